"""Disk-integrated quantities on an image-plane grid of their own (distant observer).

A distant observer receives the flux F = int I dOmega = (M/D)^2 int I dalpha dbeta
(alpha, beta in M; Cunningham 1975, eq. 4), so a disk-integrated spectrum or
line profile is an integral over the image plane.  Summing the pixels of a
picture makes it depend on the picture's width and field of view; here the
integral is sampled for the disk instead:

* a log-polar lattice around the hole, ln rho uniform from ``rho_min`` to
  ``rho_max`` (which covers the image of the disk's outer edge) and psi uniform
  over a full turn, so that cells are small where the disk's image changes
  fast (near the hole) and large far out;
* cells whose four corners all shine in the same order use the product
  trapezoid rule (each corner a quarter of the cell's area);
* cells whose corners differ (the disk's edges, the shadow, the edge of a
  higher-order image) are split into ``EDGE_SPLIT`` x ``EDGE_SPLIT`` sub-cells
  sampled at their centres;
* each sample spreads its flux uniformly over the range of g half-way to its
  neighbours (:func:`render.light.spectra.line_profile`), so a histogram in
  narrow energy bins has no aliasing spikes;
* the lattice is doubled until the result changes by less than a stated
  relative L1 tolerance (:func:`converge`);
* with a polarisation model, each sample also carries the Stokes weights
  p cos 2 EVPA and p sin 2 EVPA of its light at the observer
  (:func:`render.light.polarisation.crossing_stokes`), so that Q and U are
  integrated with the same quadrature as I.

Rays are traced with the closed form (:mod:`render.geodesics.closed_form`), which is
exact for a distant observer.

References
----------
Cunningham (1975), ApJ 202, 788 (the flux integral over the image plane);
Bardeen (1973) (image-plane coordinates).
"""

from dataclasses import dataclass, field

import numpy as np

from ..camera.observers import distant_observer_rays
from ..geodesics.tracing import TraceSettings, trace
from .disk import redshift_factor, shining_mask
from .emission import emission_cosine
from .polarisation import crossing_stokes

__all__ = ["DiskGeometry", "DiskSamples", "sample_disk", "converge", "relative_change",
           "EDGE_SPLIT", "POLARISED_FLOOR"]

# Sub-cells per side of a lattice cell that straddles an edge of the disk's image.
EDGE_SPLIT = 6
# Innermost radius of the lattice (M): inside every image of the disk for |a| < 1
# (the direct image of the horizon-hugging inner edge lies outside rho ~ 1 M).
RHO_MIN = 0.25
# Times the outer ring is widened when the disk still reaches it.
WIDEN_TRIES = 3


@dataclass(frozen=True)
class DiskGeometry:
    """What the disk integral needs to know: the hole, the observer and the disk.

    Attributes
    ----------
    spin : float
    inclination_deg : float
        Of the distant observer.
    r_in, r_out : float
        Disk edges in M.
    orders : int
        Equatorial crossings followed per ray (images n = 0 .. orders-1).
    opaque : bool
        An opaque disk shows only the first crossing on it.
    max_crossings : int
    polarisation : Polarisation, optional
        The emitted polarisation (:class:`render.light.polarisation.Polarisation`);
        None or model ``none``: the samples carry no Stokes weights.
    """

    spin: float
    inclination_deg: float
    r_in: float
    r_out: float
    orders: int = 1
    opaque: bool = True
    max_crossings: int = 64
    polarisation: object = None


@dataclass
class DiskSamples:
    """Quadrature samples of the image plane: sum weight * f(r, g, mu) approximates int f dA.

    ``r, g, mu, weight, below, above`` have shape (N, orders); ``weight`` is the
    image-plane area in M^2 a sample stands for (0 where it does not shine);
    the sample's g covers ``g - below .. g + above``.  ``stokes_q``, ``stokes_u``
    (N, orders; None without polarisation) are p cos 2 EVPA and p sin 2 EVPA of
    the sample's light at the observer (IAU angle): Q = I stokes_q, U = I stokes_u.
    """

    r: np.ndarray
    g: np.ndarray
    mu: np.ndarray
    weight: np.ndarray
    below: np.ndarray
    above: np.ndarray
    hits: np.ndarray
    info: dict = field(default_factory=dict)
    stokes_q: np.ndarray = None
    stokes_u: np.ndarray = None


