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
from ..light.disk import redshift_factor

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
    """Traced values on an extended pixel grid (the band plus virtual nodes around it)."""

    ORDER_FIELDS = ("r", "phi", "delay", "inward")
    RAY_FIELDS = ("fate", "n_crossings", "steps")

    def __init__(self, settings, viewpoint, trace_settings, rows, pad, maps):
        self.settings, self.viewpoint, self.trace_settings = settings, viewpoint, trace_settings
        self.maps = maps
        self.row0 = rows[0]
        self.pad = pad
        self.shape = (rows[1] - rows[0] + 3 * pad, viewpoint.width + 3 * pad)
        self.known = np.zeros(self.shape, dtype=bool)
        self.stamp = np.zeros(self.shape, dtype=np.int64)
        self.fields = {}
        self.lam = np.full(self.shape, np.nan)
        self.energy_ratio = np.full(self.shape, np.nan)
        self.traced = 0

    def points(self, i, j):
        return image_plane_points(self.viewpoint, i - self.pad + self.row0, j - self.pad)

    def ensure(self, i, j):
        """Trace the points (i, j) of the extended grid not traced yet."""
        flat = np.ravel_multi_index((i, j), self.shape)
        flat = flat[~self.known.ravel()[flat]]
        # Each point once (the last of its copies keeps its stamp), without sorting.
        self.stamp.ravel()[flat] = np.arange(flat.size)
        flat = flat[self.stamp.ravel()[flat] == np.arange(flat.size)]
        if flat.size == 0:
            return
        ii, jj = np.unravel_index(flat, self.shape)
        x, y = self.points(ii, jj)
        bundle = self.viewpoint.rays_at(x, y)
        raw = trace(self.trace_settings, x, y, bundle, maps=self.maps)
        if not self.fields:
            orders = raw["r"].shape[1]
            for name in self.ORDER_FIELDS:
                self.fields[name] = np.zeros(self.shape + (orders,), dtype=raw[name].dtype)
            for name in self.RAY_FIELDS:
                self.fields[name] = np.zeros(self.shape, dtype=raw[name].dtype)
        for name, array in self.fields.items():
            array[ii, jj] = raw[name]
        self.lam[ii, jj] = bundle.lam
        self.energy_ratio[ii, jj] = np.broadcast_to(bundle.energy_ratio, bundle.lam.shape)
        self.known[ii, jj] = True
        self.traced += ii.size

    def classes(self, i, j):
        """(per-ray class, per-order class) of traced points: what must not change in a cell."""
        f = self.fields
        ray = f["fate"][i, j].astype(np.int64) + 8 * f["n_crossings"][i, j].astype(np.int64)
        return ray, self.order_classes(f["r"][i, j], f["inward"][i, j])

    def order_classes(self, r, inward):
        s = self.settings
        with np.errstate(invalid="ignore"):
            return (np.isfinite(r).astype(np.int8) + 2 * inward.astype(np.int8)
                    + 4 * (r >= s.inner_radius) + 8 * (r <= s.outer_radius) + 16 * (r >= s.isco))


def _wrapped(angle):
    """Angle difference brought into [-pi, pi)."""
    return np.mod(angle + np.pi, 2.0 * np.pi) - np.pi


