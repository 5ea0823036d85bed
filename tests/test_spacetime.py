"""Kerr spacetime quantities against published values and independent computations.

The independent computations below never call the closed forms under test:
circular orbits are rebuilt from the equatorial Kerr metric components
(Boyer–Lindquist), and radii are found as roots with scipy.optimize.
"""

import numpy as np
import pytest
from scipy.optimize import brentq

from render.spacetime.kerr import (circular_orbit_angular_momentum, circular_orbit_energy,
                                   circular_orbit_time_component, ergosphere_radius,
                                   horizon_radii, isco_radius, keplerian_angular_velocity,
                                   metric_functions, photon_orbit_radii, photon_orbit_radius)

SPINS = [-0.99, -0.9, -0.5, 0.0, 0.3, 0.5, 0.7, 0.9, 0.998]


# --- an independent model of circular equatorial orbits -------------------------------

def equatorial_metric(r, a):
    """Covariant g_tt, g_tphi, g_phiphi of Kerr at theta = pi/2 and their r-derivatives.

    Boyer–Lindquist form, e.g. Misner, Thorne & Wheeler (1973), eq. 33.2, with
    Sigma = r^2 in the equatorial plane.
    """
    g_tt = -(1.0 - 2.0 / r)
    g_tphi = -2.0 * a / r
    g_pp = r * r + a * a + 2.0 * a * a / r
    d_tt = -2.0 / r ** 2
    d_tphi = 2.0 * a / r ** 2
    d_pp = 2.0 * r - 2.0 * a * a / r ** 2
    return (g_tt, g_tphi, g_pp), (d_tt, d_tphi, d_pp)


def circular_orbit_from_metric(r, a):
    """(Omega, u^t, E, L) of the circular geodesic moving in +phi, from the metric alone.

    A circular orbit u = u^t (1, 0, 0, Omega) is a geodesic iff
    d_r g_tt + 2 Omega d_r g_tphi + Omega^2 d_r g_phiphi = 0 (radial component of
    the geodesic equation for dr/dtau = 0; common practice); the root
    with Omega > 0 moves in +phi.  u^t follows from u.u = -1, E = -u_t, L = u_phi.
    Works with complex r too (for complex-step derivatives).
    """
    (g_tt, g_tphi, g_pp), (d_tt, d_tphi, d_pp) = equatorial_metric(r, a)
    omega = (-d_tphi + np.sqrt(d_tphi ** 2 - d_tt * d_pp)) / d_pp
    u_t = 1.0 / np.sqrt(-(g_tt + 2.0 * omega * g_tphi + omega ** 2 * g_pp))
    energy = -(g_tt + omega * g_tphi) * u_t
    ang_mom = (g_tphi + omega * g_pp) * u_t
    return omega, u_t, energy, ang_mom


def energy_slope(r, a):
    """dE/dr of circular orbits by complex-step differentiation (Squire & Trapp 1998).

    Exact to rounding: no subtractive cancellation, unlike finite differences.
    """
    h = 1e-30
    return circular_orbit_from_metric(complex(r, h), a)[2].imag / h


def independent_isco(a):
    """ISCO as the minimum of E(r) over circular orbits: root of dE/dr (BPT 1972, sec. II)."""
    r_photon = independent_photon_orbit(a)
    return brentq(energy_slope, r_photon * (1.0 + 1e-3), 50.0, args=(a,),
                  xtol=1e-14, rtol=1e-15, maxiter=500)


def independent_photon_orbit(a):
    """Circular equatorial photon orbit moving in +phi: root of r^(3/2) - 3 r^(1/2) + 2a.

    The denominator of E and L in Bardeen, Press & Teukolsky (1972), eq. 2.12,
    vanishes there (E, L -> infinity: the orbit becomes null).  The function has
    its only minimum at r = 1 (value 2a - 2 <= 0) and is 2 + 2a > 0 at r = 4.
    """
    return brentq(lambda r: r ** 1.5 - 3.0 * np.sqrt(r) + 2.0 * a, 1.0, 4.0,
                  xtol=1e-15, rtol=1e-15, maxiter=500)


