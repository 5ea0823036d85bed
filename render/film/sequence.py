"""Frame sequences: the plan of every frame, and the resumable driver that renders and writes them.

A scene's ``animation`` section turns one scene into a sequence of frame scenes:
the frame count is ``animation.frames``, or ``round(duration x fps)``; keyframed
keys change from frame to frame (:mod:`render.film.keyframes`) and a camera may
move (:mod:`render.film.paths`).  Every frame is validated before anything is
traced.  Frames are rendered by :func:`render.film.frame.render_frame` and written
as ``frame_00000.png`` ... under ``<output-dir>/<scene name>/`` with a manifest
of finished frames; see :func:`render_sequence`.
"""

import hashlib
import json
import math
import os
import time
from dataclasses import dataclass
from pathlib import Path

from ..about import __version__
from ..errors import SceneError, SequenceFolderError
from ..light.observing import exposure_white, prepare_observation
from ..guards.runs import is_dead_here
from ..output.files import atomic_write, jsonable, sweep_dead_temporaries, write_png
from ..output.video import FRAME_PATTERN
from ..scene.loader import frame_count, scene_from_dict
from ..spacetime.motion import MotionError
from .frame import FrameJob, render_frame
from .keyframes import keyframe_tracks, values_at
from .paths import camera_states
from .products import write_sequence_products

__all__ = ["SequencePlan", "plan_sequence", "render_sequence", "render_frames_here",
           "prepare_folder", "SequenceResult", "scene_hash", "MANIFEST"]

MANIFEST = "manifest.json"
# The manifest is rewritten at most this often while frames arrive (and at the end):
# rewriting it after every frame cost more than a frame of a traced-once film.
MANIFEST_INTERVAL_S = 1.0


# --- the plan ------------------------------------------------------------------------------

@dataclass
class SequencePlan:
    """The frames of a sequence and what they share."""

    scene: object
    jobs: list
    white: float
    hash: str
    fps: float


def scene_hash(scene):
    """SHA-256 of the scene document (canonical JSON): what frames of a sequence depend on."""
    text = json.dumps(scene.document, sort_keys=True, default=list)
    return hashlib.sha256(f"nullray-sequence-1\n{text}".encode()).hexdigest()


def _frame_scene(scene, values, frame):
    """The validated scene of one frame: ``scene`` with ``values`` {key: value} put in."""
    document = json.loads(json.dumps(scene.document, default=list))
    for key, value in values.items():
        section, leaf = key.split(".", 1)
        if key == "observer.azimuth":
            value = math.remainder(value, 360.0)
        document[section][leaf] = value
    try:
        return scene_from_dict(document, source=scene.source, default_name=scene["name"],
                               user_paths=scene.user_paths,
                               allow_outside_files=scene.allow_outside_files)
    except SceneError as exc:
        raise SceneError(f"frame {frame}: {exc}") from None


def _sequence_white(scenes):
    """One reference intensity for all frames: the largest of the frames' own whites.

    Each frame's white is what render_still would use (the emission law's intensity at
    the inner edge); taking the largest keeps a sweep that moves the inner edge (spin)
    from saturating, and is the white of every frame when nothing that sets it changes.
    """
    whites = {}
    for scene in scenes:
        key = tuple(sorted((k, v) for k, v in scene.values.items()
                           if k.split(".")[0] in ("black_hole", "disk", "emission", "observing")))
        if key not in whites:
            whites[key] = _frame_white(scene)
    return max(whites.values())


def _frame_white(scene):
    """The reference intensity of the fixed exposure rule for one frame (as a still's)."""
    white = exposure_white(prepare_observation(scene), scene.inner_radius,
                           scene["disk.outer_radius"])
    return 1.0 if white is None else white   # true colour's own white is used instead


def _check_animation(scene, tracks):
    """The frame count, after the checks that need no frame: one line per problem."""
    frames = frame_count(scene.values)
    if frames is None:
        raise SceneError("a sequence needs animation.frames or animation.duration "
                         "(with animation.fps)")
    if scene["observing.mode"] == "true_colour" and scene["observing.colour_exposure"] != "fixed":
        raise SceneError("a true_colour sequence needs observing.colour_exposure = 'fixed' "
                         "(the same exposure for every frame)")
    if scene["animation.camera_path"] == "keyframed" and not set(tracks) & {
            "observer.distance", "observer.inclination", "observer.azimuth"}:
        raise SceneError("animation.camera_path = 'keyframed' needs keyframes of "
                         "observer.distance, observer.inclination or observer.azimuth")
    return frames


