"""render/light/observing.py: cross-key refusals, the observed band, pixel angles, shading."""

import math
from types import SimpleNamespace

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest

from render import default_scene
from render.errors import SceneError
from render.light.observing import (check_observing, disk_reaches_border,
                                    observing_frequency_hz, pixel_angle_rad,
                                    prepare_observation, shade)


def values(**changes):
    """The default scene's values with dotted keys changed (check_observing takes a mapping)."""
    base = dict(default_scene().values)
    base.update(changes)
    return base


REFUSALS = [
    ("mono-without-band", {"observing.mode": "monochromatic", "emission.law": "novikov_thorne"},
     ["observing.mode = 'monochromatic'", "exactly one", "got 0"]),
    ("mono-two-bands", {"observing.mode": "monochromatic", "emission.law": "novikov_thorne",
                        "observing.frequency": 1e15, "observing.wavelength": 500.0},
     ["exactly one", "got 2"]),
    ("true-colour-power-law", {"observing.mode": "true_colour"},
     ["observing.mode = 'true_colour'", "novikov_thorne", "'power_law'"]),
    ("spectrum-profile", {"observing.mode": "spectrum", "emission.law": "profile",
                          "emission.profile": "x.csv"}, ["'spectrum'", "'profile'"]),
    ("profile-without-table", {"emission.law": "profile"}, ["emission.profile"]),
    ("fixed-colour-without-reference", {"observing.mode": "true_colour",
                                        "emission.law": "novikov_thorne",
                                        "observing.colour_exposure": "fixed"},
     ["observing.colour_reference"]),
    ("spectrum-band-upside-down", {"observing.spectrum_low": 1e18, "observing.spectrum_high": 1e15},
     ["observing.spectrum_high = 1000000000000000.0", "observing.spectrum_low"]),
    ("line-band-empty", {"observing.line_low": 1.0, "observing.line_high": 1.0},
     ["observing.line_high = 1.0", "observing.line_low"]),
]


@pytest.mark.parametrize("changes,fragments", [c[1:] for c in REFUSALS],
                         ids=[c[0] for c in REFUSALS])
def test_check_observing_refuses_in_one_line(changes, fragments):
    with pytest.raises(SceneError) as info:
        check_observing(values(**changes))
    message = str(info.value)
    assert "\n" not in message
    for fragment in fragments:
        assert fragment in message


@pytest.mark.parametrize("changes", [
    {},
    {"observing.mode": "monochromatic", "emission.law": "novikov_thorne",
     "observing.photon_energy": 1.0},
    {"observing.mode": "true_colour", "emission.law": "novikov_thorne",
     "observing.colour_exposure": "fixed", "observing.colour_reference": 1e6},
    {"observing.mode": "line"},
])
def test_check_observing_accepts_consistent_values(changes):
    assert check_observing(values(**changes)) is None


def band(**given):
    scene = {"observing.frequency": None, "observing.wavelength": None,
             "observing.photon_energy": None}
    scene.update(given)
    return scene


# Relative 1e-12: astropy's spectral equivalencies use the same CODATA constants; the
# rest is the rounding of one or two products.
@pytest.mark.parametrize("given,quantity", [
    ({"observing.frequency": 230e9}, 230e9 * u.Hz),
    ({"observing.wavelength": 550.0}, 550.0 * u.nm),
    ({"observing.wavelength": 1.3e6}, 1.3 * u.mm),
    ({"observing.photon_energy": 6.4}, 6.4 * u.keV),
    ({"observing.photon_energy": 1e-3}, 1.0 * u.eV),
])
def test_observing_frequency_matches_astropy_spectral(given, quantity):
    # astropy.units.spectral(): frequency <-> wavelength <-> photon energy.
    expected = quantity.to(u.Hz, equivalencies=u.spectral()).value
    assert observing_frequency_hz(band(**given)) == pytest.approx(expected, rel=1e-12)


def test_no_band_gives_none():
    assert observing_frequency_hz(band()) is None


@pytest.mark.parametrize("fov,width,mass,distance", [
    (40.0, 512, 6.2e6, 11500.0),
    (25.0, 64, 6.5e9, 16.8e6),
    (100.0, 17, 10.0, 2000.0),
])
def test_pixel_angle_matches_astropy(fov, width, mass, distance):
    scene = {"observer.field_of_view": fov, "image.width": width, "black_hole.mass": mass,
             "black_hole.distance": distance}
    # One pixel spans fov/width gravitational radii GM/c^2 at distance D (small angle),
    # computed with astropy Quantities straight to radians.
    angle = (fov / width * const.G * mass * u.M_sun / const.c ** 2 / (distance * u.pc))
    expected = angle.to(u.dimensionless_unscaled).value
    # Relative 1e-12: the same constants, a different order of operations.
    assert pixel_angle_rad(scene) == pytest.approx(expected, rel=1e-12)
    # Cross-check of the unit: rad -> uas with the definition 1 rad = 180/pi * 3600e6 uas.
    assert (pixel_angle_rad(scene) * u.rad).to(u.uas).value == pytest.approx(
        expected * 180 / math.pi * 3600e6, rel=1e-12)


