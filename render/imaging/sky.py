"""The celestial sphere at infinity: escape directions, panoramas and point-source stars.

Sky coordinates
---------------
The sky is a sphere at r = infinity, labelled by the Boyer–Lindquist angles
(theta, phi) at which a ray arrives there (the spacetime is asymptotically
flat, so these are ordinary spherical angles far away).  An escaping camera
ray is followed past the camera's radius to u = 1/r = 0 exactly
(:func:`escape_directions`), so its (theta_inf, phi_inf) carry no truncation
error.  The camera's frame and velocity enter through the ray's initial state
(:func:`render.camera.observers.camera_rays`), so aberration is included.

Panoramas
---------
An equirectangular image (width = 2 x height) covers the sphere: row 0 is the
north pole (theta = 0, along the spin axis), the bottom row the south pole,
and phi grows to the *left*, as on a sky chart seen from inside the sphere,
so the panorama is not mirrored: column c spans phi = 2 pi (1 - (c + 1)/W)
to 2 pi (1 - c/W).  phi = 0 is the left and right edge; phi = 180 deg, which
is behind the hole for a camera at azimuth 0, the middle column.  Values are
decoded from sRGB to linear light and looked up bilinearly.

Stars
-----
Stars are points: each has a direction, a flux and a temperature, and is
never looked up like a texture.  The lens map (pixel -> sky direction) is made
piecewise linear on the triangles between neighbouring pixel centres; a star
inside a sky triangle has an image inside the matching image triangle, at the
same barycentric coordinates, with magnification mu = 1/|det J|, J the
Jacobian of the lens map in solid-angle terms (Schneider, Ehlers & Falco
1992, sec. 5.1): det J is found per pixel from central differences of the
neighbouring rays (:func:`inverse_magnification`) and interpolated
barycentrically to the star (second-order accurate); in a triangle where det
J changes sign (a fold of the lens map, e.g. on the Einstein ring of an
aligned star) the triangle's own ratio Omega_image / Omega_sky is used, which
stays finite.  Its flux mu F is split
bilinearly over the four pixels of the cell (flux-conserving, sub-pixel
positioned).  Summed over all triangles this gives every image of every
star, including the secondary images inside the Einstein ring.  Triangles
whose corners are not all escaped rays, or whose sky corners lie more than
``MAX_TRIANGLE_RAD`` apart (near the critical curve the lens map folds
faster than the pixel grid samples it), are skipped and counted: their
magnification is tiny (a large sky triangle mapped onto a small image one).
Solid angles of triangles are those of Van Oosterom & Strackee (1983).

A star's light is a blackbody of temperature T: seen with the sky photon's
redshift factor g (the camera's energy_ratio, photon energy at the camera per
energy at infinity) its bolometric flux is g^4 mu F and its colour that of a
blackbody at g T (I_nu / nu^3 is invariant).

References
----------
Van Oosterom & Strackee (1983), IEEE Trans. Biomed. Eng. 30, 125.
Schneider, Ehlers & Falco (1992), Gravitational Lenses (Springer), sec. 5.1.
"""

import math
from dataclasses import dataclass

import numpy as np
from numba import njit, prange

from ..light.cie import blackbody_xyz_at_log
from ..guards.reading import InputFileError, open_bounded
from ..geodesics.integrator import deferred_interrupts
from ..light.cie import blackbody_xyz_table

__all__ = ["BACKDROPS", "StarField", "inverse_magnification", "sky_vectors", "load_panorama",
           "sample_panorama", "star_field", "splat_stars", "pixel_solid_angle",
           "camera_vectors", "sample_panorama_image", "SkyImageError", "PanoramaMemoryError",
           "BRIGHTEST_MAGNITUDE", "FAINTEST_MAGNITUDE"]

BACKDROPS = ("none", "stars", "image")
# Magnitude range of the procedural stars (flux ratio 10^3.2 between the ends).
BRIGHTEST_MAGNITUDE = 0.0
FAINTEST_MAGNITUDE = 8.0
SQUARE_DEGREES_ON_SKY = 4.0 * math.pi * (180.0 / math.pi) ** 2   # 41252.96
# Sky triangles wider than this are not used for stars (see the module docstring).
MAX_TRIANGLE_RAD = 0.2
# Star bins on the sky: 1 degree in theta and in phi.
N_THETA_BINS = 180
N_PHI_BINS = 360
# Largest panorama read (pixels), so a hostile file cannot exhaust memory.
MAX_PANORAMA_PIXELS = 64_000_000
# Largest panorama file read (bytes); a compressed image of the largest size is far smaller.
MAX_PANORAMA_FILE_BYTES = 256 * 1024 * 1024
# Peak bytes per pixel while a panorama is decoded: the 8-bit RGB array (3) beside
# Pillow's image (4) or beside the float64 texture made from it (24), rounded up.
PANORAMA_BYTES_PER_PIXEL = 32


