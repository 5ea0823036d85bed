"""Disk spectra and line profiles from ray-traced images."""

import numpy as np
import pytest
from scipy import integrate

from render import render_still
from render.errors import NullrayWarning
from render.light.emission import NovikovThorne
from render.light.spectra import flat_space_spectrum
from render.light.thermal import cgs, page_thorne_flux


def _line(small_scene, **values):
    base = {"observing.mode": "line", "disk.outer_radius": 30.0, "observer.field_of_view": 70.0,
            "observing.line_bins": 400, "observing.line_low": 0.2, "observing.line_high": 1.6}
    base.update(values)
    return render_still(small_scene(**base))


def test_face_on_schwarzschild_line_confined_to_gravitational_shifts(small_scene):
    # Standard result (e.g. Fabian et al. 1989): face-on, g = 1/u^t = sqrt(1 - 3/r) exactly,
    # so the line lies between sqrt(1 - 3/r_in) and sqrt(1 - 3/r_out) of the rest energy.
    r_in, r_out = 6.0, 30.0
    # Face on, the disk's sharp edges are sharp lines in g, where the grid converges only
    # at first order; a 5% sampling tolerance keeps this bounds check quick.
    result = _line(small_scene, **{"black_hole.spin": 0.0, "observer.inclination": 0.0,
                                   "disk.inner_radius": r_in, "disk.outer_radius": r_out,
                                   "observing.sampling_tolerance": 0.05})
    table = result.tables["line"]
    lit = table["counts"] > 0
    e0 = 6.4
    low, high = np.sqrt(1 - 3 / r_in) * e0, np.sqrt(1 - 3 / r_out) * e0
    bin_width = table["energy_high_kev"][0] - table["energy_low_kev"][0]
    assert table["energy_low_kev"][lit].min() >= low - bin_width
    assert table["energy_high_kev"][lit].max() <= high + bin_width
    assert np.isclose(table["counts"].sum(), 1.0)


def test_inclined_line_has_blue_peak_above_rest_energy(small_scene):
    # Doppler boosting of the approaching side (Fabian et al. 1989, fig. 1): at i = 60 deg
    # the brightest (blue) horn lies above the rest energy.
    result = _line(small_scene, **{"black_hole.spin": 0.0, "observer.inclination": 60.0,
                                   "observing.line_bins": 140})
    table = result.tables["line"]
    assert table["energy_kev"][np.argmax(table["counts"])] > 6.4


def test_line_flux_of_the_disk_grid_matches_a_fine_picture(small_scene):
    # Two samplings of the same integral F = (M/D)^2 int I dalpha dbeta (Cunningham 1975,
    # eq. 4): the line's energy flux from its own disk grid and the pixel sum of a
    # 256 x 256 picture of the whole disk.  The pixel sum is off by about a pixel along
    # the disk's edges (0.27 M against an inner edge of radius ~4 M at 60 deg, with
    # errors of both signs along it): 2% is several times what that gives.
    from render.light.observing import solid_angle_per_area_sr

    values = {"observing.mode": "line", "disk.outer_radius": 30.0,
              "observer.field_of_view": 70.0, "observer.inclination": 60.0,
              "image.width": 256, "image.height": 256}
    scene = small_scene(**values)
    result = render_still(scene)
    info = result.metadata["observing"]
    assert info["photons_outside_bins"] < 1e-12
    table = result.tables["line"]
    width = table["energy_high_kev"] - table["energy_low_kev"]
    grid_total = (table["energy_flux_per_kev"] * width).sum()
    picture_total = result.intensity.sum() * (70.0 / 256) ** 2 * solid_angle_per_area_sr(scene)
    assert abs(grid_total / picture_total - 1) < 0.02


