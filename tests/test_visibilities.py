"""Visibilities of stills: conventions, the pixel window, rings (Johnson et al. 2020)."""

import numpy as np
import pytest
from scipy import special

from render.light.observing import pixel_angle_rad
from render.measure.visibilities import (first_null_diameter, radial_profile,
                                         sample_visibilities, thin_ring_fit, visibility_grid)

PIXEL = 1e-10   # rad; only the products u * PIXEL matter


def _box_gaussian(shape, sigma, x0, y0):
    """Pixel values = the exact flux of a unit Gaussian (centre x0 right, y0 up) in each box.

    Independent of the code: erf differences (scipy), pixel side 1, image centre at 0.
    """
    height, width = shape
    xe = np.arange(width + 1) - 0.5 * width
    ye = 0.5 * height - np.arange(height + 1)
    cx = np.diff(special.ndtr((xe - x0) / sigma))
    cy = -np.diff(special.ndtr((ye - y0) / sigma))
    return np.outer(cy, cx)


def test_gaussian_transform_with_its_phase_sign():
    # Fourier transform of a Gaussian (common practice): exp(-2 pi^2 sigma^2 rho^2), and the
    # shift theorem with V = sum F exp(-2 pi i (u l + v m)), l east = -x, m north = y
    # (Thompson, Moran & Swenson 2017, eq. 3.7).  Box integrals + the window correction
    # make this exact but for aliasing: within |u|, |v| <= 1/4 per pixel the nearest alias
    # lies beyond 3/4, where the transform is exp(-2 pi^2 sigma^2 (3/4)^2) ~ 1e-11.
    sigma, x0, y0 = 1.5, 3.0, -2.0
    image = _box_gaussian((40, 40), sigma, x0, y0)
    grid = visibility_grid(image, PIXEL, padding=2)
    uu, vv = np.meshgrid(grid.u * PIXEL, grid.v * PIXEL)   # cycles per pixel
    expected = (np.exp(-2 * np.pi ** 2 * sigma ** 2 * (uu ** 2 + vv ** 2))
                * np.exp(-2j * np.pi * (uu * (-x0) + vv * y0)))
    inner = (np.abs(uu) <= 0.25) & (np.abs(vv) <= 0.25)
    assert np.max(np.abs(grid.vis - expected)[inner]) < 1e-9
    direct = sample_visibilities(image, PIXEL, [0.1 / PIXEL, -0.2 / PIXEL], [0.05 / PIXEL, 0.0])
    wanted = [np.exp(-2 * np.pi ** 2 * sigma ** 2 * (0.01 + 0.0025))
              * np.exp(-2j * np.pi * (0.1 * -x0 + 0.05 * y0)),
              np.exp(-2 * np.pi ** 2 * sigma ** 2 * 0.04) * np.exp(-2j * np.pi * (-0.2 * -x0))]
    assert np.allclose(direct, wanted, atol=1e-9)


def test_parseval():
    # Parseval's theorem for the DFT: sum |image|^2 = sum |V w|^2 / N^2, w the pixel window
    # divided out (the padding adds zeros only).  Holds to rounding (1e-12 relative).
    rng = np.random.default_rng(3)
    image = rng.random((24, 20))
    grid = visibility_grid(image, PIXEL, padding=3)
    window = np.sinc(grid.u[None, :] * PIXEL) * np.sinc(grid.v[:, None] * PIXEL)
    n = grid.u.size
    assert np.sum(np.abs(grid.vis * window) ** 2) / n ** 2 == pytest.approx(
        np.sum(image ** 2), rel=1e-12)


def _blurred_ring(shape, diameter, sigma, points=3000):
    t = np.linspace(0.0, 2 * np.pi, points, endpoint=False)
    image = np.zeros(shape)
    for x0, y0 in zip(0.5 * diameter * np.cos(t), 0.5 * diameter * np.sin(t)):
        image += _box_gaussian(shape, sigma, x0, y0) / points
    return image


