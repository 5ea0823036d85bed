"""Thermal light of a thin disk: Novikov–Thorne / Page–Thorne flux, temperature, blackbody.

A geometrically thin, optically thick disk in the equatorial plane of a Kerr
hole, its gas on circular geodesics down to the ISCO and with no torque there,
radiates from each face the flux (Page & Thorne 1974, eqs. 11b, 15n)

    F(r) = Mdot / (4 pi sqrt(-g)) * f(x),   sqrt(-g) = r  (equatorial Kerr),

measured by the comoving gas per unit proper area and proper time.  With
x = sqrt(r/M), x0 = sqrt(r_isco/M) and x1, x2, x3 the roots of
x^3 - 3x + 2a = 0, the closed form is

    f = 3 / (2 M x^2 (x^3 - 3x + 2a)) [ x - x0 - (3/2) a ln(x/x0)
          - sum_i 3 (x_i - a)^2 / (x_i prod_{j != i} (x_i - x_j)) ln((x - x_i)/(x0 - x_i)) ].

Far out F -> 3 G M Mdot / (8 pi r^3) (Shakura & Sunyaev 1973).  The local
effective temperature follows from sigma T^4 = F; a colour-correction factor
f_col (about 1.7, Shimura & Takahara 1995) gives the diluted blackbody
I_nu = B_nu(f_col T) / f_col^4, which keeps the bolometric flux.

Physical constants come from astropy.constants (imported lazily, once) and are
kept here as plain cgs floats so the array code stays fast.

References
----------
Novikov & Thorne (1973), in Black Holes (Les Houches), 343.
Page & Thorne (1974), ApJ 191, 499.
Thorne (1974), ApJ 191, 507.
Shakura & Sunyaev (1973), A&A 24, 337.
Shimura & Takahara (1995), ApJ 445, 780.
"""

import functools
import math

import numpy as np
from numba import njit, prange

from ..spacetime.kerr import check_spin, circular_orbit_energy, isco_radius

__all__ = [
    "cgs",
    "radiative_efficiency",
    "page_thorne_flux",
    "page_thorne_flux_geometric",
    "effective_temperature",
    "eddington_luminosity",
    "accretion_rate_g_per_s",
    "planck_nu",
    "planck_bolometric",
    "diluted_blackbody",
    "ACCRETION_UNITS",
    "DEFAULT_COLOUR_CORRECTION",
]

ACCRETION_UNITS = ("eddington", "g_per_s", "msun_per_yr")
DEFAULT_COLOUR_CORRECTION = 1.7  # Shimura & Takahara (1995), for stellar-mass and AGN disks


@functools.lru_cache(maxsize=1)
def cgs():
    """Physical constants in cgs units as plain floats (from astropy.constants).

    Returns
    -------
    dict
        ``G``, ``c``, ``h``, ``k_B``, ``sigma_sb``, ``M_sun`` (g), ``m_p`` (g),
        ``sigma_T`` (cm^2), ``year`` (s), ``pc`` (cm), ``Jy`` (erg s^-1 cm^-2 Hz^-1),
        ``keV`` (erg).
    """
    import astropy.constants as const
    import astropy.units as u

    return {
        "G": const.G.cgs.value, "c": const.c.cgs.value, "h": const.h.cgs.value,
        "k_B": const.k_B.cgs.value, "sigma_sb": const.sigma_sb.cgs.value,
        "M_sun": const.M_sun.cgs.value, "m_p": const.m_p.cgs.value,
        "sigma_T": const.sigma_T.cgs.value, "year": (1.0 * u.yr).to(u.s).value,
        "pc": const.pc.cgs.value, "Jy": (1.0 * u.Jy).cgs.value,
        "keV": (1.0 * u.keV).to(u.erg).value,
    }


def radiative_efficiency(spin):
    """Radiative efficiency 1 - E_isco of a Novikov–Thorne disk.

    The fraction of the rest-mass energy of the accreted gas radiated away
    before it plunges from the ISCO (specific energy E_isco).

    Parameters
    ----------
    spin : float or array_like
        a/M in (-1, 1); negative means a counter-rotating disk.

    Returns
    -------
    eta : float or ndarray

    References
    ----------
    Novikov & Thorne (1973), eq. 5.4.9; Thorne (1974), ApJ 191, 507;
    Bardeen, Press & Teukolsky (1972), eq. 2.12 (E of a circular orbit).

    Examples
    --------
    >>> round(radiative_efficiency(0.0), 4)
    0.0572
    """
    a = np.asarray(spin, dtype=float)
    eta = 1.0 - circular_orbit_energy(isco_radius(a), a)
    return float(eta) if np.ndim(eta) == 0 else eta