def test_flat_space_spectrum_integrates_to_disk_luminosity():
    # Stefan–Boltzmann: int F_nu dnu = |cos i| L_face / (pi D^2), L_face = int 2 pi r F dr
    # (independent: scipy quad of the Page–Thorne flux).
    k = cgs()
    mass, mdot, spin, incl, dist = 10.0, 1e18, 0.5, 30.0, 1e4
    law = NovikovThorne(spin=spin, mass_msun=mass, accretion_rate_g_s=mdot)
    r_in, r_out = 4.233, 400.0
    nu = np.geomspace(1e13, 1e20, 3000)
    f_nu = flat_space_spectrum(law, nu, r_in, r_out, incl, mass, dist, points=6000) * k["Jy"]
    total = np.trapezoid(f_nu, nu) if hasattr(np, "trapezoid") else np.trapz(f_nu, nu)
    r_g = k["G"] * mass * k["M_sun"] / k["c"] ** 2
    face, _ = integrate.quad(lambda r: 2 * np.pi * r * r_g ** 2 * page_thorne_flux(r, spin, mass, mdot),
                             r_in, r_out, limit=400)
    expected = np.cos(np.radians(incl)) * face / (np.pi * (dist * k["pc"]) ** 2)
    # Grids: 3000 log frequencies and 6000 log radii, trapezoid rule: 1e-3.
    assert abs(total / expected - 1) < 1e-3


def test_image_spectrum_integrates_to_bolometric_image(small_scene):
    # int g^3 I_nu(nu/g) dnu = g^4 I (Misner, Thorne & Wheeler 1973, sec. 22.6): the
    # frequency integral of the ray-traced F_nu equals the summed bolometric image.
    from render.light.disk_integral import sample_disk
    from render.light.observing import disk_geometry, solid_angle_per_area_sr

    scene = small_scene(**{"emission.law": "novikov_thorne", "observing.mode": "spectrum",
                           "black_hole.mass": 10.0, "black_hole.distance": 8e3,
                           "observing.spectrum_low": 1e14, "observing.spectrum_high": 1e20,
                           "observing.spectrum_points": 1500})
    result = render_still(scene)
    k = cgs()
    table = result.tables["spectrum"]
    nu = table["frequency_hz"]
    f = table["flux_relativistic_jy"] * k["Jy"]
    total = np.trapezoid(f, nu) if hasattr(np, "trapezoid") else np.trapz(f, nu)
    # The bolometric flux on the same disk grid (the same samples: the grid is deterministic).
    samples = sample_disk(disk_geometry(scene), result.metadata["observing"]["disk_grid"]["cells"][0])
    law = NovikovThorne(spin=scene.spin, mass_msun=10.0,
                        accretion_rate_g_s=result.metadata["observing"]["accretion_rate_g_s"])
    with np.errstate(invalid="ignore"):
        bolometric = np.nansum(np.where(samples.hits, samples.g ** 4 * law.intensity(samples.r)
                                        * samples.weight, 0.0)) * solid_angle_per_area_sr(scene)
    assert abs(total / bolometric - 1) < 2e-3  # trapezoid on 1500 log frequencies
    # Relativistic and flat spectra differ (beaming, redshift) but agree in order of magnitude.
    ratio = table["flux_relativistic_jy"].max() / table["flux_flat_jy"].max()
    assert 0.3 < ratio < 3


def test_spread_histogram_spreads_uniformly_and_conserves_flux():
    # A value spread uniformly over [0.4, 0.6] puts half its weight in each of the two
    # bins it covers (exact arithmetic of a uniform distribution; common practice).
    from render.light.spectra import _spread_histogram

    edges = np.linspace(0.0, 1.0, 11)
    counts = _spread_histogram(np.array([0.5]), np.array([2.0]), np.array([0.1]),
                               np.array([0.1]), edges)
    expected = np.zeros(10)
    expected[4] = expected[5] = 1.0
    assert np.allclose(counts, expected, atol=1e-12)
    rng = np.random.default_rng(3)
    values = rng.uniform(0.2, 0.8, 500)
    weights = rng.uniform(0.0, 1.0, 500)
    below = rng.uniform(0.0, 0.1, 500)
    above = rng.uniform(0.0, 0.1, 500)
    spread_counts = _spread_histogram(values, weights, below, above, edges)
    # Everything lies inside [0, 1]: the total is conserved to rounding.
    assert abs(spread_counts.sum() - weights.sum()) < 1e-10