class SkyImageError(ValueError):
    """A panorama that cannot be used; the message is one line for the user."""


class PanoramaMemoryError(SkyImageError):
    """A panorama whose decoded pixels would take more memory than allowed."""


# --- Escape directions ------------------------------------------------------------------


def sky_vectors(theta, phi):
    """Unit vectors (N, 3) of sky directions (x, y, z) with z along the spin axis.

    Examples
    --------
    >>> sky_vectors(np.array([0.0]), np.array([1.0])).round(12).tolist()
    [[0.0, 0.0, 1.0]]
    """
    theta, phi = np.broadcast_arrays(np.asarray(theta, dtype=float), np.asarray(phi, dtype=float))
    s = np.sin(theta)
    return np.stack([s * np.cos(phi), s * np.sin(phi), np.cos(theta)], axis=-1)


def camera_vectors(x, y, distance):
    """Unit look directions (N, 3) of image-plane points of a camera at ``distance`` M.

    Pixel (x, y) looks along (-1, x/r, y/r) in the camera's (r, phi, up) triad
    (:mod:`render.camera.observers`); only solid angles are taken from these vectors, and
    rotations do not change them.
    """
    d = np.stack([np.ones_like(x), np.asarray(x) / distance, np.asarray(y) / distance], axis=-1)
    return d / np.linalg.norm(d, axis=-1, keepdims=True)


def pixel_solid_angle(x, y, distance, pixel_size):
    """Solid angle (sr) of a camera pixel of side ``pixel_size`` M centred at (x, y).

    d Omega = (dx dy / r^2) / (1 + (x^2 + y^2)/r^2)^(3/2) for the pinhole of
    :mod:`render.camera.observers` (a plane at distance r seen from the pinhole).

    Examples
    --------
    >>> round(float(pixel_solid_angle(0.0, 0.0, 10.0, 1.0)), 12)
    0.01
    """
    rho2 = (np.asarray(x) ** 2 + np.asarray(y) ** 2) / distance ** 2
    return (pixel_size / distance) ** 2 / (1.0 + rho2) ** 1.5


# --- Panoramas --------------------------------------------------------------------------


def load_panorama(path, max_bytes=None):
    """Read an equirectangular panorama as linear-light RGB floats (H, W, 3).

    The file must be a regular file of at most ``MAX_PANORAMA_FILE_BYTES``
    (:func:`render.guards.reading.open_bounded`), and its size is checked from the
    image header *before* anything is decoded, so a small file that declares a
    huge image (a decompression bomb) costs nothing.

    Parameters
    ----------
    path : str or Path
        PNG, JPEG or any format Pillow reads; its width must be twice its height.
    max_bytes : float, optional
        Memory the decoded panorama may take (``PANORAMA_BYTES_PER_PIXEL`` per
        pixel at the peak of decoding); a larger one is refused.

    Returns
    -------
    ndarray (H, W, 3) of float64 in [0, 1] (sRGB decoded, IEC 61966-2-1).

    Raises
    ------
    SkyImageError
        Not a regular file, unreadable, too large, or an aspect other than 2:1.
    """
    from PIL import Image, UnidentifiedImageError

    try:
        with open_bounded(path, MAX_PANORAMA_FILE_BYTES) as handle, Image.open(handle) as image:
            width, height = image.size
            _check_panorama_size(width, height, max_bytes)
            rgb = np.asarray(image.convert("RGB"))
    except InputFileError as exc:
        raise SkyImageError(str(exc)) from None
    except SkyImageError:
        raise
    except (OSError, UnidentifiedImageError, ValueError, Image.DecompressionBombError) as exc:
        reason = getattr(exc, "strerror", None) or str(exc).splitlines()[0] or type(exc).__name__
        raise SkyImageError(f"cannot be read as an image ({reason})") from None
    return _SRGB_TO_LINEAR[rgb]


