"""Frame sequences: keyframes, camera paths, the frame renderer and the resumable driver.

A scene's ``animation`` section turns one scene into a sequence of frame scenes:

* the frame count is ``animation.frames``, or ``round(duration x fps)``;
* ``animation.keyframes`` gives numeric keys at chosen frames; between two
  keyframes a key is interpolated ``linear``, ``smooth`` (smoothstep
  3 s^2 - 2 s^3, at rest at each keyframe) or ``cubic`` (Hermite with
  Catmull–Rom tangents, smooth through the keyframes); before the first and
  after the last keyframe it holds its value;
* frame k happens at the observer's own clock ``k x animation.time_step``:
  the proper time of a camera, the retarded time of the distant observer;
* ``animation.camera_path`` moves a camera: ``still`` (at rest in
  ``observer.frame`` wherever the keyframes put it), ``orbit`` (circular at
  ``observer.distance`` and constant inclination with dphi/dt =
  ``angular_velocity`` or the Keplerian 1/(r^1.5 + a), which is a geodesic in the
  equatorial plane), ``plunge`` (free fall from rest at infinity with zero
  angular momentum and Carter constant: E = 1, L = Q = 0 keep theta fixed exactly)
  or ``keyframed`` (along the keyframed distance, inclination and azimuth, at the
  speed the keyframes imply).  Moving cameras are boosted from the ZAMO frame
  (:mod:`render.spacetime.motion`).

Every frame is validated before anything is traced.  Frames are written as
``frame_00000.png`` ... under ``<output-dir>/<scene name>/`` with a manifest of
finished frames; see :func:`render_sequence`.

References
----------
Bardeen, Press & Teukolsky (1972), ApJ 178, 347 (orbits, ZAMO);
Misner, Thorne & Wheeler (1973), sec. 33.5 (Kerr geodesic first integrals).
"""

import hashlib
import json
import math
import os
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..about import __version__
from ..light.color import srgb_encode, to_uint8, tone_map
from ..spacetime.motion import (MotionError, time_dilation, velocity_from_coordinates,
                                zamo_quantities)
from ..light.pattern import emission_time, pattern_factor
from ..errors import SceneError, SequenceFolderError
from ..output.video import FRAME_PATTERN
from ..scene.loader import frame_count, scene_from_dict
from ..spacetime.kerr import horizon_radii, keplerian_angular_velocity, metric_functions
from ..imaging.still import shining_crossings
from ..geodesics.tracing import trace

__all__ = ["FrameJob", "SequencePlan", "plan_sequence", "interpolate", "render_frame",
           "render_sequence", "render_frames_here", "SequenceResult", "scene_hash"]

MANIFEST = "manifest.json"


# --- keyframes -----------------------------------------------------------------------------

def _segment_weight(s, kind):
    if kind == "smooth":
        return s * s * (3.0 - 2.0 * s)
    return s


def interpolate(points, frame, default="smooth"):
    """Value at ``frame`` of keyframes ``points`` = [(frame, value, interpolation or None)].

    The interpolation named at a keyframe applies to the segment that starts
    there (``default`` if it names none).

    Examples
    --------
    >>> pts = [(0, 0.0, "linear"), (10, 10.0, None)]
    >>> interpolate(pts, 2.5), interpolate(pts, -1), interpolate(pts, 20)
    (2.5, 0.0, 10.0)
    >>> interpolate([(0, 0.0, "smooth"), (10, 1.0, None)], 5)
    0.5
    """
    frames = [p[0] for p in points]
    if frame <= frames[0]:
        return points[0][1]
    if frame >= frames[-1]:
        return points[-1][1]
    i = int(np.searchsorted(frames, frame, side="right")) - 1
    f0, v0, kind = points[i]
    f1, v1, _ = points[i + 1]
    kind = kind or default
    s = (frame - f0) / (f1 - f0)
    if kind != "cubic":
        return v0 + (v1 - v0) * _segment_weight(s, kind)

    def tangent(j):
        # Catmull–Rom tangent for uneven spacing; one-sided at the ends.
        lo, hi = max(j - 1, 0), min(j + 1, len(points) - 1)
        return (points[hi][1] - points[lo][1]) / (points[hi][0] - points[lo][0])

    h = f1 - f0
    m0, m1 = tangent(i) * h, tangent(i + 1) * h
    s2, s3 = s * s, s * s * s
    return ((2 * s3 - 3 * s2 + 1) * v0 + (s3 - 2 * s2 + s) * m0
            + (-2 * s3 + 3 * s2) * v1 + (s3 - s2) * m1)


