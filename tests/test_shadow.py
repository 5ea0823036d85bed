"""The analytic critical curve and its moments (render.measure.shadow)."""

import math

import numpy as np
import pytest
from scipy.optimize import brentq, fsolve

import render
from render.camera.observers import camera_rays
from render.geodesics.tracing import trace_bundle
from render.light.transfer import trace_points
from render.measure.shadow import closed_curve_moments, critical_curve, shadow_moments
from render.units import angular_gravitational_radius_uas

SQRT27 = math.sqrt(27.0)


@pytest.mark.parametrize("inclination", [0.0, 17.0, 60.0, 90.0, 180.0])
def test_schwarzschild_shadow_is_the_circle_of_radius_sqrt27(inclination):
    # Synge (1966), MNRAS 131, 463: b_c = 3 sqrt(3) M, so area 27 pi M^2, centred.
    # The circle is sampled uniformly in angle, where the spectral moments are exact
    # to rounding: 1e-10 leaves room for it.
    m = render.shadow_moments(0.0, inclination)
    assert m["area"] == pytest.approx(27.0 * math.pi, rel=1e-10)
    assert m["radius"] == pytest.approx(SQRT27, rel=1e-10)
    assert abs(m["centroid_alpha"]) < 1e-10 and abs(m["centroid_beta"]) < 1e-10
    assert m["alpha_min"] == pytest.approx(-SQRT27, rel=1e-10)
    assert m["alpha_max"] == pytest.approx(SQRT27, rel=1e-10)
    assert m["beta_max"] == pytest.approx(SQRT27, rel=1e-10)
    assert m["asymmetry"] < 1e-8


def test_kerr_099_edge_on_extents_and_centroid():
    # Bardeen (1973) for a = 0.99 at i = 90 deg: the curve spans alpha from about
    # -2.25 to +6.98 M with its centroid near +2.22 M (values from memory, quoted to
    # 0.01 M, hence the tolerance).  The positive sign of alpha_max is the core's
    # convention (lam = -alpha sin i): retrograde orbits lie at alpha > 0.
    m = render.shadow_moments(0.99, 90.0)
    assert m["alpha_min"] == pytest.approx(-2.25, abs=0.01)
    assert m["alpha_max"] == pytest.approx(6.98, abs=0.01)
    assert m["centroid_alpha"] == pytest.approx(2.22, abs=0.01)
    # Edge-on, beta^2 = eta, whose maximum over the spherical orbits is 27 at r = 3 M for
    # every spin (from memory; cross-checked by root finding in the next test).
    assert m["beta_max"] == pytest.approx(SQRT27, abs=1e-8)


def _radial_potential(r, lam, eta, a):
    # Carter (1968): R = (r^2 + a^2 - a lam)^2 - Delta (eta + (lam - a)^2).
    return (r * r + a * a - a * lam) ** 2 - (r * r - 2 * r + a * a) * (eta + (lam - a) ** 2)


def _spherical_orbit_by_root_finding(r, a, guess):
    # Independent computation: a spherical photon orbit at radius r has
    # R(r) = 0 and dR/dr = 0 (double root); solve for (lam, eta) with scipy.
    def conditions(x):
        lam, eta = x
        h = 1e-6
        d = (_radial_potential(r + h, lam, eta, a) - _radial_potential(r - h, lam, eta, a)) / (2 * h)
        return [_radial_potential(r, lam, eta, a), d]

    return fsolve(conditions, guess, xtol=1e-12)