def _srgb_to_linear(value):
    """sRGB-encoded values in [0, 1] to linear light (IEC 61966-2-1)."""
    return np.where(value <= 0.04045, value / 12.92, ((value + 0.055) / 1.055) ** 2.4)


# Every 8-bit code decoded once: indexing with the image's bytes needs no float temporaries.
_SRGB_TO_LINEAR = _srgb_to_linear(np.arange(256) / 255.0)


def _check_panorama_size(width, height, max_bytes):
    """Refuse a panorama by its header: too many pixels, too much memory, or not 2:1."""
    pixels = width * height
    if pixels > MAX_PANORAMA_PIXELS:
        raise SkyImageError(f"is {width} x {height} pixels, too large (at most "
                            f"{MAX_PANORAMA_PIXELS} pixels)")
    needed = pixels * PANORAMA_BYTES_PER_PIXEL
    if max_bytes is not None and needed > max_bytes:
        raise PanoramaMemoryError(f"is {width} x {height} pixels, which take {needed / 1e9:.3g} GB "
                            f"decoded, more than the {max_bytes / 1e9:.3g} GB allowed")
    if width != 2 * height:
        raise SkyImageError(f"is {width} x {height} pixels; an equirectangular "
                            "panorama is twice as wide as it is high (2:1)")


@njit(cache=True, parallel=True, error_model="numpy")
def _sample(texture, theta, phi, out):
    height, width, channels = texture.shape
    for i in prange(theta.size):
        if not (math.isfinite(theta[i]) and math.isfinite(phi[i])):
            for c in range(channels):
                out[i, c] = 0.0
            continue
        # Continuous texel coordinates of the texel centres (see the module docstring).
        s = (1.0 - (phi[i] % (2.0 * math.pi)) / (2.0 * math.pi)) * width - 0.5
        t = theta[i] / math.pi * height - 0.5
        t = min(max(t, 0.0), height - 1.0)
        c0 = math.floor(s)
        r0 = min(int(math.floor(t)), height - 2) if height > 1 else 0
        fs = s - c0
        ft = t - r0 if height > 1 else 0.0
        a = int(c0) % width
        b = (a + 1) % width
        r1 = min(r0 + 1, height - 1)
        for c in range(channels):
            top = (1.0 - fs) * texture[r0, a, c] + fs * texture[r0, b, c]
            bottom = (1.0 - fs) * texture[r1, a, c] + fs * texture[r1, b, c]
            out[i, c] = (1.0 - ft) * top + ft * bottom


def sample_panorama(texture, theta, phi):
    """Bilinear lookup of a panorama (H, W, C) at sky directions; 0 where theta is NaN.

    Examples
    --------
    >>> tex = np.zeros((2, 4, 1)); tex[:, 1] = 1.0   # column 1 spans phi = 180..270 deg
    >>> float(sample_panorama(tex, np.array([np.pi / 2]), np.array([np.radians(225.0)]))[0, 0])
    1.0
    """
    theta = np.ascontiguousarray(theta, dtype=float).ravel()
    phi = np.ascontiguousarray(phi, dtype=float).ravel()
    out = np.empty((theta.size, texture.shape[2]))
    _sample(np.ascontiguousarray(texture, dtype=float), theta, phi, out)
    return out


def sample_panorama_image(height, seed=0):
    """A generated 2:1 panorama (sRGB uint8): a faint band of light and coloured haze.

    Made by the project for its examples and tests (no image is taken from
    elsewhere): a smooth random field from a few hundred seeded spherical
    waves, brightened along a great circle tilted 60 degrees to the equator.
    """
    rng = np.random.default_rng(seed)
    width = 2 * height
    theta = (np.arange(height) + 0.5) / height * np.pi
    phi = 2.0 * np.pi * (1.0 - (np.arange(width) + 0.5) / width)
    v = sky_vectors(theta[:, None], phi[None, :])
    field = np.zeros((height, width, 3))
    for _ in range(200):
        k = rng.normal(size=3)
        k *= rng.uniform(2.0, 12.0) / np.linalg.norm(k)
        field += rng.uniform(0.2, 1.0, size=3) * np.cos(v @ k + rng.uniform(0, 2 * np.pi))[..., None]
    field = 0.5 + field / (4.0 * np.abs(field).max())
    pole = np.array([0.0, np.sin(np.radians(60.0)), np.cos(np.radians(60.0))])
    band = np.exp(-((v @ pole) / 0.15) ** 2)[..., None]
    linear = np.clip(0.03 * field + 0.25 * band * field * np.array([1.0, 0.9, 0.75]), 0.0, 1.0)
    encoded = np.where(linear <= 0.0031308, 12.92 * linear,
                       1.055 * linear ** (1.0 / 2.4) - 0.055)
    return np.round(encoded * 255.0).astype(np.uint8)


