"""render/light/pattern.py: the tortoise coordinate, emission times and co-moving patterns."""

import numpy as np
import pytest
from scipy.integrate import quad

from render.light.pattern import emission_time, pattern_factor, tortoise_radius


def tortoise_integrand(r, a):
    # dr*/dr = (r^2 + a^2) / Delta, Delta = r^2 - 2r + a^2 (Chandrasekhar 1983, sec. 63;
    # Boyer-Lindquist Delta, M = 1).
    return (r * r + a * a) / (r * r - 2.0 * r + a * a)


def outer_horizon(a):
    # r_+ = 1 + sqrt(1 - a^2) (Kerr, M = 1; common practice).
    return 1.0 + np.sqrt(1.0 - a * a)


# 1.0 reaches the module's extremal branch (r_+ = r_-), which scenes never use but
# horizon_radii accepts.
@pytest.mark.parametrize("spin", [0.0, 0.5, 0.9, -0.6, 0.999, 1.0])
def test_tortoise_difference_equals_quadrature(spin):
    # r*(r2) - r*(r1) = integral of (r^2 + a^2)/Delta, by scipy.integrate.quad.
    r_plus = outer_horizon(spin)
    points = r_plus + np.array([0.05, 0.4, 2.0, 10.0, 300.0])
    star = tortoise_radius(points, spin)
    for r1, r2, s1, s2 in zip(points[:-1], points[1:], star[:-1], star[1:]):
        integral, error = quad(tortoise_integrand, r1, r2, args=(spin,), epsabs=0, epsrel=1e-12)
        # quad reaches ~1e-12 relative; the closed form's logs lose up to ~1e-13 x |r*|,
        # which near the horizon is a few hundred: 1e-9 absolute covers both.
        assert s2 - s1 == pytest.approx(integral, abs=1e-9, rel=1e-10)


@pytest.mark.parametrize("spin", [0.0, 0.7])
def test_tortoise_derivative_by_finite_differences(spin):
    r = np.array([3.0, 5.0, 20.0])
    h = 1e-5
    slope = (tortoise_radius(r + h, spin) - tortoise_radius(r - h, spin)) / (2 * h)
    # Central difference: error ~ h^2 r*''' / 6 ~ 1e-10, plus rounding ~ 1e-16 |r*| / h
    # ~ 1e-10; 1e-7 relative covers both.
    np.testing.assert_allclose(slope, tortoise_integrand(r, spin), rtol=1e-7)


def test_schwarzschild_tortoise_closed_form():
    # r* = r + 2 ln(r/2 - 1) for a = 0 (from memory; the common Schwarzschild convention).
    r = np.array([2.5, 4.0, 30.0])
    np.testing.assert_allclose(tortoise_radius(r, 0.0), r + 2 * np.log(r / 2 - 1), rtol=1e-14)


@pytest.mark.parametrize("spin", [0.0, 0.9])
def test_emission_time_of_a_camera(spin):
    # t_obs - t_em = delay + (r*_obs - r*_em) (the regularised delay's definition in the
    # module docstring); the tortoise difference by scipy quad.
    t_obs, r_obs = 500.0, 200.0
    delay = np.array([3.0, 11.5])
    r_em = np.array([4.0, 15.0])
    got = emission_time(t_obs, delay, r_em, spin, observer_radius=r_obs)
    expected = [t_obs - d - quad(tortoise_integrand, re, r_obs, args=(spin,), epsrel=1e-12)[0]
                for d, re in zip(delay, r_em)]
    # quad's 1e-12 relative on integrals of ~200: ~1e-9 absolute.
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-8)


def test_distant_observer_reads_retarded_time():
    # For the distant observer the clock is u = t - r*_obs, so a far camera at time t and
    # the distant observer at u = t - r*(r_obs) agree (module docstring).
    spin, r_obs, t = 0.5, 1e4, 2e4
    delay, r_em = np.array([2.0, 7.0]), np.array([6.0, 12.0])
    u = t - quad(tortoise_integrand, 10.0, r_obs, args=(spin,), epsrel=1e-13)[0] \
        - float(tortoise_radius(10.0, spin))
    far = emission_time(t, delay, r_em, spin, observer_radius=r_obs)
    distant = emission_time(u, delay, r_em, spin)
    # quad over 1e4 M at 1e-13 relative: ~1e-9 absolute; 1e-7 leaves room for rounding of
    # the 2e4-sized times (~1e-12 each).
    np.testing.assert_allclose(distant, far, rtol=0, atol=1e-7)