def _keyframe_tracks(scene):
    tracks = {}
    for entry in scene["animation.keyframes"]:
        for key, value in entry.items():
            if key not in ("frame", "interpolation"):
                tracks.setdefault(key, []).append(
                    (entry["frame"], value, entry.get("interpolation")))
    return tracks


def _values_at(scene, tracks, frame):
    default = scene["animation.interpolation"]
    return {key: interpolate(points, frame, default) for key, points in tracks.items()}


# --- frames --------------------------------------------------------------------------------

@dataclass
class FrameJob:
    """Everything needed to render one frame (picklable: sent to workers).

    Attributes
    ----------
    index : int
    scene : Scene
        The validated frame scene (keyframes applied, camera position filled in).
    clock : float
        Observer's clock at this frame (proper time of a camera, retarded time
        of the distant observer), M.
    coordinate_time : float
        Boyer–Lindquist t of a camera at this frame (equal to ``clock`` for the
        distant observer, where it means retarded time), M.
    velocity : tuple or None
        Camera's 3-velocity relative to the ZAMO (moving paths), else None.
    white : float
        Intensity shown at the exposure's reference level, the same for every frame.
    """

    index: int
    scene: object
    clock: float
    coordinate_time: float
    velocity: tuple = None
    white: float = 1.0


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
    document = json.loads(json.dumps(scene.document, default=list))
    for key, value in values.items():
        section, leaf = key.split(".", 1)
        if key == "observer.azimuth":
            value = math.remainder(value, 360.0)
        document[section][leaf] = value
    try:
        return scene_from_dict(document, source=scene.source, default_name=scene["name"])
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
    """The reference intensity of the fixed exposure rule for one frame (as render_still)."""
    from ..light.observing import prepare_observation

    observation = prepare_observation(scene)
    law = observation.law
    r_in, r_out = scene.inner_radius, scene["disk.outer_radius"]
    if observation.mode == "monochromatic":
        radii = np.geomspace(r_in, r_out, 2000)
        return float(np.max(law.specific_intensity(observation.frequency_hz, radii))) or 1.0
    return float(law.reference_intensity(r_in, r_out))


def plan_sequence(scene):
    """Validate every frame of ``scene``'s animation and return a :class:`SequencePlan`.

    Raises
    ------
    SceneError
        One line naming the frame and the problem (frame count missing, a
        keyframed value out of range, a camera path inside the horizon, faster
        than light or in the ergoregion for a static frame...).
    """
    frames = frame_count(scene.values)
    if frames is None:
        raise SceneError("a sequence needs animation.frames or animation.duration "
                         "(with animation.fps)")
    if scene["observing.mode"] == "true_colour" and scene["observing.colour_exposure"] != "fixed":
        raise SceneError("a true_colour sequence needs observing.colour_exposure = 'fixed' "
                         "(the same exposure for every frame)")
    tracks = _keyframe_tracks(scene)
    path = scene["animation.camera_path"]
    step = scene["animation.time_step"]
    if path == "keyframed" and not set(tracks) & {"observer.distance", "observer.inclination",
                                                  "observer.azimuth"}:
        raise SceneError("animation.camera_path = 'keyframed' needs keyframes of "
                         "observer.distance, observer.inclination or observer.azimuth")
    values = [_values_at(scene, tracks, k) for k in range(frames)]
    # Validate the keyframed values first (one line naming the frame).
    scenes = [_frame_scene(scene, values[k], k) for k in range(frames)]
    try:
        states = _camera_states(scene, scenes, tracks, path, step, frames)
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


