"""From observed intensity to display values: the exposure rule and sRGB encoding.

Exposure rule (fixed, never from image statistics, so the same scene and
exposure always give the same brightness):

    x = exposure * I_obs / I_white,     display = x / (1 + x)  (Reinhard et al. 2002)

where ``I_white`` is the emission law's rest-frame intensity at the disk's inner
edge.  The display value is then encoded with the sRGB transfer function
(IEC 61966-2-1) and quantised to 8 bits.
"""

import numpy as np

__all__ = ["tone_map", "srgb_encode", "to_uint8"]


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
