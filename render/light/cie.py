"""CIE 1931 colorimetry: the 2-degree standard observer, XYZ of blackbodies, sRGB primaries.

Colour-matching functions
    The CIE 1931 2-degree observer x(lam), y(lam), z(lam) is evaluated with the
    multi-lobe piecewise-Gaussian fit of Wyman, Sloan & Shirley (2013), eq. 2 /
    listing 1 (no tabulated data are shipped or downloaded).  Against the CIE
    tables the fit's chromaticities of blackbodies agree to about 1e-3 in x and y
    (tests/test_color.py checks this against the colour-science library's CIE tables).

XYZ of a blackbody
    X = integral B_lam(lam, T) x(lam) dlam over 360-830 nm (1 nm steps), in
    erg s^-1 cm^-2 sr^-1 (a CIE-weighted radiance; Y is proportional to luminance).
    :func:`blackbody_xyz` reads a table precomputed once over log T (100 K to
    1e10 K, interpolated in log X - log T; Rayleigh–Jeans X ~ T beyond).  Since a
    blackbody of temperature T seen with redshift factor g is exactly a
    blackbody of temperature gT (I_nu/nu^3 invariant), one table over the
    observed temperature gT serves every g.

sRGB
    Linear sRGB from XYZ with the matrix built from the IEC 61966-2-1 primaries
    (R 0.64,0.33; G 0.30,0.60; B 0.15,0.06) and its white point D65
    (x, y) = (0.3127, 0.3290): XYZ of D65 maps to R = G = B.  No chromatic
    adaptation is applied: light with the chromaticity of D65 (a blackbody near
    6500 K) is displayed white.

References
----------
CIE (1931); CIE 15:2004, Colorimetry.
Wyman, Sloan & Shirley (2013), JCGT 2(2), 1, "Simple Analytic Approximations
to the CIE XYZ Color Matching Functions".
IEC 61966-2-1:1999, sRGB.
"""

import functools
import math

import numpy as np
from numba import njit, prange

from .thermal import cgs

__all__ = [
    "colour_matching_functions",
    "xyz_to_linear_srgb_matrix",
    "chromaticity",
    "spectrum_xyz",
    "blackbody_xyz",
    "blackbody_xyz_table",
    "WAVELENGTHS_NM",
    "D65_XY",
]

WAVELENGTHS_NM = np.arange(360.0, 831.0, 1.0)
D65_XY = (0.3127, 0.3290)
SRGB_PRIMARIES_XY = ((0.64, 0.33), (0.30, 0.60), (0.15, 0.06))

# Wyman, Sloan & Shirley (2013), eq. 2: (amplitude, mean nm, sigma below, sigma above).
_LOBES = {
    "x": ((1.056, 599.8, 37.9, 31.0), (0.362, 442.0, 16.0, 26.7), (-0.065, 501.1, 20.4, 26.2)),
    "y": ((0.821, 568.8, 46.9, 40.5), (0.286, 530.9, 16.3, 31.1)),
    "z": ((1.217, 437.0, 11.8, 36.0), (0.681, 459.0, 26.0, 13.8)),
}

T_TABLE_MIN, T_TABLE_MAX, T_TABLE_POINTS = 100.0, 1e10, 4001


def colour_matching_functions(wavelength_nm):
    """CIE 1931 2-degree x, y, z colour-matching functions (multi-lobe fit).

    Parameters
    ----------
    wavelength_nm : array_like
        Wavelengths in nm.

    Returns
    -------
    ndarray, shape (3, N)

    References
    ----------
    Wyman, Sloan & Shirley (2013), JCGT 2(2), eq. 2.

    Examples
    --------
    >>> cmf = colour_matching_functions([555.0])
    >>> 0.99 < float(cmf[1, 0]) < 1.01      # y peaks at 1 near 555 nm
    True
    """
    lam = np.atleast_1d(np.asarray(wavelength_nm, dtype=float))
    out = np.zeros((3, lam.size))
    for row, name in enumerate("xyz"):
        for amplitude, mean, below, above in _LOBES[name]:
            sigma = np.where(lam < mean, below, above)
            out[row] += amplitude * np.exp(-0.5 * ((lam - mean) / sigma) ** 2)
    return out


_trapezoid = getattr(np, "trapezoid", None) or np.trapz


def _xyz_from_xy(x, y):
    return np.array([x / y, 1.0, (1.0 - x - y) / y])


@functools.lru_cache(maxsize=1)
def xyz_to_linear_srgb_matrix():
    """3x3 matrix from CIE XYZ (Y = 1 for white) to linear sRGB.

    Built from the primaries and D65 white point of IEC 61966-2-1 (SMPTE RP 177
    construction), so XYZ of D65 gives exactly R = G = B = 1.

    Examples
    --------
    >>> m = xyz_to_linear_srgb_matrix()
    >>> round(float(m[0, 0]), 4)
    3.241
    """
    primaries = np.column_stack([_xyz_from_xy(*xy) for xy in SRGB_PRIMARIES_XY])
    white = _xyz_from_xy(*D65_XY)
    scale = np.linalg.solve(primaries, white)
    to_xyz = primaries * scale
    matrix = np.linalg.inv(to_xyz)
    matrix.setflags(write=False)
    return matrix


def chromaticity(xyz):
    """CIE (x, y) of XYZ values, last axis of length 3."""
    xyz = np.asarray(xyz, dtype=float)
    total = xyz.sum(axis=-1)
    return xyz[..., 0] / total, xyz[..., 1] / total