@njit(cache=True, parallel=True)
def _fill_cells(nodes, weights, cells_i, cells_j, is_angle, out):
    """Write the tensor-product cubic interpolant of the cells (cells_i, cells_j) into ``out``.

    ``nodes`` (n_i + 3, n_j + 3, orders): cell (i, j) has the stencil
    ``nodes[i:i + 4, j:j + 4]`` and covers the pixels ``out[i * s:(i + 1) * s,
    j * s:(j + 1) * s]`` with s = ``weights.shape[0]`` (from :func:`_cubic_weights`).
    An angle is interpolated continuously about the stencil's node (1, 1) and
    written modulo 2 pi (phi is kept modulo 2 pi).
    """
    stride = weights.shape[0]
    two_pi = 2.0 * np.pi
    for k in prange(cells_i.size):
        ci, cj = cells_i[k], cells_j[k]
        v = np.empty((4, 4))
        across = np.empty(4)
        for q in range(nodes.shape[2]):
            ref = nodes[ci + 1, cj + 1, q]
            for a in range(4):
                for b in range(4):
                    x = nodes[ci + a, cj + b, q]
                    if is_angle:
                        x = ref + ((x - ref + np.pi) % two_pi - np.pi)
                    v[a, b] = x
            for di in range(stride):
                for b in range(4):
                    across[b] = (weights[di, 0] * v[0, b] + weights[di, 1] * v[1, b]
                                 + weights[di, 2] * v[2, b] + weights[di, 3] * v[3, b])
                for dj in range(stride):
                    x = (weights[dj, 0] * across[0] + weights[dj, 1] * across[1]
                         + weights[dj, 2] * across[2] + weights[dj, 3] * across[3])
                    out[ci * stride + di, cj * stride + dj, q] = x % two_pi if is_angle else x


def _within(value, exact, tolerance, kind):
    """Whether interpolated values meet the tolerance (NaN must meet NaN).

    ``kind``: "relative", "angle" (absolute, modulo 2 pi) or "mixed" (absolute below 1,
    relative above).
    """
    both_nan = np.isnan(value) & np.isnan(exact)
    with np.errstate(invalid="ignore"):
        if kind == "angle":
            error, scale = _wrapped(value - exact), 1.0
        else:
            error = value - exact
            scale = np.abs(exact) if kind == "relative" else np.maximum(1.0, np.abs(exact))
        return both_nan | (np.abs(error) <= tolerance * scale)