def _camera_states(scene, scenes, tracks, path, step, frames):
    """(clock, coordinate time, position dict or None, velocity or None) per frame."""
    clocks = [k * step for k in range(frames)]
    if scene["observer.kind"] == "distant":
        return [(c, c, None, None) for c in clocks]
    spin = scene.spin
    if path == "still":
        rates = []
        for s in scenes:
            r, theta = s["observer.distance"], np.radians(s["observer.inclination"])
            if s["observer.frame"] == "zamo":
                rates.append(float(zamo_quantities(spin, r, theta)[0]))
            else:
                sigma, _, _ = metric_functions(r, theta, spin)
                rates.append(float(np.sqrt(1.0 - 2.0 * r / sigma)))
        t = np.concatenate([[0.0], np.cumsum(
            [0.5 * step * (1 / rates[j] + 1 / rates[j + 1]) for j in range(frames - 1)])])
        return [(clocks[k], float(t[k]), None, None) for k in range(frames)]
    if path == "orbit":
        return _orbit_states(scene, scenes, clocks)
    if path == "plunge":
        return _plunge_states(scene, clocks)
    return _keyframed_states(scene, tracks, clocks, step)


def _orbit_states(scene, scenes, clocks):
    spin = scene.spin
    states = []
    t = 0.0
    phi = np.radians(scene["observer.azimuth"])
    previous = None
    for k, s in enumerate(scenes):
        r = s["observer.distance"]
        inclination = s["observer.inclination"]
        if not 0.0 < inclination < 180.0:
            raise MotionError(f"frame {k}: an orbit needs 0 < observer.inclination < 180 "
                              f"(got {inclination:g})")
        theta = np.radians(inclination)
        omega = scene["animation.angular_velocity"]
        if omega is None:
            omega = float(keplerian_angular_velocity(r, spin))
            if not np.isfinite(omega):
                raise MotionError(f"frame {k}: no circular orbit at r = {r:.6g} M")
        try:
            v = velocity_from_coordinates(spin, r, theta, 0.0, 0.0, omega)
        except MotionError as exc:
            raise MotionError(f"frame {k}: {exc} (dphi/dt = {omega:.6g} rad/M); inside the "
                              f"photon orbit or the ergoregion a slower orbit is impossible")
        rate = time_dilation(spin, r, theta, v)
        if previous is not None:
            dt = (clocks[k] - clocks[k - 1]) * 0.5 * (1.0 / rate + 1.0 / previous[0])
            t += dt
            phi += 0.5 * (omega + previous[1]) * dt
        previous = (rate, omega)
        position = {"observer.distance": r, "observer.azimuth": float(np.degrees(phi))}
        states.append((clocks[k], t, position, tuple(float(x) for x in v)))
    return states


