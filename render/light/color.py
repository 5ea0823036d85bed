"""From observed intensity to display values: the exposure rule and sRGB encoding.

Exposure rule (fixed, never from image statistics, so the same scene and
exposure always give the same brightness):

    x = exposure * I_obs / I_white,     display = x / (1 + x)  (Reinhard et al. 2002)

where ``I_white`` is the emission law's rest-frame intensity at the disk's inner
edge.  The display value is then encoded with the sRGB transfer function
(IEC 61966-2-1) and quantised to 8 bits.  This is the default scalar rule; the
choice of rules a scene makes (scalings, colour maps, the true-colour rules) is
:mod:`render.light.display`, built from the pieces here.
"""

import math

import numpy as np
from numba import njit, prange
from .cie import xyz_to_linear_srgb_matrix

__all__ = ["SRGB_LUMINANCE", "tone_map", "srgb_encode", "srgb_pixels", "to_uint8", "to_uint16",
           "xyz_to_linear_srgb",
           "desaturate_into_gamut", "expose_true_colour", "automatic_reference_luminance"]

# Luminance Y of linear sRGB: Y = 0.2126 R + 0.7152 G + 0.0722 B (IEC 61966-2-1, the
# middle row of its RGB -> XYZ matrix; WCAG 2.2's relative luminance uses the same).
SRGB_LUMINANCE = (0.2126, 0.7152, 0.0722)
_Y_R, _Y_G, _Y_B = SRGB_LUMINANCE


def tone_map(intensity, white, exposure=1.0):
    """Reinhard curve x/(1+x) of ``exposure * intensity / white``; NaN becomes 0.

    References
    ----------
    Reinhard, Stark, Shirley & Ferwerda (2002), ACM Trans. Graph. 21, 267, eq. 3.

    Examples
    --------
    >>> float(tone_map(1.0, 1.0))
    0.5
    """
    x = exposure * np.nan_to_num(np.asarray(intensity, dtype=float), nan=0.0) / white
    x = np.clip(x, 0.0, None)
    return x / (1.0 + x)


def srgb_encode(linear):
    """sRGB transfer function (IEC 61966-2-1) of linear values in [0, 1].

    Examples
    --------
    >>> round(float(srgb_encode(0.5)), 4)
    0.7354
    """
    v = np.asarray(linear, dtype=float)
    out = np.empty(v.shape)
    _srgb_kernel(np.ascontiguousarray(v.ravel()), out.reshape(-1))
    return out


@njit(cache=True, parallel=True, error_model="numpy")
def _srgb_kernel(v, out):
    for i in prange(v.size):
        x = min(max(v[i], 0.0), 1.0)   # NaN stays NaN (as numpy.clip), then 8-bit 0
        out[i] = 12.92 * x if x <= 0.0031308 else 1.055 * x ** (1.0 / 2.4) - 0.055


def srgb_pixels(linear):
    """(8-bit, 16-bit) sRGB codes of linear values in [0, 1]: one pass, no float temporaries.

    Equal to ``to_uint8(srgb_encode(linear)), to_uint16(srgb_encode(linear))`` (the same
    transfer function and round-half-to-even); NaN gives 0.

    Examples
    --------
    >>> [a.tolist() for a in srgb_pixels(np.array([0.0, 0.5, 1.0]))]
    [[0, 188, 255], [0, 48192, 65535]]
    """
    v = np.ascontiguousarray(linear, dtype=float)
    out8 = np.empty(v.shape, dtype=np.uint8)
    out16 = np.empty(v.shape, dtype=np.uint16)
    _srgb_pixels_kernel(v.reshape(-1), out8.reshape(-1), out16.reshape(-1))
    return out8, out16


@njit(cache=True, parallel=True, error_model="numpy")
def _srgb_pixels_kernel(v, out8, out16):
    for i in prange(v.size):
        x = min(max(v[i], 0.0), 1.0)
        e = 12.92 * x if x <= 0.0031308 else 1.055 * x ** (1.0 / 2.4) - 0.055
        e = min(max(e, 0.0), 1.0)
        if e != e:   # NaN: the 8-bit 0 of to_uint8 (numpy casts NaN to 0 there)
            out8[i] = 0
            out16[i] = 0
        else:
            out8[i] = np.uint8(np.rint(e * 255.0))
            out16[i] = np.uint16(np.rint(e * 65535.0))


def to_uint8(encoded):
    """Round encoded values in [0, 1] to 8-bit integers."""
    return np.round(np.clip(encoded, 0.0, 1.0) * 255.0).astype(np.uint8)


# --- True colour: CIE XYZ -> linear sRGB -> display --------------------------------------

