"""Thermal disk physics: efficiency, Page–Thorne flux, Eddington luminosity, blackbody."""

import numpy as np
import pytest
from scipy import integrate

from render.spacetime import kerr as spacetime
from render.light.thermal import (accretion_rate_g_per_s, cgs, diluted_blackbody,
                                  eddington_luminosity, page_thorne_flux,
                                  page_thorne_flux_geometric, planck_bolometric, planck_nu,
                                  radiative_efficiency)


@pytest.mark.parametrize("spin, expected, digits", [
    # Novikov & Thorne (1973); Thorne (1974), ApJ 191, 507: 5.72%, 15.58%, 32.1%.
    (0.0, 0.0572, 4), (0.9, 0.1558, 4), (0.998, 0.321, 3)])
def test_radiative_efficiency_published_values(spin, expected, digits):
    assert round(radiative_efficiency(spin), digits) == expected


def _derivative(f, r):
    h = 1e-5 * r
    return (f(r + h) - f(r - h)) / (2 * h)


def _flux_by_quadrature(r, spin):
    """Page & Thorne (1974) eq. 11b/12 integrated numerically with scipy (independent of 15n)."""
    energy = lambda x: spacetime.circular_orbit_energy(x, spin)
    ang = lambda x: spacetime.circular_orbit_angular_momentum(x, spin)
    omega = lambda x: spacetime.keplerian_angular_velocity(x, spin)
    r_isco = spacetime.isco_radius(spin)
    integrand = lambda x: (energy(x) - omega(x) * ang(x)) * _derivative(ang, x)
    value, _ = integrate.quad(integrand, r_isco, r, epsabs=0, epsrel=1e-10, limit=200)
    f = -_derivative(omega, r) / (energy(r) - omega(r) * ang(r)) ** 2 * value
    return f / (4 * np.pi * r)


@pytest.mark.parametrize("spin", [-0.9, 0.0, 0.5, 0.9, 0.998])
def test_closed_form_flux_matches_quadrature_of_definition(spin):
    radii = spacetime.isco_radius(spin) * np.array([1.01, 1.3, 2.0, 5.0, 40.0])
    closed = page_thorne_flux_geometric(radii, spin)
    numeric = np.array([_flux_by_quadrature(r, spin) for r in radii])
    # Finite-difference derivatives (h = 1e-5 r) limit the reference to ~1e-8 relative.
    np.testing.assert_allclose(closed, numeric, rtol=1e-6)


@pytest.mark.parametrize("spin", [-0.5, 0.0, 0.9, 0.998])
def test_luminosity_equals_efficiency_times_mdot_c2(spin):
    # Page & Thorne (1974) eq. 11b + energy conservation: L_inf = 2 faces x 2 pi r F E dr
    # integrated with scipy.quad to infinity (Mdot = c = 1) equals 1 - E_isco.
    r_isco = spacetime.isco_radius(spin)
    weight = lambda r: 4 * np.pi * r * page_thorne_flux_geometric(r, spin) * \
        spacetime.circular_orbit_energy(r, spin)
    near, _ = integrate.quad(weight, r_isco, 100 * r_isco, epsabs=0, epsrel=1e-11, limit=400)
    far, _ = integrate.quad(weight, 100 * r_isco, np.inf, epsabs=0, epsrel=1e-11, limit=400)
    assert abs((near + far) / radiative_efficiency(spin) - 1) < 1e-4


@pytest.mark.parametrize("spin", [0.0, 0.9])
def test_flux_vanishes_at_isco_and_tends_to_newtonian(spin):
    r_isco = spacetime.isco_radius(spin)
    # Zero torque at the ISCO (Page & Thorne 1974): F(r_isco) = 0 and F grows from 0.
    assert page_thorne_flux_geometric(r_isco, spin) == 0.0
    peak = page_thorne_flux_geometric(np.linspace(r_isco, 10 * r_isco, 500), spin).max()
    assert 0 < page_thorne_flux_geometric(r_isco * (1 + 1e-6), spin) < 1e-6 * peak
    # Shakura & Sunyaev (1973): F -> 3 G M Mdot / (8 pi r^3) for r >> r_isco.  The inner
    # boundary and relativistic corrections fall off as sqrt(r_isco / r) (4e-4 at r = 1e9 M
    # for a = 0): a 1e-3 tolerance there, and the deviation must shrink outwards.
    devs = [abs(page_thorne_flux_geometric(r, spin) * 8 * np.pi * r ** 3 / 3 - 1)
            for r in (1e5, 1e7, 1e9)]
    assert devs[2] < 1e-3 and devs[0] > devs[1] > devs[2]