def _plunge_states(scene, clocks):
    """Free fall with E = 1, L = Q = 0 (theta constant): integrate r, t, phi in proper time."""
    from scipy.integrate import solve_ivp

    a = scene.spin
    r0 = scene["observer.distance"]
    inclination = scene["observer.inclination"]
    theta = np.radians(inclination)
    r_plus, _ = horizon_radii(a)

    def rhs(tau, y):
        r = y[0]
        sigma, delta, big_a = metric_functions(r, theta, a)
        # Misner, Thorne & Wheeler (1973), eq. 33.32 with E = 1, L = Q = 0:
        # Sigma dr/dtau = -sqrt(2 r (r^2 + a^2)), dt/dtau = A/(Sigma Delta), dphi/dtau = 2ar/(Sigma Delta).
        return [-np.sqrt(2.0 * r * (r * r + a * a)) / sigma, big_a / (sigma * delta),
                2.0 * a * r / (sigma * delta)]

    def near_horizon(tau, y):
        return y[0] - r_plus * (1.0 + 1e-3)

    near_horizon.terminal = True
    end = clocks[-1]
    solution = solve_ivp(rhs, (0.0, end if end > 0 else 1.0), [r0, 0.0, 0.0],
                         t_eval=clocks, events=near_horizon, rtol=1e-10, atol=1e-12)
    if solution.t_events[0].size:
        tau_h = float(solution.t_events[0][0])
        k = next(i for i, c in enumerate(clocks) if c >= tau_h)
        raise MotionError(f"the camera reaches the horizon r_+ = {r_plus:.6g} M at proper "
                          f"time {tau_h:.6g} M, before frame {k} ({clocks[k]:.6g} M); use "
                          f"fewer frames or a shorter animation.time_step")
    states = []
    for k in range(len(clocks)):
        r, t, dphi = solution.y[:, k]
        lapse, _, _ = zamo_quantities(a, r, theta)
        # ZAMO-measured energy E/N = 1/N: gamma = 1/N, radial speed sqrt(1 - N^2), inward.
        v = (-float(np.sqrt(max(1.0 - lapse * lapse, 0.0))), 0.0, 0.0)
        position = {"observer.distance": float(r),
                    "observer.azimuth": float(scene["observer.azimuth"] + np.degrees(dphi))}
        states.append((clocks[k], float(t), position, v))
    return states


def _keyframed_states(scene, tracks, clocks, step):
    """Positions from the keyframes; dt/dframe from dtau/dframe = time_step."""
    a = scene.spin
    default = scene["animation.interpolation"]

    def position(f):
        out = []
        for key in ("observer.distance", "observer.inclination", "observer.azimuth"):
            out.append(interpolate(tracks[key], f, default) if key in tracks else scene[key])
        return out[0], np.radians(out[1]), np.radians(out[2])

    def derivative(f, h=1e-4):
        lo, hi = position(f - h), position(f + h)
        return [(y - x) / (2 * h) for x, y in zip(lo, hi)]

    def dt_dframe(f):
        r, theta, _ = position(f)
        dr, dth, dph = derivative(f)
        sigma, delta, big_a = metric_functions(r, theta, a)
        lapse, omega, varpi = zamo_quantities(a, r, theta)
        # -dtau^2 = g_ab dx^a dx^b per frame, solved for T = dt/dframe (future root):
        # (N^2 - varpi^2 omega^2) T^2 + 2 varpi^2 omega phi' T - (varpi^2 phi'^2 + S + dtau^2) = 0.
        qa = lapse ** 2 - (varpi * omega) ** 2
        if not qa > 0.0:
            raise MotionError(f"at frame {f:.4g} the camera is in the ergoregion (r = {r:.6g} M), "
                              "where a keyframed path is not supported")
        qb = 2.0 * varpi ** 2 * omega * dph
        qc = -(varpi ** 2 * dph ** 2 + sigma / delta * dr ** 2 + sigma * dth ** 2 + step ** 2)
        return (-qb + np.sqrt(qb * qb - 4.0 * qa * qc)) / (2.0 * qa), (r, theta, dr, dth, dph)

    r_plus, _ = horizon_radii(a)
    substeps = 8
    t = 0.0
    states = []
    for k in range(len(clocks)):
        if k > 0:
            grid = np.linspace(k - 1, k, substeps + 1)
            values = [dt_dframe(f)[0] for f in grid]
            t += float(np.trapezoid(values, grid) if hasattr(np, "trapezoid")
                       else np.trapz(values, grid))
        r, theta, phi = position(k)
        if not r > r_plus:
            raise MotionError(f"frame {k} puts the camera at r = {r:.6g} M, inside the "
                              f"horizon r_+ = {r_plus:.6g} M")
        T, (r, theta, dr, dth, dph) = dt_dframe(k)
        try:
            v = velocity_from_coordinates(a, r, theta, dr / T, dth / T, dph / T)
        except MotionError as exc:
            raise MotionError(f"frame {k}: {exc}") from None
        states.append((clocks[k], t, {"observer.distance": float(r)},
                       tuple(float(x) for x in v)))
    return states


