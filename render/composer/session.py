"""One composer session: the opened scene, its previews, probes, saved scenes and stills.

Everything the page asks for goes through here, and every value through the
scene validator: the page sends ``{key: text}`` for its controls, read exactly
as ``nullray still --set key=text`` reads them, so a bad value gets the command
line's one-line message.  Renders take turns on one lock (numba's thread pool
runs one parallel kernel at a time), and a preview that a newer one has
superseded stops at its next progress report instead of finishing for nobody.
"""

import copy
import itertools
import threading
import time
import uuid
from pathlib import Path

import numpy as np
import yaml

from ..api import make_still, open_scene, render_still
from ..errors import OutputExists, SceneError, UsageError
from ..geodesics.integrator import FATE_NAMES
from ..measure.shadow import critical_curve
from ..output.files import atomic_write
from ..scene.keys import KEYS
from ..scene.loader import PREVIEW, apply_overrides, nest_values, scene_from_dict
from ..units import angular_gravitational_radius_uas
from .controls import CONTROL_KEYS, MAX_PREVIEW_SIDE, MAX_STILL_SIDE, control_table

__all__ = ["ComposerSession", "Superseded", "preview_values"]

PATH_KEYS = tuple(key for key, spec in KEYS.items() if spec.kind == "path")
MAX_VALUE_CHARACTERS = 200   # the longest text a control may send
KEPT_PREVIEWS = 4    # previews whose maps stay for probing (the shown one and a few before)


class Superseded(Exception):
    """A newer preview was asked for while this one waited or rendered."""


def preview_values(scene, side):
    """The values of a scene's preview: longer side ``side`` pixels, one ray per pixel, no NPZ.

    The integrator's tolerance is loosened to the quick look's (``image.preview``,
    1e-6) unless the scene's own is looser: a camera's preview then takes about
    half the time, and differs from the full still by far less than a pixel.
    The composer shows exactly ``render.render_still`` of this scene, so a direct
    render of the same values gives the same 8-bit pixels.

    Examples
    --------
    >>> from render.scene.loader import default_scene
    >>> values = preview_values(default_scene(**{"image.width": 400, "image.height": 200}), 256)
    >>> values["image.width"], values["image.height"], values["image.supersampling"]
    (256, 128, 1)
    """
    values = dict(scene.values)
    width, height = values["image.width"], values["image.height"]
    scale = side / max(width, height)
    values.update({"image.width": max(1, round(width * scale)),
                   "image.height": max(1, round(height * scale)),
                   "image.supersampling": 1, "image.preview": False, "output.npz": False,
                   "animation.keyframes": (),
                   "tracing.tolerance": max(values["tracing.tolerance"],
                                            PREVIEW["tracing.tolerance"])})
    return values