def plan_sequence(scene):
    """Validate every frame of ``scene``'s animation and return a :class:`SequencePlan`.

    Raises
    ------
    SceneError
        One line naming the frame and the problem (frame count missing, a
        keyframed value out of range, a camera path inside the horizon, faster
        than light or in the ergoregion for a static frame...).
    """
    tracks = keyframe_tracks(scene)
    frames = _check_animation(scene, tracks)
    path = scene["animation.camera_path"]
    values = [values_at(scene, tracks, k) for k in range(frames)]
    # Validate the keyframed values first (one line naming the frame).
    scenes = [_frame_scene(scene, values[k], k) for k in range(frames)]
    try:
        states = camera_states(scene, scenes, tracks, path, scene["animation.time_step"], frames)
    except MotionError as exc:
        raise SceneError(f"animation.camera_path = {path!r}: {exc}") from None
    jobs = []
    for k in range(frames):
        clock, t, position, velocity = states[k]
        frame_values = dict(values[k])
        if position is not None:
            frame_values.update(position)
            if path != "still":
                frame_values["observer.frame"] = "zamo"  # moving cameras: boosted ZAMO
        frame = _frame_scene(scene, frame_values, k) if position is not None else scenes[k]
        jobs.append(FrameJob(k, frame, clock, t, velocity))
    white = _sequence_white([job.scene for job in jobs])
    for job in jobs:
        job.white = white
    return SequencePlan(scene, jobs, white, scene_hash(scene), scene["animation.fps"])


# --- the folder and its manifest -----------------------------------------------------------

def _sha256(path):
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def _read_manifest(folder):
    path = folder / MANIFEST
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        return None
    except (OSError, ValueError):
        return {}  # unreadable: treated as a foreign manifest


def _write_manifest(folder, manifest):
    text = json.dumps(manifest, sort_keys=True, indent=1, default=jsonable).encode()
    atomic_write(folder / MANIFEST, lambda f: f.write(text), overwrite=True)


def _clear_sequence(folder):
    for path in folder.iterdir():
        if path.name.endswith(".part") and not is_dead_here(path.name):
            continue   # a live run's temporary
        if path.is_file() and (path.name.startswith(("frame_", ".", "sequence", "lightcurve"))
                               or path.name in (MANIFEST, "flash_check.json")):
            path.unlink()


def prepare_folder(plan, output_dir, overwrite=False):
    """The frames' folder and the frames already finished there (checked against the manifest).

    A manifest of another scene (different hash) is refused unless
    ``overwrite``, which discards its frames: old frames are never mixed in.
    Leftover temporary files of dead runs are removed (a live run's are left alone); a listed frame
    whose file is missing or whose checksum differs is rendered again.
    """
    folder = Path(output_dir) / plan.scene["name"]
    manifest = _read_manifest(folder) if folder.is_dir() else None
    if folder.is_dir() and manifest is None and any(folder.iterdir()) and not overwrite:
        raise SequenceFolderError(f"{folder} exists and is not a nullray sequence folder "
                                  "(no manifest.json); pass --overwrite or choose another "
                                  "name with --set name=...")
    if manifest is not None and manifest.get("scene_hash") != plan.hash:
        if not overwrite:
            raise SequenceFolderError(
                f"{folder} holds frames of a different scene (scene hash differs); pass "
                "--overwrite to discard them, or choose another name with --set name=...")
        _clear_sequence(folder)
        manifest = None
    if overwrite and manifest is None and folder.is_dir():
        _clear_sequence(folder)
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise SequenceFolderError(f"{folder} cannot be created: {exc.strerror or exc}") from None
    if not os.access(folder, os.W_OK | os.X_OK):
        raise SequenceFolderError(f"{folder} is not writable")
    # Temporaries of dead runs were swept before (render.output.files.sweep_dead_temporaries);
    # those of a live run of the same film are its own business.
    sweep_dead_temporaries(folder)
    if manifest is None:
        manifest = {"program": "nullray", "version": __version__, "scene_hash": plan.hash,
                    "frame_count": len(plan.jobs), "fps": plan.fps,
                    "scene": plan.scene.document, "frames": {}}
    done = {}
    for key, entry in manifest.get("frames", {}).items():
        path = folder / entry.get("file", "")
        if int(key) < len(plan.jobs) and path.is_file() and _sha256(path) == entry.get("sha256"):
            done[int(key)] = entry
    manifest["frames"] = {f"{k:05d}": v for k, v in sorted(done.items())}
    return folder, manifest


