"""Interferometric visibilities of a still: the Fourier transform of its sky brightness.

Conventions
-----------
* Sky coordinates: l points east and m north, in radians, with the phase centre at
  the image centre (the point alpha = beta = 0).  The stills show the sky with north
  up and east to the LEFT, so l = -x and m = y for x right, y up.
* Baselines (u, v) are in wavelengths (G-lambda in files), u towards east, v north,
  and V(u, v) = sum over pixels F_j exp(-2 pi i (u l_j + v m_j)) (Thompson, Moran
  & Swenson 2017, eq. 3.7, with the sign of the exponent as there); V(0, 0) is the
  total flux and V(-u, -v) = conj V(u, v) for a real image.
* Pixels are boxes: a pixel's value F_j is the flux within its square of side d
  (the image is the sky convolved with the box and sampled), so the transform of
  the samples is divided by the box's transform sinc(u d) sinc(v d)
  (numpy's sinc(x) = sin(pi x)/(pi x)); on the FFT grid |u|, |v| <= 1/(2 d), where
  the window is at least 2/pi, so the division is safe.
* The FFT grid is zero-padded to ``padding`` times the larger image side (square),
  so its spacing is 1 / (padding N d).

References
----------
Thompson, Moran & Swenson (2017), Interferometry and Synthesis in Radio Astronomy,
3rd ed., ch. 3 and 5.
Johnson et al. (2020), Science Advances 6, eaaz1310 (a thin ring's visibility
J0(pi d rho) and its ringing at long baselines).
"""

from dataclasses import dataclass

import warnings

import numpy as np

__all__ = ["VisibilityGrid", "visibility_grid", "sample_visibilities", "radial_profile",
           "first_null_diameter", "thin_ring_fit", "pixel_window", "J0_FIRST_ZERO"]

# The first zero of J0 (Abramowitz & Stegun 1964, table 9.5; tests check it with scipy).
J0_FIRST_ZERO = 2.404825557695773


@dataclass
class VisibilityGrid:
    """Complex visibilities on a square (u, v) grid (wavelengths), centred on (0, 0).

    ``vis[j, k]`` is V(u[k], v[j]); ``u`` and ``v`` increase with the index.
    """

    u: np.ndarray
    v: np.ndarray
    vis: np.ndarray


def _sky_offsets(shape, pixel_rad):
    """(l, m) in rad of the pixel centres of an image (row 0 at the top, east to the left)."""
    height, width = shape
    x = (np.arange(width) + 0.5 - 0.5 * width) * pixel_rad
    y = (0.5 * height - np.arange(height) - 0.5) * pixel_rad
    return -x, y


def pixel_window(u, v, pixel_rad):
    """The square pixel's transform sinc(u d) sinc(v d) (1 at the origin)."""
    return np.sinc(np.asarray(u) * pixel_rad) * np.sinc(np.asarray(v) * pixel_rad)


def visibility_grid(image, pixel_rad, padding=4):
    """Visibilities of ``image`` (H, W; flux per pixel) on the zero-padded FFT grid.

    Parameters
    ----------
    image : ndarray (H, W)
        Flux per pixel (NaN counts as 0), row 0 at the top, east to the left.
    pixel_rad : float
        Pixel side d in radians.
    padding : int
        The transform is taken on a square of ``padding * max(H, W)`` pixels.

    Returns
    -------
    VisibilityGrid

    Examples
    --------
    >>> grid = visibility_grid(np.ones((4, 4)), 1e-10, padding=2)
    >>> float(round(abs(grid.vis[4, 4]), 12)), float(grid.u[4])    # V(0, 0) = total flux
    (16.0, 0.0)
    """
    image = np.nan_to_num(np.asarray(image, dtype=float))
    height, width = image.shape
    n = int(padding) * max(height, width)
    padded = np.zeros((n, n))
    # Index p runs north (m increasing) and q east (l increasing): flip both axes.
    padded[:height, :width] = image[::-1, ::-1]
    l_east, m_north = _sky_offsets(image.shape, pixel_rad)
    l0, m0 = l_east[-1], m_north[-1]   # the offsets of padded[0, 0]
    freq = np.fft.fftfreq(n, d=pixel_rad)
    transform = np.fft.fft2(padded)
    phase = np.exp(-2j * np.pi * (freq[None, :] * l0 + freq[:, None] * m0))
    vis = transform * phase / pixel_window(freq[None, :], freq[:, None], pixel_rad)
    return VisibilityGrid(np.fft.fftshift(freq), np.fft.fftshift(freq),
                          np.fft.fftshift(vis))


