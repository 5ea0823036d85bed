"""Disk-integrated spectra and relativistically broadened line profiles.

Both sum over the pixels of a ray-traced image (so every relativistic effect
the tracer follows is included: light bending, Doppler and gravitational
shifts, higher orders), weighting each pixel by its solid angle.

References
----------
Cunningham (1975), ApJ 202, 788 (disk spectra seen from infinity).
Fabian, Rees, Stella & White (1989), MNRAS 238, 729; Laor (1991), ApJ 376, 90 (lines).
"""

import numpy as np

from .thermal import cgs, planck_nu
from .emission import limb_darkening

__all__ = ["image_spectrum", "flat_space_spectrum", "line_profile", "redshift_spread"]

_CHUNK_ELEMENTS = 4_000_000


def image_spectrum(law, nu, r, g, weight, hits, pixel_solid_angle_sr):
    """F_nu in Jy of a ray-traced image of a colour-corrected blackbody disk.

    F_nu = sum over pixels and orders of L(mu) f^-4 B_nu(nu, g f T(r)) dOmega
    (a blackbody of temperature T seen with factor g is one of temperature gT).

    Parameters
    ----------
    law : NovikovThorne
    nu : ndarray (F,)
        Observed frequencies in Hz.
    r, g : ndarray (N, orders)
        Crossing radii and redshift factors.
    weight : ndarray (N, orders) or (N, orders, K)
        Weights (limb darkening times the image-plane area each sample stands
        for); with a last axis, K spectra at once (signed weights allowed, such
        as the Stokes Q and U weights p cos 2 EVPA, p sin 2 EVPA).
    hits : ndarray of bool (N, orders)
    pixel_solid_angle_sr : float
        Solid angle of a unit of ``weight`` (a pixel of weight 1, or 1 M^2).

    Returns
    -------
    ndarray (F,) or (F, K)
    """
    t_obs = (g * law.colour_temperature(r))[hits]
    w = weight[hits]
    keep = np.isfinite(t_obs) & (t_obs > 0)
    if w.ndim == 1:
        keep &= w > 0
    else:
        keep &= np.isfinite(w).all(axis=1) & (w != 0.0).any(axis=1)
    t_obs, w = t_obs[keep], w[keep]
    nu = np.asarray(nu, dtype=float)
    flux = np.zeros(nu.shape + w.shape[1:])
    step = max(1, _CHUNK_ELEMENTS // max(1, t_obs.size))
    for start in range(0, nu.size, step):
        block = nu[start:start + step]
        flux[start:start + step] = planck_nu(block[:, None], t_obs[None, :]) @ w
    scale = pixel_solid_angle_sr * law.colour_correction ** -4 / cgs()["Jy"]
    return flux * scale


def flat_space_spectrum(law, nu, r_in, r_out, inclination_deg, mass_msun, distance_pc,
                        limb="none", points=4000):
    """F_nu in Jy of the same local emission in flat space (no relativistic effects).

    F_nu = |cos i| / D^2 int_{r_in}^{r_out} 2 pi r L(|cos i|) f^-4 B_nu(nu, f T(r)) dr,
    with r in cm, integrated by the trapezoid rule on a log-spaced grid.

    References
    ----------
    Frank, King & Raine (2002), Accretion Power in Astrophysics, eq. 5.45.
    """

    k = cgs()
    r_g = k["G"] * mass_msun * k["M_sun"] / k["c"] ** 2
    distance = distance_pc * k["pc"]
    cos_i = abs(np.cos(np.radians(inclination_deg)))
    radii = np.geomspace(r_in, r_out, points)
    t_colour = law.colour_temperature(radii)
    nu = np.asarray(nu, dtype=float)
    integrand = planck_nu(nu[:, None], t_colour[None, :]) * (2 * np.pi * radii * r_g ** 2)
    trapezoid = getattr(np, "trapezoid", None) or np.trapz
    integral = trapezoid(integrand, radii, axis=1)
    factor = cos_i * float(limb_darkening(cos_i, limb)) * law.colour_correction ** -4
    return integral * factor / distance ** 2 / k["Jy"]


def redshift_spread(g, hits, height, width):
    """Range of g over each pixel's footprint, from its neighbours of the same order.

    A pixel is not a point: it covers g from about halfway towards each
    neighbour on one side to halfway towards the neighbour on the other, along
    both image axes.  Spreading each pixel's line flux uniformly over that
    range instead of dropping it into one bin removes the aliasing spikes a
    plain histogram of pixel centres shows, and conserves the flux exactly.
    Neighbours that are not hits of the same order are not used, so the range
    never reaches past the g of the disk's edges or the shadow.

    Parameters
    ----------
    g : ndarray (N, orders), N = height * width
    hits : ndarray of bool (N, orders)
    height, width : int

    Returns
    -------
    below, above : ndarray (N, orders)
        The pixel covers g - below .. g + above (both >= 0).
    """
    orders = g.shape[1]
    grid = np.where(hits, g, np.nan).T.reshape(orders, height, width)
    below = np.zeros_like(grid)
    above = np.zeros_like(grid)
    for axis in (1, 2):
        half_step = 0.5 * np.diff(grid, axis=axis)
        pad_shape = list(half_step.shape)
        pad_shape[axis] = 1
        pad = np.full(pad_shape, np.nan)
        to_next = np.nan_to_num(np.concatenate([half_step, pad], axis=axis), nan=0.0)
        to_previous = np.nan_to_num(-np.concatenate([pad, half_step], axis=axis), nan=0.0)
        below -= np.minimum(0.0, np.minimum(to_next, to_previous))
        above += np.maximum(0.0, np.maximum(to_next, to_previous))
    return below.reshape(orders, -1).T, above.reshape(orders, -1).T


def _spread_histogram(values, weights, below, above, edges):
    """Histogram of values each spread uniformly over [value - below, value + above].

    Each sample adds w * (overlap of its range with the bin) / (its width) to every
    bin it touches, walking only the bins it touches (cost: the total number of
    sample-bin overlaps), so that the result is a sum of non-negative terms (no
    cancellation, empty bins exactly 0).  A sample of zero width is a point: it
    counts in the bin with e_j < value <= e_j+1.  Weight outside the edges is dropped.
    """
    values = np.asarray(values, dtype=float)
    weights = np.asarray(weights, dtype=float)
    lo = values - np.asarray(below, dtype=float)
    hi = values + np.asarray(above, dtype=float)
    bins = edges.size - 1
    counts = np.zeros(bins)
    point = ~(hi > lo)
    index = np.searchsorted(edges, values[point], side="left") - 1
    inside = (index >= 0) & (index < bins)
    counts += np.bincount(index[inside], weights=weights[point][inside], minlength=bins)
    lo, hi, weights = lo[~point], hi[~point], weights[~point]
    density = weights / (hi - lo)
    first = np.clip(np.searchsorted(edges, lo, side="right") - 1, 0, bins - 1)
    last = np.clip(np.searchsorted(edges, hi, side="left") - 1, 0, bins - 1)
    active = np.nonzero(last >= first)[0]
    offset = 0
    while active.size:
        b = first[active] + offset
        overlap = np.minimum(hi[active], edges[b + 1]) - np.maximum(lo[active], edges[b])
        counts += np.bincount(b, weights=density[active] * np.maximum(overlap, 0.0),
                              minlength=bins)
        offset += 1
        active = active[first[active] + offset <= last[active]]
    return counts


def line_profile(g, emissivity, hits, rest_energy_kev, bins, low_ratio, high_ratio,
                 g_spread=None):
    """Profile of a narrow line at rest energy E0 from per-crossing g and emissivity.

    A line I_E,em = eps delta(E - E0) arrives as I_E,obs = g^4 eps delta(E - g E0)
    (I_E / E^3 invariant): each crossing adds energy flux g^4 eps and photon
    flux g^3 eps / E0 at E = g E0.

    Parameters
    ----------
    g, emissivity : ndarray (N, orders)
        Redshift factors and emissivity (times any limb-darkening factor).
    hits : ndarray of bool (N, orders)
    rest_energy_kev : float
    bins : int
    low_ratio, high_ratio : float
        Energy range of the bins in units of E0.
    g_spread : (below, above) pair of ndarray (N, orders), optional
        Range of g over each pixel (:func:`redshift_spread`); each crossing's
        flux is then spread uniformly over it instead of being binned at the
        pixel centre's g.

    Returns
    -------
    table : dict of ndarray
        ``energy_low_kev``, ``energy_high_kev``, ``energy_kev`` (bin centres),
        ``counts`` (photon counts per bin, normalised to sum 1 over the bins),
        ``counts_per_kev``, ``energy_flux`` (g^4 eps per bin, image units), ``photons``
        (g^3 eps per bin, not normalised).
    image : ndarray (N,)
        Line intensity per pixel, sum over orders of g^4 eps (same units as ``energy_flux``).
    info : dict
        Photon fraction outside the bins and totals.

    References
    ----------
    Fabian et al. (1989), MNRAS 238, 729; Laor (1991), ApJ 376, 90.
    """
    g = np.where(hits, g, np.nan)
    with np.errstate(invalid="ignore"):
        energy_weight = np.nan_to_num(np.where(hits, g ** 4 * emissivity, 0.0), nan=0.0)
        photon_weight = np.nan_to_num(np.where(hits, g ** 3 * emissivity, 0.0), nan=0.0)
    image = energy_weight.sum(axis=1)
    lit = hits & np.isfinite(g) & (energy_weight > 0)
    energies = g[lit] * rest_energy_kev
    edges = np.linspace(low_ratio * rest_energy_kev, high_ratio * rest_energy_kev, bins + 1)
    if g_spread is None:
        photons, _ = np.histogram(energies, bins=edges, weights=photon_weight[lit])
        flux, _ = np.histogram(energies, bins=edges, weights=energy_weight[lit])
    else:
        below = g_spread[0][lit] * rest_energy_kev
        above = g_spread[1][lit] * rest_energy_kev
        photons = _spread_histogram(energies, photon_weight[lit], below, above, edges)
        flux = _spread_histogram(energies, energy_weight[lit], below, above, edges)
    total_photons = float(photon_weight[lit].sum())
    in_range = float(photons.sum())
    counts = photons / in_range if in_range > 0 else photons
    table = {
        "energy_low_kev": edges[:-1], "energy_high_kev": edges[1:],
        "energy_kev": 0.5 * (edges[:-1] + edges[1:]), "counts": counts,
        "counts_per_kev": counts / np.diff(edges), "energy_flux": flux, "photons": photons,
    }
    info = {"line_energy_kev": rest_energy_kev,
            "photons_outside_bins": 0.0 if total_photons == 0 else 1.0 - in_range / total_photons,
            "line_flux_image_sum": float(image.sum()), "line_flux_profile_sum": float(flux.sum())}
    return table, image, info
