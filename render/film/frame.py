"""One frame of a sequence: what a worker needs (FrameJob), renders (render_frame) and returns.

Frames that share their geometry (the observer set-up, how rays are traced and
the camera's velocity) reuse the last frame's traced rays, so a sequence that
changes only the disk, the emission or a pattern traces once.  A pattern
(:mod:`render.light.pattern`) is seen at the frame's time: each ray's emission
time is the frame's coordinate time minus its travel time.
"""

import dataclasses
import math
import time
from dataclasses import dataclass, field

import numpy as np

from ..geodesics.tracing import trace
from ..imaging.still import shining_crossings
from ..light.display import scene_scalar_pixels
from ..light.pattern import pattern_factor, tortoise_radius
from ..imaging.sensor import finish_still, needs_sensor
from ..light.emission import observed_bolometric
from ..light.observing import crossing_weights, order_sum, prepare_observation, shade

__all__ = ["FrameJob", "FrameResult", "render_frame", "shades_once"]


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
# Arrays of a trace that hold Boyer–Lindquist azimuths, and those modulo 2 pi.
_AZIMUTH_FIELDS = ("phi", "phi_end")


def _symmetry_key(scene, velocity):
    """What decides a frame's rays up to a turn about the spin axis.

    Kerr is stationary and axisymmetric: two observers that differ only in their
    azimuth and clock (the same radius, polar angle, frame and velocity in that frame)
    see the same rays, turned by the difference of their azimuths.  A camera at rest,
    one on a circular orbit at a constant angular velocity, and a distant observer
    whose azimuth or time changes all trace once per film.  The trace settings carry
    the resolved tracing.method.
    """
    at_zero = dataclasses.replace(scene.viewpoint(), azimuth_deg=0.0)
    return at_zero, scene.trace_settings(), velocity


def _trace_at_azimuth_zero(scene, velocity, progress=None):
    """Bundle and raw kernel output of the frame's observer turned to azimuth 0, cached.

    Every frame with the same :func:`_symmetry_key` shares them: a film traces once
    where symmetry allows.
    """
    key = _symmetry_key(scene, velocity)
    if key not in _TRACE_CACHE:
        alpha, beta, bundle = key[0].rays(velocity=velocity)
        raw = trace(key[1], alpha, beta, bundle, progress)
        _TRACE_CACHE.clear()
        _TRACE_CACHE[key] = (bundle, raw)
    return _TRACE_CACHE[key]


def _trace(scene, velocity, progress=None):
    """Bundle and raw kernel output of a frame, traced once per film where symmetry allows.

    The rays of :func:`_trace_at_azimuth_zero` turned to the frame's own azimuth
    (:func:`turned_trace`), which equals tracing them anew (tests/test_animation.py).
    """
    bundle, raw = _trace_at_azimuth_zero(scene, velocity, progress)
    return turned_trace(bundle, raw, math.radians(scene["observer.azimuth"]))


def turned_trace(bundle, raw, angle):
    """A traced bundle turned by ``angle`` (rad) about the spin axis: azimuths shifted.

    The crossings' azimuths and the escape directions' are shifted modulo 2 pi, the
    rays' starting azimuths (and final states) by ``angle``; radii, redshifts, delays
    and fates are unchanged (the Kerr metric does not depend on phi: Carter 1968).

    Examples
    --------
    >>> from render.camera.observers import RayBundle
    >>> b = RayBundle(np.zeros((1, 6)), np.zeros(1), np.zeros(1), np.ones(1), 0.0)
    >>> _, out = turned_trace(b, {"phi": np.array([[6.0]]), "r": np.array([[7.0]])}, 1.0)
    >>> round(float(out["phi"][0, 0]), 12), float(out["r"][0, 0])
    (0.71681469282, 7.0)
    """
    if angle == 0.0:
        return bundle, raw
    turned = dict(raw)
    for name in _AZIMUTH_FIELDS:
        if name in raw:
            turned[name] = np.mod(raw[name] + angle, 2.0 * math.pi)
    if "final_state" in raw:
        final = raw["final_state"].copy()
        final[:, 4] += angle
        turned["final_state"] = final
    states = bundle.states.copy()
    states[:, 4] += angle
    return dataclasses.replace(bundle, states=states), turned


_CROSSINGS_CACHE = {}


