"""The image sensor: the sky behind the disk, and supersampled, filtered pixels.

What a still's picture shows, per pixel, is built here from the shaded rays
of :mod:`render.imaging.still`:

1. **Radiance of each ray** (linear): the disk's observed intensity (the
   bolometric ``intensity``, or CIE XYZ in ``true_colour``), plus, for a ray
   that escaped, the sky behind it: a panorama looked up at the ray's
   direction at infinity (:mod:`render.imaging.sky`).  Captured and unresolved rays
   add nothing (black); a ray that ended on an opaque disk sees no sky; a
   transparent disk's orders add over the sky, as in the core.
2. **Anti-aliasing** (``image.supersampling`` n > 1): pixels are refined with
   n x n stratified sub-pixel rays whose positions importance-sample the
   reconstruction filter (``box``: the pixel's square; ``tent``: the
   separable tent of radius one pixel, 1 - |x| per axis), so each refined
   pixel is the plain mean of its samples (filter importance sampling,
   Pharr, Jakob & Humphreys, Physically Based Rendering, 3rd ed., sec. 7.8 and
   13.9; the tent is the Bartlett filter).  With ``image.adaptive`` only
   pixels that differ from a 4-neighbour in fate, in the number of
   equatorial crossings (disk orders, photon rings) or in displayed
   brightness by more than ``image.refine_threshold`` are refined (the
   shadow edge, the disk edges, the rings); the others keep their centre ray.
3. **Stars** (``sky.backdrop: stars``): point sources splatted with their
   magnification from the pixel-centre rays (:func:`render.imaging.sky.splat_stars`);
   they are not supersampled (their images are already placed to sub-pixel
   accuracy and flux-conserving).
4. **Display**: the exposure rule of :mod:`render.light.color` on the sum.

The data maps (``r``, ``g``, ``fate``, ``intensity`` ...) stay those of the pixel
centres; the picture's linear values are the ``composite`` product, and the
samples per pixel the ``samples`` product.

Sky brightness, against the disk's white I_w (the fixed exposure rule's
white, or the luminance reference of ``true_colour``): a white panorama pixel
has intensity ``sky.brightness`` x I_w; stars are drawn as flux per pixel, a
magnitude-0 star whose whole flux lands in one pixel showing at
``sky.star_brightness`` x I_w (so stars look the same at any resolution).  Sky light reaching a camera
with redshift factor g (the camera's energy per energy at infinity) is
scaled by g^4 (bolometric; I_nu/nu^3 invariant); panorama colours are not
shifted, star colours are (a blackbody at g T).
"""

import functools
import math
from dataclasses import dataclass

import numpy as np

from ..geodesics.integrator import FATE_ESCAPED
from ..light.color import SRGB_LUMINANCE
from ..light.observing import exposure_white
from .tiling import HALO_ROWS
from ..errors import SceneError
from ..geodesics.tracing import escape_directions
from ..light.cie import xyz_to_linear_srgb_matrix
from ..light.color import xyz_to_linear_srgb
from ..light.display import scene_colour_pixels, scene_scalar_pixels
from ..light.observing import Shaded
from ..guards.reading import InputFileError, check_regular_file
from .sky import (PanoramaMemoryError, SkyImageError, camera_vectors, load_panorama, sample_panorama, sky_vectors,
                  splat_stars, star_field)
from .tiling import is_tileable

__all__ = ["FILTERS", "SENSOR_MODES", "check_sensor", "prepare_sky", "needs_sensor",
           "check_untiled", "halo_rows", "subpixel_offsets", "refine_mask", "finish_still"]

FILTERS = ("box", "tent")
# Share of tracing.memory_budget a decoded sky panorama may take; a tile takes a
# quarter (render.imaging.tiling.TILE_SHARE), the interpreter and libraries the rest.
PANORAMA_BUDGET_SHARE = 0.5
SENSOR_MODES = ("bolometric", "true_colour")
# What a preview renders (README, "Preview").
def _scene_error(message):

    return SceneError(message)


def needs_sensor(scene):
    """Whether a still has a sky or supersampling (and so goes through :func:`finish_still`)."""
    return scene["sky.backdrop"] != "none" or scene["image.supersampling"] > 1


