"""Whole stills from ``render.render_still`` (64x64 distant observer) against known physics."""

import math

import numpy as np
import pytest

from render import render_still

B_CRIT = math.sqrt(27.0)  # Schwarzschild shadow radius (Synge 1966; Luminet 1979)

# Rendering tolerance: stills use the scene default tracing.tolerance = 1e-9; mirrored and
# rotated rays are either exact mirror images of the same arithmetic or differ only in the
# rounding of their starting values, so 1e-9 of the peak intensity is generous.
SYMMETRY_RTOL = 1e-9


@pytest.mark.parametrize("inclination", [0.0, 37.0])
def test_schwarzschild_shadow_on_image(small_scene, inclination):
    # Synge (1966); Luminet (1979): the captured region of a = 0 is the disk of radius
    # sqrt(27) M on the sky, at any inclination.  Transparent disk, so every ray is
    # followed to its end.  Pixel centres more than 1e-6 M from the edge must be
    # classified exactly; the mask's area-equivalent radius is within one pixel.
    fov = 16.0
    still = render_still(small_scene(**{
        "black_hole.spin": 0.0, "observer.inclination": inclination,
        "observer.field_of_view": fov, "disk.surface": "transparent"}))
    rho = np.hypot(still.alpha, still.beta)
    captured = still.fate == 1
    assert np.all((still.fate == 0) | captured)
    clear = np.abs(rho - B_CRIT) > 1e-6
    assert np.array_equal(captured[clear], rho[clear] < B_CRIT)
    pixel = fov / still.alpha.shape[1]
    radius = math.sqrt(captured.sum() * pixel ** 2 / math.pi)
    assert abs(radius - B_CRIT) <= pixel


def test_face_on_schwarzschild_redshift_on_image(small_scene):
    # Face-on, lam = 0: g = sqrt(1 - 3M/r) for circular Schwarzschild orbits (standard
    # result, no Doppler term), for every order recorded; 1e-10 is rounding.
    still = render_still(small_scene(**{
        "black_hole.spin": 0.0, "observer.inclination": 0.0, "observer.field_of_view": 30.0,
        "disk.surface": "transparent", "disk.orders": 2}))
    finite = np.isfinite(still.g)
    assert finite[0].sum() > 1000 and finite[1].sum() > 20
    assert np.allclose(still.g[finite], np.sqrt(1.0 - 3.0 / still.r[finite]), rtol=0, atol=1e-10)


@pytest.mark.parametrize("inclination", [30.0, 0.0])
def test_opposite_inclinations_give_mirror_images(small_scene, inclination):
    # Reflection symmetry of Kerr about the equatorial plane (theta -> pi - theta;
    # common practice): the observer at 180 - i sees the image of the
    # observer at i flipped top to bottom (beta -> -beta).  Fates must agree exactly:
    # a flip would need a pixel centre within rounding of a fate boundary.
    common = {"black_hole.spin": 0.7, "disk.orders": 3}
    upper = render_still(small_scene(**common, **{"observer.inclination": inclination}))
    lower = render_still(small_scene(**common, **{"observer.inclination": 180.0 - inclination}))
    assert np.array_equal(upper.fate, lower.fate[::-1])
    assert (upper.fate == 2).sum() > 500
    peak = upper.intensity.max()
    assert peak > 0
    assert np.allclose(upper.intensity, lower.intensity[::-1], rtol=0, atol=SYMMETRY_RTOL * peak)
    assert np.allclose(upper.r, lower.r[:, ::-1], rtol=1e-9, equal_nan=True)


def test_face_on_image_is_rotationally_symmetric(small_scene):
    # Axisymmetry of Kerr (common practice): seen from the axis, the image is invariant
    # under rotation about the line of sight.  With an even square grid, a 90-degree
    # rotation maps pixel centres exactly onto pixel centres.
    still = render_still(small_scene(**{"black_hole.spin": 0.9, "observer.inclination": 0.0}))
    peak = still.intensity.max()
    assert peak > 0
    for quarter_turns in (1, 2, 3):
        assert np.array_equal(np.rot90(still.fate, quarter_turns), still.fate)
        assert np.allclose(np.rot90(still.intensity, quarter_turns), still.intensity,
                           rtol=0, atol=SYMMETRY_RTOL * peak)


@pytest.mark.parametrize("spin", [0.9, -0.5])
def test_approaching_side_is_brighter(small_scene, spin):
    # The disk rotates in +phi whatever the sign of spin (render.light.disk; for spin < 0 it
    # counter-rotates with respect to the hole).  With the observer at phi = 0 and
    # alpha along +e_phi (Bardeen 1973), the gas moves towards the observer on the
    # alpha < 0 side, where lam = -alpha sin i > 0 and g = 1/(u^t (1 - Omega lam)) is
    # largest (Cunningham & Bardeen 1973): Doppler boosting makes that half brighter.
    still = render_still(small_scene(**{"black_hole.spin": spin, "observer.inclination": 60.0}))
    left = still.alpha < 0
    assert still.intensity[left].sum() > 1.5 * still.intensity[~left].sum()
    g = still.g[0]
    assert np.nanmax(g[left]) > 1.0 > np.nanmax(g[~left])
    assert still.alpha.flat[np.nanargmax(g)] < 0