def spectrum_xyz(wavelength_nm, spectral_radiance):
    """XYZ of a spectrum sampled on ``wavelength_nm`` (per nm units; trapezoid rule)."""
    cmf = colour_matching_functions(wavelength_nm)
    return _trapezoid(cmf * np.asarray(spectral_radiance, dtype=float), wavelength_nm, axis=-1)


def _planck_lambda(lam_cm, temperature):
    k = cgs()
    with np.errstate(over="ignore", divide="ignore"):
        x = k["h"] * k["c"] / (lam_cm * k["k_B"] * temperature)
        value = 2.0 * k["h"] * k["c"] ** 2 / lam_cm ** 5 / np.expm1(x)
    return np.where(np.isfinite(value), value, 0.0)


@functools.lru_cache(maxsize=1)
def blackbody_xyz_table():
    """(log T, log X, log Y, log Z) table of blackbodies, erg s^-1 cm^-2 sr^-1 (see module doc)."""
    temperatures = np.geomspace(T_TABLE_MIN, T_TABLE_MAX, T_TABLE_POINTS)
    lam_cm = WAVELENGTHS_NM * 1e-7
    radiance = _planck_lambda(lam_cm[None, :], temperatures[:, None])   # per cm
    cmf = colour_matching_functions(WAVELENGTHS_NM)
    xyz = _trapezoid(radiance[:, None, :] * cmf[None, :, :], lam_cm, axis=-1)
    log_xyz = np.log(np.maximum(xyz, 1e-300))
    table = np.column_stack([np.log(temperatures), log_xyz])
    table.setflags(write=False)
    return table


def blackbody_xyz(temperature):
    """CIE XYZ (erg s^-1 cm^-2 sr^-1) of blackbodies, from the precomputed table.

    Parameters
    ----------
    temperature : array_like
        Temperatures in K; <= 0 or NaN gives 0.  Below 100 K the visible
        emission is taken as 0; above 1e10 K the Rayleigh–Jeans scaling X ~ T is used.

    Returns
    -------
    ndarray, shape temperature.shape + (3,)
    """
    t = np.asarray(temperature, dtype=float)
    out = np.empty(t.shape + (3,))
    flat = np.ascontiguousarray(t.reshape(-1, 1))
    _blackbody_xyz_kernel(flat, np.ones_like(flat), blackbody_xyz_table(), T_TABLE_MIN,
                          out.reshape(-1, 3))
    return out


def blackbody_xyz_sum(temperature, weight):
    """sum_k weight[i, k] * XYZ(temperature[i, k]): the light of several images in one pixel.

    Parameters
    ----------
    temperature, weight : array_like, shape (N, K)
        Temperatures in K (as :func:`blackbody_xyz`) and their weights; a NaN
        weight counts as 0.

    Returns
    -------
    ndarray, shape (N, 3)
    """
    t = np.ascontiguousarray(temperature, dtype=float)
    w = np.ascontiguousarray(weight, dtype=float)
    out = np.empty((t.shape[0], 3))
    _blackbody_xyz_kernel(t, w, blackbody_xyz_table(), T_TABLE_MIN, out)
    return out


@njit(cache=True, inline="always", error_model="numpy")
def blackbody_xyz_at_log(table, log_t):
    """(X, Y, Z) at ln T from :func:`blackbody_xyz_table`, for numba kernels.

    Linear interpolation of log XYZ in log T on the table's nodes (as numpy.interp);
    the table is uniform in log T up to rounding, so the node is found from the
    step and then checked against its neighbours.  Below the table the first node
    is used; above it the Rayleigh-Jeans scaling X ~ T.
    """
    n = table.shape[0]
    first = table[0, 0]
    last = table[n - 1, 0]
    clipped = min(max(log_t, first), last)
    j = min(max(int((clipped - first) / ((last - first) / (n - 1))), 0), n - 2)
    while j > 0 and clipped < table[j, 0]:
        j -= 1
    while j < n - 2 and clipped > table[j + 1, 0]:
        j += 1
    u = (clipped - table[j, 0]) / (table[j + 1, 0] - table[j, 0])
    scale = math.exp(log_t - last) if log_t > last else 1.0
    return (scale * math.exp(table[j, 1] + u * (table[j + 1, 1] - table[j, 1])),
            scale * math.exp(table[j, 2] + u * (table[j + 1, 2] - table[j, 2])),
            scale * math.exp(table[j, 3] + u * (table[j + 1, 3] - table[j, 3])))


@njit(cache=True, parallel=True, error_model="numpy")
def _blackbody_xyz_kernel(t, weight, table, t_min, out):
    """out[i] = sum_k weight[i, k] XYZ(t[i, k]); 0 for T < t_min, NaN T or NaN weight."""
    for i in prange(t.shape[0]):
        x_sum = 0.0
        y_sum = 0.0
        z_sum = 0.0
        for k in range(t.shape[1]):
            ti = t[i, k]
            wk = weight[i, k]
            if not ti >= t_min or wk != wk:   # NaN or too cold to see
                continue
            x, y, z = blackbody_xyz_at_log(table, math.log(ti))
            x_sum += wk * x
            y_sum += wk * y
            z_sum += wk * z
        out[i, 0] = x_sum
        out[i, 1] = y_sum
        out[i, 2] = z_sum