def check_sensor(values):
    """Cross-key checks of the sky and anti-aliasing keys (called by scene validation)."""
    backdrop = values["sky.backdrop"]
    mode = values["observing.mode"]
    if backdrop != "none" and values["observer.placement"] != "camera":
        raise _scene_error(f"sky.backdrop = {backdrop!r} needs observer.placement = 'camera' "
                           "(a distant observer's whole image lies within a vanishing solid "
                           "angle of the sky)")
    if backdrop == "image" and values["sky.image"] is None:
        raise _scene_error("sky.backdrop = 'image' needs sky.image, an equirectangular (2:1) "
                           "panorama file")
    for key, active in (("sky.backdrop", backdrop != "none"),
                        ("image.supersampling", values["image.supersampling"] > 1)):
        if active and mode not in SENSOR_MODES:
            raise _scene_error(f"{key} = {values[key]!r} needs observing.mode = "
                               f"{' or '.join(repr(m) for m in SENSOR_MODES)} (got {mode!r})")


def check_untiled(values, plan):
    """A sky or supersampling in tiles needs shading that is per pixel (a fixed white).

    Each band is then traced with a halo of neighbouring rows (:func:`halo_rows`),
    so it equals the untiled render.  :func:`render.imaging.tiling.check_memory` already
    refuses a still that needs tiles but shades the whole image at once (the
    automatic colour exposure); this is the same rule, kept for callers that
    plan on their own.
    """

    if (plan.tiles > 1 and (values["sky.backdrop"] != "none" or values["image.supersampling"] > 1)
            and not is_tileable(values)):
        raise _scene_error(
            f"image.width x image.height = {values['image.width']} x {values['image.height']} "
            f"does not fit tracing.memory_budget = {values['tracing.memory_budget']:g} GB "
            "untiled, and its exposure needs the whole image at once; use a fixed colour "
            "exposure, a smaller image or a larger budget")


# Rows of neighbours a band of a tiled still is traced with, above and below its own.
# The refinement mask compares a pixel with its 4-neighbours (one row); a star image
# lands in a pixel from the cells (row pairs) above and below it, and those cells use
# the lens map's Jacobian at their corners, a central difference over one more row:
# two rows.  The haloed band starts on an even image row, so that the star kernel's
# two passes (even and odd cell rows) add into each pixel in the untiled order.


def halo_rows(rows, height):
    """The rows (first, stop) to trace for the band ``rows = (start, stop)`` of a tiled still.

    Examples
    --------
    >>> halo_rows((5, 9), 12), halo_rows((0, 4), 12), halo_rows((8, 12), 12)
    ((2, 11), (0, 6), (6, 12))
    """
    start, stop = rows
    first = max(0, start - HALO_ROWS - start % 2)
    return first, min(height, stop + HALO_ROWS)


@dataclass
class Sky:
    """A prepared sky: the panorama (linear RGB) or the star field, and its settings."""

    backdrop: str
    panorama: np.ndarray = None
    stars: object = None
    source: str = None


@functools.lru_cache(maxsize=4)
def _panorama(path, mtime_ns, size, max_bytes):

    texture = load_panorama(path, max_bytes)
    texture.setflags(write=False)   # shared by every render that uses this file
    return texture


@functools.lru_cache(maxsize=4)
def _stars(density, seed):

    stars = star_field(density, seed)
    for array in (stars.directions, stars.flux, stars.temperature):
        array.setflags(write=False)   # shared by every render with this density and seed
    return stars


def prepare_sky(scene):
    """Read the panorama or draw the stars of a scene; a bad file raises SceneError.

    Called before any tracing (the command line calls it before it makes any
    file); results are cached, so the render reuses them.
    """

    backdrop = scene["sky.backdrop"]
    if backdrop == "none":
        return Sky(backdrop)
    if backdrop == "stars":
        return Sky(backdrop, stars=_stars(float(scene["sky.star_density"]), int(scene["sky.seed"])))
    path = scene.side_file("sky.image")
    budget = scene["tracing.memory_budget"]
    try:
        stat = check_regular_file(path)
        texture = _panorama(str(path), stat.st_mtime_ns, stat.st_size,
                            budget * 1e9 * PANORAMA_BUDGET_SHARE)
    except InputFileError as exc:
        raise _scene_error(f"sky.image = {scene['sky.image']!r} {exc} (looked for {path})") from None
    except PanoramaMemoryError as exc:
        raise _scene_error(f"sky.image = {scene['sky.image']!r} {exc} (a panorama may use "
                           f"{PANORAMA_BUDGET_SHARE:.0%} of tracing.memory_budget = {budget:g} "
                           "GB; use a smaller image or a larger budget)") from None
    except SkyImageError as exc:
        raise _scene_error(f"sky.image = {scene['sky.image']!r} {exc}") from None
    return Sky(backdrop, panorama=texture, source=str(path))


