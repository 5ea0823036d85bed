"""render/units.py: geometric units -> physical units, against constants written out here.

The expected values use the IAU's exact nominal numbers, not astropy's Quantity
arithmetic that the module uses, so a slip in the module's unit algebra (a
missing c, cm for m, rad for uas) shows.
"""

import math

import pytest

from render.units import (angular_gravitational_radius_uas, gravitational_radius_cm,
                          gravitational_time_s)

# IAU 2015 Resolution B3: nominal solar mass parameter GM_sun = 1.3271244e20 m^3 s^-2 (exact).
GM_SUN_SI = 1.3271244e20
# SI definition of the metre: c = 299 792 458 m/s (exact).
C_SI = 299792458.0
# IAU 2012 Resolution B2: au = 149 597 870 700 m (exact); IAU 2015 Resolution B2:
# pc = (648000 / pi) au (exact).
PC_SI = 648000.0 / math.pi * 149597870700.0
UAS_PER_RAD = 180.0 / math.pi * 3600.0 * 1e6

# astropy's M_sun is GM_sun(nominal) / G (CODATA 2018), so G * M_sun rounds back to the
# nominal value up to float rounding and the last digit of G: 1e-9 relative covers that
# with room while catching any real unit error (those are factors of 10^n or c).
REL = 1e-9


@pytest.mark.parametrize("mass", [1.0, 10.0, 6.5e9])
def test_gravitational_radius_is_gm_over_c_squared(mass):
    expected_cm = GM_SUN_SI * mass / C_SI ** 2 * 100.0
    assert gravitational_radius_cm(mass) == pytest.approx(expected_cm, rel=REL)


def test_gravitational_radius_of_the_sun_is_1_477_km():
    # from memory: GM_sun / c^2 = 1.4766 km, a textbook number.
    assert gravitational_radius_cm(1.0) / 1e5 == pytest.approx(1.4766, abs=1e-4)


@pytest.mark.parametrize("mass", [1.0, 4.3e6])
def test_gravitational_time_is_gm_over_c_cubed(mass):
    assert gravitational_time_s(mass) == pytest.approx(GM_SUN_SI * mass / C_SI ** 3, rel=REL)
    # from memory: GM_sun / c^3 = 4.925 microseconds.
    assert gravitational_time_s(1.0) == pytest.approx(4.925e-6, rel=1e-3)


@pytest.mark.parametrize("mass,distance_pc", [(6.5e9, 16.8e6), (4.0e6, 8.2e3), (1.0, 1.0)])
def test_angular_gravitational_radius_is_gm_over_c2_d(mass, distance_pc):
    expected = GM_SUN_SI * mass / C_SI ** 2 / (distance_pc * PC_SI) * UAS_PER_RAD
    # Small-angle: theta = GM/(c^2 D) in radians (Event Horizon Telescope Collaboration
    # 2019, ApJL 875, L6, sec. 2).
    assert angular_gravitational_radius_uas(mass, distance_pc) == pytest.approx(expected, rel=REL)


def test_m87_angular_scale_is_about_3_8_uas():
    # Event Horizon Telescope Collaboration 2019, ApJL 875, L6: theta_g = 3.8 uas for
    # M = 6.5e9 M_sun at D = 16.8 Mpc (quoted to two digits, hence 0.05 uas).
    assert angular_gravitational_radius_uas(6.5e9, 16.8e6) == pytest.approx(3.8, abs=0.05)