class ComposerSession:
    """The state behind one composer page.

    Parameters
    ----------
    scene_path : str or Path or None
        The scene file to start from (None: the built-in default scene, traced
        with ``tracing.method: auto`` so that a distant observer is quick).
    output_dir : str or Path
        Where "save scene" and "render still" write.
    """

    def __init__(self, scene_path=None, output_dir="outputs"):
        overrides = () if scene_path else ("tracing.method=auto",)
        self.scene = open_scene(scene_path, overrides)
        self.folder = Path(scene_path).resolve().parent if scene_path else Path.cwd().resolve()
        self.output_dir = Path(output_dir)
        self._check_side_files(self.scene)
        self._document = copy.deepcopy(self.scene.document)
        self._render_lock = threading.Lock()
        self._newest = itertools.count(1)
        self._latest_ticket = 0
        self._previews = {}
        self.still = {"state": "idle", "done": 0, "total": 0, "message": "", "image": None}
        self._still_thread = None
        self._stopping = threading.Event()

    def _check_side_files(self, scene):
        """Refuse side files (sky image, emission table) outside the scene's folder."""
        for key in PATH_KEYS:
            path = scene.side_file(key)
            if path is not None and not path.resolve().is_relative_to(self.folder):
                raise SceneError(f"{key} = {scene[key]!r} is outside the scene's folder "
                                 f"{self.folder}; the composer reads no file outside it")

    def controls(self):
        """The page's controls with their starting values (:func:`control_table`)."""
        return control_table(self.scene)

    def scene_for(self, settings):
        """The validated scene of the opened one with the page's ``{key: text}`` applied.

        Raises
        ------
        SceneError
            The command line's one-line message for the first bad value.
        """
        if not isinstance(settings, dict):
            raise UsageError("the page sent no settings")
        overrides = []
        for key, text in settings.items():
            if key not in CONTROL_KEYS:
                raise UsageError(f"{str(key)[:60]!r} is not a control of the composer")
            text = str(text)
            if len(text) > MAX_VALUE_CHARACTERS:
                raise SceneError(f"{key} is given {len(text)} characters; at most "
                                 f"{MAX_VALUE_CHARACTERS} are allowed")
            overrides.append(f"{key}={text}")
        document = apply_overrides(copy.deepcopy(self._document), overrides)
        return scene_from_dict(document, source=self.scene.source,
                               default_name=self.scene["name"])

    def preview(self, settings, side):
        """Render the preview of the page's settings; newest request wins.

        Returns
        -------
        dict
            ``id`` (for :meth:`probe` and :meth:`png`), the preview's ``values``,
            ``seconds`` of server time, ``curve`` (the critical curve in pixel
            coordinates, distant observer only, else None).

        Raises
        ------
        Superseded
            A newer preview was asked for before this one finished.
        """
        started = time.perf_counter()
        side = int(side)
        if not 16 <= side <= MAX_PREVIEW_SIDE:
            raise UsageError(f"preview side {side} is not allowed; expected 16 to "
                             f"{MAX_PREVIEW_SIDE} pixels")
        scene = self.scene_for(settings)
        ticket = self._latest_ticket = next(self._newest)
        preview = scene_from_dict(nest_values(preview_values(scene, side)),
                                  source=scene.source, default_name=scene["name"])

        def still_wanted(done=0, total=0):
            if ticket != self._latest_ticket or self._stopping.is_set():
                raise Superseded()

        with self._render_lock:
            still_wanted()
            result = render_still(preview, still_wanted, maps=False)
        return self._keep(preview, result, started)

    def warm_up(self):
        """Load the compiled kernels (numba's cache) with two tiny renders, so the first
        preview is as quick as the others; meant for a background thread."""
        for placement in ("distant", "camera"):
            tiny = {"observer.placement": placement, "tracing.method": "auto"}
            scene = scene_from_dict(nest_values(
                preview_values(scene_from_dict(nest_values(tiny)), 16)))
            with self._render_lock:
                render_still(scene, maps=False)

    def _keep(self, preview, result, started):
        """Keep a rendered preview for probing and return what the page needs."""
        key = uuid.uuid4().hex[:12]
        self._previews[key] = (preview, result)
        while len(self._previews) > KEPT_PREVIEWS:
            self._previews.pop(next(iter(self._previews)))
        curve = critical_curve_pixels(preview, result)
        return {"id": key, "seconds": time.perf_counter() - started,
                "width": preview["image.width"], "height": preview["image.height"],
                "values": {k: preview[k] for k in CONTROL_KEYS},
                "curve": curve}

    def _preview(self, key):
        try:
            return self._previews[key]
        except KeyError:
            raise UsageError(f"preview {str(key)[:20]!r} is no longer kept") from None

    def png(self, key):
        """The 8-bit pixels of a kept preview."""
        return self._preview(key)[1].pixels

    def probe(self, key, column, row):
        """The numbers under the cursor: see :func:`probe_pixel`."""
        preview, result = self._preview(key)
        return probe_pixel(preview, result, int(column), int(row))

    def save_scene(self, settings, overwrite=False):
        """Write the validated scene as ``<name>.yaml`` into the output folder; return its path."""
        scene = self.scene_for(settings)
        document = _plain(copy.deepcopy(scene.document))
        for key in PATH_KEYS:   # side files keep pointing at the same files from the new folder
            if scene[key] is not None:
                section, leaf = key.split(".")
                document[section][leaf] = str(scene.side_file(key).resolve())
        text = ("# Saved by nullray compose; every key is shown (see the README's scene "
                "reference).\n" + yaml.safe_dump(document, sort_keys=False))
        self.output_dir.mkdir(parents=True, exist_ok=True)
        path = self.output_dir / f"{scene['name']}.yaml"
        _page_wording(lambda: atomic_write(path, lambda f: f.write(text.encode()), overwrite))
        return path

    def start_still(self, settings, overwrite=False):
        """Start the full still of the page's settings in the background (one at a time)."""
        scene = self.scene_for(settings)
        if max(scene["image.width"], scene["image.height"]) > MAX_STILL_SIDE:
            raise UsageError(f"image {scene['image.width']}x{scene['image.height']} is larger "
                             f"than the composer renders (at most {MAX_STILL_SIDE} pixels a "
                             "side); use nullray still")
        if self._still_thread is not None and self._still_thread.is_alive():
            raise UsageError("a still is already rendering; wait for it to finish")
        self.still = {"state": "rendering", "done": 0, "total": 0, "message": "", "image": None}
        self._still_thread = threading.Thread(target=self._run_still, args=(scene, overwrite),
                                              daemon=True, name="composer-still")
        self._still_thread.start()

    def _run_still(self, scene, overwrite):
        def progress(done, total):
            if self._stopping.is_set():
                raise Superseded()
            self.still.update(done=done, total=total)

        try:
            with self._render_lock:
                _, paths = _page_wording(lambda: make_still(
                    scene, self.output_dir, overwrite=overwrite, progress=progress))
        except (SceneError, UsageError, OutputExists) as exc:
            self.still.update(state="failed", message=str(exc))
        except Superseded:
            self.still.update(state="stopped", message="stopped")
        except Exception as exc:   # shown on the page in one line; the server keeps serving
            self.still.update(state="failed", message=f"{type(exc).__name__}: {exc}")
        else:
            image = paths.get("png")
            self.still.update(state="done", image=image.name if image else None,
                              message=", ".join(path.name for path in paths.values()))

    def output_file(self, name):
        """The path of a file the last still wrote (the only output files served)."""
        if not name or name != self.still.get("image"):
            raise UsageError(f"{str(name)[:60]!r} is not a still of this session")
        return self.output_dir / name

    def stop(self, wait_seconds=10.0):
        """Stop a running still at its next progress report (its temporary files are removed)."""
        self._stopping.set()
        if self._still_thread is not None:
            self._still_thread.join(wait_seconds)