# --- Anti-aliasing ----------------------------------------------------------------------


def _tent_inverse_cdf(u):
    """Inverse CDF of the tent 1 - |x| on [-1, 1] (exact)."""
    u = np.asarray(u, dtype=float)
    return np.where(u < 0.5, np.sqrt(2.0 * u) - 1.0, 1.0 - np.sqrt(2.0 * (1.0 - u)))


def subpixel_offsets(n, kind="tent"):
    """n x n sample offsets (pixel units, x right, y up) importance-sampling a filter.

    The strata are the n x n cells of the unit square, sampled at their
    centres (deterministic, so renders are reproducible) and mapped through
    the filter's inverse CDF per axis.

    Parameters
    ----------
    n : int
        Samples per axis.
    kind : {"box", "tent"}

    Returns
    -------
    ndarray (n * n, 2)

    References
    ----------
    Pharr, Jakob & Humphreys, Physically Based Rendering (3rd ed.), sec. 7.8, 13.9.

    Examples
    --------
    >>> subpixel_offsets(2, "box").tolist()
    [[-0.25, -0.25], [0.25, -0.25], [-0.25, 0.25], [0.25, 0.25]]
    """
    u = (np.arange(n) + 0.5) / n
    if kind == "box":
        axis = u - 0.5
    elif kind == "tent":
        axis = _tent_inverse_cdf(u)
    else:
        raise ValueError(f"filter must be one of {', '.join(FILTERS)}, got {kind!r}")
    x, y = np.meshgrid(axis, axis)
    return np.stack([x.ravel(), y.ravel()], axis=-1)


def refine_mask(fate, crossings, display, threshold):
    """Pixels that differ from a 4-neighbour in fate, crossings or displayed brightness.

    Parameters
    ----------
    fate, crossings : ndarray (H, W) of int
    display : ndarray (H, W)
        Displayed brightness in [0, 1] (after the exposure rule).
    threshold : float
        Smallest difference of ``display`` that counts.

    Returns
    -------
    ndarray (H, W) of bool

    Examples
    --------
    >>> f = np.zeros((3, 3), int); f[1, 1] = 1
    >>> refine_mask(f, np.zeros((3, 3), int), np.zeros((3, 3)), 0.1).astype(int).tolist()
    [[0, 1, 0], [1, 1, 1], [0, 1, 0]]
    """
    mask = np.zeros(fate.shape, dtype=bool)
    for axis in (0, 1):
        a = [slice(None)] * 2
        b = [slice(None)] * 2
        a[axis] = slice(1, None)
        b[axis] = slice(None, -1)
        a, b = tuple(a), tuple(b)
        differ = ((fate[a] != fate[b]) | (crossings[a] != crossings[b])
                  | (np.abs(display[a] - display[b]) > threshold))
        mask[a] |= differ
        mask[b] |= differ
    return mask


# --- One still's picture ----------------------------------------------------------------


def _white(observation, scene, shaded):
    white = exposure_white(observation, scene.inner_radius, scene["disk.outer_radius"])
    if white is None:   # the automatic colour exposure: the white the shading chose
        white = float(shaded.info["colour_reference_y"])
    return white


def _disk_radiance(observation, shaded):
    if observation.mode == "true_colour":
        return np.asarray(shaded.products["xyz"], dtype=float)
    return np.asarray(shaded.intensity, dtype=float)[:, None]


def _panorama_radiance(sky, observation, raw, bundle, scene, white, directions):
    """Sky radiance (N, C) behind each escaped ray (0 elsewhere)."""

    theta, phi = directions
    rgb = sample_panorama(sky.panorama, theta, phi)
    g = np.broadcast_to(np.asarray(bundle.energy_ratio, dtype=float), theta.shape)
    scale = scene["sky.brightness"] * white * g ** 4
    if observation.mode == "true_colour":
        value = rgb @ np.linalg.inv(xyz_to_linear_srgb_matrix()).T
    else:
        value = rgb @ np.array(SRGB_LUMINANCE)[:, None]
    value *= scale[:, None]
    value[raw["fate"] != FATE_ESCAPED] = 0.0
    return value


def _display(observation, scene, composite, white):
    """8-bit sRGB pixels (and 16-bit for true colour) of linear composite values."""

    if observation.mode == "true_colour":
        return scene_colour_pixels(scene, xyz_to_linear_srgb(composite), white)
    return scene_scalar_pixels(scene, composite[:, 0], white), None