# Near the curve's ends (eta -> 0) fsolve reports slow progress; the results still meet
# the tolerances asserted below, which is what counts.
@pytest.mark.filterwarnings("ignore:The iteration is not making good progress")
def test_kerr_099_edge_on_cross_checked_by_scipy_root_finding():
    # Independent computation: the equatorial circular photon orbits (eta = 0) solved
    # from R = dR/dr = 0 with scipy fsolve give the extremes alpha = -lam (edge-on);
    # then a shoelace polygon through root-found points gives area and centroid.
    a = 0.99

    def equatorial(x):
        r, lam = x
        h = 1e-6
        return [_radial_potential(r, lam, 0.0, a),
                (_radial_potential(r + h, lam, 0.0, a) - _radial_potential(r - h, lam, 0.0, a))
                / (2 * h)]

    r_pro, lam_pro = fsolve(equatorial, [1.2, 2.2], xtol=1e-12)
    r_ret, lam_ret = fsolve(equatorial, [4.0, -7.0], xtol=1e-12)
    m = render.shadow_moments(a, 90.0)
    # fsolve with a central-difference derivative (h = 1e-6) is good to ~1e-8.
    assert m["alpha_min"] == pytest.approx(-lam_pro, abs=1e-6)
    assert m["alpha_max"] == pytest.approx(-lam_ret, abs=1e-6)

    # Points on the upper half, uniform in cos-spaced r, by root finding.
    t = np.linspace(0.0, math.pi, 1201)
    radii = r_pro + (r_ret - r_pro) * 0.5 * (1 - np.cos(t))
    alphas, betas = [], []
    guess = [lam_pro, 0.0]
    for r in radii:
        lam, eta = _spherical_orbit_by_root_finding(r, a, guess)
        guess = [lam, eta]
        alphas.append(-lam)
        betas.append(math.sqrt(max(eta, 0.0)))
    alphas, betas = np.array(alphas), np.array(betas)
    x = np.concatenate([alphas, alphas[-2:0:-1]])
    y = np.concatenate([betas, -betas[-2:0:-1]])
    xn, yn = np.roll(x, -1), np.roll(y, -1)
    cross = x * yn - xn * y
    area = abs(0.5 * cross.sum())
    centroid = abs(((x + xn) * cross).sum() / 6.0 / (0.5 * cross.sum()))
    # A 2400-gon with cosine clustering: shoelace error ~1e-5 relative (common practice).
    assert m["area"] == pytest.approx(area, rel=3e-5)
    assert m["centroid_alpha"] == pytest.approx(centroid, abs=3e-4)
    assert m["beta_max"] == pytest.approx(betas.max(), abs=1e-5)  # sampling of the top


def _bisect_capture(trace, lo, hi, steps=48):
    # lo is captured, hi escapes; both arrays of image-plane points along a line.
    for _ in range(steps):
        mid = 0.5 * (lo + hi)
        captured = trace(mid)
        lo = np.where(captured[:, None], mid, lo)
        hi = np.where(captured[:, None], hi, mid)
    return 0.5 * (lo + hi)


def test_sign_convention_agrees_with_the_tracer():
    # Independent computation: the capture boundary along beta = 0 and alpha = centroid,
    # found by bisection with the core's tracer, lands on the analytic curve (1e-7 M:
    # far below the integrator's 1e-9 relative tolerance effect on the boundary).
    a, inc = 0.99, 90.0
    m = render.shadow_moments(a, inc)

    def trace(points):
        out = trace_points(points[:, 0], points[:, 1], spin=a, inclination_deg=inc, max_orders=1)
        return out["fate"] == "captured"

    c = m["centroid_alpha"]
    lo = np.array([[c, 0.0], [c, 0.0], [c, 0.0]])
    hi = np.array([[c - 8.0, 0.0], [c + 8.0, 0.0], [c, 8.0]])
    edge = _bisect_capture(trace, lo, hi)
    assert edge[0, 0] == pytest.approx(m["alpha_min"], abs=1e-7)
    assert edge[1, 0] == pytest.approx(m["alpha_max"], abs=1e-7)
    alpha, beta = critical_curve(a, inc, 8192)
    top = np.interp(c, alpha[beta > 0][::-1], beta[beta > 0][::-1])
    assert edge[2, 1] == pytest.approx(top, abs=1e-5)  # interpolation on the 8192-point curve


def test_face_on_kerr_is_a_circle_through_the_lam0_orbit():
    # Bardeen (1973): a pole-on observer sees only L = 0 rays: a circle of radius
    # sqrt(eta + a^2) of the orbit with lam = 0; that orbit found here by scipy brentq on
    # R = R' = 0 solved independently.
    a = 0.9
    r0 = brentq(lambda r: _spherical_orbit_by_root_finding(r, a, [0.0, 25.0])[0], 2.0, 3.0,
                xtol=1e-12)
    eta0 = _spherical_orbit_by_root_finding(r0, a, [0.0, 25.0])[1]
    for inclination in (0.0, 180.0):
        m = shadow_moments(a, inclination)
        assert m["radius"] == pytest.approx(math.sqrt(eta0 + a * a), rel=1e-7)
        assert m["asymmetry"] < 1e-8 and abs(m["centroid_alpha"]) < 1e-10
    # Continuity into the general branch (the curve is continuous in i): at 1e-3 deg
    # the centroid moves by ~ a sin i, far below 1e-4 M.
    near = shadow_moments(a, 1e-3)
    assert near["area"] == pytest.approx(shadow_moments(a, 0.0)["area"], rel=1e-6)