def _cubic_roots(spin):
    """Roots of x^3 - 3x + 2a = 0 (Page & Thorne 1974, after eq. 15n)."""
    third = np.arccos(spin) / 3.0
    return (2.0 * np.cos(third - np.pi / 3.0), 2.0 * np.cos(third + np.pi / 3.0),
            -2.0 * np.cos(third))


def page_thorne_flux_geometric(r, spin):
    """Page–Thorne flux per face for M = Mdot = G = c = 1; 0 inside the ISCO.

    Multiply by Mdot c^6 / (G^2 M^2) for cgs (see :func:`page_thorne_flux`).

    Parameters
    ----------
    r : array_like
        Boyer–Lindquist radius in M.
    spin : float
        a/M in (-1, 1).

    Returns
    -------
    F : ndarray or float

    References
    ----------
    Page & Thorne (1974), ApJ 191, 499, eqs. 11b and 15n.

    Examples
    --------
    >>> float(page_thorne_flux_geometric(6.0, 0.0))
    0.0
    """
    a = check_spin(spin)
    r = np.asarray(r, dtype=float)
    r_isco = float(isco_radius(a))
    roots = _cubic_roots(a)
    coefficients = np.array([
        3.0 * (xi - a) ** 2 / (xi * np.prod([xi - xj for j, xj in enumerate(roots) if j != i]))
        for i, xi in enumerate(roots)])
    flux = np.empty(r.size)
    _page_thorne_kernel(np.ascontiguousarray(r.ravel()), a, r_isco,
                        np.array(roots, dtype=float), coefficients, flux)
    flux = flux.reshape(r.shape)
    return float(flux) if flux.ndim == 0 else flux


@njit(cache=True, parallel=True, error_model="numpy")
def _page_thorne_kernel(r, a, r_isco, roots, coefficients, out):
    """Page & Thorne (1974) eq. 15n at each radius (0 inside the ISCO, NaN for NaN)."""
    x0 = math.sqrt(r_isco)
    for i in prange(r.size):
        ri = r[i]
        if not ri > r_isco:
            out[i] = np.nan if ri != ri else 0.0
            continue
        x = math.sqrt(ri)
        bracket = x - x0 - 1.5 * a * math.log(x / x0)
        for j in range(3):
            bracket -= coefficients[j] * math.log((x - roots[j]) / (x0 - roots[j]))
        f = 1.5 / (x * x * (x * x * x - 3.0 * x + 2.0 * a)) * bracket
        # Round-off can leave -1e-17 just outside the ISCO; no torque means zero there.
        out[i] = max(f / (4.0 * math.pi * x * x), 0.0)


def page_thorne_flux(r, spin, mass_msun, accretion_rate_g_s):
    """Page–Thorne flux of one face of the disk, in erg s^-1 cm^-2.

    Parameters
    ----------
    r : array_like
        Boyer–Lindquist radius in units of GM/c^2.
    spin : float
        a/M in (-1, 1).
    mass_msun : float
        Black-hole mass in solar masses (> 0).
    accretion_rate_g_s : float
        Rest-mass accretion rate in g/s (> 0); see :func:`accretion_rate_g_per_s`.

    Returns
    -------
    F : ndarray or float
        Flux emitted per unit proper area of one face, measured by the gas;
        zero at and inside the ISCO.

    References
    ----------
    Page & Thorne (1974), ApJ 191, 499, eq. 15n; Novikov & Thorne (1973).

    Examples
    --------
    >>> f = page_thorne_flux(1e4, 0.0, 10.0, 1e18)   # Newtonian 3 G M Mdot / (8 pi r^3)
    >>> bool(0.95 < f / (3 * 6.674e-8 * 10 * 1.989e33 * 1e18
    ...     / (8 * np.pi * (1e4 * 1.4767e6) ** 3)) < 1.0)   # inner edge and relativity: 4% at 1e4 M
    True
    """
    _check_positive("mass", mass_msun)
    _check_positive("accretion rate", accretion_rate_g_s)
    k = cgs()
    mass_g = mass_msun * k["M_sun"]
    scale = accretion_rate_g_s * k["c"] ** 6 / (k["G"] ** 2 * mass_g ** 2)
    return page_thorne_flux_geometric(r, spin) * scale


