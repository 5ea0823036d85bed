"""The glare of a viewer's eye, added to a displayed picture (never to the data maps).

A bright source seen by a human eye is surrounded by a veil of scattered light
(from the cornea, lens and retina).  Its point-spread function is the CIE
general disability glare equation (Vos & van den Berg 1999, CIE 135/1), the
equivalent veiling luminance per unit illuminance at the eye from a source at
angle theta (degrees), valid for 0.1 deg < theta < 100 deg:

    L_eq / E = 10 / theta^3 + (5 / theta^2 + 0.1 p / theta) (1 + (A / 62.5)^4)
               + 0.0025 p     [sr^-1]

with a viewer of age A = 25 years and eye pigmentation p = 0.5 (brown eyes)
fixed here.  A picture whose width subtends ``display.viewing_angle`` degrees
has pixels of angle w = viewing_angle / image.width (degrees); a pixel at angle
theta >= 0.1 deg from a source receives the fraction PSF(theta) w^2 (pi/180)^2 of
its light, and the source keeps what is not scattered within the picture
(light is conserved inside it).  Angles below 0.1 deg are the unscattered core.
The convolution is done by FFT (scipy), once per channel, on the exposed linear
light before the display rule, as the eye would scatter the light of the scene.

References
----------
Vos, J. J. & van den Berg, T. J. T. P. (1999), Report on disability glare,
CIE Collection 135/1, eq. 6 (the general disability glare equation).
Spencer, Shirley, Zimmerman & Greenberg (1995), Physically-based glare effects
for digital images, Proc. SIGGRAPH 95, 325 (adding the eye's scatter to pictures).
"""

import numpy as np

__all__ = ["GLARE_AGE", "GLARE_PIGMENTATION", "GLARE_CORE_DEG", "glare_psf", "glare_kernel",
           "add_glare"]

GLARE_AGE = 25.0             # years
GLARE_PIGMENTATION = 0.5     # p: 0 very dark, 0.5 brown, 1 blue-green eyes (CIE 135/1)
GLARE_CORE_DEG = 0.1         # the equation's lower limit of validity
GLARE_OUTER_DEG = 100.0      # and its upper one


def glare_psf(theta_deg, age=GLARE_AGE, pigmentation=GLARE_PIGMENTATION):
    """CIE 135/1 general disability glare function L_eq / E (sr^-1) at angle theta (deg).

    Examples
    --------
    >>> round(float(glare_psf(1.0, pigmentation=0.0)), 4)   # 10 + 5 (1 + 0.4^4)
    15.128
    """
    t = np.asarray(theta_deg, dtype=float)
    ageing = 1.0 + (age / 62.5) ** 4
    return 10.0 / t ** 3 + (5.0 / t ** 2 + 0.1 * pigmentation / t) * ageing + 0.0025 * pigmentation


def glare_kernel(height, width, pixel_deg):
    """The fraction of a pixel's light each pixel at offset (dy, dx) receives, (2H-1, 2W-1).

    The centre (and every offset below 0.1 deg) is 0: the unscattered core.
    """
    dy = np.arange(-(height - 1), height)[:, None]
    dx = np.arange(-(width - 1), width)[None, :]
    theta = np.hypot(dy, dx) * pixel_deg
    inside = (theta >= GLARE_CORE_DEG) & (theta <= GLARE_OUTER_DEG)
    solid_angle = (pixel_deg * np.pi / 180.0) ** 2
    with np.errstate(divide="ignore"):
        return np.where(inside, glare_psf(np.where(inside, theta, 1.0)) * solid_angle, 0.0)


def add_glare(image, pixel_deg):
    """The picture ``image`` (H, W) or (H, W, C) of exposed linear light with the eye's glare.

    Light is conserved within the picture: each pixel keeps 1 - S of its own light,
    where S is the kernel's sum, and spreads S over its neighbours.
    """
    from scipy.signal import fftconvolve  # here: importing scipy.signal takes ~2 s

    image = np.nan_to_num(np.asarray(image, dtype=float), nan=0.0, posinf=0.0)
    height, width = image.shape[:2]
    kernel = glare_kernel(height, width, pixel_deg)
    kept = 1.0 - kernel.sum()
    planes = image[..., None] if image.ndim == 2 else image
    out = np.empty(planes.shape)
    for channel in range(planes.shape[2]):
        plane = planes[..., channel]
        out[..., channel] = kept * plane + fftconvolve(plane, kernel, mode="same")
    out = np.clip(out, 0.0, None)   # FFT round-off can give tiny negatives in the dark
    return out[..., 0] if image.ndim == 2 else out