def test_pixel_spread_smooths_the_line_profile(small_scene):
    # The relativistic line of a smooth disk is a smooth function of energy (Fabian et
    # al. 1989; Laor 1991): spreading each pixel over its own range of g must remove the
    # bin-to-bin aliasing of a histogram of pixel centres without changing the total.
    from render.light.spectra import line_profile, redshift_spread
    from render.geodesics.tracing import trace_bundle
    from render.light.disk import on_disk, redshift_factor

    scene = small_scene(**{"black_hole.spin": 0.9, "observer.inclination": 40.0,
                           "image.width": 96, "image.height": 96})
    _, _, bundle = scene.viewpoint().rays()
    raw = trace_bundle(bundle, scene.spin, n_record=1, stop_on_disk=True,
                       r_in=scene.inner_radius, r_out=scene["disk.outer_radius"])
    g = redshift_factor(raw["r"], bundle.lam[:, None], scene.spin)
    hits = on_disk(raw["r"], scene.inner_radius, scene["disk.outer_radius"])
    emissivity = np.nan_to_num(raw["r"] ** -3.0)
    # Bins wide enough (0.05 .. 2 E0) that no flux falls outside them.
    plain, _, info_plain = line_profile(g, emissivity, hits, 6.4, 120, 0.05, 2.0)
    spread = redshift_spread(g, hits, 96, 96)
    smooth, _, info_smooth = line_profile(g, emissivity, hits, 6.4, 120, 0.05, 2.0,
                                          g_spread=spread)
    for info in (info_plain, info_smooth):
        assert info["line_flux_profile_sum"] == pytest.approx(info["line_flux_image_sum"],
                                                              rel=1e-9)

    def roughness(counts):
        return np.abs(np.diff(counts, 2)).sum()

    assert roughness(smooth["counts"]) < 0.5 * roughness(plain["counts"])


def test_line_of_a_distant_observer_does_not_depend_on_the_picture(small_scene):
    # The issue this guards against: a line summed over pixels changed with image.width
    # and was cropped by a small field of view.  The disk grid ignores both, exactly.
    small = render_still(small_scene(**{"observing.mode": "line", "observer.field_of_view": 6.0,
                                        "image.width": 16, "image.height": 16}))
    large = render_still(small_scene(**{"observing.mode": "line", "observer.field_of_view": 60.0,
                                        "image.width": 48, "image.height": 48}))
    for name, column in small.tables["line"].items():
        np.testing.assert_array_equal(column, large.tables["line"][name])
    assert not small.metadata["observing"]["warnings"]
    assert small.metadata["observing"]["disk_grid"]["converged"]


@pytest.mark.parametrize("field_of_view, cropped", [(12.0, True), (60.0, False)])
def test_camera_line_warns_that_it_sums_pixels_and_when_cropped(small_scene, field_of_view,
                                                                 cropped):
    # A camera at 1000 M sees a disk to 20 M at 60 deg about 40 M across (geometry:
    # 2 r_out; common practice), so a 12 M field of view crops it and a 60 M one does not.
    scene = small_scene(**{"observing.mode": "line", "observer.field_of_view": field_of_view,
                           "observer.placement": "camera", "observer.distance": 1000.0,
                           "image.width": 16, "image.height": 16})
    with pytest.warns(NullrayWarning, match="sums the pixels"):
        result = render_still(scene)
    warnings = result.metadata["observing"]["warnings"]
    assert any("image border" in w for w in warnings) == cropped


def test_camera_line_warns_when_its_pixels_are_coarser_than_the_bins(small_scene):
    # 8 x 8 pixels over a disk whose g spans ~0.5 give each pixel a g range far above a
    # bin of 1.4 / 2000 = 0.0007 (arithmetic), so the profile is smoothed by the pixels.
    scene = small_scene(**{"observing.mode": "line", "observer.placement": "camera",
                           "observer.distance": 1000.0, "observer.field_of_view": 60.0,
                           "observing.line_bins": 2000, "image.width": 8, "image.height": 8})
    with pytest.warns(NullrayWarning):
        result = render_still(scene)
    assert any("more than one line bin" in w for w in result.metadata["observing"]["warnings"])