# --- ISCO ------------------------------------------------------------------------------

@pytest.mark.parametrize("spin, expected", [
    # Bardeen, Press & Teukolsky (1972), ApJ 178, 347, table 1 (r_ms in M), from memory;
    # tolerance 5e-4 = half a unit in the table's last (third) decimal.
    (0.0, 6.0), (0.5, 4.233), (0.9, 2.321), (0.998, 1.237), (-0.9, 8.717),
])
def test_isco_matches_bpt_table(spin, expected):
    assert abs(isco_radius(spin) - expected) <= 5e-4


@pytest.mark.parametrize("spin", SPINS)
def test_isco_is_minimum_of_circular_orbit_energy(spin):
    # Independent: root of dE/dr with E from the metric (see circular_orbit_from_metric),
    # solved with scipy.optimize.brentq.  1e-9 is far above the root's conditioning
    # (dE/dr is computed to ~1e-16 and E'' is O(1e-2..1)).
    assert abs(isco_radius(spin) - independent_isco(spin)) <= 1e-9


def test_isco_array_input_matches_scalars():
    spins = np.array(SPINS)
    assert np.allclose(isco_radius(spins), [isco_radius(a) for a in SPINS], rtol=0, atol=1e-14)


def test_isco_extreme_limits():
    # Bardeen, Press & Teukolsky (1972), eq. 2.21 and text: r_ms -> 1 M (prograde) and
    # 9 M (retrograde) as a -> 1; for a = 1 - delta, r_ms ~ 1 + (4 delta)^(1/3)
    # (BPT 1972, from memory).  Relative tolerance 1e-2 bounds the next order,
    # which is O(delta^(1/3)) = 1e-3 relative here.
    assert abs(isco_radius(1.0) - 1.0) <= 1e-12
    assert abs(isco_radius(-1.0) - 9.0) <= 1e-12
    delta = 1e-9
    assert (isco_radius(1.0 - delta) - 1.0) == pytest.approx((4.0 * delta) ** (1 / 3), rel=1e-2)


def test_isco_energy_values():
    # Bardeen, Press & Teukolsky (1972), eq. 2.21 and table 1: E_ms = sqrt(8/9) at a = 0,
    # -> 1/sqrt(3) prograde and 5/(3 sqrt(3)) retrograde (r = 9) as a -> 1, and
    # E_ms = sqrt(1 - 2/(3 r_ms)) for every spin (from memory).
    assert circular_orbit_energy(6.0, 0.0) == pytest.approx(np.sqrt(8.0 / 9.0), abs=1e-12)
    assert circular_orbit_energy(9.0, -1.0) == pytest.approx(5.0 / (3.0 * np.sqrt(3.0)),
                                                            abs=1e-12)
    near_extreme = 1.0 - 1e-9
    # Near-extreme prograde E_ms approaches 1/sqrt(3); the gap is O(delta^(1/3)) ~ 1e-3.
    assert circular_orbit_energy(isco_radius(near_extreme), near_extreme) == pytest.approx(
        1.0 / np.sqrt(3.0), abs=3e-3)
    for a in SPINS:
        r = isco_radius(a)
        assert circular_orbit_energy(r, a) == pytest.approx(np.sqrt(1.0 - 2.0 / (3.0 * r)),
                                                            abs=1e-12)


# --- photon orbits ---------------------------------------------------------------------

def test_schwarzschild_radii_in_schwarzschild_units():
    # Common practice: for a = 0 the photon orbit is at 1.5 and the ISCO at 3
    # Schwarzschild radii (r_s = 2M).
    r_s = 2.0
    assert photon_orbit_radius(0.0) / r_s == pytest.approx(1.5, abs=1e-12)
    assert isco_radius(0.0) / r_s == pytest.approx(3.0, abs=1e-12)
    assert photon_orbit_radii(0.0) == pytest.approx((3.0, 3.0), abs=1e-12)