def sample_visibilities(image, pixel_rad, u, v, chunk=256):
    """V(u, v) at a list of baselines (wavelengths) by the direct transform, window corrected.

    Exact for the box-pixel image at any (u, v) (no gridding); cost pixels x baselines.

    Examples
    --------
    >>> image = np.zeros((3, 3)); image[1, 1] = 2.0      # a point at the phase centre
    >>> vis = sample_visibilities(image, 1e-10, [0.0, 1e9], [0.0, 0.0])
    >>> np.allclose(vis, 2.0 / np.sinc(np.array([0.0, 0.1])))   # the box window divided out
    True
    """
    image = np.nan_to_num(np.asarray(image, dtype=float))
    l_east, m_north = _sky_offsets(image.shape, pixel_rad)
    rows, cols = np.nonzero(image)
    flux, l, m = image[rows, cols], l_east[cols], m_north[rows]
    u = np.atleast_1d(np.asarray(u, dtype=float))
    v = np.atleast_1d(np.asarray(v, dtype=float))
    out = np.empty(u.size, dtype=complex)
    for start in range(0, u.size, chunk):
        uu, vv = u[start:start + chunk, None], v[start:start + chunk, None]
        out[start:start + chunk] = np.exp(-2j * np.pi * (uu * l + vv * m)) @ flux
    return out / pixel_window(u, v, pixel_rad)


def radial_profile(grid, bins=None):
    """Azimuthal mean of |V| in rings of baseline length: (rho, mean |V|, count).

    The rings are one grid spacing wide (default) up to the grid's edge along the axes.
    """
    du = grid.u[1] - grid.u[0]
    rho = np.hypot(grid.u[None, :], grid.v[:, None])
    if bins is None:
        bins = np.arange(0.0, grid.u.max() + du, du) + 0.5 * du
        bins = np.concatenate([[0.0], bins])
    index = np.digitize(rho.ravel(), bins) - 1
    keep = (index >= 0) & (index < bins.size - 1)
    count = np.bincount(index[keep], minlength=bins.size - 1)
    total = np.bincount(index[keep], weights=np.abs(grid.vis).ravel()[keep],
                        minlength=bins.size - 1)
    centre = np.bincount(index[keep], weights=rho.ravel()[keep], minlength=bins.size - 1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return centre / count, total / count, count


def first_null_diameter(rho, amplitude):
    """Ring diameter (rad) from the first minimum of a radial amplitude profile.

    A thin ring of diameter d has |V| = |J0(pi d rho)| V(0), whose first null lies at
    rho_0 = j_0,1 / (pi d); the minimum is refined by a parabola through its
    neighbours.  Returns (d, rho_0); NaN if the profile has no interior minimum.

    References
    ----------
    Johnson et al. (2020), Sci. Adv. 6, eaaz1310, sec. "Interferometric signatures".
    """
    rho, amplitude = np.asarray(rho), np.asarray(amplitude)
    ok = np.isfinite(amplitude) & np.isfinite(rho)
    rho, amplitude = rho[ok], amplitude[ok]
    minima = np.nonzero((amplitude[1:-1] < amplitude[:-2]) & (amplitude[1:-1] <= amplitude[2:]))[0]
    if minima.size == 0:
        return np.nan, np.nan
    k = minima[0] + 1
    y0, y1, y2 = amplitude[k - 1], amplitude[k], amplitude[k + 1]
    curvature = y0 - 2.0 * y1 + y2
    shift = 0.5 * (y0 - y2) / curvature if curvature > 0 else 0.0
    rho0 = rho[k] + shift * 0.5 * (rho[k + 1] - rho[k - 1])
    return J0_FIRST_ZERO / (np.pi * rho0), rho0


def thin_ring_fit(rho, amplitude, rho_max=None):
    """Least-squares fit of |V| = F |J0(pi d rho)| to a radial profile: (d, sigma_d, F, rms).

    The fit uses rho <= ``rho_max`` (default: up to the third null of the first-null
    estimate); sigma_d is the standard error from the fit's covariance scaled by the
    residual scatter (scipy.optimize.curve_fit, absolute_sigma=False), and ``rms`` the
    root-mean-square residual over the fitted points relative to F: how well a thin
    ring describes the profile at all.  All four are NaN when the profile has no null
    or the fit does not converge (an image that is not ring-like, such as a disk seen
    whole).

    References
    ----------
    Johnson et al. (2020), Sci. Adv. 6, eaaz1310 (the thin-ring model).
    """
    from scipy import optimize, special  # here: scipy.optimize costs ~1 s of every start

    rho, amplitude = np.asarray(rho), np.asarray(amplitude)
    failed = (np.nan, np.nan, np.nan, np.nan)
    d0, _ = first_null_diameter(rho, amplitude)
    if not np.isfinite(d0):
        return failed
    if rho_max is None:
        rho_max = float(special.jn_zeros(0, 3)[-1]) / (np.pi * d0)
    keep = np.isfinite(amplitude) & (rho <= rho_max)

    def model(r, flux, d):
        return flux * np.abs(special.j0(np.pi * d * r))

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", optimize.OptimizeWarning)
            (flux, d), cov = optimize.curve_fit(model, rho[keep], amplitude[keep],
                                                p0=(amplitude[keep][0], d0))
    except RuntimeError:   # no convergence within curve_fit's evaluation budget
        return failed
    if not (np.isfinite(cov[1, 1]) and flux != 0.0):
        return failed
    rms = np.sqrt(np.mean((amplitude[keep] - model(rho[keep], flux, d)) ** 2)) / abs(flux)
    return float(d), float(np.sqrt(cov[1, 1])), float(flux), float(rms)
