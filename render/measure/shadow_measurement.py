"""Measuring rendered images against the analytic predictions.

What is measured
----------------
Shadow boundary
    The captured region's edge is located to sub-pixel precision by bisection
    along ``measure.directions`` rays from the shadow's centre (the centroid of
    the captured pixels), each step tracing one ray per direction with the
    same observer and tolerances as the render (``trace_points`` for the
    distant observer, the camera's own rays otherwise), ignoring the disk.  The
    radii rho(phi) are uniform in polar angle, so the moments of
    :func:`render.measure.shadow.closed_curve_moments` are spectrally accurate; the
    extents are read off the trigonometric interpolant of rho(phi).
Pixel mask
    The captured pixels of a transparent-disk render give a second area
    estimate, N h^2 (h the pixel size).  Its error is bounded by the area of
    the pixels that the true boundary crosses: a curve of length L meets at
    most 4 (L/h + 1) pixels (split it into pieces of length h; each meets at
    most 4 squares), so |N h^2 - A| <= 4 h (L + h).  With an opaque disk the
    disk hides part of the shadow and the mask is not used.
Photon rings
    For a transparent disk, the order-n image (n >= 1) is read from the order
    map ``on_disk[n]``: in angular bins about the shadow centre its inner and
    outer radii are averaged, giving a diameter 2 <(inner + outer)/2> and a
    width <outer - inner> + h.  :func:`photon_ring_edges` locates the edges
    along one radial cut by bisection, to far below a pixel.
Image moments
    Brightness-weighted centroid and second central moments (sigma_alpha^2,
    sigma_beta^2, cov) of the whole image and of each order.

The check table compares the measured shadow with
:func:`render.measure.shadow.shadow_moments` (exact for the camera's frame when the
observer is a camera) quantity by quantity, each with its tolerance.

References
----------
Bardeen (1973); Johannsen & Psaltis (2010), ApJ 718, 446;
Johnson et al. (2020), Sci. Adv. 6, eaaz1310 (photon-ring widths shrink by
e^-pi per order for Schwarzschild).
"""

import io
import json
import dataclasses
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..geodesics.integrator import FATE_CAPTURED, FATE_ESCAPED
from ..output.files import atomic_write, check_free, jsonable
from ..geodesics.tracing import trace
from ..light.transfer import trace_points
from ..errors import SceneError
from .shadow import closed_curve_moments, critical_curve, shadow_moments
from ..imaging.still import render_still
from ..light.emission import make_emission_law, observed_bolometric
from ..units import angular_gravitational_radius_uas

__all__ = [
    "MeasureError",
    "Check",
    "Measurement",
    "QUANTITIES",
    "fate_tracer",
    "shadow_boundary",
    "pixel_mask_area",
    "ring_profiles",
    "image_moments",
    "photon_ring_edges",
    "measure_scene",
    "measure_paths",
    "write_measurement",
    "format_table",
]

# Quantity -> (unit, scene key of its tolerance, "relative" or "absolute").
QUANTITIES = {
    "area": ("M^2", "measure.area_tolerance", "relative"),
    "radius": ("M", "measure.radius_tolerance", "relative"),
    "centroid_alpha": ("M", "measure.centroid_tolerance", "absolute"),
    "centroid_beta": ("M", "measure.centroid_tolerance", "absolute"),
    "alpha_min": ("M", "measure.extent_tolerance", "absolute"),
    "alpha_max": ("M", "measure.extent_tolerance", "absolute"),
    "beta_max": ("M", "measure.extent_tolerance", "absolute"),
    "asymmetry": ("M", "measure.asymmetry_tolerance", "absolute"),
    "pixel_area": ("M^2", None, "absolute"),
}
# Bisection stops when the bracket is this small (M): far below any pixel and
# below the integrator's own resolution of the capture boundary.
BOUNDARY_TOLERANCE = 1e-10
UPSAMPLE = 16


class MeasureError(SceneError):
    """The scene cannot be measured (the message is one line for the user)."""