def _frame_crossings(scene, raw, bundle):
    """(g, hits, delay - r*_em + r*_cam) of traced rays: what every frame of a film shares.

    The redshift factors, the crossings that shine and the emission time's offset
    from the frame's clock depend on the rays' radii, constants of motion and fates,
    which a turn about the spin axis leaves alone (:func:`turned_trace`), and on the
    disk's extent; they are computed once per trace and disk.  The emission time of a
    frame is then its coordinate time minus the offset (:func:`render.light.pattern.emission_time`).
    """
    camera_radius = None if scene["observer.placement"] == "distant" else scene["observer.distance"]
    key = (id(raw["r"]), id(bundle.lam), scene.spin, scene.inner_radius, scene["disk.outer_radius"],
           scene["disk.orders"], scene["disk.surface"], camera_radius)
    if key not in _CROSSINGS_CACHE:
        g, hits = shining_crossings(scene, raw, bundle)
        with np.errstate(invalid="ignore"):
            offset = np.asarray(raw["delay"], dtype=float) - tortoise_radius(raw["r"], scene.spin)
        if camera_radius is not None:
            offset = offset + float(tortoise_radius(camera_radius, scene.spin))
        _CROSSINGS_CACHE.clear()
        # The arrays named in the key are kept alive with the entry, so their ids stay theirs.
        _CROSSINGS_CACHE[key] = (g, hits, offset, raw["r"], bundle.lam)
    return _CROSSINGS_CACHE[key][:3]


def _shades_by_pattern_only(scene):
    """Whether a frame's intensity is a sum over crossings of (fixed weight) x (pattern factor).

    True for bolometric light without sky, supersampling or polarisation: the
    observed intensity g^4 I_em(r) (1 + contrast P) w_limb is linear in the pattern
    factor, and nothing else in the frame depends on the frame's clock or azimuth.
    """
    return (scene["observing.mode"] == "bolometric" and not needs_sensor(scene)
            and scene["polarisation.model"] == "none")


def shades_once(jobs):
    """Whether every frame of ``jobs`` comes from one trace and one shading (pattern only).

    Such a film costs one trace plus a pattern factor per frame in one process;
    a pool of processes would trace it once in each of them.
    """
    keys = {_symmetry_key(job.scene, job.velocity) for job in jobs}
    return len(keys) == 1 and all(_shades_by_pattern_only(job.scene) for job in jobs)


_WEIGHTS_CACHE = {}


def _film_weights(scene, job):
    """(raw, hits, offset, g, I_em(r), limb weight) of a film's one trace at azimuth 0, cached.

    Cached per trace and per frame scene with its azimuth left out: frames whose
    keyframes change the emission or the disk get their own weights.
    """
    bundle, raw = _trace_at_azimuth_zero(scene, job.velocity)
    settings = {key: value for key, value in scene.values.items() if key != "observer.azimuth"}
    key = (id(raw["r"]), repr(sorted(settings.items())))
    if key not in _WEIGHTS_CACHE:
        g, hits, offset = _frame_crossings(scene, raw, bundle)
        observation = prepare_observation(scene)
        _, weight = crossing_weights(observation, raw["r"], g, hits, bundle)
        with np.errstate(invalid="ignore"):
            emitted = observation.law.intensity(np.where(hits, raw["r"], np.nan))
        _WEIGHTS_CACHE.clear()
        _WEIGHTS_CACHE[key] = (raw, hits, offset, g, emitted, weight)
    return _WEIGHTS_CACHE[key]


def _pattern_only_intensity(scene, job):
    """A frame's bolometric intensity per pixel from the film's cached weights.

    The same arithmetic, in the same order, as :func:`render.light.observing.shade`
    with the pattern's law (:class:`_ModulatedLaw`), so the result is identical to it.
    """
    raw, hits, offset, g, emitted, weight = _film_weights(scene, job)
    if scene["pattern.shape"] != "none":
        factor = pattern_factor(
            scene["pattern.shape"], raw["r"], raw["phi"] + math.radians(scene["observer.azimuth"]),
            job.coordinate_time - offset, scene.spin, radius=scene["pattern.radius"],
            phase_deg=scene["pattern.phase"], size=scene["pattern.size"],
            contrast=scene["pattern.contrast"], arms=scene["pattern.arms"],
            pitch_deg=scene["pattern.pitch"])
        emitted = emitted * np.where(hits, factor, 1.0)
    with np.errstate(invalid="ignore"):
        return order_sum(observed_bolometric(g, np.where(hits, emitted, 0.0)) * weight, hits)


def _shade_traced(scene, job, bundle, raw):
    """(observation, shaded) of traced rays, with the pattern at the frame's time."""

    spin = scene.spin
    g, hits, offset = _frame_crossings(scene, raw, bundle)
    observation = prepare_observation(scene)
    if scene["pattern.shape"] != "none":
        t_em = job.coordinate_time - offset
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
    if _shades_by_pattern_only(scene):
        # Trace once, shade many: only the pattern factor is computed per frame.
        intensity = _pattern_only_intensity(scene, job)
        pixels = scene_scalar_pixels(scene, intensity, job.white)
    else:
        bundle, raw = _trace(scene, job.velocity)
        observation, shaded = _shade_traced(scene, job, bundle, raw)
        pixels = _frame_pixels(scene, job, observation, shaded, raw, bundle)
        intensity = shaded.intensity
    height, width = scene["image.height"], scene["image.width"]
    pixel_area = (scene["observer.field_of_view"] / width) ** 2
    flux = float(np.nansum(intensity) * pixel_area)
    return FrameResult(job.index, pixels.reshape((height, width) + pixels.shape[1:]), flux,
                       time.perf_counter() - started)