def test_symmetries():
    # Bardeen (1973): reversing the spin mirrors the image in alpha; i and 180 - i
    # give the same curve (mirror in beta) -- common practice symmetry checks.
    plus, minus = shadow_moments(0.7, 40.0), shadow_moments(-0.7, 40.0)
    assert minus["centroid_alpha"] == pytest.approx(-plus["centroid_alpha"], abs=1e-12)
    assert minus["area"] == pytest.approx(plus["area"], rel=1e-12)
    assert shadow_moments(0.7, 140.0)["area"] == pytest.approx(plus["area"], rel=1e-12)
    alpha, beta = critical_curve(0.7, 40.0, 256)
    assert alpha[0] == alpha[-1] and beta[0] == beta[-1]  # closed


def test_finite_camera_schwarzschild_matches_synge():
    # Synge (1966): a static observer at r_o sees the shadow's edge at
    # sin(theta) = sqrt(27) sqrt(1 - 2/r_o) / r_o; the pinhole maps it to
    # r_o tan(theta) in M at the hole's distance.
    for r_o in (20.0, 1000.0):
        expected = r_o * math.tan(math.asin(SQRT27 * math.sqrt(1 - 2 / r_o) / r_o))
        for frame in ("zamo", "static"):
            m = shadow_moments(0.0, 60.0, distance=r_o, frame=frame)
            assert m["radius"] == pytest.approx(expected, rel=1e-10)


def test_finite_camera_kerr_matches_camera_rays_by_bisection():
    # Independent computation: bisect the capture boundary of the camera's own rays
    # (render.camera.observers.camera_rays + the kernel) along beta = 0; the exact camera curve
    # must agree to 1e-7 M, while the distant-observer curve is off by O(M / r_o).
    a, inc, r_o = 0.9, 60.0, 40.0
    m = shadow_moments(a, inc, distance=r_o)

    def trace(points):
        bundle = camera_rays(points[:, 0], points[:, 1], a, r_o, inc)
        return trace_bundle(bundle, a, n_record=1)["fate"] == 1

    c = m["centroid_alpha"]
    edge = _bisect_capture(trace, np.array([[c, 0.0], [c, 0.0]]),
                           np.array([[c - 8.0, 0.0], [c + 8.0, 0.0]]))
    assert edge[0, 0] == pytest.approx(m["alpha_min"], abs=1e-7)
    assert edge[1, 0] == pytest.approx(m["alpha_max"], abs=1e-7)
    distant = shadow_moments(a, inc)
    assert abs(distant["alpha_max"] - m["alpha_max"]) > 1e-3


def test_closed_curve_moments_of_an_ellipse():
    # Elementary geometry: an ellipse with semi-axes 3 and 2 centred at (1, -0.5) has
    # area 6 pi; the spectral rule is exact to rounding, the shoelace rule of a 4096-gon
    # is off by (2 pi / n)^2 / 6 ~ 4e-7 relative.
    t = np.linspace(0.0, 2 * np.pi, 4097)
    x, y = 1.0 + 3.0 * np.cos(t), -0.5 + 2.0 * np.sin(t)
    smooth = closed_curve_moments(x, y)
    assert smooth["area"] == pytest.approx(6 * math.pi, rel=1e-12)
    assert smooth["centroid_alpha"] == pytest.approx(1.0, abs=1e-12)
    assert smooth["centroid_beta"] == pytest.approx(-0.5, abs=1e-12)
    polygon = closed_curve_moments(x, y, smooth=False)
    assert polygon["area"] == pytest.approx(6 * math.pi, rel=1e-6)
    # The asymmetry of a circle is 0 and of an ellipse is positive.
    assert smooth["asymmetry"] > 0.1
    assert closed_curve_moments(np.cos(t), np.sin(t))["asymmetry"] < 1e-9


def test_schwarzschild_shadow_in_microarcseconds():
    # Event Horizon Telescope Collaboration (2019), ApJL 875, L6: GM/(c^2 D) = 3.8 uas for
    # M = 6.5e9 M_sun at D = 16.8 Mpc, so the shadow spans 2 sqrt(27) x 3.8 ~ 39.7 uas.
    theta_g = angular_gravitational_radius_uas(6.5e9, 16.8e6)
    assert theta_g == pytest.approx(3.8, abs=0.05)
    diameter = 2.0 * shadow_moments(0.0, 17.0)["radius"] * theta_g
    assert diameter == pytest.approx(39.7, abs=0.3)  # 3.8 is quoted to 2 digits


def test_bad_arguments():
    with pytest.raises(ValueError):
        critical_curve(0.5, 200.0)
    with pytest.raises(ValueError):
        critical_curve(1.0, 30.0)
    with pytest.raises(ValueError):
        shadow_moments(0.5, 30.0, distance=2.5)  # inside the photon region