def test_thin_ring_follows_j0_and_gives_its_diameter():
    # A ring of diameter d has V = J0(pi d rho) (Johnson et al. 2020, eq. 5); blurred by a
    # Gaussian of width sigma, times exp(-2 pi^2 sigma^2 rho^2) (convolution theorem).
    # The ring is 3000 points (spacing 0.03 pixel << sigma) and aliases enter below
    # rho = 0.15 per pixel only through exp(-2 pi^2 sigma^2 0.85^2) ~ 1e-6: bound 1e-4.
    d, sigma = 30.0, 1.0
    image = _blurred_ring((64, 64), d, sigma)
    grid = visibility_grid(image, PIXEL, padding=4)
    rho_2d = np.hypot(grid.u[None, :], grid.v[:, None]) * PIXEL
    expected = special.j0(np.pi * d * rho_2d) * np.exp(-2 * np.pi ** 2 * sigma ** 2 * rho_2d ** 2)
    inner = rho_2d < 0.15
    assert np.max(np.abs(grid.vis - expected)[inner]) < 1e-4
    rho, amp, _ = radial_profile(grid)
    rho_px = rho * PIXEL
    diameter, _ = first_null_diameter(rho_px, amp)
    assert diameter == pytest.approx(d, rel=0.02)    # the grid step is 1/256 of a cycle
    fitted, error, _, rms = thin_ring_fit(rho_px, amp)
    assert rms < 0.02     # the blur: exp(-2 pi^2 sigma^2 rho^2) departs from |J0| slowly
    assert fitted == pytest.approx(d, rel=0.01)      # the blur lowers |V| only slowly
    assert 0.0 < error < 0.01 * d


def _bump_profile(path):
    # A smooth emissivity (Gaussian in r, 8 +- 0.8 M): the direct image has no sharp edge,
    # so at long baselines the thin lensed rings ring alone.
    r = np.linspace(6.0, 12.0, 601)
    np.savetxt(path, np.column_stack([r, np.exp(-0.5 * ((r - 8.0) / 0.8) ** 2)]),
               delimiter=",", header="r,emissivity", comments="")
    return path


def test_face_on_schwarzschild_rings_set_the_long_baseline_period(small_scene, tmp_path):
    # Johnson et al. (2020): a thin ring of diameter d makes |V| ring with period 1/d in
    # baseline length.  The first lensed image (order 1) of a transparent face-on disk is
    # such a ring; its diameter is measured on the image itself (the intensity-weighted
    # mean of 2 |(alpha, beta)| over the pixels where order 1 shines).  The period of
    # |V| between 1 and 3 cycles per M, found by a periodogram, must match it within 2 %
    # (the ring's width, 0.2 M, spreads its diameter by ~2 %).
    from render.imaging.still import render_still

    fov, width = 24.0, 256
    scene = small_scene(**{
        "image.width": width, "image.height": width, "observer.inclination": 0.0,
        "black_hole.spin": 0.0, "disk.surface": "transparent", "disk.orders": 3,
        "disk.outer_radius": 12.0, "observer.field_of_view": fov, "emission.law": "profile",
        "emission.profile": str(_bump_profile(tmp_path / "bump.csv")), "output.npz": False})
    result = render_still(scene)
    weight = np.where(result.on_disk[1], result.intensity, 0.0)
    ring = 2.0 * np.sum(np.hypot(result.alpha, result.beta) * weight) / np.sum(weight)
    grid = visibility_grid(result.intensity, fov / width, padding=4)   # u in cycles per M
    rho, amp, _ = radial_profile(grid)
    band = (rho >= 1.0) & (rho <= 3.0)
    r, a = rho[band], amp[band] / amp[0]
    a = a - np.polyval(np.polyfit(r, a, 2), r)     # remove the slow decline
    trial = np.linspace(5.0, 30.0, 5001)
    power = np.abs(np.exp(-2j * np.pi * np.outer(trial, r)) @ a)
    assert trial[np.argmax(power)] == pytest.approx(ring, rel=0.02)
    assert 2 * np.sqrt(27.0) < ring < 12.0   # outside the critical curve, as order 1 is