# --- Stars ------------------------------------------------------------------------------


@dataclass
class StarField:
    """Point-source stars on the sphere at infinity.

    Attributes
    ----------
    directions : ndarray (S, 3)
        Unit vectors (x, y, z), z along the spin axis (:func:`sky_vectors`).
    flux : ndarray (S,)
        Unlensed flux at rest (units chosen by the caller).
    temperature : ndarray (S,)
        Blackbody temperature in K.
    """

    directions: np.ndarray
    flux: np.ndarray
    temperature: np.ndarray

    def __len__(self):
        return self.flux.size


def star_field(density, seed, brightest=BRIGHTEST_MAGNITUDE, faintest=FAINTEST_MAGNITUDE):
    """A seeded random star field with Euclidean counts and blackbody temperatures.

    Parameters
    ----------
    density : float
        Mean number of stars per square degree (over the whole sky).
    seed : int
        Seed of the random generator (the same seed gives the same sky).
    brightest, faintest : float
        Magnitude range; flux = 10^(-0.4 m), so a magnitude-0 star has flux 1.

    Returns
    -------
    StarField

    Notes
    -----
    Directions are uniform on the sphere.  Magnitudes follow dN/dm ~ 10^(0.6 m),
    i.e. N(> F) ~ F^(-3/2), the counts of uniformly spread sources in Euclidean
    space (common practice).  Temperatures are a plausible invented mixture:
    85% with log10 T ~ N(3.72, 0.08) (K and G stars, ~5200 K) and 15% with
    log10 T ~ N(4.0, 0.15) (A and B stars), clipped to 2500-40000 K.

    Examples
    --------
    >>> stars = star_field(1.0, seed=7)
    >>> abs(len(stars) - 41253) < 1000, bool(stars.flux.max() <= 1.0)
    (True, True)
    """
    rng = np.random.default_rng(seed)
    n = int(rng.poisson(density * SQUARE_DEGREES_ON_SKY))
    z = rng.uniform(-1.0, 1.0, n)
    azimuth = rng.uniform(0.0, 2.0 * np.pi, n)
    s = np.sqrt(1.0 - z * z)
    directions = np.stack([s * np.cos(azimuth), s * np.sin(azimuth), z], axis=-1)
    # Inverse CDF of dN/dm ~ 10^(0.6 m) on [brightest, faintest].
    lo, hi = 10.0 ** (0.6 * brightest), 10.0 ** (0.6 * faintest)
    magnitude = np.log10(lo + rng.uniform(0.0, 1.0, n) * (hi - lo)) / 0.6
    hot = rng.uniform(0.0, 1.0, n) < 0.15
    log_t = np.where(hot, rng.normal(4.0, 0.15, n), rng.normal(3.72, 0.08, n))
    temperature = np.clip(10.0 ** log_t, 2500.0, 40000.0)
    return StarField(directions, 10.0 ** (-0.4 * magnitude), temperature)


def _bin_stars(directions):
    """Sort stars into (theta, phi) bins: (order, start offsets of each bin)."""
    theta = np.arccos(np.clip(directions[:, 2], -1.0, 1.0))
    phi = np.arctan2(directions[:, 1], directions[:, 0]) % (2.0 * np.pi)
    t = np.minimum((theta / np.pi * N_THETA_BINS).astype(np.int64), N_THETA_BINS - 1)
    p = np.minimum((phi / (2.0 * np.pi) * N_PHI_BINS).astype(np.int64), N_PHI_BINS - 1)
    index = t * N_PHI_BINS + p
    order = np.argsort(index, kind="stable")
    starts = np.searchsorted(index[order], np.arange(N_THETA_BINS * N_PHI_BINS + 1))
    return order, starts


@njit(cache=True, inline="always")
def _solid_angle(ax, ay, az, bx, by, bz, cx, cy, cz):
    # Van Oosterom & Strackee (1983): tan(Omega/2) = |A.(B x C)| / (1 + A.B + B.C + C.A).
    triple = ax * (by * cz - bz * cy) + ay * (bz * cx - bx * cz) + az * (bx * cy - by * cx)
    denominator = 1.0 + (ax * bx + ay * by + az * bz) + (bx * cx + by * cy + bz * cz) + (
        cx * ax + cy * ay + cz * az)
    return 2.0 * math.atan2(abs(triple), denominator)


