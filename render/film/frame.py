"""One frame of a sequence: what a worker needs (FrameJob), renders (render_frame) and returns.

Frames that share their geometry (the observer set-up, how rays are traced and
the camera's velocity) reuse the last frame's traced rays, so a sequence that
changes only the disk, the emission or a pattern traces once.  A pattern
(:mod:`render.light.pattern`) is seen at the frame's time: each ray's emission
time is the frame's coordinate time minus its travel time.
"""

import time
from dataclasses import dataclass, field

import numpy as np

from ..geodesics.tracing import trace
from ..imaging.still import shining_crossings
from ..light.display import scene_scalar_pixels
from ..light.pattern import emission_time, pattern_factor
from ..imaging.sensor import finish_still, needs_sensor
from ..light.observing import prepare_observation, shade

__all__ = ["FrameJob", "FrameResult", "render_frame"]


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
class FrameResult:
    """A rendered frame: its pixels and what the light curve needs."""

    index: int
    pixels: np.ndarray
    flux: float
    seconds: float
    info: dict = field(default_factory=dict)


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


_TRACE_CACHE = {}


def _geometry_key(scene, velocity):
    # Everything that decides the rays: the observer set-up and how they are traced
    # (the trace settings carry the resolved tracing.method).
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

    spin = scene.spin
    g, hits = shining_crossings(scene, raw, bundle)
    observation = prepare_observation(scene)
    if scene["pattern.shape"] != "none":
        camera_radius = None if scene["observer.placement"] == "distant" else scene["observer.distance"]
        t_em = emission_time(job.coordinate_time, raw["delay"], raw["r"], spin, camera_radius)
        factor = pattern_factor(
            scene["pattern.shape"], raw["r"], raw["phi"], t_em, spin,
            radius=scene["pattern.radius"], phase_deg=scene["pattern.phase"],
            size=scene["pattern.size"], contrast=scene["pattern.contrast"],
            arms=scene["pattern.arms"], pitch_deg=scene["pattern.pitch"])
        observation.law = _ModulatedLaw(observation.law, np.where(hits, factor, 1.0))
    return observation, shade(observation, scene, raw, g, hits, bundle)


def _frame_pixels(scene, job, observation, shaded, raw, bundle):
    """The frame's 8-bit pixels (flat), exposed at the sequence's one white."""

    if needs_sensor(scene):
        # Sky and supersampling seen from the moving camera's frame (render.imaging.sensor), at the
        # sequence's one white; extra rays are shaded at the same frame time.
        def trace_more(x, y, more):
            more_raw = trace(scene.trace_settings(), x, y, more, maps=False)
            return more_raw, _shade_traced(scene, job, more, more_raw)[1]

        alpha, beta = scene.viewpoint().grid()
        white = None if observation.mode == "true_colour" else job.white
        return finish_still(scene, observation, shaded, raw, bundle, alpha, beta, trace_more,
                            white=white, velocity=job.velocity).pixels
    if observation.mode == "true_colour":
        return shaded.pixels
    # One white for the whole sequence, so brightness changes are real.
    return scene_scalar_pixels(scene, shaded.intensity, job.white)


def render_frame(job, numba_threads=None):
    """Render one :class:`FrameJob`; return a :class:`FrameResult`.

    Parameters
    ----------
    job : FrameJob
    numba_threads : int, optional
        Caps the kernel's threads in this process (workers of a pool or
        cluster share their machine's cores).

    Returns
    -------
    FrameResult
        The pixels (height, width[, 3]) and the frame's total flux: the sum of
        the pixels' intensities times a pixel's area, (observer.field_of_view / width)^2 M^2.
    """
    if numba_threads:
        import numba

        numba.set_num_threads(max(1, min(int(numba_threads), numba.config.NUMBA_NUM_THREADS)))
    started = time.perf_counter()
    scene = job.scene
    bundle, raw = _trace(scene, job.velocity)
    observation, shaded = _shade_traced(scene, job, bundle, raw)
    pixels = _frame_pixels(scene, job, observation, shaded, raw, bundle)
    height, width = scene["image.height"], scene["image.width"]
    pixel_area = (scene["observer.field_of_view"] / width) ** 2
    flux = float(np.nansum(shaded.intensity) * pixel_area)
    return FrameResult(job.index, pixels.reshape((height, width) + pixels.shape[1:]), flux,
                       time.perf_counter() - started)