def _brightness(observation, scene, composite, white):
    """Displayed brightness in [0, 1] (the refinement criterion)."""
    y = composite[:, 1] if observation.mode == "true_colour" else composite[:, 0]
    x = scene["output.exposure"] * np.clip(np.nan_to_num(y), 0.0, None) / white
    return x / (1.0 + x)


def finish_still(scene, observation, shaded, raw, bundle, alpha, beta, trace, own=None,
                 white=None, velocity=None):
    """Composite sky and disk, supersample, add stars; return the updated Shaded.

    Parameters
    ----------
    scene, observation :
        The scene and its prepared observation.
    shaded : Shaded
        The pixel centres' shading (:func:`render.light.observing.shade`).
    raw : dict
        The pixel centres' kernel output (with ``final_state`` for a camera sky).
    bundle : RayBundle
    alpha, beta : ndarray (H, W)
        Pixel centres in the image plane (M).
    trace : callable
        ``trace(x, y, bundle) -> (raw, shaded)``: traces and shades the extra
        rays of image-plane points (x, y) as the centre rays were
        (:func:`render.imaging.still.trace_and_shade`); only used with supersampling.
    own : (start, stop), optional
        Rows of the given arrays that are the band's own (a band of a tiled
        still traced with a halo of neighbouring rows, :func:`halo_rows`): only
        they are refined and counted, and only their values are meant to be
        kept; the halo rows give them the neighbours they have untiled.
        Default: all rows.
    white : float, optional
        The exposure's white (default: the still's own, as the observing mode sets it;
        a sequence passes its one white for all frames).
    velocity : array_like (3,), optional
        A moving camera's velocity (:func:`render.camera.observers.camera_rays`), for the extra rays.
    """
    height, width = alpha.shape
    rows = (0, height) if own is None else own
    _check_band_can_be_finished(scene, rows, height)
    sky = prepare_sky(scene)
    white = _white(observation, scene, shaded) if white is None else float(white)
    centre_dirs = None
    composite = _disk_radiance(observation, shaded).copy()
    if sky.backdrop != "none":
        centre_dirs = _sky_directions(scene, bundle, raw)
    if sky.backdrop == "image":
        composite += _panorama_radiance(sky, observation, raw, bundle, scene, white,
                                        centre_dirs)
    info = dict(shaded.info)
    samples = np.ones(height * width, dtype=np.int32)
    if scene["image.supersampling"] > 1:
        info["antialias"] = _supersample(scene, observation, sky, white, composite, samples,
                                         raw, alpha, beta, rows, trace, velocity)
    if sky.backdrop != "none":
        info["sky"] = _sky_info(scene, sky)
        if sky.backdrop == "stars":
            info["sky"].update(_add_stars(scene, observation, sky, composite, white, bundle,
                                          centre_dirs, alpha, beta, rows))
    return _finished(observation, scene, shaded, composite, samples, white, info)


def _check_band_can_be_finished(scene, rows, height):
    """Refuse a band of rows whose exposure needs the whole image at once."""
    if rows != (0, height):

        if not is_tileable(scene.values):
            raise _scene_error("observing.colour_exposure = 'auto' needs the whole image at "
                               "once; a band of rows cannot be finished alone")


def _sky_directions(scene, bundle, raw):
    """(theta, phi) at infinity of the escaped rays of a traced bundle."""

    return escape_directions(bundle, raw, scene.spin, scene["tracing.tolerance"],
                             scene["tracing.max_steps"])


def _pixels_to_refine(scene, observation, raw, composite, white, rows, shape):
    """Mask (H, W) of the band's own pixels that get sub-pixel rays."""
    if scene["image.adaptive"]:
        fate = raw["fate"].reshape(shape)
        crossings = np.minimum(raw["n_crossings"], scene["disk.orders"] + 1).reshape(shape)
        display = _brightness(observation, scene, composite, white).reshape(shape)
        mask = refine_mask(fate, crossings, display, scene["image.refine_threshold"])
    else:
        mask = np.ones(shape, dtype=bool)
    mask[:rows[0]] = False   # a halo row is only a neighbour here
    mask[rows[1]:] = False
    return mask