def test_still_writes_visibilities_and_samples_baselines(small_scene, tmp_path):
    # Files and units: baselines in metres at the observing frequency (lambda = c / nu,
    # astropy's c) agree with the same baselines in G-lambda, and with the grid at grid
    # points (the direct transform and the FFT are the same sum: 1e-9 relative).
    from astropy import constants

    from render.api import make_still

    nu = 230e9
    metres = np.array([[0.0, 0.0], [3.0e6, -1.0e6], [-5.0e6, 2.0e6]])
    (tmp_path / "m.csv").write_text("u_m,v_m\n" + "\n".join(f"{u},{v}" for u, v in metres))
    scene = small_scene(**{"image.width": 32, "image.height": 32,
                           "observing.mode": "monochromatic", "observing.frequency": nu,
                           "emission.law": "novikov_thorne", "visibilities.compute": True,
                           "visibilities.baselines": str(tmp_path / "m.csv")})
    from render.errors import NullrayWarning

    with pytest.warns(NullrayWarning, match="not a thin ring"):   # a 32 x 32 disk image
        result, paths = make_still(scene, tmp_path / "out")
    table = np.genfromtxt(paths["baselines_csv"], delimiter=",", names=True)   # one header row
    wavelength = constants.c.si.value / nu
    assert np.allclose(table["u_glambda"], metres[:, 0] / wavelength / 1e9)
    total = np.nansum(result.products["flux_density_jy"])
    assert table["re"][0] == pytest.approx(total, rel=1e-9)   # V(0, 0) = total flux
    with np.load(paths["visibilities_npz"]) as data:
        middle = data["u_glambda"].size // 2
        assert data["vis"][middle, middle].real == pytest.approx(total, rel=1e-9)
        u_k, v_k = data["u_glambda"][middle + 3] * 1e9, data["v_glambda"][middle - 2] * 1e9
        on_grid = data["vis"][middle - 2, middle + 3]
    direct = sample_visibilities(result.products["flux_density_jy"], pixel_angle_rad(scene),
                                 [u_k], [v_k])
    assert np.allclose(direct, on_grid, rtol=1e-9, atol=1e-12 * total)
    assert "ring_diameter_fit_uas" in result.metadata["visibilities"]


def test_the_first_zero_of_j0_is_scipys():
    from scipy import special

    from render.measure.visibilities import J0_FIRST_ZERO

    assert J0_FIRST_ZERO == pytest.approx(float(special.jn_zeros(0, 1)[0]), rel=1e-15)


def test_a_uniform_disk_is_not_taken_for_a_thin_ring():
    # A uniform disk of diameter D has |V| = |2 J1(pi D rho) / (pi D rho)| (the Airy
    # pattern; Thompson, Moran & Swenson 2017, sec. 10.1): its nulls are those of J1, not
    # J0, and its lobes fall as rho^-3/2 faster, so |J0| cannot follow it: the fit's rms
    # residual must stay above the 10 % that marks a ring-like profile (a blurred ring
    # above gives 1.4 %).
    rho = np.linspace(0.0, 0.2, 801)
    x = np.pi * 30.0 * np.maximum(rho, 1e-12)
    amplitude = np.abs(2.0 * special.j1(x) / x)
    diameter, _, _, rms = thin_ring_fit(rho, amplitude)
    assert not rms < 0.1


def test_a_disk_still_with_visibilities_warns_instead_of_failing(tmp_path):
    # Regression: the thermal-bolometric example with visibilities.compute stopped with a
    # traceback (curve_fit's "Optimal parameters not found") since its disk's profile has a
    # shallow ripple for a null and no J0 shape.  Now the still and its visibilities are
    # written, the fit's diameter is NaN or flagged, and one warning says why.
    from render import load_scene
    from render.api import make_still
    from render.errors import NullrayWarning

    repo = __import__("pathlib").Path(__file__).resolve().parents[1]
    scene = load_scene(repo / "scenes" / "thermal-bolometric.yaml",
                       ["image.width=128", "image.height=72", "visibilities.compute=true",
                        "output.fits=false"])
    with pytest.warns(NullrayWarning, match="not a thin ring"):
        result, paths = make_still(scene, tmp_path)
    assert paths["visibilities_npz"].exists()
    info = result.metadata["visibilities"]
    assert not info["ring_fit_rms_relative"] <= 0.1