def effective_temperature(r, spin, mass_msun, accretion_rate_g_s):
    """Local effective temperature (F / sigma_SB)^(1/4) of the disk in K.

    References
    ----------
    Page & Thorne (1974); Stefan–Boltzmann law.
    """
    flux = page_thorne_flux(r, spin, mass_msun, accretion_rate_g_s)
    return (np.asarray(flux) / cgs()["sigma_sb"]) ** 0.25


def eddington_luminosity(mass_msun, opacity=None):
    """Eddington luminosity 4 pi G M c / kappa in erg/s.

    Parameters
    ----------
    mass_msun : float
        Mass in solar masses.
    opacity : float, optional
        Opacity kappa in cm^2/g; default sigma_T / m_p (electron scattering in
        pure hydrogen, 0.398 cm^2/g), which gives 1.26e38 (M / M_sun) erg/s.

    References
    ----------
    Eddington (1926); Rybicki & Lightman (1979), Radiative Processes, eq. 1.
    """
    _check_positive("mass", mass_msun)
    k = cgs()
    kappa = k["sigma_T"] / k["m_p"] if opacity is None else float(opacity)
    _check_positive("opacity", kappa)
    return 4.0 * np.pi * k["G"] * mass_msun * k["M_sun"] * k["c"] / kappa


def accretion_rate_g_per_s(value, unit, mass_msun=None, spin=None, opacity=None):
    """Convert an accretion rate to g/s.

    Parameters
    ----------
    value : float
        The rate (> 0).
    unit : {"g_per_s", "msun_per_yr", "eddington"}
        ``eddington``: ``value`` is the Eddington ratio L / L_Edd with
        L = eta Mdot c^2, eta = :func:`radiative_efficiency` of ``spin`` and
        L_Edd from :func:`eddington_luminosity` with ``opacity``.
    mass_msun, spin, opacity : float
        Needed for ``eddington``.

    Returns
    -------
    mdot : float
        g/s.

    Examples
    --------
    >>> round(float(accretion_rate_g_per_s(1.0, "msun_per_yr")) / 6.30e25, 2)
    1.0
    """
    _check_positive("accretion rate", value)
    k = cgs()
    if unit == "g_per_s":
        return float(value)
    if unit == "msun_per_yr":
        return float(float(value) * k["M_sun"] / k["year"])
    if unit == "eddington":
        eta = radiative_efficiency(spin)
        return float(value) * eddington_luminosity(mass_msun, opacity) / (eta * k["c"] ** 2)
    raise ValueError(f"accretion-rate unit must be one of {', '.join(ACCRETION_UNITS)}, "
                     f"got {unit!r}")


def planck_nu(nu, temperature):
    """Planck specific intensity B_nu(T) in erg s^-1 cm^-2 Hz^-1 sr^-1.

    Zero where T <= 0 (no emission); overflow-free for h nu >> kT.

    References
    ----------
    Planck (1901); Rybicki & Lightman (1979), eq. 1.51.

    Examples
    --------
    >>> b = planck_nu(1e15, 1e4)
    >>> 1e-5 < b < 1e-3
    True
    """
    k = cgs()
    nu = np.asarray(nu, dtype=float)
    t = np.asarray(temperature, dtype=float)
    with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
        x = k["h"] * nu / (k["k_B"] * t)
        value = 2.0 * k["h"] * nu ** 3 / k["c"] ** 2 / np.expm1(x)
    value = np.where((t > 0) & np.isfinite(value), value, 0.0)
    return float(value) if value.ndim == 0 else value


def planck_bolometric(temperature):
    """Frequency-integrated Planck intensity sigma T^4 / pi in erg s^-1 cm^-2 sr^-1."""
    t = np.asarray(temperature, dtype=float)
    return cgs()["sigma_sb"] * np.where(t > 0, t, 0.0) ** 4 / np.pi


def diluted_blackbody(nu, temperature, colour_correction=1.0):
    """Colour-corrected blackbody B_nu(f T) / f^4: same bolometric flux, harder spectrum.

    References
    ----------
    Shimura & Takahara (1995), ApJ 445, 780, sec. 4.
    """
    f = float(colour_correction)
    return planck_nu(nu, f * np.asarray(temperature, dtype=float)) / f ** 4


def _check_positive(what, value):
    try:
        ok = float(value) > 0.0 and np.isfinite(float(value))
    except (TypeError, ValueError):
        ok = False
    if not ok:
        raise ValueError(f"{what} must be a positive finite number, got {value!r}")
