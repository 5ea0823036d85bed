"""Display rules: from exposed linear light to the values a picture shows.

Every rule here is *fixed*: it depends on the scene's keys and on the exposure's
white, never on the image's own statistics, so the frames of a film and the
stills of a sweep are shown alike.  The data maps are never touched; only the
8-bit (and 16-bit) picture is.

Scalar images (``display.scaling``, ``display.colour_map``)
    With x = exposure * I / I_white (:func:`render.light.observing.exposure_white`):

    * ``reinhard``: v = x / (1 + x) (Reinhard et al. 2002, eq. 3; the original rule);
    * ``linear``: v = min(x, 1);
    * ``log``: v = 1 + log10(x) / D over D = ``display.decades`` decades, clipped to [0, 1];
    * ``asinh``: v = asinh(x / s) / asinh(1 / s) with s = 10^-D, clipped to [0, 1]
      (linear below s, logarithmic above; Lupton, Gunn & Szalay 1999).

    v is light (linear); it is sRGB-encoded (IEC 61966-2-1) and then shown in grey
    or looked up in a perceptually uniform colour map (viridis, magma, inferno,
    cividis: van der Walt & Smith 2015; Nunez, Anderton & Renslow 2018) indexed by
    the encoded value, so a colour map and grey agree on which pixel is brighter.

True colour (``display.colour_rule``)
    * ``scale_down`` (the original rule): exposed linear sRGB; a pixel whose
      largest channel exceeds 1 is scaled down as a whole (a flat plateau where the
      disk is brighter than white);
    * ``soft_shoulder`` (the default): the largest channel m of the exposed linear
      sRGB is rolled off by a shoulder that is the identity below the knee
      k = 0.5 and k + (1 - k) t / (1 + t), t = (m - k) / (1 - k), above it (C1 at
      the knee, approaching 1 but never reaching it), keeping the chromaticity;
      only where the shown level passes 0.8 is the colour mixed toward white of
      the same level, with weight ((level - 0.8) / 0.2)^2, as bright film
      highlights are.  Brightness differences above white stay visible (Doppler
      beaming, the radial fall-off) and nothing clips unless the light is
      hundreds of times above white.

Glare (``display.glare``)
    Optionally, before either rule, the exposed light of the whole picture is
    spread by the point-spread function of a viewer's eye (:mod:`render.light.glare`).
"""

import functools
import math

import numpy as np
from numba import njit, prange

from .color import desaturate_into_gamut, srgb_encode, srgb_pixels, to_uint8
from .glare import add_glare

__all__ = ["SCALINGS", "COLOUR_MAPS", "COLOUR_RULES", "scale_display", "colour_mapped",
           "scalar_pixels", "soft_shoulder_colour", "colour_display", "SHOULDER_KNEE",
           "WHITENING_START", "scene_scalar_pixels", "scene_colour_pixels"]

SCALINGS = ("reinhard", "linear", "log", "asinh")
COLOUR_MAPS = ("grey", "viridis", "magma", "inferno", "cividis")
COLOUR_RULES = ("soft_shoulder", "scale_down")
# The fixed constants of the soft shoulder (module docstring).
SHOULDER_KNEE = 0.5
WHITENING_START = 0.8


def scale_display(x, scaling="reinhard", decades=4.0):
    """Display light v in [0, 1] of exposed values ``x`` (white at x = 1); NaN -> 0.

    References
    ----------
    Reinhard, Stark, Shirley & Ferwerda (2002), ACM Trans. Graph. 21, 267, eq. 3;
    Lupton, Gunn & Szalay (1999), AJ 118, 1406 (the asinh scale).

    Examples
    --------
    >>> float(scale_display(1.0)), float(scale_display(0.01, "log", 2.0))
    (0.5, 0.0)
    """
    x = np.clip(np.nan_to_num(np.asarray(x, dtype=float), nan=0.0, posinf=0.0), 0.0, None)
    if scaling == "reinhard":
        return x / (1.0 + x)
    if scaling == "linear":
        return np.minimum(x, 1.0)
    if scaling == "log":
        with np.errstate(divide="ignore"):
            return np.clip(1.0 + np.log10(x) / decades, 0.0, 1.0)
    if scaling == "asinh":
        soft = 10.0 ** -decades
        return np.clip(np.arcsinh(x / soft) / math.asinh(1.0 / soft), 0.0, 1.0)
    raise ValueError(f"unknown scaling {scaling!r}; expected one of {', '.join(SCALINGS)}")


@functools.lru_cache(maxsize=None)
def _colour_table(name):
    """The 256-entry 8-bit RGB table of a matplotlib colour map (lazy: matplotlib is heavy)."""
    import matplotlib   # the colour-map data only; no backend is chosen here

    table = matplotlib.colormaps[name].resampled(256)(np.arange(256))[:, :3]
    return np.round(table * 255.0).astype(np.uint8)


