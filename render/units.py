"""Physical units at the edges: the conversions between geometric units (G = c = M = 1) and
the units users read (solar masses, parsecs, seconds, microarcseconds).

Constants come from astropy.constants and astropy.units (imported lazily: they
cost about a second of start-up, and most renders never need them).
"""

import functools

# Units of a reported angular pixel scale: microarcseconds or milliarcseconds.
ANGLE_UNITS = ("uas", "mas")

__all__ = [
    "gravitational_radius_cm",
    "gravitational_time_s",
    "angular_gravitational_radius_uas",
]


@functools.lru_cache(maxsize=None)
def _per_solar_mass():
    """(GM_sun/c^2 in cm, GM_sun/c^3 in s, one parsec in cm, microarcseconds per radian).

    Taken from astropy once per process: its unit arithmetic costs about 8 ms a call,
    which a film paid on every frame.
    """
    import astropy.constants as const
    import astropy.units as u

    length = (const.G * const.M_sun / const.c ** 2).to(u.cm).value
    duration = (const.G * const.M_sun / const.c ** 3).to(u.s).value
    return float(length), float(duration), float(u.pc.to(u.cm)), float(u.rad.to(u.uas))


def gravitational_radius_cm(mass_msun):
    """GM/c^2 in centimetres for a mass in solar masses.

    Examples
    --------
    >>> round(gravitational_radius_cm(1.0) / 1e5, 3)   # km
    1.477
    """
    return float(mass_msun) * _per_solar_mass()[0]


def gravitational_time_s(mass_msun):
    """GM/c^3 in seconds for a mass in solar masses."""
    return float(mass_msun) * _per_solar_mass()[1]


def angular_gravitational_radius_uas(mass_msun, distance_pc):
    """Angle subtended by GM/c^2 at distance D, in microarcseconds (small-angle).

    References
    ----------
    Event Horizon Telescope Collaboration (2019), ApJL 875, L6, sec. 2 (theta_g = GM/(c^2 D)).

    Examples
    --------
    >>> round(angular_gravitational_radius_uas(6.5e9, 16.8e6), 1)
    3.8
    """
    length, _, parsec, uas_per_rad = _per_solar_mass()
    return float(mass_msun) * length / (float(distance_pc) * parsec) * uas_per_rad