def test_photon_orbit_extreme_limits():
    # Bardeen (1972), eq. 2.18: r_ph -> 1 M (prograde) and 4 M (retrograde) as a -> 1.
    assert abs(photon_orbit_radius(1.0) - 1.0) <= 1e-12
    assert abs(photon_orbit_radius(-1.0) - 4.0) <= 1e-12
    # Approach to the limit: with r = 1 + eps, a = 1 - delta the condition
    # r^(3/2) - 3 r^(1/2) + 2a = 0 gives (3/4) eps^2 = 2 delta to leading order
    # (expansion of BPT 1972 eq. 2.12 denominator, done here); next order is O(eps).
    delta = 1e-10
    eps = np.sqrt(8.0 * delta / 3.0)
    assert photon_orbit_radius(1.0 - delta) - 1.0 == pytest.approx(eps, rel=1e-3)
    pro, retro = photon_orbit_radii(1.0 - delta)
    assert pro == pytest.approx(1.0, abs=1e-4) and retro == pytest.approx(4.0, abs=1e-4)


@pytest.mark.parametrize("spin", SPINS)
def test_photon_orbit_is_root_of_circular_photon_condition(spin):
    # Independent root with scipy (BPT 1972, eq. 2.12 denominator); 1e-10 tolerance.
    assert abs(photon_orbit_radius(spin) - independent_photon_orbit(spin)) <= 1e-10
    pro, retro = photon_orbit_radii(spin)
    assert abs(pro - independent_photon_orbit(abs(spin))) <= 1e-10
    assert abs(retro - independent_photon_orbit(-abs(spin))) <= 1e-10


@pytest.mark.parametrize("spin", [-0.9, 0.0, 0.5, 0.9])
def test_photon_orbit_is_null_limit_of_circular_orbits(spin):
    # Independent: the energy of the metric-built circular orbit diverges at the
    # photon orbit, u.u -> 0 (BPT 1972, text after eq. 2.12).
    r = independent_photon_orbit(spin)
    energy_near = circular_orbit_from_metric(r * (1.0 + 1e-8), spin)[2]
    assert energy_near > 1e3


# --- horizons and ergosphere -------------------------------------------------------------

@pytest.mark.parametrize("spin", SPINS)
def test_horizons_are_roots_of_delta(spin):
    # Delta = r^2 - 2r + a^2 = 0 (BPT 1972, eq. 2.1); independent roots with numpy.roots.
    r_plus, r_minus = horizon_radii(spin)
    roots = np.sort(np.roots([1.0, -2.0, spin * spin]).real)
    assert r_plus == pytest.approx(roots[1], abs=1e-12)
    assert r_minus == pytest.approx(roots[0], abs=1e-12)


@pytest.mark.parametrize("spin", [0.3, 0.9, -0.7])
def test_ergosphere_is_where_g_tt_vanishes(spin):
    # Static limit g_tt = -(1 - 2r/Sigma) = 0 (Misner, Thorne & Wheeler 1973, sec. 33.8),
    # solved with brentq between the horizon and 2 M.
    for theta in [0.1, 0.7, np.pi / 2, 2.5]:
        def g_tt(r):
            return -(1.0 - 2.0 * r / (r * r + spin * spin * np.cos(theta) ** 2))
        root = brentq(g_tt, horizon_radii(spin)[0] * (1 + 1e-12), 2.0 + 1e-9, xtol=1e-15)
        assert ergosphere_radius(spin, theta) == pytest.approx(root, abs=1e-12)


# --- circular orbits -------------------------------------------------------------------