def _is_polarised(geometry):
    return geometry.polarisation is not None and geometry.polarisation.model != "none"


def _trace_points(geometry, alpha, beta):
    """r, g, mu, the shining mask and the Stokes weights (N, orders) of rays at points.

    The Stokes weights are (None, None) without polarisation.
    """
    bundle = distant_observer_rays(alpha, beta, geometry.spin, geometry.inclination_deg)
    settings = TraceSettings(spin=geometry.spin, method="closed_form",
                             inclination_deg=geometry.inclination_deg, orders=geometry.orders,
                             max_crossings=geometry.max_crossings, stop_on_disk=geometry.opaque,
                             r_in=geometry.r_in, r_out=geometry.r_out)
    raw = trace(settings, alpha, beta, bundle, maps=False)
    r = raw["r"]
    g = redshift_factor(r, bundle.lam[:, None], geometry.spin)
    hits = shining_mask(r, raw["fate"], raw["n_crossings"], geometry.r_in, geometry.r_out,
                        geometry.orders, geometry.opaque) & np.isfinite(g)
    mu = emission_cosine(r, bundle.eta[:, None], g)
    stokes = (None, None)
    if _is_polarised(geometry):
        unit = crossing_stokes(geometry.spin, geometry.inclination_deg, 0.0, geometry.polarisation,
                               r, raw["inward"], bundle, (alpha, beta), mu, np.ones(r.shape),
                               hits)
        stokes = (unit["stokes_q_order"], unit["stokes_u_order"])
    return r, g, mu, hits, stokes


def _lattice(rho_min, rho_max, n):
    """Vertices of an n x n log-polar lattice: ln rho (n + 1 values) and psi (n, periodic)."""
    log_rho = np.linspace(np.log(rho_min), np.log(rho_max), n + 1)
    psi = (np.arange(n) + 0.5) * (2.0 * np.pi / n)
    return log_rho, psi


def _corner_stack(values):
    """The four corners (i, j), (i+1, j), (i, j+1), (i+1, j+1) of every cell, psi periodic."""
    low, high = values[:-1], values[1:]
    return np.stack([low, high, np.roll(low, -1, axis=1), np.roll(high, -1, axis=1)])


def _vertex_spread(g, hits):
    """Half the change of g towards each shining neighbour on the lattice (psi periodic)."""
    grid = np.where(hits, g, np.nan)
    below = np.zeros_like(grid)
    above = np.zeros_like(grid)
    neighbours = [np.roll(grid, 1, axis=1), np.roll(grid, -1, axis=1)]
    pad = np.full((1,) + grid.shape[1:], np.nan)
    neighbours += [np.concatenate([pad, grid[:-1]]), np.concatenate([grid[1:], pad])]
    for other in neighbours:
        with np.errstate(invalid="ignore"):
            half = np.nan_to_num(0.5 * (other - grid), nan=0.0)
        below = np.maximum(below, -half)
        above = np.maximum(above, half)
    return below, above


