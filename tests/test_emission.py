"""Emission laws, the transfer rule, the emission angle and bad emission input."""

import numpy as np
import pytest
from scipy import integrate

from render import render_still, trace_points
from render.cli import main
from render.light.emission import (EmissionTableError, RadialProfile, emission_cosine,
                                   limb_darkening, read_profile_table)


def test_power_law_default_is_g4_r_minus_q(small_scene):
    # Default bolometric power law (Liouville, Misner, Thorne & Wheeler 1973 sec. 22.6): g^4 r^-3.
    result = render_still(small_scene())
    expected = np.where(result.on_disk, result.g ** 4 * result.r ** -3.0, 0.0)
    np.testing.assert_allclose(result.intensity, np.nan_to_num(expected).sum(axis=0), rtol=1e-12)
    assert "emission_cosine" not in result.maps()


def test_electron_scattering_limb_darkening_keeps_the_flux():
    # Chandrasekhar (1960) law normalised so that 2 int_0^1 L(mu) mu dmu = 1 (scipy quad).
    value, _ = integrate.quad(lambda mu: 2 * limb_darkening(mu, "electron_scattering") * mu, 0, 1)
    assert abs(value - 1) < 1e-12
    # Chandrasekhar (1960), table XXIV (from memory): I(1)/I(0) = 3.06 for electron scattering.
    ratio = limb_darkening(1.0, "electron_scattering") / limb_darkening(0.0, "electron_scattering")
    assert abs(ratio - 3.06) < 0.01


def test_emission_angle_far_from_the_hole_is_the_inclination():
    # Flat-space limit: far out, light reaching a distant observer at inclination i leaves the
    # disk at angle i from its normal; the orbital speed v = r^-1/2 aberrates this at first
    # order in v on the approaching/receding side (special-relativistic aberration), so the
    # deviation must fall like r^-1/2: below 1e-3 at r = 1e6 M and 10x smaller than at 1e4 M.
    import render.camera.observers as camera

    alpha, beta = np.array([1e4, 1e6, 0.0]), np.array([0.0, 0.0, 1e6])
    out = trace_points(alpha, beta, spin=0.5, inclination_deg=60.0, max_orders=1)
    bundle = camera.distant_observer_rays(alpha, beta, 0.5, 60.0)
    deviation = np.abs(emission_cosine(out["r"][:, 0], bundle.eta, out["g"][:, 0]) - 0.5)
    assert deviation[1] < 1e-3 and deviation[2] < 1e-3
    assert 8 < deviation[0] / deviation[1] < 12


def test_profile_table_interpolates_and_validates(tmp_path):
    good = tmp_path / "good.csv"
    good.write_text("# radius, emissivity\nr,emissivity\n4,1.0\n8,3.0\n12,0.5\n")
    law = RadialProfile.from_csv(good)
    np.testing.assert_allclose(law.intensity([4.0, 6.0, 10.0, 13.0]), [1.0, 2.0, 1.75, 0.0])
    for text in ("", "4,1\n", "4,1\n3,2\n", "4,1\n8,x\n", "4,1\n8,-2\n", "4,1,2\n8,2,3\n",
                 "4,1\n8,nan\n"):
        bad = tmp_path / "bad.csv"
        bad.write_text(text)
        with pytest.raises(EmissionTableError):
            read_profile_table(bad)
    with pytest.raises(EmissionTableError):
        read_profile_table(tmp_path / "missing.csv")


def test_profile_law_renders(small_scene, tmp_path):
    table = tmp_path / "p.csv"
    table.write_text("2,1\n30,1\n")
    result = render_still(small_scene(**{"emission.law": "profile", "emission.profile": str(table)}))
    expected = np.where(result.on_disk, result.g ** 4, 0.0)
    np.testing.assert_allclose(result.intensity, np.nan_to_num(expected).sum(axis=0), rtol=1e-12)


def _run(capsys, argv):
    status = main(argv)
    return status, capsys.readouterr().err


@pytest.mark.parametrize("setting", [
    "black_hole.mass=0", "black_hole.mass=-3", "black_hole.distance=0",
    "emission.accretion_rate=0", "emission.accretion_rate=-1", "observing.frequency=0",
    "observing.frequency=-5", "observing.wavelength=0", "observing.photon_energy=-1"])
def test_bad_physical_input_one_line_exit_2_nothing_written(capsys, tmp_path, setting):
    out = tmp_path / "out"
    status, err = _run(capsys, ["still", "--set", "emission.law=novikov_thorne", "--set",
                                "observing.mode=monochromatic", "--set", setting,
                                "--output-dir", str(out)])
    assert status == 2 and err.count("\n") == 1 and setting.split("=")[0] in err
    assert not out.exists()


@pytest.mark.parametrize("content", [None, "r,emissivity\n", "1,2\nthree,4\n"])
def test_bad_profile_table_one_line_exit_2_nothing_written(capsys, tmp_path, content):
    table = tmp_path / "profile.csv"
    if content is not None:
        table.write_text(content)
    out = tmp_path / "out"
    status, err = _run(capsys, ["still", "--set", "emission.law=profile", "--set",
                                f"emission.profile={table}", "--output-dir", str(out)])
    assert status == 2 and err.count("\n") == 1 and "profile" in err
    assert not out.exists()


def test_exposure_white_follows_the_readme_rule(small_scene):
    # README, "Exposure": the power law's white is its intensity at the inner edge, r_in^-index
    # (here r_in = 6 M, the ISCO of a = 0: Bardeen, Press & Teukolsky 1972).
    from render.light.observing import exposure_white, prepare_observation

    scene = small_scene(**{"black_hole.spin": 0.0, "emission.index": 2.5})
    white = exposure_white(prepare_observation(scene), scene.inner_radius, 20.0)
    assert white == pytest.approx(6.0 ** -2.5, rel=1e-14)
    colour = {"emission.law": "novikov_thorne", "observing.mode": "true_colour"}
    fixed = small_scene(**colour, **{"observing.colour_exposure": "fixed",
                                     "observing.colour_reference": 3e11})
    assert exposure_white(prepare_observation(fixed), fixed.inner_radius, 20.0) == 3e11
    auto = small_scene(**colour)   # the automatic exposure takes its white from the image
    assert exposure_white(prepare_observation(auto), auto.inner_radius, 20.0) is None


def test_monochromatic_white_is_the_disks_peak_at_the_observed_frequency(small_scene):
    # README, "Exposure": the peak rest-frame specific intensity over the disk; the peak is
    # found independently by scipy's bounded scalar minimiser (Brent's method).
    from scipy.optimize import minimize_scalar

    from render.light.observing import exposure_white, prepare_observation

    scene = small_scene(**{"emission.law": "novikov_thorne", "observing.mode": "monochromatic",
                           "black_hole.mass": 4.0e7, "observing.frequency": 1.0e15})
    observation = prepare_observation(scene)
    r_in, r_out = scene.inner_radius, scene["disk.outer_radius"]
    law, nu = observation.law, observation.frequency_hz
    peak = minimize_scalar(lambda r: -float(law.specific_intensity(nu, np.array([r]))[0]),
                           bounds=(r_in, r_out), method="bounded", options={"xatol": 1e-6})
    assert exposure_white(observation, r_in, r_out) == pytest.approx(-peak.fun, rel=1e-4)