def keplerian_omega(r, a):
    # Bardeen, Press & Teukolsky 1972, eq. 2.16: Omega = 1 / (r^(3/2) + a), M = 1.
    return 1.0 / (r ** 1.5 + a)


@pytest.mark.parametrize("spin,t_em,phase_deg", [(0.0, 0.0, 0.0), (0.9, 137.0, 30.0),
                                                  (-0.5, 1000.0, 250.0)])
def test_spot_peaks_at_its_keplerian_position(spin, t_em, phase_deg):
    radius, size, contrast = 8.0, 0.7, 3.0
    centre = np.radians(phase_deg) + keplerian_omega(radius, spin) * t_em
    phi = np.linspace(-np.pi, np.pi, 20001)
    values = pattern_factor("spot", radius, phi, t_em, spin, radius=radius,
                            phase_deg=phase_deg, size=size, contrast=contrast)
    peak = phi[np.argmax(values)]
    # The grid step is 2 pi / 20000 ~ 3.1e-4 rad: the peak lies within one step.
    assert np.angle(np.exp(1j * (peak - centre))) == pytest.approx(0.0, abs=4e-4)
    # At the centre itself d = 0 (up to the rounding of cos near 1: d^2 ~ 1e-14).
    at_centre = pattern_factor("spot", radius, centre, t_em, spin, radius=radius,
                               phase_deg=phase_deg, size=size, contrast=contrast)
    assert float(at_centre) == pytest.approx(1.0 + contrast, rel=1e-12)
    # A Gaussian in the flat disk-plane distance d = 2 r sin(dphi/2) (chord length).
    offset = 0.1
    d = 2.0 * radius * np.sin(offset / 2)
    at = pattern_factor("spot", radius, centre + offset, t_em, spin, radius=radius,
                        phase_deg=phase_deg, size=size, contrast=contrast)
    assert float(at) == pytest.approx(1.0 + contrast * np.exp(-d * d / (2 * size * size)),
                                      rel=1e-12)


def test_spot_is_nan_where_the_radius_is_nan_and_one_far_away():
    values = pattern_factor("spot", np.array([np.nan, 1000.0]), 0.0, 0.0, 0.0, radius=8.0,
                            size=1.0, contrast=2.0)
    assert np.isnan(values[0])
    # exp(-(992)^2 / 2) underflows to 0: the factor is exactly 1 far from the spot.
    assert values[1] == 1.0


@pytest.mark.parametrize("arms", [1, 2, 3, 5])
def test_spiral_has_as_many_arms_as_asked(arms):
    phi = np.linspace(0.0, 2 * np.pi, 7200, endpoint=False)
    values = pattern_factor("spiral", 9.0, phi, 55.0, 0.6, arms=arms, pitch_deg=25.0,
                            contrast=1.0)
    # Count strict local maxima on the periodic grid.
    maxima = (values > np.roll(values, 1)) & (values > np.roll(values, -1))
    assert int(maxima.sum()) == arms
    # P = ((1 + cos psi)/2)^2 spans [0, 1], so the factor spans [1, 2] (grid to 1e-4).
    assert values.min() == pytest.approx(1.0, abs=1e-4)
    assert values.max() == pytest.approx(2.0, abs=1e-4)


def test_spiral_arms_turn_with_the_local_keplerian_speed():
    # After a time t the pattern at radius r is the initial one rotated by Omega(r) t
    # (BPT 1972, eq. 2.16 for Omega).
    spin, r, t = 0.3, 6.0, 40.0
    phi = np.linspace(0, 2 * np.pi, 50, endpoint=False)
    later = pattern_factor("spiral", r, phi + keplerian_omega(r, spin) * t, t, spin)
    now = pattern_factor("spiral", r, phi, 0.0, spin)
    np.testing.assert_allclose(later, now, rtol=1e-12)


def test_no_pattern_is_one_and_unknown_kind_is_refused():
    assert np.all(pattern_factor("none", np.array([3.0, np.nan]), 0.0, 0.0, 0.0) == 1.0)
    with pytest.raises(ValueError, match="spot"):
        pattern_factor("stripes", 5.0, 0.0, 0.0, 0.0)
