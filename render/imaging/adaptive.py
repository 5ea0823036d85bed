"""Adaptive image-plane sampling: trace a coarse grid, interpolate where the maps are smooth.

A still traced pixel by pixel spends most of its rays on smooth maps: away from the
shadow's edge, the disk's edges and the photon rings, the crossing radius r, its
azimuth phi and the delay of each order vary slowly across the image.  With
``tracing.sampling: adaptive`` a band of rows is sampled in levels of decreasing
stride s (16, then 8, then 4 pixels; only strides that fit 4 times in the band):

1. The nodes of the level (pixels whose row and column are multiples of s, extended
   by virtual nodes beyond the image edges) are traced where a cell still unresolved
   needs them.
2. A cell (an s x s block of pixels) is *smooth* if the 4 x 4 nodes of its bicubic
   stencil share the same fate, number of crossings, direction of each crossing and
   place of each crossing relative to the disk's edges and the ISCO; where any of
   these changes (shadow edge, disk edges, photon rings) the cell is refined.
3. A smooth cell is interpolated per order, r, phi (unwrapped about a stencil node)
   and the delay with tensor-product cubic Lagrange weights; three test pixels (the
   middle of its top and left edges and its centre, where the cubic's error kernel
   peaks) are traced and the cell is accepted only if the interpolant meets there
   half the tolerance in r, g, phi and the delay, and the test pixels are in the
   class of the nodes.
4. Cells that fail go on to the next level; what remains after the last level is
   traced pixel by pixel.

Every traced pixel keeps its traced values; every interpolated pixel is flagged in
the ``interpolated`` map.  The bound is checked, not proven: it holds at the test
points, and the benchmark ``benchmarks/bench_adaptive.py`` measures the maximum error
over whole images against tracing every pixel.  The redshift factor g is not
interpolated: the still computes it from the interpolated r and each pixel's exact
constants of motion, so its error follows from that of r.
"""

from dataclasses import dataclass

import numpy as np
from numba import njit, prange

from ..errors import SceneError
from ..geodesics.tracing import trace
from ..light.disk import keplerian_redshift
from ..spacetime.kerr import isco_radius

__all__ = ["SAMPLINGS", "SamplingSettings", "sample_band", "image_plane_points",
           "check_sampling", "sampling_metadata", "merge_sampling_info"]

SAMPLINGS = ("every_pixel", "adaptive")
# Share of the tolerance the test pixels must meet: they sit where the cubic's error
# kernel peaks on smooth maps, and the margin covers the rest of the cell.
TEST_MARGIN = 0.5


@dataclass(frozen=True)
class SamplingSettings:
    """How a still samples its image plane.

    Attributes
    ----------
    method : {"every_pixel", "adaptive"}
    tolerance : float
        Error bound of interpolated pixels: relative in r and g, absolute in phi (rad),
        and for the delay (M) absolute below 1 M and relative above.
    strides : tuple of int
        Node spacings in pixels, coarse to fine; each divides the one before.
    inner_radius, outer_radius, isco : float
        The disk's edges and the ISCO (M): a crossing that moves across one is an edge.
    """

    method: str = "every_pixel"
    tolerance: float = 1e-6
    strides: tuple = (16, 8, 4)
    inner_radius: float = 0.0
    outer_radius: float = 0.0
    isco: float = 0.0

    @property
    def is_adaptive(self):
        return self.method == "adaptive"


def check_sampling(values):
    """Cross-key checks of ``tracing.sampling`` (called by scene validation).

    The sky and supersampling (:mod:`render.imaging.sensor`) trace extra rays around
    the pixels they refine and need every pixel's escape direction; adaptive sampling
    does not provide them yet.
    """
    if values["tracing.sampling"] != "adaptive":
        return
    for key, off in (("sky.backdrop", "none"), ("image.supersampling", 1)):
        if values[key] != off:
            raise SceneError(f"tracing.sampling = 'adaptive' cannot be combined with "
                             f"{key} = {values[key]!r}; use tracing.sampling: every_pixel "
                             f"or {key}: {off}")