def test_schwarzschild_isco_energy_and_angular_momentum():
    # Common practice (Schwarzschild ISCO): E = sqrt(8/9), L = sqrt(12) M, u^t = sqrt(2).
    assert circular_orbit_energy(6.0, 0.0) == pytest.approx(np.sqrt(8.0 / 9.0), abs=1e-12)
    assert circular_orbit_angular_momentum(6.0, 0.0) == pytest.approx(np.sqrt(12.0), abs=1e-12)
    assert circular_orbit_time_component(6.0, 0.0) == pytest.approx(np.sqrt(2.0), abs=1e-12)


@pytest.mark.parametrize("spin", SPINS)
def test_circular_orbits_match_metric_construction(spin):
    # Independent: Omega, u^t, E, L rebuilt from the metric components
    # (circular_orbit_from_metric); relative 1e-12 (a few ulps of O(1-10) values).
    r = isco_radius(spin) * np.geomspace(1.0, 50.0, 40)
    omega, u_t, energy, ang_mom = circular_orbit_from_metric(r, spin)
    assert np.allclose(keplerian_angular_velocity(r, spin), omega, rtol=1e-12, atol=0)
    assert np.allclose(circular_orbit_time_component(r, spin), u_t, rtol=1e-12, atol=0)
    assert np.allclose(circular_orbit_energy(r, spin), energy, rtol=1e-12, atol=0)
    assert np.allclose(circular_orbit_angular_momentum(r, spin), ang_mom, rtol=1e-12, atol=0)


@pytest.mark.parametrize("spin", SPINS)
def test_circular_orbit_four_velocity_is_normalised(spin):
    # u = u^t (1, 0, 0, Omega) from the code; u.u with the Kerr metric written here
    # (MTW 1973, eq. 33.2 at theta = pi/2) must be -1 to 1e-12.  Also E = -u_t and
    # L = u_phi lowered with that metric.
    r = isco_radius(spin) * np.geomspace(1.0, 50.0, 40)
    (g_tt, g_tphi, g_pp), _ = equatorial_metric(r, spin)
    omega = keplerian_angular_velocity(r, spin)
    u_t = circular_orbit_time_component(r, spin)
    norm = u_t ** 2 * (g_tt + 2.0 * omega * g_tphi + omega ** 2 * g_pp)
    assert np.allclose(norm, -1.0, rtol=0, atol=1e-12)
    assert np.allclose(-(g_tt + omega * g_tphi) * u_t, circular_orbit_energy(r, spin),
                       rtol=1e-12, atol=0)
    assert np.allclose((g_tphi + omega * g_pp) * u_t,
                       circular_orbit_angular_momentum(r, spin), rtol=1e-12, atol=0)


def test_circular_orbits_do_not_exist_inside_photon_orbit():
    # BPT 1972, text after eq. 2.12: no timelike circular orbit inside r_ph.
    for a in [0.0, 0.9, -0.9]:
        r = independent_photon_orbit(a) * 0.98
        assert np.isnan(circular_orbit_energy(r, a))
        assert np.isnan(circular_orbit_time_component(r, a))


@pytest.mark.parametrize("spin", [0.0, 0.6, -0.8])
def test_metric_functions_reproduce_kerr_components(spin):
    # A sin^2/Sigma must equal g_phiphi written the other standard way,
    # (r^2 + a^2 + 2 r a^2 sin^2 / Sigma) sin^2 (MTW 1973, eq. 33.2).
    r = np.geomspace(1.5, 100.0, 25)[:, None]
    theta = np.linspace(0.05, np.pi - 0.05, 9)[None, :]
    sigma, delta, big_a = metric_functions(r, theta, spin)
    s2 = np.sin(theta) ** 2
    assert np.allclose(sigma, r * r + spin * spin * np.cos(theta) ** 2, rtol=1e-14)
    assert np.allclose(delta, r * r - 2.0 * r + spin * spin, rtol=1e-14, atol=1e-14)
    g_pp = (r * r + spin * spin + 2.0 * r * spin * spin * s2 / sigma) * s2
    assert np.allclose(big_a * s2 / sigma, g_pp, rtol=1e-13)
