"""Physical units at the edges: the conversions between geometric units (G = c = M = 1) and
the units users read (solar masses, parsecs, seconds, microarcseconds).

Constants come from astropy.constants and astropy.units (imported lazily: they
cost about a second of start-up, and most renders never need them).
"""

# Units of a reported angular pixel scale: microarcseconds or milliarcseconds.
ANGLE_UNITS = ("uas", "mas")

__all__ = [
    "gravitational_radius_cm",
    "gravitational_time_s",
    "angular_gravitational_radius_uas",
]


def _astropy():
    import astropy.constants as const
    import astropy.units as u

    return const, u


def gravitational_radius_cm(mass_msun):
    """GM/c^2 in centimetres for a mass in solar masses.

    Examples
    --------
    >>> round(gravitational_radius_cm(1.0) / 1e5, 3)   # km
    1.477
    """
    const, u = _astropy()
    return float((const.G * mass_msun * const.M_sun / const.c ** 2).to(u.cm).value)


def gravitational_time_s(mass_msun):
    """GM/c^3 in seconds for a mass in solar masses."""
    const, u = _astropy()
    return float((const.G * mass_msun * const.M_sun / const.c ** 3).to(u.s).value)


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
    const, u = _astropy()
    ratio = (const.G * mass_msun * const.M_sun / const.c ** 2) / (distance_pc * u.pc)
    return float((ratio.decompose() * u.rad).to(u.uas).value)