def _lattice_samples(geometry, rho_min, rho_max, n):
    """Trapezoid samples at the lattice's vertices and the cells that straddle an edge."""
    log_rho, psi = _lattice(rho_min, rho_max, n)
    rho = np.exp(log_rho)
    alpha = (rho[:, None] * np.cos(psi)[None, :]).ravel()
    beta = (rho[:, None] * np.sin(psi)[None, :]).ravel()
    r, g, mu, hits, stokes = _trace_points(geometry, alpha, beta)
    shape = (n + 1, n, geometry.orders)
    hit_grid = hits.reshape(shape)
    corners = _corner_stack(hit_grid)
    full = corners.all(axis=0)
    mixed = (corners.any(axis=0) & ~full).any(axis=2)
    cell_area = 0.5 * np.diff(rho ** 2) * (2.0 * np.pi / n)
    quarter = np.where(full, cell_area[:, None, None] / 4.0, 0.0)
    weight = np.zeros(shape)
    weight[:-1] += quarter
    weight[1:] += quarter
    weight[:-1] += np.roll(quarter, 1, axis=1)
    weight[1:] += np.roll(quarter, 1, axis=1)
    g_grid = g.reshape(shape)
    below, above = _vertex_spread(g_grid, hit_grid)
    reaches = {"outer": bool(hit_grid[-1].any()), "inner": bool(hit_grid[0].any())}
    flat = (-1, geometry.orders)
    vertices = DiskSamples(r=r, g=g, mu=mu, weight=weight.reshape(flat),
                           below=below.reshape(flat), above=above.reshape(flat),
                           hits=(weight > 0).reshape(flat), stokes_q=stokes[0],
                           stokes_u=stokes[1])
    edge_cells = np.nonzero(mixed)
    corner_g = _corner_stack(g_grid)
    g_range = (np.max(np.where(corners, corner_g, -np.inf), axis=0)
               - np.min(np.where(corners, corner_g, np.inf), axis=0))
    g_range = np.where(corners.any(axis=0), g_range, np.nan)
    return vertices, (log_rho, psi, edge_cells, g_range), reaches


def _edge_samples(geometry, log_rho, psi, edge_cells, g_range):
    """Centres of EDGE_SPLIT x EDGE_SPLIT sub-cells of the cells that straddle an edge."""
    rows, cols = edge_cells
    s = EDGE_SPLIT
    d_log = log_rho[1] - log_rho[0]
    d_psi = psi[1] - psi[0] if psi.size > 1 else 2.0 * np.pi
    fractions = (np.arange(s) + 0.5) / s
    sub_log = log_rho[rows][:, None, None] + d_log * fractions[None, :, None]
    sub_psi = psi[cols][:, None, None] + d_psi * fractions[None, None, :]
    sub_log, sub_psi = np.broadcast_arrays(sub_log, sub_psi)
    rho_low = np.exp(sub_log - 0.5 * d_log / s)
    rho_high = np.exp(sub_log + 0.5 * d_log / s)
    area = (0.5 * (rho_high ** 2 - rho_low ** 2) * d_psi / s).ravel()
    rho = np.exp(sub_log).ravel()
    alpha, beta = rho * np.cos(sub_psi.ravel()), rho * np.sin(sub_psi.ravel())
    r, g, mu, hits, stokes = _trace_points(geometry, alpha, beta)
    # A sub-cell's own g range: its parent's, shrunk by the split (NaN where none shone).
    half = np.nan_to_num(np.repeat(g_range[rows, cols], s * s, axis=0), nan=0.0) / (2.0 * s)
    return DiskSamples(r=r, g=g, mu=mu, weight=np.where(hits, area[:, None], 0.0),
                       below=half, above=half.copy(), hits=hits, stokes_q=stokes[0],
                       stokes_u=stokes[1])


def _joined(parts, info):
    names = ("r", "g", "mu", "weight", "below", "above", "hits")
    if parts[0].stokes_q is not None:
        names += ("stokes_q", "stokes_u")
    return DiskSamples(**{name: np.concatenate([getattr(p, name) for p in parts])
                          for name in names}, info=info)