# --- the resumable driver ------------------------------------------------------------------

@dataclass
class SequenceResult:
    """What :func:`render_sequence` did."""

    folder: Path
    rendered: list
    reused: list
    paths: dict
    flash: dict
    fluxes: list


def render_frames_here(jobs):
    """Render frames one after the other in this process, yielding their results in order."""
    for job in jobs:
        yield render_frame(job)


def _record_frame(folder, plan, manifest, result):
    """Write a rendered frame's PNG, then list it (with its SHA-256) in the manifest's dict.

    The caller writes the manifest file (:func:`_write_manifest`).
    """
    name = FRAME_PATTERN.format(result.index)
    path = write_png(folder / name, result.pixels, overwrite=True,
                     metadata={"Software": f"nullray {__version__}",
                               "nullray-frame": str(result.index),
                               "nullray-scene-hash": plan.hash})
    job = plan.jobs[result.index]
    manifest["frames"][f"{result.index:05d}"] = {
        "file": name, "sha256": _sha256(path), "flux": result.flux,
        "clock": job.clock, "coordinate_time": job.coordinate_time,
        "seconds": result.seconds}


def render_sequence(scene, output_dir="outputs", *, run_frames=render_frames_here,
                    overwrite=False, progress=None, products=True):
    """Render (or finish) a scene's frame sequence and its video, contact sheet and light curve.

    Parameters
    ----------
    scene : Scene
        With an ``animation`` section (see the module docstring).
    output_dir : str or Path
        Frames go to ``output_dir/<scene name>/``.
    run_frames : callable
        ``run_frames(jobs)`` yields the :class:`~render.film.frame.FrameResult` of
        each job, in order: in this process by default, or on a pool or cluster
        (:mod:`render.parallel`, wired by :func:`render.api.render_sequence`).
    overwrite : bool
        Discard frames of a different scene found in the folder.
    progress : callable, optional
        ``progress(done, total, result)`` after each frame written.
    products : bool
        Also write the video, GIF, contact sheet, light curve and flash report
        (:func:`render.film.products.write_sequence_products`).

    Returns
    -------
    SequenceResult

    Notes
    -----
    Rerunning after an interruption renders only the frames missing from the
    manifest; each frame is written atomically and listed (with its SHA-256)
    only after it is complete.
    """
    plan = plan_sequence(scene)
    folder, manifest = prepare_folder(plan, output_dir, overwrite)
    done = sorted(int(k) for k in manifest["frames"])
    todo = [job for job in plan.jobs if job.index not in manifest["frames"]
            and f"{job.index:05d}" not in manifest["frames"]]
    rendered = []
    total = len(plan.jobs)
    if progress is not None:
        progress(len(done), total, None)
    written = time.monotonic()
    try:
        for result in run_frames(todo):
            _record_frame(folder, plan, manifest, result)
            rendered.append(result.index)
            if time.monotonic() - written >= MANIFEST_INTERVAL_S:
                _write_manifest(folder, manifest)
                written = time.monotonic()
            if progress is not None:
                progress(len(manifest["frames"]), total, result)
    finally:
        # Also on Ctrl-C or an error: every frame written so far is listed, so a rerun
        # resumes after it.  A frame written but not yet listed (a killed process) is
        # rendered again.
        _write_manifest(folder, manifest)
    fluxes = [manifest["frames"][f"{k:05d}"]["flux"] for k in range(len(plan.jobs))]
    paths, flash = {}, {}
    if products:
        paths, flash = write_sequence_products(folder, plan, manifest)
    return SequenceResult(folder, rendered, done, paths, flash, fluxes)