@njit(cache=True, inline="always")
def _blackbody_xyz(table, log_t, out):
    """XYZ of a blackbody at ln T into ``out`` (:func:`render.light.cie.blackbody_xyz_at_log`)."""
    out[0], out[1], out[2] = blackbody_xyz_at_log(table, log_t)


@njit(cache=True, error_model="numpy")
def _splat_triangle(corner_sky, corner_cam, corner_px, corner_g, corner_det, stars, flux, log_t,
                    order, starts, colour, table, out, counts, row, col):
    """Add the images of the stars inside one sky triangle; return 1 if it was skipped."""
    a = corner_sky[0]
    b = corner_sky[1]
    c = corner_sky[2]
    cos_limit = math.cos(MAX_TRIANGLE_RAD)
    if (a[0] * b[0] + a[1] * b[1] + a[2] * b[2] < cos_limit
            or b[0] * c[0] + b[1] * c[1] + b[2] * c[2] < cos_limit
            or c[0] * a[0] + c[1] * a[1] + c[2] * a[2] < cos_limit):
        return 1
    omega_sky = _solid_angle(a[0], a[1], a[2], b[0], b[1], b[2], c[0], c[1], c[2])
    if not omega_sky > 0.0:
        return 0
    p = corner_cam
    omega_cam = _solid_angle(p[0, 0], p[0, 1], p[0, 2], p[1, 0], p[1, 1], p[1, 2],
                             p[2, 0], p[2, 1], p[2, 2])
    mu_triangle = omega_cam / omega_sky
    # Where the lens map does not fold inside the triangle, interpolate the signed
    # inverse magnification of its corners (second order); else use the triangle's ratio.
    smooth = ((corner_det[0] > 0.0 and corner_det[1] > 0.0 and corner_det[2] > 0.0)
              or (corner_det[0] < 0.0 and corner_det[1] < 0.0 and corner_det[2] < 0.0))
    # Bounding box in bins, padded by one bin (edges are great circles).
    t_lo = 1e9
    t_hi = -1e9
    ph = np.empty(3)
    for k in range(3):
        t = math.acos(min(1.0, max(-1.0, corner_sky[k, 2])))
        t_lo = min(t_lo, t)
        t_hi = max(t_hi, t)
        ph[k] = math.atan2(corner_sky[k, 1], corner_sky[k, 0])
    for k in range(1, 3):
        ph[k] = ph[0] + (ph[k] - ph[0] + math.pi) % (2.0 * math.pi) - math.pi
    i_lo = int(math.floor(t_lo / math.pi * N_THETA_BINS)) - 1
    i_hi = int(math.floor(t_hi / math.pi * N_THETA_BINS)) + 1
    if i_lo <= 0 or i_hi >= N_THETA_BINS - 1:
        j_lo = 0
        j_hi = N_PHI_BINS - 1
        i_lo = max(i_lo, 0)
        i_hi = min(i_hi, N_THETA_BINS - 1)
    else:
        p_lo = min(ph[0], min(ph[1], ph[2]))
        p_hi = max(ph[0], max(ph[1], ph[2]))
        j_lo = int(math.floor(p_lo / (2.0 * math.pi) * N_PHI_BINS)) - 1
        j_hi = int(math.floor(p_hi / (2.0 * math.pi) * N_PHI_BINS)) + 1
        if j_hi - j_lo >= N_PHI_BINS:
            j_lo = 0
            j_hi = N_PHI_BINS - 1
    # Normals of the three edge planes; a point is inside if on the same side of all.
    nab = np.cross(a, b)
    nbc = np.cross(b, c)
    nca = np.cross(c, a)
    centre = a + b + c
    ba = b - a
    ca = c - a
    plane = np.cross(ba, ca)
    plane2 = plane[0] * plane[0] + plane[1] * plane[1] + plane[2] * plane[2]
    xyz = np.empty(3)
    rest = np.empty(3)
    for i in range(i_lo, i_hi + 1):
        for jj in range(j_lo, j_hi + 1):
            j = jj % N_PHI_BINS
            bin_index = i * N_PHI_BINS + j
            for q in range(starts[bin_index], starts[bin_index + 1]):
                m = order[q]
                s = stars[m]
                if s[0] * centre[0] + s[1] * centre[1] + s[2] * centre[2] <= 0.0:
                    continue
                d1 = s[0] * nab[0] + s[1] * nab[1] + s[2] * nab[2]
                d2 = s[0] * nbc[0] + s[1] * nbc[1] + s[2] * nbc[2]
                d3 = s[0] * nca[0] + s[1] * nca[1] + s[2] * nca[2]
                if not ((d1 >= 0.0 and d2 >= 0.0 and d3 >= 0.0)
                        or (d1 <= 0.0 and d2 <= 0.0 and d3 <= 0.0)):
                    continue
                # Barycentric coordinates where the star's direction meets the triangle's plane.
                sn = s[0] * plane[0] + s[1] * plane[1] + s[2] * plane[2]
                if sn == 0.0:
                    continue
                tt = (a[0] * plane[0] + a[1] * plane[1] + a[2] * plane[2]) / sn
                hx = tt * s[0] - a[0]
                hy = tt * s[1] - a[1]
                hz = tt * s[2] - a[2]
                # lb = ((hit x ca) . plane) / |plane|^2, lc = ((ba x hit) . plane) / |plane|^2
                lb = ((hy * ca[2] - hz * ca[1]) * plane[0] + (hz * ca[0] - hx * ca[2]) * plane[1]
                      + (hx * ca[1] - hy * ca[0]) * plane[2]) / plane2
                lc = ((ba[1] * hz - ba[2] * hy) * plane[0] + (ba[2] * hx - ba[0] * hz) * plane[1]
                      + (ba[0] * hy - ba[1] * hx) * plane[2]) / plane2
                la = 1.0 - lb - lc
                fx = la * corner_px[0, 0] + lb * corner_px[1, 0] + lc * corner_px[2, 0]
                fy = la * corner_px[0, 1] + lb * corner_px[1, 1] + lc * corner_px[2, 1]
                g = la * corner_g[0] + lb * corner_g[1] + lc * corner_g[2]
                fx = min(max(fx, 0.0), 1.0)
                fy = min(max(fy, 0.0), 1.0)
                mu = mu_triangle
                if smooth:
                    mu = 1.0 / abs(la * corner_det[0] + lb * corner_det[1] + lc * corner_det[2])
                amount = flux[m] * mu
                if colour:
                    # A blackbody at T seen with factor g is one at g T (I_nu/nu^3 invariant);
                    # flux[m] is its luminance Y at rest.
                    _blackbody_xyz(table, log_t[m] + math.log(g), xyz)
                    _blackbody_xyz(table, log_t[m], rest)
                    scale = amount / rest[1]
                    for ch in range(3):
                        xyz[ch] *= scale
                else:
                    g2 = g * g
                    xyz[0] = amount * g2 * g2
                weights = ((1.0 - fx) * (1.0 - fy), fx * (1.0 - fy), (1.0 - fx) * fy, fx * fy)
                for w_index in range(4):
                    rr = row + (w_index // 2)
                    cc = col + (w_index % 2)
                    w = weights[w_index]
                    for ch in range(out.shape[2]):
                        out[rr, cc, ch] += w * xyz[ch]
                    counts[rr, cc] += w
    return 0


@njit(cache=True, parallel=True, error_model="numpy")
def _splat(sky, cam, g, det, ok, stars, flux, log_t, order, starts, colour, table, out, counts):
    height, width = ok.shape
    skipped = np.zeros(height, dtype=np.int64)
    # Cell row j writes pixel rows j and j + 1: even and odd rows in two passes never collide.
    for parity in range(2):
        n_rows = (height - 1 - parity + 1) // 2
        for jj in prange(n_rows):
            j = 2 * jj + parity
            if j >= height - 1:
                continue
            corner_sky = np.empty((3, 3))
            corner_cam = np.empty((3, 3))
            corner_px = np.empty((3, 2))
            corner_g = np.empty(3)
            corner_det = np.empty(3)
            for i in range(width - 1):
                if not (ok[j, i] and ok[j, i + 1] and ok[j + 1, i] and ok[j + 1, i + 1]):
                    continue
                for tri in range(2):
                    for k in range(3):
                        # Triangles (00, 01, 10) and (11, 10, 01) of the cell, (row, column).
                        if tri == 0:
                            dr = 1 if k == 2 else 0
                            dc = 1 if k == 1 else 0
                        else:
                            dr = 0 if k == 2 else 1
                            dc = 0 if k == 1 else 1
                        for e in range(3):
                            corner_sky[k, e] = sky[j + dr, i + dc, e]
                            corner_cam[k, e] = cam[j + dr, i + dc, e]
                        corner_px[k, 0] = dc
                        corner_px[k, 1] = dr
                        corner_g[k] = g[j + dr, i + dc]
                        corner_det[k] = det[j + dr, i + dc]
                    skipped[j] += _splat_triangle(corner_sky, corner_cam, corner_px, corner_g,
                                                  corner_det, stars, flux, log_t, order, starts, colour,
                                                  table, out, counts, j, i)
    return skipped


def inverse_magnification(sky, cam, ok=None):
    """Signed det of the lens map per pixel: (sky solid angle) / (image solid angle).

    Central differences of neighbouring pixel-centre directions (one-sided at
    the image border); NaN where a neighbour did not escape.  The sign is the
    image parity relative to an undeflected view (the camera's (look, right,
    up) triad is left-handed in sky coordinates, so an undeflected image has
    det = -1); its magnification is 1 / |det|.
    """
    if ok is None:
        ok = np.all(np.isfinite(sky), axis=-1)
    s = np.where(ok[..., None], sky, np.nan)
    s_y, s_x = np.gradient(s, axis=(0, 1))
    c_y, c_x = np.gradient(np.asarray(cam, dtype=float), axis=(0, 1))
    sky_area = np.einsum("...i,...i", np.cross(s_x, s_y), s)
    cam_area = np.einsum("...i,...i", np.cross(c_x, c_y), cam)
    return sky_area / cam_area


def splat_stars(stars, sky, cam, g, colour=False, cells=None):
    """Images of point-source stars on a pixel grid, with their lensing magnification.

    Parameters
    ----------
    stars : StarField
    sky : ndarray (H, W, 3)
        Unit sky direction at infinity of each pixel-centre ray (NaN where the
        ray did not escape).
    cam : ndarray (H, W, 3)
        Unit look direction of each pixel centre in the camera's frame
        (:func:`camera_vectors`).
    g : ndarray (H, W)
        Redshift factor of sky photons at each pixel centre (energy at the
        camera per energy at infinity; 1 for a camera at rest far away).
    colour : bool
        False: one channel, bolometric flux g^4 mu F.  True: CIE XYZ of a
        blackbody at g T with rest luminance Y = F, times mu (three channels).
    cells : (start, stop), optional
        Count skipped triangles only in the cell rows start..stop - 1 (cell row j
        lies between pixel rows j and j + 1): a band of rows traced with a halo
        of neighbouring rows counts only its own cells, so the bands' counts add
        up to the whole image's.

    Returns
    -------
    flux : ndarray (H, W, 1 or 3)
        Flux landing in each pixel (units of ``stars.flux``).
    images : ndarray (H, W)
        Star images per pixel (bilinear weights summed).
    skipped : int
        Sky triangles left out as too wide (see the module docstring).

    References
    ----------
    Van Oosterom & Strackee (1983); Schneider, Ehlers & Falco (1992), sec. 5.1.
    """

    height, width = g.shape
    ok = np.all(np.isfinite(sky), axis=-1) & np.isfinite(g) & (g > 0)
    out = np.zeros((height, width, 3 if colour else 1))
    counts = np.zeros((height, width))
    if len(stars) == 0 or height < 2 or width < 2:
        return out, counts, 0
    order, starts = _bin_stars(stars.directions)
    det = np.nan_to_num(inverse_magnification(sky, cam, ok), nan=0.0)
    with deferred_interrupts():
        skipped = _splat(np.ascontiguousarray(np.where(ok[..., None], sky, 0.0)),
                         np.ascontiguousarray(cam, dtype=float),
                         np.ascontiguousarray(np.where(ok, g, 1.0)), np.ascontiguousarray(det),
                         ok,
                         np.ascontiguousarray(stars.directions, dtype=float),
                         np.ascontiguousarray(stars.flux, dtype=float),
                         np.log(np.ascontiguousarray(stars.temperature, dtype=float)),
                         order, starts.astype(np.int64), bool(colour),
                         np.ascontiguousarray(blackbody_xyz_table()), out, counts)
    if cells is not None:
        skipped = skipped[cells[0]:cells[1]]
    return out, counts, int(skipped.sum())