@dataclass
class Check:
    """One row of the check table."""

    quantity: str
    unit: str
    measured: float
    analytic: float
    tolerance: float
    kind: str  # "relative" or "absolute"

    @property
    def difference(self):
        return self.measured - self.analytic

    @property
    def error(self):
        """The number compared with the tolerance (relative or absolute)."""
        if self.kind == "relative":
            return abs(self.difference) / abs(self.analytic)
        return abs(self.difference)

    @property
    def passed(self):
        return bool(self.error <= self.tolerance)

    def as_dict(self):
        return {"quantity": self.quantity, "unit": self.unit, "measured": self.measured,
                "analytic": self.analytic, "difference": self.difference,
                "error": self.error, "tolerance": self.tolerance, "tolerance_kind": self.kind,
                "passed": self.passed}


@dataclass
class Measurement:
    """Everything :func:`measure_scene` found; ``checks`` is the pass/fail table."""

    checks: list
    report: dict
    result: object = None  # the StillResult measured
    boundary: tuple = ()  # measured (alpha, beta), closed
    curve: tuple = ()  # analytic (alpha, beta), closed
    extra: dict = field(default_factory=dict)

    @property
    def passed(self):
        return all(check.passed for check in self.checks)


def fate_tracer(scene):
    """A function (alpha, beta) -> fate codes for the scene's observer, disk ignored.

    The rays are the render's own (the scene's observer set-up and tracing method,
    :meth:`render.scene.loader.Scene.trace_settings`), so the boundary measured is
    the one in the rendered image plane; only one crossing is recorded and up to
    1000 followed (rays that graze the photon orbit cross the plane many times).
    """
    viewpoint = scene.viewpoint()
    base = scene.trace_settings()
    settings = dataclasses.replace(base, orders=1, max_crossings=max(base.max_crossings, 1000),
                                   stop_on_disk=False, want_escape=False)

    def trace_fates(alpha, beta):
        alpha = np.atleast_1d(np.asarray(alpha, dtype=float)).ravel()
        beta = np.atleast_1d(np.asarray(beta, dtype=float)).ravel()
        raw = trace(settings, alpha, beta, viewpoint.rays_at(alpha, beta), maps=False)
        return raw["fate"].astype(np.int8)
    return trace_fates


def _distance_to_frame(centre, angles, half_width, half_height, roll_deg):
    """Distance from ``centre`` (sky coordinates) to the image edge along each angle."""
    roll = math.radians(roll_deg)
    c, s = math.cos(roll), math.sin(roll)
    # Into the image axes (the inverse of the roll rotation).
    x0 = c * centre[0] + s * centre[1]
    y0 = -s * centre[0] + c * centre[1]
    dx, dy = np.cos(angles - roll), np.sin(angles - roll)
    with np.errstate(divide="ignore"):
        tx = np.where(dx > 0, (half_width - x0) / dx, np.where(dx < 0, (-half_width - x0) / dx,
                                                               np.inf))
        ty = np.where(dy > 0, (half_height - y0) / dy, np.where(dy < 0, (-half_height - y0) / dy,
                                                                np.inf))
    return np.minimum(tx, ty)


def shadow_boundary(trace, centre, n_directions, outer, tolerance=BOUNDARY_TOLERANCE):
    """Capture boundary along rays from ``centre``, by bisection.

    Parameters
    ----------
    trace : callable
        (alpha, beta) -> fate codes (see :func:`fate_tracer`).
    centre : (float, float)
        A point inside the captured region, in M.
    n_directions : int
        Directions, uniform in polar angle phi_k = 2 pi k / n.
    outer : float or ndarray
        Radius (per direction) at which every ray must have escaped: the
        image's edge.
    tolerance : float
        Final bracket width in M.

    Returns
    -------
    phi, rho : ndarray
        Polar angles and boundary radii (midpoint of the final bracket).

    Raises
    ------
    MeasureError
        If the centre is not captured, or a ray at ``outer`` is (the shadow
        reaches past the image's edge).
    """
    phi = 2.0 * np.pi * np.arange(int(n_directions)) / int(n_directions)
    cx, cy = centre
    if trace(np.array([cx]), np.array([cy]))[0] != FATE_CAPTURED:
        raise MeasureError(f"the ray at the shadow's centre ({cx:.4g}, {cy:.4g}) M is not "
                           "captured; no shadow to measure")
    lo = np.zeros_like(phi)
    hi = np.broadcast_to(np.asarray(outer, dtype=float), phi.shape).copy()
    edge = trace(cx + hi * np.cos(phi), cy + hi * np.sin(phi))
    if np.any(edge == FATE_CAPTURED):
        raise MeasureError("the field of view does not contain the whole shadow (rays at the "
                           "image's edge are captured); widen observer.field_of_view")
    while np.max(hi - lo) > tolerance:
        mid = 0.5 * (lo + hi)
        captured = trace(cx + mid * np.cos(phi), cy + mid * np.sin(phi)) == FATE_CAPTURED
        lo = np.where(captured, mid, lo)
        hi = np.where(captured, hi, mid)
    return phi, 0.5 * (lo + hi)


