"""The thin equatorial disk: its edges, its emitters and the redshift they imprint.

The disk lies in the equatorial plane between ``r_in`` (by default the ISCO)
and ``r_out``.  Its gas moves on circular Keplerian geodesics in the +phi
direction (prograde for spin > 0, retrograde for spin < 0), with 4-velocity
u = u^t (1, 0, 0, Omega) (Bardeen, Press & Teukolsky 1972).

For a photon of conserved energy E and axial angular momentum L = lam E, the
energy measured by the emitter is E u^t (1 - Omega lam), so the redshift
factor g = nu_obs / nu_em is

    g = energy_ratio / (u^t (1 - Omega lam)),

which contains the gravitational and the Doppler shift together
(Cunningham & Bardeen 1973, eq. 8; energy_ratio is 1 for a distant observer).
"""

import math

import numpy as np
from numba import njit, prange

from ..geodesics.integrator import FATE_DISK as _FATE_DISK
from ..spacetime.kerr import circular_orbit_time_component, isco_radius, keplerian_angular_velocity

# opaque: a ray ends at its first crossing on the disk; transparent: orders add up.
SURFACES = ("opaque", "transparent")

__all__ = ["redshift_factor", "keplerian_redshift", "on_disk", "shining_mask"]


def redshift_factor(r, lam, spin, energy_ratio=1.0, inside_isco="nan"):
    """Redshift factor g = nu_obs/nu_em of light from a Keplerian emitter at radius r.

    Parameters
    ----------
    r : array_like
        Emission radius in M (NaN allowed: gives NaN).
    lam : array_like
        Photon's L/E, broadcastable against ``r``.
    spin : float
        a/M.
    energy_ratio : array_like
        Observer-measured photon energy per unit conserved E, broadcastable.
    inside_isco : {"nan", "keplerian"}
        ``"nan"``: g is NaN inside the ISCO, where no stable emitter exists.
        ``"keplerian"``: use the (unstable) circular orbit down to the photon orbit.

    Returns
    -------
    g : ndarray

    References
    ----------
    Cunningham & Bardeen (1973), ApJ 183, 237, eq. 8; Bardeen, Press &
    Teukolsky (1972), ApJ 178, 347, eqs. 2.15-2.16.

    Examples
    --------
    >>> float(redshift_factor(6.0, 0.0, 0.0)) == float(np.sqrt(0.5))
    True
    """
    r = np.asarray(r, dtype=float)
    if inside_isco == "nan" and r.ndim == 2 and np.ndim(lam) == 2 and np.shape(lam)[1] == 1 \
            and np.ndim(energy_ratio) == 2 and np.shape(energy_ratio)[1] == 1:
        # A traced bundle's crossings (N, orders) with per-ray lam and energy ratio
        # (N, 1): one fused parallel pass instead of a dozen numpy temporaries.
        g = np.empty(r.shape)
        _redshift_kernel(np.ascontiguousarray(r), np.ascontiguousarray(np.asarray(
            lam, dtype=float)[:, 0]), np.ascontiguousarray(np.asarray(
                energy_ratio, dtype=float)[:, 0]), float(spin),
            float(isco_radius(spin)) * (1.0 - 1e-12), g)
        return g
    with np.errstate(invalid="ignore"):
        u_t = circular_orbit_time_component(r, spin)
        omega = keplerian_angular_velocity(r, spin)
        g = np.asarray(energy_ratio) / (u_t * (1.0 - omega * np.asarray(lam)))
    if inside_isco == "nan":
        g = np.where(r >= isco_radius(spin) * (1.0 - 1e-12), g, np.nan)
    return g


@njit(cache=True, parallel=True, error_model="numpy")
def _redshift_kernel(r, lam, energy_ratio, spin, r_min, out):
    """g of :func:`redshift_factor` for crossings r (N, K) of rays with lam, energy_ratio (N,).

    u^t = (r^(3/2) + a) / (r^(3/4) sqrt(r^(3/2) - 3 r^(1/2) + 2a)) and
    Omega = 1 / (r^(3/2) + a) (Bardeen, Press & Teukolsky 1972, eqs. 2.15-2.16); NaN
    below ``r_min`` (the ISCO) and for NaN r.
    """
    for i in prange(r.shape[0]):
        for k in range(r.shape[1]):
            out[i, k] = keplerian_redshift(r[i, k], lam[i], energy_ratio[i], spin, r_min)


@njit(cache=True, error_model="numpy")
def keplerian_redshift(r, lam, energy_ratio, spin, r_min):
    """g of one crossing at radius r (M) of a ray with lam and energy_ratio; NaN below ``r_min``.

    The scalar form of :func:`redshift_factor` for kernels (``r_min``: the ISCO times
    1 - 1e-12, as there); NaN for NaN r.

    References
    ----------
    Cunningham & Bardeen (1973), ApJ 183, 237, eq. 8; Bardeen, Press & Teukolsky
    (1972), ApJ 178, 347, eqs. 2.15-2.16.

    Examples
    --------
    >>> keplerian_redshift(6.0, 0.0, 1.0, 0.0, 6.0) == math.sqrt(0.5)
    True
    """
    if not r >= r_min:
        return np.nan
    root = math.sqrt(r)
    r32 = r * root
    u_t = (r32 + spin) / (math.sqrt(r32) * math.sqrt(r32 - 3.0 * root + 2.0 * spin))
    return energy_ratio / (u_t * (1.0 - lam / (r32 + spin)))


def on_disk(r, r_in, r_out):
    """Boolean mask of crossing radii that fall on the disk (NaN counts as off)."""
    r = np.asarray(r, dtype=float)
    with np.errstate(invalid="ignore"):
        return (r >= r_in) & (r <= r_out)


def shining_mask(r, fate, n_crossings, r_in, r_out, orders, opaque):
    """Crossings (N, orders) that shine: on the disk and, for an opaque disk, the one that ended the ray.

    An opaque disk stops a ray at its first crossing between its edges (fate 2,
    :mod:`render.geodesics.integrator`), so earlier crossings missed the disk and
    later ones never happen.
    """
    hits = on_disk(r, r_in, r_out)
    if not opaque:
        return hits
    last = np.clip(np.asarray(n_crossings) - 1, 0, orders - 1)
    keep = np.zeros_like(hits)
    rows = np.nonzero((np.asarray(fate) == _FATE_DISK) & (np.asarray(n_crossings) <= orders))[0]
    keep[rows, last[rows]] = True
    return hits & keep