def grid_hits(height, width, orders, cells):
    hits = np.zeros((height * width, orders), dtype=bool)
    for row, col, order in cells:
        hits[row * width + col, order] = True
    return hits


@pytest.mark.parametrize("cells,expected", [
    ([], False),
    ([(2, 3, 0)], False),                  # inside
    ([(1, 1, 0), (3, 4, 1)], False),       # the ring just inside the border
    ([(0, 2, 0)], True),                   # top row
    ([(4, 3, 0)], True),                   # bottom row
    ([(2, 0, 1)], True),                   # left column, second order only
    ([(3, 5, 2)], True),                   # right column, third order only
    ([(4, 5, 0)], True),                   # a corner
])
def test_disk_reaches_border(cells, expected):
    # A 5 x 6 image (rows x columns; non-square so a swapped reshape shows).
    assert disk_reaches_border(grid_hits(5, 6, 3, cells), 5, 6) is expected


def test_shade_bolometric_is_g4_times_emitted_intensity_summed_over_orders():
    scene = default_scene(**{"image.width": 2, "image.height": 2, "emission.index": 2.5,
                             "observer.placement": "distant"})
    obs = prepare_observation(scene)
    r = np.array([[8.0, 15.0], [12.0, np.nan], [np.nan, np.nan], [30.0, 5.0]])
    g = np.array([[0.9, 1.2], [0.7, np.nan], [np.nan, np.nan], [1.1, 0.8]])
    hits = np.array([[True, True], [True, False], [False, False], [False, True]])
    bundle = SimpleNamespace(eta=np.full(4, 10.0), energy_ratio=np.ones(4))
    shaded = shade(obs, scene, {"r": r}, g, hits, bundle)
    # I_obs = g^4 I_em (Misner, Thorne & Wheeler 1973, sec. 22.6: I_nu/nu^3 invariant),
    # I_em = r^-2.5 (the power law asked for), no limb darkening; crossings that do not
    # shine add nothing.
    expected = np.array([0.9 ** 4 * 8 ** -2.5 + 1.2 ** 4 * 15 ** -2.5,
                         0.7 ** 4 * 12 ** -2.5, 0.0, 0.8 ** 4 * 5 ** -2.5])
    # Relative 1e-13: a handful of products and one sum.
    np.testing.assert_allclose(shaded.intensity, expected, rtol=1e-13, atol=0)
    assert shaded.pixels.dtype == np.uint8 and shaded.pixels.shape == (4,)
    # A pixel with no light is black; brighter pixels are not darker (monotone tone curve,
    # common practice).
    assert shaded.pixels[2] == 0
    order = np.argsort(expected)
    assert np.all(np.diff(shaded.pixels[order].astype(int)) >= 0)


@pytest.mark.parametrize("orders", [3, 16])
def test_order_sum_equals_numpy_sum_of_the_shining_crossings(orders):
    # order_sum adds the shining crossings of each ray in a numba kernel; the reference is
    # numpy's masked sum (NaN as 0, +-inf as the largest float, numpy.nan_to_num).
    # Up to 7 terms numpy adds in turn, so 3 orders agree bit for bit; with 16 numpy's
    # pairwise blocks may round differently: 16 terms of like sign agree to 16 ulp (4e-15).
    from render.light.observing import order_sum

    rng = np.random.default_rng(14)
    values = rng.random((5000, orders)) * 10.0 ** rng.uniform(-30, 30, (5000, orders))
    values[rng.random(values.shape) < 0.1] = np.nan
    values[0, 0] = np.inf
    hits = rng.random(values.shape) < 0.7
    hits[0, 0] = True
    with np.errstate(invalid="ignore"):
        expected = np.nan_to_num(np.where(hits, values, 0.0), nan=0.0).sum(axis=1)
    got = order_sum(values, hits)
    if orders < 8:
        assert np.array_equal(got, expected)
    else:
        np.testing.assert_allclose(got, expected, rtol=4e-15, atol=0.0)
    assert got[0] == np.finfo(float).max