def _upsampled_polar(phi, rho, factor=UPSAMPLE):
    """Trigonometric interpolant of rho(phi) on a grid ``factor`` times finer."""
    n = rho.size
    spectrum = np.fft.rfft(rho)
    m = n * factor
    padded = np.zeros(m // 2 + 1, dtype=complex)
    padded[: spectrum.size] = spectrum
    if n % 2 == 0:
        padded[n // 2] *= 0.5  # split the Nyquist term between +-n/2
    fine = np.fft.irfft(padded, m) * factor
    return 2.0 * np.pi * np.arange(m) / m, fine


def boundary_moments(centre, phi, rho):
    """Moments of the measured boundary rho(phi) about ``centre`` (see the module docstring)."""
    fine_phi, fine_rho = _upsampled_polar(phi, rho)
    alpha = centre[0] + fine_rho * np.cos(fine_phi)
    beta = centre[1] + fine_rho * np.sin(fine_phi)
    moments = closed_curve_moments(alpha, beta, smooth=True)
    return moments, (np.append(alpha, alpha[0]), np.append(beta, beta[0]))


def pixel_mask_area(captured, pixel_size, perimeter):
    """Area of the captured pixels and its quantisation bound 4 h (L + h), in M^2."""
    count = int(np.count_nonzero(captured))
    return count * pixel_size ** 2, 4.0 * pixel_size * (perimeter + pixel_size)


def ring_profiles(on_disk, alpha, beta, centre, pixel_size, n_bins=90):
    """Diameter and width of each order's image from the order maps (n >= 1).

    Returns
    -------
    dict
        {n: {"diameter", "width", "inner", "outer", "bins"}} in M, for orders
        with pixels in at least half the angular bins.
    """
    rho = np.hypot(alpha - centre[0], beta - centre[1])
    angle = np.arctan2(beta - centre[1], alpha - centre[0])
    bins = np.floor((angle + np.pi) / (2.0 * np.pi) * n_bins).astype(int) % n_bins
    rings = {}
    for n in range(1, on_disk.shape[0]):
        mask = on_disk[n]
        inner, outer = [], []
        for k in range(n_bins):
            values = rho[mask & (bins == k)]
            if values.size:
                inner.append(values.min())
                outer.append(values.max())
        if len(inner) < n_bins // 2:
            continue
        inner, outer = np.array(inner), np.array(outer)
        rings[n] = {"diameter": float(np.mean(inner + outer)),
                    "width": float(np.mean(outer - inner) + pixel_size),
                    "inner": float(np.mean(inner)), "outer": float(np.mean(outer)),
                    "bins": int(inner.size)}
    return rings


def image_moments(intensity, alpha, beta, pixel_size):
    """Brightness-weighted centroid and second central moments of an image, in M.

    Returns
    -------
    dict
        ``flux`` (sum of I h^2), ``centroid_alpha``, ``centroid_beta``,
        ``sigma_alpha``, ``sigma_beta`` (square roots of the second central
        moments), ``covariance``, ``major``/``minor`` (sigmas along the
        principal axes) and ``position_angle_deg`` (of the major axis,
        counter-clockwise from +alpha).  None when the image is dark.
    """
    weight = np.nan_to_num(np.asarray(intensity, dtype=float), nan=0.0)
    total = weight.sum()
    if not total > 0.0:
        return None
    ca = float((weight * alpha).sum() / total)
    cb = float((weight * beta).sum() / total)
    saa = float((weight * (alpha - ca) ** 2).sum() / total)
    sbb = float((weight * (beta - cb) ** 2).sum() / total)
    sab = float((weight * (alpha - ca) * (beta - cb)).sum() / total)
    eigen, vectors = np.linalg.eigh(np.array([[saa, sab], [sab, sbb]]))
    major = vectors[:, 1]
    return {"flux": float(total * pixel_size ** 2), "centroid_alpha": ca, "centroid_beta": cb,
            "sigma_alpha": math.sqrt(saa), "sigma_beta": math.sqrt(sbb), "covariance": sab,
            "major": math.sqrt(max(eigen[1], 0.0)), "minor": math.sqrt(max(eigen[0], 0.0)),
            "position_angle_deg": float(np.degrees(np.arctan2(major[1], major[0])) % 180.0)}


def _per_order_intensity(result, scene):

    law = make_emission_law(scene["emission.law"], index=scene["emission.index"])
    with np.errstate(invalid="ignore"):
        values = np.where(result.on_disk, observed_bolometric(result.g, law.intensity(result.r)),
                          0.0)
    return np.nan_to_num(values, nan=0.0)


def photon_ring_edges(spin, inclination_deg, inner_radius, outer_radius, orders=(1, 2, 3), *,
                      direction_deg=0.0, tolerance=1e-11, bisection_tolerance=1e-13,
                      far=60.0):
    """Edges of the order-n images of a transparent disk along one radial image-plane cut.

    Along the cut beta = rho sin(phi), alpha = rho cos(phi) from the origin
    (which must lie inside the shadow), the n-th equatorial crossing radius
    r_n(rho) rises from near the photon orbits at the shadow's edge to
    infinity where the n-th crossing disappears; the image of order n is where
    inner_radius <= r_n <= outer_radius.  Both edges are found by bisection
    with :func:`render.trace_points`.

    Parameters
    ----------
    spin, inclination_deg : float
        The black hole and the distant observer.
    inner_radius, outer_radius : float
        The disk's edges in M.
    orders : sequence of int
        Orders n >= 0 to locate.
    direction_deg : float
        Polar angle of the cut in the image plane.
    tolerance : float
        Integrator tolerance (tighter than the default: the n = 3 ring is
        ~1e-4 M wide).
    bisection_tolerance : float
        Final bracket width in M.
    far : float
        A radius (M) beyond which the n-th crossing no longer exists... or
        lies outside the disk, for every requested order.

    Returns
    -------
    dict
        ``critical``: the cut's capture boundary rho_c; and per order n,
        ``(rho_inner, rho_outer)``.

    References
    ----------
    Johnson et al. (2020), Sci. Adv. 6, eaaz1310; Gralla & Lupsasca (2020),
    Phys. Rev. D 101, 044031.
    """
    orders = [int(n) for n in orders]
    trace = _cut_tracer(spin, inclination_deg, direction_deg, max(orders) + 1, tolerance)
    rho_c = _capture_boundary_along_cut(trace, far, bisection_tolerance)
    edges = {"critical": rho_c}
    targets = []
    for n in orders:
        targets += [(n, inner_radius), (n, outer_radius)]
    middle = _crossing_edges_along_cut(trace, targets, rho_c, far, bisection_tolerance)
    for k, n in enumerate(orders):
        edges[n] = (float(middle[2 * k]), float(middle[2 * k + 1]))
    return edges


def _cut_tracer(spin, inclination_deg, direction_deg, depth, tolerance):
    """``trace(rho)``: the distant observer's rays at distances rho along one image-plane cut."""
    cos_phi, sin_phi = math.cos(math.radians(direction_deg)), math.sin(math.radians(direction_deg))

    def trace(rho):
        rho = np.asarray(rho, dtype=float)
        return trace_points(rho * cos_phi, rho * sin_phi, spin=spin,
                            inclination_deg=inclination_deg, max_orders=depth,
                            tolerance=tolerance)

    return trace


def _capture_boundary_along_cut(trace, far, bisection_tolerance):
    """The cut's capture boundary rho_c, by bisection between 0 (captured) and ``far``."""
    lo, hi = np.array([0.0]), np.array([far])
    if trace(lo)["fate"][0] != "captured" or trace(hi)["fate"][0] == "captured":
        raise MeasureError("the cut must start inside the shadow and end outside it")
    while hi[0] - lo[0] > bisection_tolerance:
        mid = 0.5 * (lo + hi)
        captured = trace(mid)["fate"][0] == "captured"
        lo, hi = (mid, hi) if captured else (lo, mid)
    return float(hi[0])  # the escaping side: rays wind many times here


def _crossing_edges_along_cut(trace, targets, rho_c, far, bisection_tolerance):
    """Where the n-th crossing radius r_n(rho) passes each target radius, all bisected at once.

    Parameters
    ----------
    trace : callable
        :func:`_cut_tracer`'s ``trace(rho)``.
    targets : list of (int, float)
        Pairs (order n, radius in M).
    rho_c, far : float
        The bracket: the capture boundary (r_n near the photon orbits, below
        every target) and a distance where r_n is beyond every target or gone.
    bisection_tolerance : float
        Final bracket width in M.

    Returns
    -------
    ndarray
        The crossing distance rho of each target, in order.
    """
    lo = np.full(len(targets), rho_c)
    hi = np.full(len(targets), far)
    column = np.array([n for n, _ in targets])
    radius = np.array([r for _, r in targets])

    def beyond(rho):
        crossings = trace(rho)["r"][np.arange(rho.size), column]
        return np.where(np.isnan(crossings), True, crossings > radius)

    if np.any(beyond(lo)) or not np.all(beyond(hi)):
        raise MeasureError("the rings are not bracketed along this cut; change far or the disk")
    while np.max(hi - lo) > bisection_tolerance:
        mid = 0.5 * (lo + hi)
        out = beyond(mid)
        lo = np.where(out, lo, mid)
        hi = np.where(out, mid, hi)
    return 0.5 * (lo + hi)


def measure_paths(scene, folder):
    """Final paths of the measurement's files: {"json": ..., "png": ...}."""
    folder = Path(folder)
    return {"json": folder / f"{scene['name']}-measure.json",
            "png": folder / f"{scene['name']}-measure.png"}


def _tolerances(scene, overrides):
    tolerances = {}
    for quantity, (_, key, _) in QUANTITIES.items():
        if key is not None:
            tolerances[quantity] = scene[key]
    for quantity, value in (overrides or {}).items():
        if quantity not in QUANTITIES:
            raise MeasureError(f"--tolerance: unknown quantity '{quantity}'; expected one of "
                               f"{', '.join(QUANTITIES)}")
        if not (isinstance(value, (int, float)) and math.isfinite(value) and value >= 0.0):
            raise MeasureError(f"--tolerance {quantity}={value!r} is not allowed; expected a "
                               "number >= 0")
        tolerances[quantity] = float(value)
    return tolerances


def parse_tolerances(items):
    """``quantity=value`` strings (as given to ``--tolerance``) -> {quantity: float}."""
    parsed = {}
    for item in items or ():
        name, sep, text = item.partition("=")
        name = name.strip()
        try:
            value = float(text)
        except ValueError:
            value = None
        if not sep or value is None:
            raise MeasureError(f"--tolerance {item!r} is not allowed; expected quantity=number, "
                               "e.g. area=1e-4")
        parsed[name] = value
    return parsed


def _analytic(scene):
    distance = None if scene["observer.placement"] == "distant" else scene["observer.distance"]
    kwargs = {"distance": distance, "frame": scene["observer.frame"]}
    moments = shadow_moments(scene.spin, scene["observer.inclination"], **kwargs)
    curve = critical_curve(scene.spin, scene["observer.inclination"], **kwargs)
    return moments, curve, distance


def check_field_of_view(scene, curve):
    """Raise :class:`MeasureError` unless the analytic curve lies inside the image."""
    width, height = scene["image.width"], scene["image.height"]
    h = scene["observer.field_of_view"] / width
    roll = math.radians(scene["observer.roll"])
    c, s = math.cos(roll), math.sin(roll)
    x = c * curve[0] + s * curve[1]
    y = -s * curve[0] + c * curve[1]
    if (np.max(np.abs(x)) >= 0.5 * width * h) or (np.max(np.abs(y)) >= 0.5 * height * h):
        raise MeasureError(
            f"the field of view ({width * h:.4g} M x {height * h:.4g} M) does not contain the "
            f"whole shadow (alpha {curve[0].min():.4g} .. {curve[0].max():.4g} M, beta "
            f"{curve[1].min():.4g} .. {curve[1].max():.4g} M); widen observer.field_of_view")


def measure_scene(scene, tolerances=None, result=None):
    """Render (unless ``result`` is given) and measure a scene.

    Parameters
    ----------
    scene : Scene
    tolerances : dict, optional
        {quantity: tolerance} overriding the scene's ``measure.*`` keys.
    result : StillResult, optional
        A render of this scene, to avoid rendering again.

    Returns
    -------
    Measurement

    Raises
    ------
    MeasureError
        The field of view does not contain the whole shadow, or nothing is captured.
    """

    tolerances = _tolerances(scene, tolerances)
    analytic, curve, distance = _analytic(scene)
    check_field_of_view(scene, curve)
    if result is None:
        result = render_still(scene, maps=False)   # the fates are all it needs
    h = scene["observer.field_of_view"] / scene["image.width"]
    captured = _captured_pixels(result)
    centre = (float(result.alpha[captured].mean()), float(result.beta[captured].mean()))
    n_directions = scene["measure.directions"]
    measured, boundary = _measured_shadow(scene, centre, n_directions, h)
    checks = _shadow_checks(measured, analytic, tolerances)
    transparent = scene["disk.surface"] == "transparent"
    mask = None
    if transparent:
        mask, check = _pixel_mask_check(captured, h, analytic, tolerances)
        checks.append(check)
    rings = ring_profiles(result.on_disk, result.alpha, result.beta, centre, h) \
        if transparent else {}
    report = {
        "program": "nullray", "version": result.metadata.get("version"),
        "scene": scene.document, "scene_source": scene.source,
        "units": "M (G = c = 1) unless stated; areas in M^2; uas = microarcseconds",
        "conventions": {"alpha": "to the right", "beta": "up",
                        "tolerance_kind": "relative: |measured-analytic|/|analytic|; "
                                          "absolute: |measured-analytic|"},
        "passed": all(c.passed for c in checks),
        "checks": [c.as_dict() for c in checks],
        "shadow": {"measured": measured, "analytic": analytic, "centre": list(centre),
                   "directions": int(n_directions), "bisection_tolerance": BOUNDARY_TOLERANCE,
                   "pixel_mask": mask},
        "rings": {str(n): ring for n, ring in rings.items()},
        "image_moments": _image_moments_by_order(result, scene, h),
        "physical": _physical_sizes(scene, measured, analytic, rings),
        "notes": _notes(scene, analytic, distance, transparent),
    }
    return Measurement(checks=checks, report=report, result=result, boundary=boundary,
                       curve=curve)


def _captured_pixels(result):
    """The captured pixels (H, W); refused if there are none or they touch the edge."""
    captured = result.fate == FATE_CAPTURED
    if not np.any(captured):
        raise MeasureError("no captured pixels in the image: the shadow is smaller than a pixel "
                           "or hidden; raise image.width or narrow observer.field_of_view")
    border = np.concatenate([captured[0], captured[-1], captured[:, 0], captured[:, -1]])
    if np.any(border):
        raise MeasureError("the field of view does not contain the whole shadow (captured "
                           "pixels touch the image's edge); widen observer.field_of_view")
    return captured


def _measured_shadow(scene, centre, n_directions, h):
    """(moments, boundary) of the shadow edge bisected along rays from ``centre``."""
    width, height = scene["image.width"], scene["image.height"]
    phi = 2.0 * np.pi * np.arange(n_directions) / n_directions
    outer = _distance_to_frame(centre, phi, 0.5 * width * h, 0.5 * height * h,
                               scene["observer.roll"])
    phi, rho = shadow_boundary(fate_tracer(scene), centre, n_directions, outer)
    return boundary_moments(centre, phi, rho)


def _shadow_checks(measured, analytic, tolerances):
    """One :class:`Check` per compared shadow quantity."""
    checks = []
    for quantity in ("area", "radius", "centroid_alpha", "centroid_beta", "alpha_min",
                     "alpha_max", "beta_max", "asymmetry"):
        unit, _, kind = QUANTITIES[quantity]
        checks.append(Check(quantity, unit, measured[quantity], analytic[quantity],
                            tolerances[quantity], kind))
    return checks


def _pixel_mask_check(captured, h, analytic, tolerances):
    """(report entry, Check) of the captured pixels' area against the analytic area."""
    mask_area, bound = pixel_mask_area(captured, h, analytic["perimeter"])
    mask = {"area": mask_area, "quantisation_bound": bound,
            "pixels": int(np.count_nonzero(captured))}
    return mask, Check("pixel_area", "M^2", mask_area, analytic["area"],
                       tolerances.get("pixel_area", bound), "absolute")


def _image_moments_by_order(result, scene, h):
    """Intensity moments of the whole image and of each order's image alone."""
    total = image_moments(result.intensity, result.alpha, result.beta, h)
    per_order = _per_order_intensity(result, scene)
    orders = {str(n): image_moments(per_order[n], result.alpha, result.beta, h)
              for n in range(per_order.shape[0])}
    return {"total": total, "orders": orders}


def _physical_sizes(scene, measured, analytic, rings):
    """Shadow and ring sizes in microarcseconds, for the scene's mass and distance."""

    uas = angular_gravitational_radius_uas(scene["black_hole.mass"], scene["black_hole.distance"])
    return {
        "uas_per_M": uas,
        "shadow_diameter_uas": {"measured": 2.0 * measured["radius"] * uas,
                                "analytic": 2.0 * analytic["radius"] * uas},
        "shadow_width_uas": {"measured": measured["width"] * uas,
                             "analytic": analytic["width"] * uas},
        "shadow_height_uas": {"measured": measured["height"] * uas,
                              "analytic": analytic["height"] * uas},
        "ring_diameters_uas": {str(n): ring["diameter"] * uas for n, ring in rings.items()},
    }


def _notes(scene, analytic, distance, transparent):
    """What the reader of a measurement should know about how it was made."""
    notes = []
    if distance is not None:
        distant = shadow_moments(scene.spin, scene["observer.inclination"])
        notes.append(
            f"analytic curve exact in the camera's {scene['observer.frame']} frame at "
            f"r = {distance:g} M; the distant-observer approximation would differ in area by "
            f"{distant['area'] / analytic['area'] - 1.0:+.3e} (relative)")
    if not transparent:
        notes.append("opaque disk: the pixel-mask area and the ring sizes are not measured "
                     "(the disk hides part of the shadow and the higher orders)")
    return notes


def _fmt(value):
    return f"{value:.9g}" if abs(value) >= 1e-3 or value == 0.0 else f"{value:.4e}"


def format_table(measurement):
    """The check table as aligned text, then a few lines of physical sizes."""
    header = ("quantity", "unit", "measured", "analytic", "difference", "tolerance", "result")
    rows = [header]
    for c in measurement.checks:
        diff = _fmt(c.difference) + (f" ({c.error:.2e} rel)" if c.kind == "relative" else "")
        tol = f"{c.tolerance:.3g}" + (" rel" if c.kind == "relative" else f" {c.unit}")
        rows.append((c.quantity, c.unit, _fmt(c.measured), _fmt(c.analytic), diff, tol,
                     "pass" if c.passed else "FAIL"))
    widths = [max(len(row[k]) for row in rows) for k in range(len(header))]
    lines = ["  ".join(cell.ljust(w) for cell, w in zip(row, widths)).rstrip() for row in rows]
    physical = measurement.report["physical"]
    uas = physical["uas_per_M"]
    lines.append(f"1 M = {uas:.4g} uas; shadow diameter 2 sqrt(A/pi) = "
                 f"{physical['shadow_diameter_uas']['measured']:.4g} uas (analytic "
                 f"{physical['shadow_diameter_uas']['analytic']:.4g} uas), width "
                 f"{physical['shadow_width_uas']['measured']:.4g} uas")
    for n, ring in measurement.report["rings"].items():
        lines.append(f"order {n} image: diameter {ring['diameter']:.4g} M "
                     f"({ring['diameter'] * uas:.4g} uas), width {ring['width']:.3g} M")
    for note in measurement.report["notes"]:
        lines.append(f"note: {note}")
    passed = sum(c.passed for c in measurement.checks)
    lines.append(f"{passed} of {len(measurement.checks)} checks within tolerance")
    return "\n".join(lines)


def overlay_png_bytes(measurement, scene):
    """The image with the analytic curve and the measured boundary drawn over it (PNG)."""
    from matplotlib.figure import Figure   # a bare Figure: no backend is chosen here

    result = measurement.result
    width, height = scene["image.width"], scene["image.height"]
    h = scene["observer.field_of_view"] / width
    half_w, half_h = 0.5 * width * h, 0.5 * height * h
    roll = math.radians(scene["observer.roll"])
    c, s = math.cos(roll), math.sin(roll)

    def to_image(curve):
        return c * curve[0] + s * curve[1], -s * curve[0] + c * curve[1]

    figure = Figure(figsize=(6.4, 6.4 * height / width + 0.6), dpi=100)
    axes = figure.add_subplot(1, 1, 1)
    pixels = result.pixels
    axes.imshow(pixels, cmap="gray" if pixels.ndim == 2 else None, vmin=0, vmax=255,
                extent=(-half_w, half_w, -half_h, half_h), origin="upper",
                interpolation="nearest")
    ax, ay = to_image(measurement.curve)
    mx, my = to_image(measurement.boundary)
    axes.plot(ax, ay, color="#00d0ff", lw=1.2, label="analytic critical curve")
    axes.plot(mx, my, color="#ff3030", lw=0.8, ls="--", label="measured boundary")
    axes.set_xlim(-half_w, half_w)
    axes.set_ylim(-half_h, half_h)
    label = ("alpha", "beta") if roll == 0.0 else ("x", "y")
    axes.set_xlabel(f"{label[0]} (M)")
    axes.set_ylabel(f"{label[1]} (M)")
    uas = measurement.report["physical"]["uas_per_M"]
    top = axes.secondary_xaxis("top", functions=(lambda v: v * uas, lambda v: v / uas))
    top.set_xlabel(f"{label[0]} (uas)")
    right = axes.secondary_yaxis("right", functions=(lambda v: v * uas, lambda v: v / uas))
    right.set_ylabel(f"{label[1]} (uas)")
    verdict = "pass" if measurement.passed else "FAIL"
    axes.set_title(f"{scene['name']}: spin {scene.spin:g}, inclination "
                   f"{scene['observer.inclination']:g} deg ({verdict})", fontsize=10)
    axes.legend(loc="lower left", fontsize=8)
    figure.tight_layout()
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png")
    return buffer.getvalue()


def write_measurement(measurement, scene, folder="outputs", overwrite=False):
    """Write the JSON report and the overlay PNG atomically; returns {kind: Path}."""
    paths = measure_paths(scene, folder)
    check_free(paths.values(), overwrite)
    text = json.dumps(measurement.report, indent=2, sort_keys=False, default=jsonable) + "\n"
    png = overlay_png_bytes(measurement, scene)
    atomic_write(paths["json"], lambda f: f.write(text.encode("utf-8")), overwrite)
    atomic_write(paths["png"], lambda f: f.write(png), overwrite)
    return paths