def _level(store, pending, stride, spin, out):
    """One level: interpolate (into ``out``) and accept the cells of stride ``stride``.

    Returns the accepted pixels of the band (bool, ``pending.shape``), or None when
    nothing is pending.  Values written for cells that fail their tests are left in
    ``out`` but never used (those pixels stay pending).
    """
    height, width = pending.shape
    n_i, n_j = -(-height // stride), -(-width // stride)
    padded = np.zeros((n_i * stride, n_j * stride), dtype=bool)
    padded[:height, :width] = pending
    waiting = padded.reshape(n_i, stride, n_j, stride).any(axis=(1, 3))
    if not waiting.any():
        return None
    p = store.pad
    node_rows = p + (np.arange(n_i + 3) - 1) * stride         # extended rows of the nodes
    node_cols = p + (np.arange(n_j + 3) - 1) * stride
    needed = np.zeros((n_i + 3, n_j + 3), dtype=bool)
    for a in range(4):
        for b in range(4):
            needed[a:a + n_i, b:b + n_j] |= waiting
    ni, nj = np.nonzero(needed)
    store.ensure(node_rows[ni], node_cols[nj])
    grid = np.ix_(node_rows, node_cols)
    ray, order = store.classes(*grid)
    smooth = waiting.copy()
    for a in range(4):
        for b in range(4):
            smooth &= ray[a:a + n_i, b:b + n_j] == ray[1:1 + n_i, 1:1 + n_j]
            smooth &= (order[a:a + n_i, b:b + n_j] == order[1:1 + n_i, 1:1 + n_j]).all(axis=-1)
    ci, cj = np.nonzero(smooth)
    weights = _cubic_weights(stride)
    for name in ("r", "phi", "delay") if store.maps else ("r",):
        _fill_cells(np.ascontiguousarray(store.fields[name][grid]), weights, ci, cj,
                    name == "phi", out[name])
    for di, dj in _test_offsets(stride):
        ti, tj = ci * stride + di, cj * stride + dj
        store.ensure(p + ti, p + tj)
        test = {name: out[name][ti, tj] for name in ("r", "phi", "delay")}
        smooth[ci, cj] &= _tests_passed(store, test, (p + ti, p + tj),
                                        (node_rows[ci + 1], node_cols[cj + 1]), spin)
    return np.repeat(np.repeat(smooth, stride, 0), stride, 1)[:height, :width]


def _test_offsets(stride):
    """Test pixels of a cell: the middle of its top and left edges and its centre.

    The cubic's error kernel t (t^2 - 1)(t - 2) peaks in the middle of the interval;
    the two edge midpoints see the error of each direction alone, and the centre their
    sum (which may cancel there, hence not the centre alone).
    """
    half = stride // 2
    return ((half, half), (half, 0), (0, half))


def _tests_passed(store, test, at, node, spin):
    """Which cells' interpolants ``test`` meet the tolerance at their traced test pixels ``at``.

    The test pixel must also be in the class of the cell's nodes (``node``: one of them).
    """
    tol = TEST_MARGIN * store.settings.tolerance
    f = store.fields
    ti, tj = at
    r_exact, r_value = f["r"][ti, tj], test["r"]
    lam = store.lam[ti, tj][:, None]
    ratio = store.energy_ratio[ti, tj][:, None]
    with np.errstate(invalid="ignore"):
        g_exact = redshift_factor(r_exact, lam, spin, ratio)
        g_value = redshift_factor(r_value, lam, spin, ratio)
    ray, order = store.classes(ti, tj)
    ray_node, order_node = store.classes(*node)
    ok = (_within(r_value, r_exact, tol, "relative") & _within(g_value, g_exact, tol, "relative")
          & _within(test["phi"], f["phi"][ti, tj], tol, "angle")
          & _within(test["delay"], f["delay"][ti, tj], tol, "mixed")
          & (order == order_node) & (store.order_classes(r_value, f["inward"][ti, tj]) == order))
    return ok.all(axis=1) & (ray == ray_node)


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
    store = _Store(settings, viewpoint, trace_settings, rows, pad, maps)
    pending = np.ones((height, width), dtype=bool)
    # The stride that accepted each interpolated pixel (0: traced).
    accepted_by = np.zeros((height, width), dtype=np.int16)
    out = {}
    for stride in strides:
        if not out:
            store.ensure(np.array([pad]), np.array([pad]))   # the number of orders
            out = {name: np.full((height + pad, width + pad) + store.fields[name].shape[2:],
                                 np.nan) for name in ("r", "phi", "delay")}
        accepted = _level(store, pending, stride, trace_settings.spin, out)
        if accepted is None:
            break
        accepted &= pending
        accepted_by[accepted] = stride
        pending &= ~accepted
        if progress is not None:
            progress(int(height * width - np.count_nonzero(pending)), height * width)
    return _assembled(store, out, accepted_by, pending)


def _assembled(store, out, strides, pending):
    """The band's raw arrays: traced values where traced, interpolated ones elsewhere.

    An interpolated pixel takes its fate, crossing count and crossing directions from
    the node at the corner of its cell (all nodes of an accepted cell share them).
    """
    height, width = strides.shape
    p = store.pad
    ii, jj = np.nonzero(pending)
    store.ensure(ii + p, jj + p)
    inside = (slice(p, p + height), slice(p, p + width))
    strides[store.known[inside]] = 0
    interpolated = strides > 0
    raw = {}
    # The corner node of each pixel's cell (the pixel itself where traced).
    step = np.maximum(strides, 1)
    rows = p + np.arange(height)[:, None] // step * step
    cols = p + np.arange(width)[None, :] // step * step
    for name, array in store.fields.items():
        if name in ("phi", "delay") and not store.maps:   # skipped: all NaN, no memory
            raw[name] = np.broadcast_to(np.nan, (height * width,) + array.shape[2:])
            continue
        if name in out:
            band = np.array(array[inside])
            where = interpolated.reshape(interpolated.shape + (1,) * (band.ndim - 2))
            np.copyto(band, out[name][:height, :width], where=where)
        elif name == "steps":   # no steps were taken for an interpolated pixel
            band = np.where(interpolated, 0, array[inside]).astype(array.dtype)
        else:
            band = array[rows, cols]
        raw[name] = band.reshape((height * width,) + band.shape[2:])
    info = {"traced_rays": int(store.traced), "interpolated_pixels": int(interpolated.sum()),
            "pixels": int(height * width), "tolerance": store.settings.tolerance,
            "strides": list(store.settings.strides)}
    return raw, interpolated.ravel(), info
