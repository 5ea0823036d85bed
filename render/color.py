"""From observed intensity to display values: the exposure rule and sRGB encoding.

Exposure rule (fixed, never from image statistics, so the same scene and
exposure always give the same brightness):

    x = exposure * I_obs / I_white,     display = x / (1 + x)  (Reinhard et al. 2002)

where ``I_white`` is the emission law's rest-frame intensity at the disk's inner
edge.  The display value is then encoded with the sRGB transfer function
(IEC 61966-2-1) and quantised to 8 bits.
"""

import numpy as np

__all__ = ["tone_map", "srgb_encode", "to_uint8", "to_uint16", "xyz_to_linear_srgb",
           "desaturate_into_gamut", "expose_true_colour", "automatic_reference_luminance"]


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
    v = np.clip(np.asarray(linear, dtype=float), 0.0, 1.0)
    return np.where(v <= 0.0031308, 12.92 * v, 1.055 * v ** (1.0 / 2.4) - 0.055)


def to_uint8(encoded):
    """Round encoded values in [0, 1] to 8-bit integers."""
    return np.round(np.clip(encoded, 0.0, 1.0) * 255.0).astype(np.uint8)


# --- True colour: CIE XYZ -> linear sRGB -> display --------------------------------------

def xyz_to_linear_srgb(xyz):
    """Linear sRGB of CIE XYZ values (last axis 3), D65 white -> R = G = B.

    References
    ----------
    IEC 61966-2-1:1999; matrix from :func:`render.cie.xyz_to_linear_srgb_matrix`.
    """
    from .cie import xyz_to_linear_srgb_matrix

    return np.asarray(xyz, dtype=float) @ xyz_to_linear_srgb_matrix().T


def desaturate_into_gamut(rgb):
    """Bring negative linear-sRGB components to 0 by mixing in grey of the same luminance.

    A pixel outside the sRGB gamut (some channel < 0) is replaced by
    Y + s (RGB - Y) with the largest s in [0, 1] that makes every channel >= 0,
    where Y = 0.2126 R + 0.7152 G + 0.0722 B (IEC 61966-2-1) is kept: hue is
    kept, saturation reduced.  In-gamut pixels are unchanged.
    """
    rgb = np.nan_to_num(np.asarray(rgb, dtype=float), nan=0.0)
    luminance = np.maximum(rgb @ np.array([0.2126, 0.7152, 0.0722]), 0.0)[..., None]
    low = rgb.min(axis=-1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        s = np.where(low < 0.0, luminance / (luminance - low), 1.0)
    s = np.clip(np.nan_to_num(s, nan=0.0), 0.0, 1.0)
    mixed = np.maximum(luminance + s * (rgb - luminance), 0.0)
    return np.where(low < 0.0, mixed, rgb)


def expose_true_colour(xyz, reference_y, exposure=1.0):
    """Linear display sRGB in [0, 1] from XYZ radiances: gamut, exposure, then overflow.

    Steps: linear sRGB (:func:`xyz_to_linear_srgb`), :func:`desaturate_into_gamut`,
    multiply by ``exposure / reference_y`` (so a white of luminance
    ``reference_y`` shows as display white at exposure 1), then any pixel whose
    largest channel exceeds 1 is scaled down as a whole (hue and saturation
    kept; it shows at the brightest displayable level of its colour).
    """
    rgb = desaturate_into_gamut(xyz_to_linear_srgb(xyz)) * (exposure / reference_y)
    top = rgb.max(axis=-1, keepdims=True)
    return np.where(top > 1.0, rgb / np.where(top > 1.0, top, 1.0), rgb)


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