def sampling_metadata(settings, info=None):
    """What a still's metadata says about its sampling (``info`` from :func:`sample_band`)."""
    if not settings.is_adaptive:
        return {"method": "every_pixel"}
    meta = {"method": "adaptive", "tolerance": settings.tolerance,
            "error_bound": (f"interpolated pixels (map 'interpolated') within {settings.tolerance:g} "
                            "relative in r and g, absolute in phi (rad), absolute in the delay "
                            "below 1 M and relative above; checked at traced test pixels "
                            "(half the bound there), not proven for every pixel"),
            "strides": list(settings.strides)}
    if info is not None:
        meta.update({name: info[name] for name in ("traced_rays", "interpolated_pixels",
                                                   "pixels")})
    return meta


def merge_sampling_info(total, part):
    """The sampling metadata of two bands of one still (counts added)."""
    if total is None or part.get("method") != "adaptive":
        return dict(part)
    merged = dict(total)
    for name in ("traced_rays", "interpolated_pixels", "pixels"):
        merged[name] = total[name] + part[name]
    return merged


def image_plane_points(viewpoint, rows, cols):
    """Image-plane points (alpha, beta) in M of pixel indices, fractional or beyond the edges.

    The same arithmetic as :func:`render.camera.observers.image_plane_grid`, so a
    pixel inside the image gets bit for bit its grid point.

    Examples
    --------
    >>> from render.camera.observers import Viewpoint
    >>> view = Viewpoint("distant", 0.0, 0.0, 60.0, field_of_view=2.0, width=2, height=2)
    >>> a, b = image_plane_points(view, np.array([0.0, 1.0]), np.array([1.0, -1.0]))
    >>> a.tolist(), b.tolist()
    ([0.5, -1.5], [0.5, -0.5])
    """
    scale = viewpoint.field_of_view / viewpoint.width
    x = (np.asarray(cols, dtype=float) + 0.5 - 0.5 * viewpoint.width) * scale
    y = (0.5 * viewpoint.height - np.asarray(rows, dtype=float) - 0.5) * scale
    roll = np.radians(viewpoint.roll_deg)
    if roll == 0.0:
        return x, y
    c, s = np.cos(roll), np.sin(roll)
    return c * x - s * y, s * x + c * y


def _cubic_weights(stride):
    """(stride, 4) Lagrange weights of nodes at t = -1, 0, 1, 2 for t = d / stride.

    References
    ----------
    Abramowitz & Stegun (1964), eq. 25.2.13 (four-point Lagrange interpolation).
    """
    t = np.arange(stride) / stride
    return np.stack([-t * (t - 1) * (t - 2) / 6, (t + 1) * (t - 1) * (t - 2) / 2,
                     -(t + 1) * t * (t - 2) / 2, (t + 1) * t * (t - 1) / 6], axis=1)


class _Store:
    """Traced rays of a band, kept compactly, and where on the extended grid each one lies.

    The extended grid is the band plus virtual nodes around it (``pad`` pixels before,
    2 ``pad`` after).  ``slot[i, j]`` is the row of the point (i, j) in the traced
    arrays (``fields``, ``lam``, ``energy_ratio``), or -1 while it is not traced.
    """

    def __init__(self, viewpoint, trace_settings, rows, pad, maps):
        self.viewpoint, self.trace_settings = viewpoint, trace_settings
        self.maps = maps
        self.row0 = rows[0]
        self.pad = pad
        self.shape = (rows[1] - rows[0] + 3 * pad, viewpoint.width + 3 * pad)
        self.slot = np.full(self.shape, -1, dtype=np.int64)
        self.fields = {}
        self.lam = np.empty(0)
        self.energy_ratio = np.empty(0)
        self.traced = 0

    def ensure(self, i, j):
        """Trace the points (i, j) of the extended grid not traced yet (each once)."""
        ii, jj = _untraced(self.slot, np.asarray(i, dtype=np.int64),
                           np.asarray(j, dtype=np.int64), self.traced)
        if ii.size == 0:
            return
        x, y = image_plane_points(self.viewpoint, ii - self.pad + self.row0, jj - self.pad)
        bundle = self.viewpoint.rays_at(x, y)
        raw = trace(self.trace_settings, x, y, bundle, maps=self.maps)
        for name in ("r", "phi", "delay", "inward", "fate", "n_crossings", "steps"):
            new = raw[name]
            if name in ("phi", "delay") and not self.maps:   # skipped (all NaN): never read
                new = np.empty((ii.size, 0))
            self.fields[name] = new if name not in self.fields else np.concatenate(
                (self.fields[name], new))
        self.lam = np.concatenate((self.lam, bundle.lam))
        self.energy_ratio = np.concatenate(
            (self.energy_ratio, np.broadcast_to(bundle.energy_ratio, bundle.lam.shape)))
        self.traced += ii.size