# --- rendering one frame -------------------------------------------------------------------

class _ModulatedLaw:
    """An emission law times a per-crossing pattern factor (same shape as the crossings)."""

    def __init__(self, law, factor):
        self._law = law
        self._factor = factor
        self.name = law.name

    def intensity(self, r):
        base = self._law.intensity(r)
        return base * self._factor if np.shape(base) == self._factor.shape else base

    def __getattr__(self, name):
        return getattr(self._law, name)


@dataclass
class FrameResult:
    """A rendered frame: its pixels and what the light curve needs."""

    index: int
    pixels: np.ndarray
    flux: float
    seconds: float
    info: dict = field(default_factory=dict)


_TRACE_CACHE = {}


def _geometry_key(scene, velocity):
    # Everything that decides the rays: the observer set-up and how they are traced.
    return scene.viewpoint(), scene.trace_settings(), velocity


def _trace(scene, velocity, progress=None):
    """Bundle and raw kernel output; a frame with the same geometry as the last reuses it."""
    key = _geometry_key(scene, velocity)
    if key in _TRACE_CACHE:
        return _TRACE_CACHE[key]
    alpha, beta, bundle = scene.viewpoint().rays(velocity=velocity)
    raw = trace(scene.trace_settings(), alpha, beta, bundle, progress)
    _TRACE_CACHE.clear()
    _TRACE_CACHE[key] = (bundle, raw)
    return bundle, raw


def _shade_traced(scene, job, bundle, raw):
    """(observation, shaded) of traced rays, with the pattern at the frame's time."""
    from ..light.observing import prepare_observation, shade

    spin = scene.spin
    g, hits = shining_crossings(scene, raw, bundle)
    observation = prepare_observation(scene)
    if scene["pattern.kind"] != "none":
        camera_radius = None if scene["observer.kind"] == "distant" else scene["observer.distance"]
        t_em = emission_time(job.coordinate_time, raw["delay"], raw["r"], spin, camera_radius)
        factor = pattern_factor(
            scene["pattern.kind"], raw["r"], raw["phi"], t_em, spin,
            radius=scene["pattern.radius"], phase_deg=scene["pattern.phase"],
            size=scene["pattern.size"], contrast=scene["pattern.contrast"],
            arms=scene["pattern.arms"], pitch_deg=scene["pattern.pitch"])
        observation.law = _ModulatedLaw(observation.law, np.where(hits, factor, 1.0))
    return observation, shade(observation, scene, raw, g, hits, bundle)


def render_frame(job, numba_threads=None):
    """Render one :class:`FrameJob`; return a :class:`FrameResult`.

    ``numba_threads`` caps the kernel's threads in this process (workers of a
    pool or cluster share their machine's cores).
    """
    from ..imaging.sensor import finish_still, needs_sensor

    if numba_threads:
        import numba

        numba.set_num_threads(max(1, min(int(numba_threads), numba.config.NUMBA_NUM_THREADS)))
    started = time.perf_counter()
    scene = job.scene
    bundle, raw = _trace(scene, job.velocity)
    observation, shaded = _shade_traced(scene, job, bundle, raw)
    height, width = scene["image.height"], scene["image.width"]
    if needs_sensor(scene):
        # Sky and supersampling seen from the moving camera's frame (render.imaging.sensor), at the
        # sequence's one white; extra rays are shaded at the same frame time.
        def trace_more(x, y, more):
            more_raw = trace(scene.trace_settings(), x, y, more, maps=False)
            return more_raw, _shade_traced(scene, job, more, more_raw)[1]

        alpha, beta = scene.viewpoint().grid()
        white = None if observation.mode == "true_colour" else job.white
        pixels = finish_still(scene, observation, shaded, raw, bundle, alpha, beta, trace_more,
                              white=white, velocity=job.velocity).pixels
    elif observation.mode == "true_colour":
        pixels = shaded.pixels
    else:
        # One white for the whole sequence (frame 0's), so brightness changes are real.
        pixels = to_uint8(srgb_encode(tone_map(shaded.intensity, job.white,
                                               scene["output.exposure"])))
    pixel_area = (scene["observer.field_of_view"] / width) ** 2
    flux = float(np.nansum(shaded.intensity) * pixel_area)
    return FrameResult(job.index, pixels.reshape((height, width) + pixels.shape[1:]), flux,
                       time.perf_counter() - started)