def colour_mapped(encoded, colour_map="grey"):
    """8-bit pixels of sRGB-encoded display values: grey (H, W) or colour (H, W, 3).

    Examples
    --------
    >>> colour_mapped(np.array([0.0, 1.0])).tolist()
    [0, 255]
    """
    index = to_uint8(encoded)
    if colour_map == "grey":
        return index
    return _colour_table(colour_map)[index]


def scalar_pixels(intensity, white, exposure, scaling="reinhard", decades=4.0,
                  colour_map="grey"):
    """8-bit pixels of a scalar image by the fixed rule (module docstring)."""
    x = exposure * np.asarray(intensity, dtype=float) / white
    return colour_mapped(srgb_encode(scale_display(x, scaling, decades)), colour_map)


def soft_shoulder_colour(rgb):
    """Display linear sRGB in [0, 1) of exposed, in-gamut linear sRGB (N, 3) by the soft shoulder.

    References
    ----------
    Reinhard, Stark, Shirley & Ferwerda (2002), ACM Trans. Graph. 21, 267 (the
    x / (1 + x) form of the shoulder above the knee).

    Examples
    --------
    >>> soft_shoulder_colour(np.array([[0.25, 0.5, 0.1]])).round(3).tolist()
    [[0.25, 0.5, 0.1]]
    """
    rgb = np.asarray(rgb, dtype=float)
    out = np.empty(rgb.shape)
    _shoulder_kernel(np.ascontiguousarray(rgb.reshape(-1, 3)), SHOULDER_KNEE, WHITENING_START,
                     out.reshape(-1, 3))
    return out


@njit(cache=True, parallel=True, error_model="numpy")
def _shoulder_kernel(rgb, knee, whitening, out):
    for i in prange(rgb.shape[0]):
        r = max(rgb[i, 0], 0.0) if math.isfinite(rgb[i, 0]) else 0.0
        g = max(rgb[i, 1], 0.0) if math.isfinite(rgb[i, 1]) else 0.0
        b = max(rgb[i, 2], 0.0) if math.isfinite(rgb[i, 2]) else 0.0
        top = max(r, g, b)
        if top <= 0.0:
            out[i, 0] = 0.0
            out[i, 1] = 0.0
            out[i, 2] = 0.0
            continue
        level = top
        if top > knee:
            t = (top - knee) / (1.0 - knee)
            level = knee + (1.0 - knee) * t / (1.0 + t)
        w = 0.0
        if level > whitening:
            w = ((level - whitening) / (1.0 - whitening)) ** 2
        scale = level / top
        out[i, 0] = (1.0 - w) * r * scale + w * level
        out[i, 1] = (1.0 - w) * g * scale + w * level
        out[i, 2] = (1.0 - w) * b * scale + w * level


def colour_display(rgb_exposed_unlimited, rule):
    """Display linear sRGB of exposed in-gamut linear sRGB by ``display.colour_rule``."""
    rgb = np.asarray(rgb_exposed_unlimited, dtype=float)
    if rule == "soft_shoulder":
        return soft_shoulder_colour(rgb)
    if rule == "scale_down":
        top = np.max(rgb, axis=-1, keepdims=True)
        return np.where(top > 1.0, rgb / np.where(top > 1.0, top, 1.0), rgb)
    raise ValueError(f"unknown colour rule {rule!r}; expected one of {', '.join(COLOUR_RULES)}")


def colour_pixels(display_rgb):
    """(8-bit, 16-bit) sRGB pixels of display linear sRGB."""
    return srgb_pixels(display_rgb)


def _with_glare(scene, exposed):
    """Exposed light with the viewer's glare (``display.glare``) if it is the whole picture.

    Arrays of any other size (a band's or supersampling rays' own shading) are
    returned as they are: their picture is not the one shown.
    """
    height, width = scene["image.height"], scene["image.width"]
    if not scene["display.glare"] or exposed.shape[0] != height * width:
        return exposed
    pixel_deg = scene["display.viewing_angle"] / width
    picture = exposed.reshape((height, width) + exposed.shape[1:])
    return add_glare(picture, pixel_deg).reshape(exposed.shape)


def scene_scalar_pixels(scene, intensity, white):
    """8-bit pixels of a scalar image by the scene's display keys and ``output.exposure``."""
    x = _with_glare(scene, scene["output.exposure"] * np.asarray(intensity, dtype=float) / white)
    return scalar_pixels(x, 1.0, 1.0, scene["display.scaling"], scene["display.decades"],
                         scene["display.colour_map"])


def scene_colour_pixels(scene, rgb, reference_y):
    """(8-bit, 16-bit) pixels of linear sRGB (in gamut or not) by the scene's colour rule.

    Negative channels are first desaturated toward grey of equal luminance
    (:func:`render.light.color.desaturate_into_gamut`), then multiplied by
    ``output.exposure / reference_y`` (a white of luminance ``reference_y`` is
    exposed to 1), then shown by ``display.colour_rule``.
    """
    exposed = _with_glare(scene, desaturate_into_gamut(rgb) * (scene["output.exposure"]
                                                             / reference_y))
    return colour_pixels(colour_display(exposed, scene["display.colour_rule"]))
