"""render/light/disk.py: the redshift factor of Keplerian emitters and the disk's edges.

The expected redshift factor is written out here with numpy from Bardeen, Press &
Teukolsky 1972 (BPT), independently of render.spacetime.kerr.
"""

import numpy as np
import pytest

from render.light.disk import on_disk, redshift_factor


def bpt_isco(a):
    # Bardeen, Press & Teukolsky 1972, eq. 2.21 (M = 1; a < 0 is a retrograde orbit).
    z1 = 1.0 + (1.0 - a * a) ** (1 / 3) * ((1.0 + a) ** (1 / 3) + (1.0 - a) ** (1 / 3))
    z2 = np.sqrt(3.0 * a * a + z1 * z1)
    return 3.0 + z2 - np.sign(a) * np.sqrt((3.0 - z1) * (3.0 + z1 + 2.0 * z2))


def bpt_redshift(r, lam, a, energy_ratio=1.0):
    # BPT 1972, eq. 2.16: Omega = 1 / (r^(3/2) + a).
    omega = 1.0 / (r ** 1.5 + a)
    # BPT 1972, sec. II (circular equatorial orbits), dt/dtau of the prograde orbit,
    # from memory: u^t = (r^(3/2) + a) / (r^(3/4) sqrt(r^(3/2) - 3 r^(1/2) + 2 a)).
    u_t = (r ** 1.5 + a) / (r ** 0.75 * np.sqrt(r ** 1.5 - 3.0 * np.sqrt(r) + 2.0 * a))
    # Cunningham & Bardeen 1973, eq. 8: g = 1 / (u^t (1 - Omega lam)) for E_obs = E.
    return energy_ratio / (u_t * (1.0 - omega * lam))


# Relative 1e-12: the same closed form evaluated in a different order; the rounding of
# a few dozen operations on numbers of order 1-100 stays far below it.
REL = 1e-12


@pytest.mark.parametrize("spin", [0.0, 0.5, 0.9, 0.998, -0.7])
def test_redshift_factor_matches_bpt_written_out(spin):
    # Just outside the ISCO, a few ISCO radii, and far out (10 ISCO + 50 M).
    radii = bpt_isco(spin) * np.array([1.0001, 1.5, 3.0, 10.0]) + np.array([0, 0, 0, 50.0])
    lams = np.array([-6.0, -1.0, 0.0, 2.5, 7.0])
    r, lam = np.meshgrid(radii, lams)
    got = redshift_factor(r, lam, spin)
    np.testing.assert_allclose(got, bpt_redshift(r, lam, spin), rtol=REL)


def test_redshift_factor_carries_the_observer_energy_ratio():
    # g scales linearly with the observer-measured energy per unit E (disk.py docstring,
    # Cunningham & Bardeen 1973, eq. 8 with E_obs = energy_ratio * E).
    got = redshift_factor(np.array([8.0, 12.0]), 3.0, 0.5, energy_ratio=np.array([0.8, 1.3]))
    np.testing.assert_allclose(got, bpt_redshift(np.array([8.0, 12.0]), 3.0, 0.5,
                                                 np.array([0.8, 1.3])), rtol=REL)


def test_schwarzschild_isco_face_on_value():
    # A face-on distant observer sees lam = 0; at r = 6M, a = 0: u^t = (1 - 3/r)^(-1/2)
    # = sqrt(2) (Schwarzschild circular orbit, from memory), so g = 1/sqrt(2).
    assert float(redshift_factor(6.0, 0.0, 0.0)) == pytest.approx(2 ** -0.5, rel=REL)


@pytest.mark.parametrize("spin", [0.0, 0.7, -0.5])
def test_nan_inside_the_isco_and_finite_from_it(spin):
    isco = bpt_isco(spin)
    inside = redshift_factor(np.array([isco * 0.999, isco * 0.9]), 1.0, spin)
    assert np.all(np.isnan(inside))
    # 1e-9 above the BPT ISCO (the module allows 1e-12 of rounding below it).
    assert np.isfinite(redshift_factor(isco * (1 + 1e-9), 1.0, spin))
    # "keplerian" keeps the unstable circular orbit inside the ISCO (BPT written out).
    r = isco * 0.95
    assert float(redshift_factor(r, 1.0, spin, inside_isco="keplerian")) == pytest.approx(
        bpt_redshift(r, 1.0, spin), rel=REL)


def test_nan_radius_gives_nan():
    assert np.isnan(redshift_factor(np.nan, 0.0, 0.3))


def test_on_disk_edges_are_inclusive_and_nan_is_off():
    r_in, r_out = 2.5, 20.0
    radii = np.array([r_in, r_out, np.nextafter(r_in, 0), np.nextafter(r_out, 99), 7.0,
                      np.nan])
    assert on_disk(radii, r_in, r_out).tolist() == [True, True, False, False, True, False]