def _page_wording(write):
    """Run ``write``; an existing file is refused with the page's wording (no --overwrite there)."""
    try:
        return write()
    except OutputExists as exc:
        name = str(exc).split(" exists;")[0]
        raise OutputExists(f"{name} exists; tick 'overwrite' or change the name") from None


def _plain(document):
    """Tuples (keyframes) as lists, so the YAML is plain and loads back the same."""
    if isinstance(document, dict):
        return {k: _plain(v) for k, v in document.items()}
    if isinstance(document, (list, tuple)):
        return [_plain(v) for v in document]
    return document


def probe_pixel(scene, result, column, row):
    """The numbers of one pixel of a rendered preview.

    Returns
    -------
    dict
        ``alpha``, ``beta`` (M) and ``alpha_uas``, ``beta_uas`` (microarcseconds
        at the scene's mass and distance), ``fate``, and ``crossings``: for every
        shining equatorial crossing its ``order``, ``r`` (M) and ``g``.
    """
    height, width = result.fate.shape
    if not (0 <= column < width and 0 <= row < height):
        raise UsageError(f"pixel ({column}, {row}) is outside the {width}x{height} preview")
    scale = angular_gravitational_radius_uas(scene["black_hole.mass"], scene["black_hole.distance"])
    alpha, beta = float(result.alpha[row, column]), float(result.beta[row, column])
    crossings = [{"order": int(n), "r": _number(result.r[n, row, column]),
                  "g": _number(result.g[n, row, column])}
                 for n in np.nonzero(result.on_disk[:, row, column])[0]]
    return {"alpha": alpha, "beta": beta, "alpha_uas": alpha * scale, "beta_uas": beta * scale,
            "fate": FATE_NAMES[int(result.fate[row, column])], "crossings": crossings}


def _number(value):
    value = float(value)
    return value if np.isfinite(value) else None


def critical_curve_pixels(scene, result, n_points=256):
    """The analytic critical curve in the preview's pixel coordinates (distant observer only).

    A distant observer's image plane is an affine function of the pixel
    position (scale, roll and centre), so the map is read off the rendered
    alpha and beta of three pixels and inverted; None for a camera.

    Returns
    -------
    list of [x, y] or None
        Pixel coordinates, x to the right from the left edge, y down from the
        top edge, pixel centres at half-integers.
    """
    if scene["observer.placement"] != "distant":
        return None
    alpha, beta = critical_curve(scene.spin, scene["observer.inclination"], n_points)
    height, width = result.alpha.shape
    if width < 2 or height < 2:
        return None
    origin = np.array([result.alpha[0, 0], result.beta[0, 0]])
    along_x = np.array([result.alpha[0, 1], result.beta[0, 1]]) - origin
    along_y = np.array([result.alpha[1, 0], result.beta[1, 0]]) - origin
    to_pixels = np.linalg.inv(np.column_stack([along_x, along_y]))
    x, y = to_pixels @ (np.vstack([alpha, beta]) - origin[:, None])
    return np.column_stack([x + 0.5, y + 0.5]).round(2).tolist()