# --- the resumable sequence driver ---------------------------------------------------------

@dataclass
class SequenceResult:
    """What :func:`render_sequence` did."""

    folder: Path
    rendered: list
    reused: list
    paths: dict
    flash: dict
    fluxes: list


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
    from ..output.files import atomic_write, jsonable

    text = json.dumps(manifest, sort_keys=True, indent=1, default=jsonable).encode()
    atomic_write(folder / MANIFEST, lambda f: f.write(text), overwrite=True)


def _clear_sequence(folder):
    for path in folder.iterdir():
        if path.is_file() and (path.name.startswith(("frame_", ".", "sequence", "lightcurve"))
                               or path.name in (MANIFEST, "flash_check.json")):
            path.unlink()


def prepare_folder(plan, output_dir, overwrite=False):
    """The frames' folder and the frames already finished there (checked against the manifest).

    A manifest of another scene (different hash) is refused unless
    ``overwrite``, which discards its frames: old frames are never mixed in.
    Leftover temporary files of an interrupted run are removed; a listed frame
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
    for stale in folder.glob(".*.part"):
        stale.unlink()  # temporary files of an interrupted run (atomic writes never finished)
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


def render_frames_here(jobs):
    """Render frames one after the other in this process, yielding their results in order."""
    for job in jobs:
        yield render_frame(job)


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
        ``run_frames(jobs)`` yields the :class:`FrameResult` of each job, in order:
        in this process by default, or on a pool or cluster (:mod:`render.parallel`,
        wired by :func:`render.api.render_sequence`).
    overwrite : bool
        Discard frames of a different scene found in the folder.
    progress : callable, optional
        ``progress(done, total, result)`` after each frame written.
    products : bool
        Also write the video, GIF, contact sheet, light curve and flash report.

    Returns
    -------
    SequenceResult

    Notes
    -----
    Rerunning after an interruption renders only the frames missing from the
    manifest; each frame is written atomically and listed (with its SHA-256)
    only after it is complete.
    """
    from ..output.files import write_png

    plan = plan_sequence(scene)
    folder, manifest = prepare_folder(plan, output_dir, overwrite)
    done = sorted(int(k) for k in manifest["frames"])
    todo = [job for job in plan.jobs if job.index not in manifest["frames"]
            and f"{job.index:05d}" not in manifest["frames"]]
    rendered = []
    total = len(plan.jobs)
    if progress is not None:
        progress(len(done), total, None)
    for result in run_frames(todo):
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
        _write_manifest(folder, manifest)
        rendered.append(result.index)
        if progress is not None:
            progress(len(manifest["frames"]), total, result)
    fluxes = [manifest["frames"][f"{k:05d}"]["flux"] for k in range(len(plan.jobs))]
    paths, flash = {}, {}
    if products:
        from ..output.video import write_sequence_products

        paths, flash = write_sequence_products(folder, plan, manifest)
    return SequenceResult(folder, rendered, done, paths, flash, fluxes)