@njit(cache=True)
def _untraced(slot, rows, cols, first):
    """The points (rows, cols) not traced yet, each once, given slots from ``first`` on.

    Marks them in ``slot`` at once (the caller traces them next), so a point listed
    twice is kept once.
    """
    keep = np.empty(rows.size, dtype=np.int64)
    kept = 0
    for k in range(rows.size):
        if slot[rows[k], cols[k]] < 0:
            slot[rows[k], cols[k]] = first + kept
            keep[kept] = k
            kept += 1
    return rows[keep[:kept]], cols[keep[:kept]]


@njit(cache=True)
def _ray_class(fate, n_crossings, k):
    """What must not change across a cell, per ray: the fate and the number of crossings."""
    return np.int64(fate[k]) + 8 * np.int64(n_crossings[k])


@njit(cache=True)
def _order_class(r, inward, inner_radius, outer_radius, isco):
    """What must not change across a cell, per crossing: whether there is one, its direction,
    and on which side of the disk's edges and the ISCO it lies (NaN r: none of them)."""
    return (np.int64(np.isfinite(r)) + 2 * np.int64(inward) + 4 * np.int64(r >= inner_radius)
            + 8 * np.int64(r <= outer_radius) + 16 * np.int64(r >= isco))


@njit(cache=True, parallel=True)
def _waiting_cells(accepted_by, stride):
    """Cells of stride ``stride`` (ceil(height / s), ceil(width / s)) with a pixel not accepted yet."""
    height, width = accepted_by.shape
    n_i, n_j = -(-height // stride), -(-width // stride)
    waiting = np.zeros((n_i, n_j), dtype=np.bool_)
    for ci in prange(n_i):
        for y in range(ci * stride, min((ci + 1) * stride, height)):
            for x in range(width):
                if accepted_by[y, x] == 0:
                    waiting[ci, x // stride] = True
    return waiting


@njit(cache=True)
def _stencil_nodes(waiting, stride, pad):
    """Extended-grid (rows, cols) of the nodes in the 4 x 4 stencil of any waiting cell.

    Node (k, l) of the level lies at ``pad + (k - 1) * stride``, ``pad + (l - 1) * stride``;
    cell (ci, cj) uses the nodes ci..ci + 3, cj..cj + 3.
    """
    n_i, n_j = waiting.shape
    needed = np.zeros((n_i + 3, n_j + 3), dtype=np.bool_)
    for ci in range(n_i):
        for cj in range(n_j):
            if waiting[ci, cj]:
                needed[ci:ci + 4, cj:cj + 4] = True
    ni, nj = np.nonzero(needed)
    return pad + (ni - 1) * stride, pad + (nj - 1) * stride


@njit(cache=True, parallel=True)
def _smooth_cells(waiting, stride, pad, slot, fate, n_crossings, r, inward, inner_radius,
                  outer_radius, isco):
    """(cells_i, cells_j) of the waiting cells whose 16 stencil nodes share one class.

    The class is that of :func:`_ray_class` and, for each order, :func:`_order_class`;
    the nodes must be traced.
    """
    n_i, n_j = waiting.shape
    smooth = np.zeros((n_i, n_j), dtype=np.bool_)
    for ci in prange(n_i):
        for cj in range(n_j):
            if not waiting[ci, cj]:
                continue
            corner = slot[pad + ci * stride, pad + cj * stride]
            ray = _ray_class(fate, n_crossings, corner)
            same = True
            for a in range(4):
                for b in range(4):
                    k = slot[pad + (ci + a - 1) * stride, pad + (cj + b - 1) * stride]
                    if _ray_class(fate, n_crossings, k) != ray:
                        same = False
                    for q in range(r.shape[1]):
                        if (_order_class(r[k, q], inward[k, q], inner_radius, outer_radius, isco)
                                != _order_class(r[corner, q], inward[corner, q], inner_radius,
                                                outer_radius, isco)):
                            same = False
            smooth[ci, cj] = same
    return np.nonzero(smooth)


@njit(cache=True)
def _stencil(values, slot, ci, cj, q, stride, pad, is_angle, v):
    """Load the 4 x 4 node values of cell (ci, cj), order q, into ``v``.

    An angle is made continuous about the stencil's node (1, 1), the cell's corner.
    """
    two_pi = 2.0 * np.pi
    ref = values[slot[pad + ci * stride, pad + cj * stride], q]
    for a in range(4):
        for b in range(4):
            x = values[slot[pad + (ci + a - 1) * stride, pad + (cj + b - 1) * stride], q]
            if is_angle:
                x = ref + ((x - ref + np.pi) % two_pi - np.pi)
            v[a, b] = x


@njit(cache=True)
def _across(v, weights, di, across):
    """The stencil's four columns interpolated to row offset ``di`` (first pass of the tensor product)."""
    for b in range(4):
        across[b] = (weights[di, 0] * v[0, b] + weights[di, 1] * v[1, b]
                     + weights[di, 2] * v[2, b] + weights[di, 3] * v[3, b])


@njit(cache=True)
def _along(across, weights, dj, is_angle):
    """The row ``across`` interpolated to column offset ``dj``; an angle modulo 2 pi."""
    x = (weights[dj, 0] * across[0] + weights[dj, 1] * across[1]
         + weights[dj, 2] * across[2] + weights[dj, 3] * across[3])
    return x % (2.0 * np.pi) if is_angle else x


@njit(cache=True)
def _interpolated_at(values, slot, ci, cj, q, offsets, stride, pad, weights, is_angle, v, across,
                     out):
    """The cell's cubic interpolant of ``values`` (order q) at each offset (di, dj) in the cell."""
    _stencil(values, slot, ci, cj, q, stride, pad, is_angle, v)
    for t in range(offsets.shape[0]):
        _across(v, weights, offsets[t, 0], across)
        out[t] = _along(across, weights, offsets[t, 1], is_angle)


@njit(cache=True)
def _within(value, exact, tolerance, kind):
    """Whether an interpolated value meets the tolerance (NaN must meet NaN).

    ``kind``: 0 relative, 1 angle (absolute, modulo 2 pi), 2 mixed (absolute below 1,
    relative above).
    """
    if np.isnan(value) and np.isnan(exact):
        return True
    error = value - exact
    if kind == 1:
        return abs((error + np.pi) % (2.0 * np.pi) - np.pi) <= tolerance
    scale = abs(exact) if kind == 0 else max(1.0, abs(exact))
    return abs(error) <= tolerance * scale


@njit(cache=True, parallel=True)
def _tests_passed(cells_i, cells_j, offsets, stride, pad, weights, slot, fate, n_crossings, r,
                  phi, delay, inward, lam, energy_ratio, spin, r_min, tolerance, inner_radius,
                  outer_radius, isco, maps):
    """Which cells' interpolants meet ``tolerance`` at their traced test pixels ``offsets``.

    At each test pixel, every order's r and g (from the interpolated r with the pixel's
    lam and energy ratio, :func:`render.light.disk.keplerian_redshift`; ``r_min`` as
    there) must be within ``tolerance`` relative, and with ``maps`` phi (absolute,
    modulo 2 pi) and the delay (absolute below 1 M, relative above) too; the test
    pixel must be in the class of the cell's nodes, and so must the interpolated r.
    """
    ok = np.empty(cells_i.size, dtype=np.bool_)
    n_tests = offsets.shape[0]
    for k in prange(cells_i.size):
        ci, cj = cells_i[k], cells_j[k]
        v = np.empty((4, 4))
        across = np.empty(4)
        r_value, phi_value, delay_value = np.empty(n_tests), np.empty(n_tests), np.empty(n_tests)
        node = slot[pad + ci * stride, pad + cj * stride]
        passed = True
        for t in range(n_tests):
            test = slot[pad + ci * stride + offsets[t, 0], pad + cj * stride + offsets[t, 1]]
            if _ray_class(fate, n_crossings, test) != _ray_class(fate, n_crossings, node):
                passed = False
        for q in range(r.shape[1]):
            if not passed:
                break
            node_class = _order_class(r[node, q], inward[node, q], inner_radius, outer_radius,
                                      isco)
            _interpolated_at(r, slot, ci, cj, q, offsets, stride, pad, weights, False, v, across,
                             r_value)
            if maps:
                _interpolated_at(phi, slot, ci, cj, q, offsets, stride, pad, weights, True, v,
                                 across, phi_value)
                _interpolated_at(delay, slot, ci, cj, q, offsets, stride, pad, weights, False, v,
                                 across, delay_value)
            for t in range(n_tests):
                test = slot[pad + ci * stride + offsets[t, 0], pad + cj * stride + offsets[t, 1]]
                r_exact = r[test, q]
                g_value = keplerian_redshift(r_value[t], lam[test], energy_ratio[test], spin, r_min)
                g_exact = keplerian_redshift(r_exact, lam[test], energy_ratio[test], spin, r_min)
                order = _order_class(r_exact, inward[test, q], inner_radius, outer_radius, isco)
                if not (_within(r_value[t], r_exact, tolerance, 0)
                        and _within(g_value, g_exact, tolerance, 0)
                        and order == node_class
                        and order == _order_class(r_value[t], inward[test, q], inner_radius,
                                                  outer_radius, isco)
                        and (not maps or (_within(phi_value[t], phi[test, q], tolerance, 1)
                                          and _within(delay_value[t], delay[test, q],
                                                      tolerance, 2)))):
                    passed = False
        ok[k] = passed
    return ok


@njit(cache=True, parallel=True)
def _mark_accepted(accepted_by, cells_i, cells_j, stride):
    """Give the band's pixels of the cells (cells_i, cells_j) not accepted yet the stride."""
    height, width = accepted_by.shape
    for k in prange(cells_i.size):
        for y in range(cells_i[k] * stride, min((cells_i[k] + 1) * stride, height)):
            for x in range(cells_j[k] * stride, min((cells_j[k] + 1) * stride, width)):
                if accepted_by[y, x] == 0:
                    accepted_by[y, x] = stride


@njit(cache=True, parallel=True)
def _fill_cells(cells_i, cells_j, stride, pad, weights, slot, values, is_angle, out):
    """Write the cells' cubic interpolant of ``values`` into the untraced pixels of ``out``.

    ``out`` is (height * width, orders) in row order; pixels beyond the band's edges
    and traced pixels (which keep their traced values) are skipped.
    """
    height, width = slot.shape[0] - 3 * pad, slot.shape[1] - 3 * pad
    for k in prange(cells_i.size):
        ci, cj = cells_i[k], cells_j[k]
        v = np.empty((4, 4))
        across = np.empty(4)
        for q in range(values.shape[1]):
            _stencil(values, slot, ci, cj, q, stride, pad, is_angle, v)
            for di in range(stride):
                y = ci * stride + di
                if y >= height:
                    break
                _across(v, weights, di, across)
                for dj in range(stride):
                    x = cj * stride + dj
                    if x >= width:
                        break
                    if slot[pad + y, pad + x] < 0:
                        out[y * width + x, q] = _along(across, weights, dj, is_angle)


@njit(cache=True, parallel=True)
def _assemble_pixels(accepted_by, pad, slot, r, phi, delay, inward, fate, n_crossings, steps,
                     maps, out_r, out_phi, out_delay, out_inward, out_fate, out_n_crossings,
                     out_steps, interpolated):
    """Traced pixels' values, and interpolated pixels' classes, into the band's arrays.

    A traced pixel keeps all its traced values; an interpolated one (untraced, accepted
    with stride s) takes its fate, crossing count and crossing directions from the node
    at the corner of its cell (all nodes of an accepted cell share them), and 0 steps.
    Its r, phi and delay come from :func:`_fill_cells`.
    """
    height, width = accepted_by.shape
    for y in prange(height):
        for x in range(width):
            p = y * width + x
            k = slot[pad + y, pad + x]
            interpolated[p] = k < 0
            if k >= 0:
                for q in range(r.shape[1]):
                    out_r[p, q] = r[k, q]
                    if maps:
                        out_phi[p, q] = phi[k, q]
                        out_delay[p, q] = delay[k, q]
                out_steps[p] = steps[k]
            else:
                s = accepted_by[y, x]
                k = slot[pad + y // s * s, pad + x // s * s]
                out_steps[p] = 0
            for q in range(r.shape[1]):
                out_inward[p, q] = inward[k, q]
            out_fate[p] = fate[k]
            out_n_crossings[p] = n_crossings[k]


def _level(store, settings, accepted_by, stride, spin):
    """One level: the cells of stride ``stride`` that pass their tests, (cells_i, cells_j).

    Returns None when no pixel is waiting.  Traces the stencil nodes of the waiting cells
    and the test pixels of the smooth ones; marks the accepted pixels in ``accepted_by``.
    """
    waiting = _waiting_cells(accepted_by, stride)
    if not waiting.any():
        return None
    p = store.pad
    store.ensure(*_stencil_nodes(waiting, stride, p))
    f = store.fields
    edges = (settings.inner_radius, settings.outer_radius, settings.isco)
    ci, cj = _smooth_cells(waiting, stride, p, store.slot, f["fate"], f["n_crossings"],
                           f["r"], f["inward"], *edges)
    offsets = np.array(_test_offsets(stride), dtype=np.int64)
    store.ensure((p + ci[:, None] * stride + offsets[:, 0]).ravel(),
                 (p + cj[:, None] * stride + offsets[:, 1]).ravel())
    ok = _tests_passed(ci, cj, offsets, stride, p, _cubic_weights(stride), store.slot,
                       f["fate"], f["n_crossings"], f["r"], f["phi"], f["delay"], f["inward"],
                       store.lam, store.energy_ratio, float(spin),
                       float(isco_radius(spin)) * (1.0 - 1e-12),
                       TEST_MARGIN * settings.tolerance, *edges, bool(store.maps))
    ci, cj = ci[ok], cj[ok]
    _mark_accepted(accepted_by, ci, cj, stride)
    return ci, cj


def _test_offsets(stride):
    """Test pixels of a cell: the middle of its top and left edges and its centre.

    The cubic's error kernel t (t^2 - 1)(t - 2) peaks in the middle of the interval;
    the two edge midpoints see the error of each direction alone, and the centre their
    sum (which may cancel there, hence not the centre alone).
    """
    half = stride // 2
    return ((half, half), (half, 0), (0, half))


def sample_band(trace_settings, viewpoint, settings, rows=None, progress=None, maps=True):
    """Trace a band of rows adaptively; return its raw arrays and the ``interpolated`` map.

    Parameters
    ----------
    trace_settings : TraceSettings
        How rays are traced (:func:`render.geodesics.tracing.trace`).
    viewpoint : Viewpoint
        The observer and its pixel grid.
    settings : SamplingSettings
    rows : (start, stop), optional
        The band of rows (all rows if None).
    progress : callable, optional
        ``progress(done, total)`` in pixels resolved.
    maps : bool
        Whether phi and the delay are wanted: ``maps=False`` lets the closed form skip
        them (NaN then, as in :func:`render.geodesics.tracing.trace`), and only r and g
        are checked.

    Returns
    -------
    raw : dict
        The keys of :func:`render.geodesics.tracing.trace` (without the escape
        direction) for the band's pixels in row order; ``steps`` is 0 where interpolated.
    interpolated : ndarray of bool (pixels,)
    info : dict
        ``traced_rays`` (virtual nodes beyond the edges included), ``interpolated_pixels``,
        ``pixels``, ``tolerance``, ``strides``.

    References
    ----------
    Press, Teukolsky, Vetterling & Flannery (2007), Numerical Recipes, 3rd ed., sec. 3.6
    (interpolation in two dimensions on a grid).
    """
    rows = (0, viewpoint.height) if rows is None else rows
    height, width = rows[1] - rows[0], viewpoint.width
    # A stencil spans 3 strides beyond its cell: strides that do not fit 4 times in the band
    # would trace more virtual nodes than they save (a small image traces every pixel).
    strides = [stride for stride in settings.strides if 4 * stride <= min(height, width)]
    pad = max(strides, default=1)
    # The integrator computes phi and the delay anyway (as trace() keeps them).
    maps = maps or trace_settings.method != "closed_form"
    store = _Store(viewpoint, trace_settings, rows, pad, maps)
    # The stride that accepted each pixel (0: not accepted, traced in the end).
    accepted_by = np.zeros((height, width), dtype=np.int16)
    levels = []
    for stride in strides:
        cells = _level(store, settings, accepted_by, stride, trace_settings.spin)
        if cells is None:
            break
        levels.append((stride, cells))
        if progress is not None:
            progress(int(np.count_nonzero(accepted_by)), height * width)
    return _assembled(store, settings, levels, accepted_by)


def _assembled(store, settings, levels, accepted_by):
    """The band's raw arrays: traced values where traced, interpolated ones elsewhere.

    The pixels no level accepted are traced first.  ``levels``: (stride, (cells_i,
    cells_j)) of the cells each level accepted.
    """
    height, width = accepted_by.shape
    p = store.pad
    ii, jj = np.nonzero(accepted_by == 0)
    store.ensure(ii + p, jj + p)
    f = store.fields
    pixels, orders = height * width, f["r"].shape[1]
    raw = {"r": np.empty((pixels, orders))}
    if store.maps:
        raw["phi"], raw["delay"] = np.empty((pixels, orders)), np.empty((pixels, orders))
        phi_out, delay_out = raw["phi"], raw["delay"]
    else:   # skipped: all NaN, no memory
        raw["phi"] = raw["delay"] = np.broadcast_to(np.nan, (pixels, orders))
        phi_out = delay_out = np.empty((0, orders))
    raw["inward"] = np.empty((pixels, orders), dtype=f["inward"].dtype)
    for name in ("fate", "n_crossings", "steps"):
        raw[name] = np.empty(pixels, dtype=f[name].dtype)
    interpolated = np.empty(pixels, dtype=np.bool_)
    _assemble_pixels(accepted_by, p, store.slot, f["r"], f["phi"], f["delay"], f["inward"],
                     f["fate"], f["n_crossings"], f["steps"], bool(store.maps), raw["r"],
                     phi_out, delay_out, raw["inward"], raw["fate"], raw["n_crossings"],
                     raw["steps"], interpolated)
    for stride, (ci, cj) in levels:
        weights = _cubic_weights(stride)
        _fill_cells(ci, cj, stride, p, weights, store.slot, f["r"], False, raw["r"])
        if store.maps:
            _fill_cells(ci, cj, stride, p, weights, store.slot, f["phi"], True, raw["phi"])
            _fill_cells(ci, cj, stride, p, weights, store.slot, f["delay"], False, raw["delay"])
    info = {"traced_rays": int(store.traced),
            "interpolated_pixels": int(np.count_nonzero(interpolated)),
            "pixels": int(pixels), "tolerance": settings.tolerance,
            "strides": list(settings.strides)}
    return raw, interpolated, info
