"""Rendering one still: scene -> camera -> geodesics (+ disk) -> emission -> arrays."""

import dataclasses
import time
import warnings
from datetime import datetime, timezone

import numpy as np

from ..about import __version__, software_versions
from ..errors import NullrayWarning
from ..light.disk import redshift_factor, shining_mask
from ..light.observing import (PER_ORDER_PRODUCTS, disk_integrated_tables, prepare_observation,
                               samples_own_grid, shade)
from ..geodesics.integrator import FATE_NAMES
from ..geodesics.tracing import energy_signs, trace
from ..spacetime.kerr import horizon_radii, isco_radius
from .adaptive import sample_band, sampling_metadata
from .result import StillResult
from .ticks import draw_ticks
from .tiling import plan_still, render_in_tiles
from .sensor import check_untiled, finish_still, halo_rows, needs_sensor, prepare_sky

__all__ = ["StillResult", "render_still", "trace_and_shade", "shining_crossings"]


def render_still(scene, progress=None, *, memory_budget=None, workdir=None, maps=None):
    """Render a validated :class:`~render.scene.loader.Scene` and return a :class:`StillResult`.

    ``progress(done, total)`` is called as rays finish (e.g. a
    :class:`render.progress.RayProgress` bar).

    Examples
    --------
    >>> from render import default_scene
    >>> result = render_still(default_scene(**{"image.width": 8, "image.height": 8}))
    >>> result.intensity.shape
    (8, 8)

    A still larger than ``tracing.memory_budget`` (or ``memory_budget``, in
    bytes) is rendered in bands of rows whose arrays go to temporary files in
    ``workdir`` (see :mod:`render.imaging.tiling`); call ``result.release()`` when done.

    ``maps`` asks for the ``phi`` and ``delay`` maps; by default (None) they are
    computed when the scene writes its data maps (``output.npz``).  The integrator
    produces them anyway; the closed form (``tracing.method``) skips them when they
    are not asked for, and they are then NaN.  The image needs neither.
    """
    if maps is None:
        maps = bool(scene["output.npz"])
    plan = plan_still(scene, memory_budget)
    # A budget given here (not the scene's) may call for tiles that a sky or
    # supersampling cannot use: refuse before any tracing, as the scene check does.
    check_untiled(scene.values, plan)
    # Emission law and observing mode first: a bad profile table fails before any tracing.
    observation = prepare_observation(scene)
    if needs_sensor(scene):
        prepare_sky(scene)  # a bad sky image fails before any tracing too
    if plan.tiles == 1:
        result = _render_band(scene, observation, None, progress, maps)
        return _with_ticks(scene, _with_disk_integrals(scene, observation, result))
    result = render_in_tiles(
        scene, plan, lambda rows, band_progress: _render_band(scene, observation, rows,
                                                              band_progress, maps),
        workdir=workdir, progress=progress)
    if scene["polarisation.ticks"]:
        result.metadata.setdefault("warnings", []).append(
            "polarisation.ticks: not drawn on a still rendered in tiles")
    return result


def _with_ticks(scene, result):
    """The still with polarisation ticks over its picture, when the scene asks for them.

    Only an untiled still gets them (a tiled one keeps its picture and says so).
    """
    if not scene["polarisation.ticks"] or "stokes_q" not in result.products:
        return result
    p = result.products
    result.pixels = draw_ticks(result.pixels, p["stokes_i"], p["stokes_q"], p["stokes_u"],
                               min_fraction=_faintest_ticked(scene))
    return result


def _faintest_ticked(scene):
    """Intensity, relative to the brightest cell, below which a cell gets no tick.

    The log and asinh scalings show display.decades of intensity, so every cell they show
    gets its tick; the others show about two decades.
    """
    if scene["display.scaling"] in ("log", "asinh"):
        return 10.0 ** -scene["display.decades"]
    return 0.01


def _with_disk_integrals(scene, observation, result):
    """Add the spectrum or line of the whole disk, sampled on its own grid (distant observer).

    These modes are never tiled (:func:`render.imaging.tiling.is_tileable`); their
    warnings go to the metadata and, as :class:`render.errors.NullrayWarning`, to
    Python callers.
    """
    if observation.mode not in ("spectrum", "line"):
        return result
    if not samples_own_grid(scene):
        for message in result.metadata["observing"].get("warnings", ()):
            warnings.warn(message, NullrayWarning, stacklevel=3)
        return result
    started = time.perf_counter()
    tables, info = disk_integrated_tables(observation, scene)   # with Q_nu, U_nu if polarised
    result.tables.update(tables)
    observed = result.metadata["observing"]
    observed.setdefault("warnings", []).extend(info.pop("warnings"))
    observed.update(info)
    observed["disk_grid"]["seconds"] = time.perf_counter() - started
    for message in observed["warnings"]:
        warnings.warn(message, NullrayWarning, stacklevel=3)
    return result