def _subpixel_points(scene, alpha, beta, chosen, n):
    """Image-plane points (x, y) of the n x n sub-pixel rays of the pixels ``chosen``.

    The filter's offsets are turned with the camera's roll, as the pixel grid is.
    """
    offsets = subpixel_offsets(n, scene["image.filter"])
    roll = math.radians(scene["observer.roll"])
    pixel = scene["observer.field_of_view"] / scene["image.width"]
    ox = (math.cos(roll) * offsets[:, 0] - math.sin(roll) * offsets[:, 1]) * pixel
    oy = (math.sin(roll) * offsets[:, 0] + math.cos(roll) * offsets[:, 1]) * pixel
    x = (alpha.ravel()[chosen][:, None] + ox[None, :]).ravel()
    y = (beta.ravel()[chosen][:, None] + oy[None, :]).ravel()
    return x, y


def _supersample(scene, observation, sky, white, composite, samples, raw, alpha, beta, rows,
                 trace, velocity):
    """Replace refined pixels of ``composite`` by their sub-pixel mean; return the counts.

    ``composite`` and ``samples`` are updated in place.
    """
    height, width = alpha.shape
    lo, hi = rows
    n = scene["image.supersampling"]
    mask = _pixels_to_refine(scene, observation, raw, composite, white, rows, (height, width))
    chosen = np.nonzero(mask.ravel())[0]
    x, y = _subpixel_points(scene, alpha, beta, chosen, n)
    if x.size:
        sub_bundle = scene.viewpoint().rays_at(x, y, velocity)
        sub_raw, sub_shaded = trace(x, y, sub_bundle)
        value = _disk_radiance(observation, sub_shaded)
        if sky.backdrop == "image":
            value = value + _panorama_radiance(sky, observation, sub_raw, sub_bundle, scene,
                                               white, _sky_directions(scene, sub_bundle, sub_raw))
        composite[chosen] = value.reshape(chosen.size, n * n, -1).mean(axis=1)
        samples[chosen] = n * n
    own_samples = samples[lo * width:hi * width]
    return {
        "supersampling": n, "filter": scene["image.filter"],
        "adaptive": scene["image.adaptive"], "pixels_refined": int(chosen.size),
        "pixels": int((hi - lo) * width),
        "samples_total": int(own_samples.sum()),
        "samples_per_pixel_mean": float(own_samples.mean()),
        "data_maps": "evaluated at pixel centres; only 'composite' and the picture are "
                     "supersampled"}


def _sky_info(scene, sky):
    """The metadata of a still's sky that does not depend on the band."""
    info = {"backdrop": sky.backdrop,
            "convention": "equirectangular: row 0 at theta = 0 (spin axis), phi grows "
                          "to the left, phi = 0 at the left and right edges"}
    if sky.backdrop == "image":
        info.update({"image": sky.source, "brightness": scene["sky.brightness"]})
    return info


def _add_stars(scene, observation, sky, composite, white, bundle, centre_dirs, alpha, beta,
               rows):
    """Add the star images seen by the pixel-centre rays to ``composite``; return their counts."""

    height, width = alpha.shape
    lo, hi = rows
    theta, phi = centre_dirs
    directions = sky_vectors(theta, phi).reshape(height, width, 3)
    cam = camera_vectors(alpha, beta, scene["observer.distance"])
    g = np.broadcast_to(np.asarray(bundle.energy_ratio, dtype=float),
                        theta.shape).reshape(height, width)
    colour = observation.mode == "true_colour"
    # A band counts the skipped triangles of its own cell rows only (cells lo..hi-1).
    flux, images, skipped = splat_stars(sky.stars, directions, cam, g, colour=colour,
                                        cells=(lo, hi))
    # Drawn as flux per pixel (a point source has no surface brightness to keep).
    composite += (flux * scene["sky.star_brightness"] * white).reshape(height * width, -1)
    return {"star_brightness": scene["sky.star_brightness"],
            "stars": len(sky.stars), "star_density_per_deg2": scene["sky.star_density"],
            "seed": scene["sky.seed"], "star_images": float(images[lo:hi].sum()),
            "sky_triangles_skipped": skipped, "magnitudes": "0 to 8, dN/dm ~ 10^(0.6 m)"}


def _finished(observation, scene, shaded, composite, samples, white, info):
    """The Shaded of a finished still: its picture, composite and sample counts."""

    pixels, pixels16 = _display(observation, scene, composite, white)
    products = dict(shaded.products)
    products["composite"] = composite[:, 0] if composite.shape[1] == 1 else composite
    products["samples"] = samples
    if pixels16 is not None:
        products["pixels16"] = pixels16
    return Shaded(intensity=shaded.intensity, pixels=pixels, products=products,
                  tables=shaded.tables, info=info)