def test_flux_in_cgs_units_newtonian_limit():
    k = cgs()
    mass, mdot, r = 10.0, 1e18, 1e9
    r_cm = r * k["G"] * mass * k["M_sun"] / k["c"] ** 2
    newtonian = 3 * k["G"] * mass * k["M_sun"] * mdot / (8 * np.pi * r_cm ** 3)  # Shakura & Sunyaev 1973
    assert abs(page_thorne_flux(r, 0.0, mass, mdot) / newtonian - 1) < 1e-3


def test_eddington_luminosity():
    # common practice: L_Edd = 1.26e38 (M / M_sun) erg/s for electron scattering in hydrogen.
    assert abs(eddington_luminosity(1.0) / 1.26e38 - 1) < 0.005
    assert abs(eddington_luminosity(4.3e6) / (1.26e38 * 4.3e6) - 1) < 0.005


def test_accretion_units():
    k = cgs()
    assert accretion_rate_g_per_s(2.0, "g_per_s") == 2.0
    # 1 M_sun/yr = 1.989e33 g / 3.156e7 s = 6.30e25 g/s (from memory).
    assert abs(accretion_rate_g_per_s(1.0, "msun_per_yr") / 6.30e25 - 1) < 2e-3
    mdot = accretion_rate_g_per_s(0.1, "eddington", mass_msun=10.0, spin=0.0)
    assert abs(0.0572 * mdot * k["c"] ** 2 / (0.1 * 1.26e39) - 1) < 0.01  # L = eta Mdot c^2


@pytest.mark.parametrize("bad", [0.0, -1.0, float("nan")])
def test_bad_physical_inputs_refused(bad):
    with pytest.raises(ValueError):
        page_thorne_flux(10.0, 0.0, bad, 1e18)
    with pytest.raises(ValueError):
        page_thorne_flux(10.0, 0.0, 10.0, bad)
    with pytest.raises(ValueError):
        accretion_rate_g_per_s(bad, "g_per_s")


def test_planck_against_astropy_blackbody():
    # Independent implementation: astropy.modeling.physical_models.BlackBody.
    import astropy.units as u
    from astropy.modeling.physical_models import BlackBody

    nu = np.geomspace(1e9, 1e19, 41)
    for temperature in (30.0, 5772.0, 1e7):
        reference = BlackBody(temperature=temperature * u.K)(nu * u.Hz).to(
            u.erg / (u.s * u.cm ** 2 * u.Hz * u.sr)).value
        ours = planck_nu(nu, temperature)
        mask = reference > 1e-250
        np.testing.assert_allclose(ours[mask], reference[mask], rtol=1e-10)


def test_planck_integrates_to_stefan_boltzmann():
    # Stefan–Boltzmann: integral of B_nu over nu = sigma T^4 / pi (scipy quad, in log nu).
    temperature = 1e5
    value, _ = integrate.quad(lambda s: planck_nu(np.exp(s), temperature) * np.exp(s),
                              np.log(1e10), np.log(1e18), epsrel=1e-10, limit=200)
    assert abs(value / planck_bolometric(temperature) - 1) < 1e-8


def test_wien_peak():
    # Wien's displacement law in frequency: the peak of B_nu is at h nu = 2.821 k T
    # (root of 3(1 - e^-x) = x; Rybicki & Lightman 1979, eq. 1.57).
    from scipy.optimize import minimize_scalar

    k = cgs()
    temperature = 1e4
    best = minimize_scalar(lambda x: -planck_nu(x * k["k_B"] * temperature / k["h"], temperature),
                           bounds=(1.0, 5.0), method="bounded", options={"xatol": 1e-8})
    assert abs(best.x - 2.821) < 5e-4


@pytest.mark.parametrize("g", [0.3, 0.77, 1.0, 1.6])
def test_blackbody_seen_with_g_is_blackbody_g_t(g):
    # I_nu/nu^3 invariant (Misner, Thorne & Wheeler 1973, sec. 22.6): g^3 B_nu(nu/g, T) = B_nu(nu, gT).
    nu = np.geomspace(1e12, 1e17, 50)
    temperature = 2e4
    np.testing.assert_allclose(g ** 3 * planck_nu(nu / g, temperature), planck_nu(nu, g * temperature),
                               rtol=1e-12)


def test_diluted_blackbody_keeps_bolometric_flux():
    # Shimura & Takahara (1995): B_nu(f T)/f^4 integrates to the same sigma T^4 / pi.
    temperature = 1e6
    value, _ = integrate.quad(lambda s: diluted_blackbody(np.exp(s), temperature, 1.7) * np.exp(s),
                              np.log(1e12), np.log(1e20), epsrel=1e-10, limit=200)
    assert abs(value / planck_bolometric(temperature) - 1) < 1e-8