def _render_band(scene, observation, rows, progress, maps=True):
    """Render the image rows ``rows = (start, stop)`` (all rows if None) as a StillResult."""
    started = time.perf_counter()
    sensor = needs_sensor(scene)
    # A band with a sky or supersampling is traced with a halo of neighbouring rows
    # (render.imaging.sensor.halo_rows), so that its refinement and star images see the
    # neighbours they see untiled; only the band's own rows are kept.
    traced_rows = halo_rows(rows, scene["image.height"]) if sensor and rows is not None else rows
    alpha, beta, bundle = scene.viewpoint().rays(traced_rows)
    own_rays = _band_height(scene, rows) * scene["image.width"]
    sampling = scene.sampling_settings()
    sampled = None
    if sampling.is_adaptive:   # never with a sensor (check_sampling), so never with a halo
        sampled = sample_band(scene.trace_settings(), scene.viewpoint(), sampling, rows,
                              progress, maps)
    raw, g, hits, shaded = trace_and_shade(
        scene, observation, alpha, beta, bundle,
        _halo_free_progress(progress, alpha.size, own_rays, traced_rows != rows), maps,
        raw=None if sampled is None else sampled[0])
    traced = time.perf_counter()
    own = None if traced_rows == rows else (rows[0] - traced_rows[0], rows[1] - traced_rows[0])
    if sensor:
        # The sky behind the disk, supersampling and stars (render.imaging.sensor).
        shaded = finish_still(scene, observation, shaded, raw, bundle, alpha, beta,
                              lambda x, y, more: _traced_and_shaded(scene, observation, x, y,
                                                                    more), own=own)
    negative = energy_signs(bundle) < 0.0
    if own is not None:
        raw, g, hits, negative, shaded, alpha, beta = _own_rows(
            own, scene["image.width"], raw, g, hits, negative, shaded, alpha, beta)
    metadata = _still_metadata(scene, raw, shaded, negative, maps)
    metadata["trace_seconds"] = traced - started
    metadata["sampling"] = sampling_metadata(sampling, None if sampled is None else sampled[2])
    if sampled is not None:
        shaded.products["interpolated"] = sampled[1]
    metadata["total_seconds"] = time.perf_counter() - started
    return _band_result(scene, rows, raw, g, hits, shaded, alpha, beta, metadata)


def _band_height(scene, rows):
    return scene["image.height"] if rows is None else rows[1] - rows[0]