def xyz_to_linear_srgb(xyz):
    """Linear sRGB of CIE XYZ values (last axis 3), D65 white -> R = G = B.

    References
    ----------
    IEC 61966-2-1:1999; matrix from :func:`render.light.cie.xyz_to_linear_srgb_matrix`.
    """

    xyz = np.asarray(xyz, dtype=float)
    out = np.empty(xyz.shape)
    _matrix_kernel(np.ascontiguousarray(xyz.reshape(-1, 3)), xyz_to_linear_srgb_matrix(),
                   out.reshape(-1, 3))
    return out


@njit(cache=True, parallel=True)
def _matrix_kernel(v, matrix, out):
    """out[i] = matrix @ v[i] for 3-vectors (a loop, not BLAS: no thread pool of its own)."""
    for i in prange(v.shape[0]):
        for row in range(3):
            out[i, row] = (matrix[row, 0] * v[i, 0] + matrix[row, 1] * v[i, 1]
                           + matrix[row, 2] * v[i, 2])


def desaturate_into_gamut(rgb):
    """Bring negative linear-sRGB components to 0 by mixing in grey of the same luminance.

    NaN and infinite channels count as 0.  A pixel outside the sRGB gamut (some
    channel < 0) is replaced by
    Y + s (RGB - Y) with the largest s in [0, 1] that makes every channel >= 0,
    where Y = 0.2126 R + 0.7152 G + 0.0722 B (IEC 61966-2-1) is kept: hue is
    kept, saturation reduced.  In-gamut pixels are unchanged.
    """
    rgb = np.asarray(rgb, dtype=float)
    out = np.empty(rgb.shape)
    _gamut_kernel(np.ascontiguousarray(rgb.reshape(-1, 3)), 1.0, False, out.reshape(-1, 3))
    return out


@njit(cache=True, parallel=True, error_model="numpy")
def _gamut_kernel(rgb, scale, limit, out):
    """Per pixel: non-finite -> 0, desaturate into gamut, times ``scale``; if ``limit``, top <= 1."""
    for i in prange(rgb.shape[0]):
        r = rgb[i, 0] if math.isfinite(rgb[i, 0]) else 0.0
        g = rgb[i, 1] if math.isfinite(rgb[i, 1]) else 0.0
        b = rgb[i, 2] if math.isfinite(rgb[i, 2]) else 0.0
        low = min(r, g, b)
        if low < 0.0:
            luminance = max(_Y_R * r + _Y_G * g + _Y_B * b, 0.0)
            s = luminance / (luminance - low)
            s = min(max(s, 0.0), 1.0) if s == s else 0.0
            r = max(luminance + s * (r - luminance), 0.0)
            g = max(luminance + s * (g - luminance), 0.0)
            b = max(luminance + s * (b - luminance), 0.0)
        r *= scale
        g *= scale
        b *= scale
        top = max(r, g, b)
        if limit and top > 1.0:
            r /= top
            g /= top
            b /= top
        out[i, 0] = r
        out[i, 1] = g
        out[i, 2] = b


def expose_true_colour(xyz, reference_y, exposure=1.0):
    """Linear display sRGB in [0, 1] from XYZ radiances: gamut, exposure, then overflow.

    Steps: linear sRGB (:func:`xyz_to_linear_srgb`), :func:`desaturate_into_gamut`,
    multiply by ``exposure / reference_y`` (so a white of luminance
    ``reference_y`` shows as display white at exposure 1), then any pixel whose
    largest channel exceeds 1 is scaled down as a whole (hue and saturation
    kept; it shows at the brightest displayable level of its colour).
    """
    return expose_linear_srgb(xyz_to_linear_srgb(xyz), reference_y, exposure)


def expose_linear_srgb(rgb, reference_y, exposure=1.0):
    """:func:`expose_true_colour` from linear sRGB (in gamut or not) instead of XYZ."""
    rgb = np.asarray(rgb, dtype=float)
    out = np.empty(rgb.shape)
    _gamut_kernel(np.ascontiguousarray(rgb.reshape(-1, 3)), float(exposure / reference_y), True,
                  out.reshape(-1, 3))
    return out


def automatic_reference_luminance(y, percentile=99.5):
    """Reference luminance of the automatic exposure: the given percentile of Y > 0.

    Returns 1.0 for an image with no light (so the image stays black).
    """
    y = np.asarray(y, dtype=float)
    lit = y[np.isfinite(y) & (y > 0)]
    return float(np.percentile(lit, percentile)) if lit.size else 1.0


def to_uint16(encoded):
    """Round encoded values in [0, 1] to 16-bit integers."""
    return np.round(np.clip(encoded, 0.0, 1.0) * 65535.0).astype(np.uint16)