def sample_disk(geometry, n, rho_max=None):
    """Quadrature samples of the disk's image on an n x n log-polar lattice.

    Parameters
    ----------
    geometry : DiskGeometry
    n : int
        Lattice cells along ln rho and along psi.
    rho_max : float, optional
        Outer radius of the lattice in M (default 1.05 r_out + 10, widened
        while the disk still shines on its outer ring).

    Returns
    -------
    DiskSamples
        ``info`` holds the lattice (``rho_min``, ``rho_max``, ``cells``, ``rays``)
        and ``truncated`` (True if the disk still reached the lattice's outer or
        inner ring after widening it: then some flux is missing).

    Examples
    --------
    >>> geometry = DiskGeometry(spin=0.0, inclination_deg=30.0, r_in=6.0, r_out=20.0)
    >>> samples = sample_disk(geometry, 64)
    >>> bool(samples.info["truncated"])
    False
    """
    rho_min = RHO_MIN
    rho_max = 1.05 * geometry.r_out + 10.0 if rho_max is None else float(rho_max)
    for _ in range(WIDEN_TRIES + 1):
        vertices, edges, reaches = _lattice_samples(geometry, rho_min, rho_max, n)
        if not (reaches["outer"] or reaches["inner"]):
            break
        rho_max *= 1.5 if reaches["outer"] else 1.0
        rho_min *= 0.5 if reaches["inner"] else 1.0
    log_rho, psi, edge_cells, g_range = edges
    parts = [vertices]
    if edge_cells[0].size:
        parts.append(_edge_samples(geometry, log_rho, psi, edge_cells, g_range))
    info = {"rho_min": rho_min, "rho_max": rho_max, "cells": [n, n],
            "edge_cells": int(edge_cells[0].size), "edge_split": EDGE_SPLIT,
            "rays": int(sum(p.r.shape[0] for p in parts)),
            "truncated": bool(reaches["outer"] or reaches["inner"])}
    return _joined(parts, info)


# A polarised row (Q or U) is judged against at least this fraction of the flux's norm, so
# that a net polarisation near zero (a face-on disk) does not demand endless refinement.
POLARISED_FLOOR = 0.01


def relative_change(value, previous):
    """Relative L1 change of a product between two lattices (the largest over its rows).

    A 1-D product: sum|v - v_prev| / sum|v|.  Rows (K, F): the first row (a flux)
    as above; each later row (a signed quantity such as Stokes Q) relative to
    max(sum|row|, POLARISED_FLOOR sum|first row|), i.e. for a degree of
    polarisation below 1 % the change is that of the degree in units of 1 %.

    Examples
    --------
    >>> float(relative_change(np.array([2.0, 2.0]), np.array([2.0, 1.0])))
    0.25
    >>> rows = np.array([[1.0, 1.0], [0.0, 0.0]])
    >>> float(relative_change(rows + [[0.0], [1e-4]], rows))   # 2e-4 / (0.01 * 2)
    0.01
    """
    value, previous = np.atleast_2d(value), np.atleast_2d(previous)
    flux = np.abs(value[0]).sum()
    changes = []
    for k, (row, before) in enumerate(zip(value, previous)):
        scale = np.abs(row).sum() if k == 0 else max(np.abs(row).sum(), POLARISED_FLOOR * flux)
        changes.append(float(np.abs(row - before).sum() / scale) if scale > 0 else 0.0)
    return max(changes)


def converge(geometry, measure, tolerance, start=128, largest=1024):
    """Double the lattice until ``measure(samples)`` changes by at most ``tolerance`` (L1).

    Parameters
    ----------
    geometry : DiskGeometry
    measure : callable
        ``measure(samples) -> ndarray``: the product (a binned line, a spectrum),
        or rows of products (K, F): a flux first, then quantities judged against
        it, such as the Stokes Q and U spectra (:func:`relative_change`).
    tolerance : float
        Relative L1 change sum|v_2n - v_n| / sum|v_2n| at which to stop (for
        rows, the largest of :func:`relative_change`).
    start, largest : int
        First and largest lattice size n (cells per side).

    Returns
    -------
    value : ndarray
        The product on the finest lattice used.
    samples : DiskSamples
        Its samples; ``info`` gains ``l1_change`` (the last change, an estimate
        of the remaining error), ``converged`` and ``levels``.
    """
    previous, n, levels = None, int(start), []
    while True:
        samples = sample_disk(geometry, n)
        value = np.asarray(measure(samples), dtype=float)
        change = np.inf if previous is None else relative_change(value, previous)
        levels.append({"cells": n, "rays": samples.info["rays"],
                       "l1_change": None if np.isinf(change) else change})
        if change <= tolerance or 2 * n > largest:
            break
        previous, n = value, 2 * n
    samples.info.update({"l1_change": None if np.isinf(change) else change,
                         "converged": bool(change <= tolerance), "tolerance": tolerance,
                         "levels": levels})
    return value, samples