def _halo_free_progress(progress, traced_rays, own_rays, has_halo):
    """The progress callback of a band's tracing, counting its own rays only."""
    if progress is None or not has_halo:
        return progress

    def band_progress(done, total):   # the halo's rays are not counted twice
        progress(done * own_rays // traced_rays, own_rays)

    return band_progress


def _own_rows(own, width, raw, g, hits, negative, shaded, alpha, beta):
    """The band's own rows ``own = (start, stop)`` of arrays traced with a halo."""
    keep = slice(own[0] * width, own[1] * width)
    n_traced = alpha.size

    def cut(a):
        return a[keep] if isinstance(a, np.ndarray) and a.ndim and len(a) == n_traced else a

    raw = {name: cut(a) for name, a in raw.items()}
    shaded = dataclasses.replace(
        shaded, intensity=cut(shaded.intensity), pixels=cut(shaded.pixels),
        products={name: cut(a) for name, a in shaded.products.items()})
    return (raw, cut(g), cut(hits), cut(negative), shaded, alpha[own[0]:own[1]],
            beta[own[0]:own[1]])


def _still_metadata(scene, raw, shaded, negative, maps):
    """A band's metadata: scene, conventions, fate counts and the observing info.

    The caller adds the timings (``trace_seconds``, ``total_seconds``).
    """
    spin = scene.spin
    method = scene.trace_settings().method
    counts = {name: int(np.count_nonzero(raw["fate"] == code))
              for code, name in FATE_NAMES.items()}
    r_plus, _ = horizon_radii(spin)
    return {
        "program": "nullray", "version": __version__,
        "versions": software_versions(),
        "rendered_utc": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "scene": scene.document, "scene_source": scene.source,
        "units": "geometric, G = c = M = 1: lengths and times in M, angles in rad",
        "conventions": {
            "alpha": "image-plane x in M, to the right (Bardeen 1973)",
            "beta": "image-plane y in M, up along the projected spin axis",
            "rows": "row 0 is the top of the image",
            "order": "n counts all earlier crossings of the equatorial plane",
            "fate_codes": {str(k): v for k, v in FATE_NAMES.items()},
            "g": "nu_obs / nu_em; NaN inside the ISCO",
            "delay": "(t_obs - t_em) - (r*_obs - r*_em), dr*/dr = (r^2+a^2)/Delta",
            "exposure": "x = exposure * I / I_white; picture by the display.* rules "
                        "(README, Exposure and display); data maps untouched",
        },
        "isco": isco_radius(spin), "horizon": r_plus, "inner_radius": scene.inner_radius,
        "outer_radius": scene["disk.outer_radius"], "fate_counts": counts,
        # Photons of negative conserved energy (a camera inside the ergoregion).
        "negative_energy_rays": int(np.count_nonzero(negative)),
        "tracing_method": method,
        # False when the closed form skipped the phi and delay maps (then NaN).
        "phi_delay_maps": bool(maps or method == "integrate"),
        "steps_mean": float(raw["steps"].mean()),
        "observing": shaded.info,
    }


def _band_result(scene, rows, raw, g, hits, shaded, alpha, beta, metadata):
    """The band's flat per-ray arrays shaped as images (H, W) and per-order maps (orders, H, W)."""
    orders = scene["disk.orders"]
    height, width = _band_height(scene, rows), scene["image.width"]

    def image(a):
        return a.reshape((height, width) + a.shape[1:])

    def stack(a):
        if a.strides == (0, 0):   # a map the closed form skipped: all NaN, no memory
            return np.broadcast_to(np.nan, (orders, height, width))
        return np.ascontiguousarray(np.moveaxis(a, 1, 0).reshape(orders, height, width))

    return StillResult(
        intensity=image(shaded.intensity), pixels=image(shaded.pixels), fate=image(raw["fate"]),
        alpha=alpha, beta=beta, r=stack(raw["r"]), phi=stack(raw["phi"]), g=stack(g),
        delay=stack(raw["delay"]), on_disk=stack(hits), steps=image(raw["steps"]),
        metadata=metadata,
        products={k: stack(v) if k in PER_ORDER_PRODUCTS else image(v)
                  for k, v in shaded.products.items()},
        tables=shaded.tables)


def _traced_and_shaded(scene, observation, x, y, bundle):
    # Extra rays (supersampling) feed only the picture: no phi/delay maps needed.
    raw, _, _, shaded = trace_and_shade(scene, observation, x, y, bundle, maps=False)
    return raw, shaded


def trace_and_shade(scene, observation, alpha, beta, bundle, progress=None, maps=True, *,
                    raw=None):
    """Trace a bundle as the scene asks and shade its disk crossings.

    ``alpha, beta`` are the rays' image-plane points (M).  Returns
    ``(raw, g, hits, shaded)``: the kernel's arrays, the redshift
    factors and shining crossings (N, orders), and the observing mode's
    :class:`~render.light.observing.Shaded`.  A camera with a sky also keeps each
    ray's final state (for its direction at infinity, :mod:`render.imaging.sky`).
    ``maps=False`` lets the closed form skip phi and the delay (NaN then).  ``raw``,
    if given, holds the bundle's arrays already traced (adaptive sampling,
    :mod:`render.imaging.adaptive`), which are then shaded as they are.
    """
    if raw is None:
        raw = trace(scene.trace_settings(), alpha, beta, bundle, progress, maps)
    g, hits = shining_crossings(scene, raw, bundle)
    shaded = shade(observation, scene, raw, g, hits, bundle, alpha, beta)
    return raw, g, hits, shaded


def shining_crossings(scene, raw, bundle):
    """(g, hits) of traced rays: redshift factors and the crossings that shine, (N, orders).

    A crossing shines if it lies on the disk; for an opaque disk only the one that
    ended the ray does (earlier ones missed the disk).
    """
    g = redshift_factor(raw["r"], bundle.lam[:, None], scene.spin, bundle.energy_ratio[:, None])
    hits = shining_mask(raw["r"], raw["fate"], raw["n_crossings"], scene.inner_radius,
                        scene["disk.outer_radius"], scene["disk.orders"],
                        scene["disk.surface"] == "opaque")
    return g, hits
