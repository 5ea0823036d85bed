"""Kerr spacetime quantities in Boyer–Lindquist coordinates.

Geometric units throughout: G = c = M = 1, so radii are in units of M and the
dimensionless spin is ``spin = a / M`` with ``|spin| < 1``.

Sign convention for orbits: every circular-orbit function here describes an
orbit that moves in the +phi direction, which is the sense of rotation of the
disk.  A positive spin therefore gives prograde (co-rotating) orbits and a
negative spin gives retrograde ones: the disk counter-rotates with respect to
the hole.
"""

import numpy as np

__all__ = [
    "horizon_radii",
    "ergosphere_radius",
    "isco_radius",
    "photon_orbit_radius",
    "photon_orbit_radii",
    "keplerian_angular_velocity",
    "circular_orbit_energy",
    "circular_orbit_angular_momentum",
    "circular_orbit_time_component",
    "metric_functions",
    "check_spin",
]


def check_spin(spin):
    """Raise ``ValueError`` unless ``|spin| < 1`` and finite.

    Parameters
    ----------
    spin : float
        Dimensionless spin a/M.
    """
    spin = float(spin)
    if not np.isfinite(spin) or abs(spin) >= 1.0:
        raise ValueError(f"spin must be finite with |spin| < 1, got {spin!r}")
    return spin


def horizon_radii(spin):
    """Outer and inner horizon radii r_+ and r_-, in units of M.

    Parameters
    ----------
    spin : float or array_like
        Dimensionless spin a/M, |a| < 1.

    Returns
    -------
    r_plus, r_minus : float or ndarray
        ``1 +/- sqrt(1 - a^2)``.

    References
    ----------
    Boyer & Lindquist (1967), J. Math. Phys. 8, 265; Bardeen, Press &
    Teukolsky (1972), ApJ 178, 347, eq. 2.4 (roots of Delta = 0).

    Examples
    --------
    >>> horizon_radii(0.0)
    (2.0, 0.0)
    """
    a = np.asarray(spin, dtype=float)
    root = np.sqrt(1.0 - a * a)
    r_plus, r_minus = 1.0 + root, 1.0 - root
    if r_plus.ndim == 0:
        return float(r_plus), float(r_minus)
    return r_plus, r_minus


def ergosphere_radius(spin, theta):
    """Outer boundary of the ergoregion (static limit), in units of M.

    Parameters
    ----------
    spin : float
        Dimensionless spin a/M.
    theta : float or array_like
        Boyer–Lindquist polar angle in radians.

    Returns
    -------
    r_ergo : float or ndarray
        ``1 + sqrt(1 - a^2 cos^2 theta)``: g_tt = 0 there and static observers
        exist only outside it.

    References
    ----------
    Misner, Thorne & Wheeler (1973), Gravitation, eq. 33.9 and box 33.2.

    Examples
    --------
    >>> ergosphere_radius(0.6, np.pi / 2)
    2.0
    """
    a = float(spin)
    value = 1.0 + np.sqrt(1.0 - a * a * np.cos(theta) ** 2)
    return float(value) if np.ndim(value) == 0 else value


def isco_radius(spin):
    """Radius of the innermost stable circular orbit, in units of M.

    Parameters
    ----------
    spin : float or array_like
        Dimensionless spin a/M in (-1, 1); negative means the orbit is retrograde.

    Returns
    -------
    r : float or ndarray

    References
    ----------
    Bardeen, Press & Teukolsky (1972), ApJ 178, 347, eq. 2.21.

    Examples
    --------
    >>> round(isco_radius(0.0), 6)
    6.0
    """
    a = np.asarray(spin, dtype=float)
    z1 = 1.0 + np.cbrt(1.0 - a * a) * (np.cbrt(1.0 + a) + np.cbrt(1.0 - a))
    z2 = np.sqrt(3.0 * a * a + z1 * z1)
    r = 3.0 + z2 - np.sign(a) * np.sqrt((3.0 - z1) * (3.0 + z1 + 2.0 * z2))
    return float(r) if r.ndim == 0 else r


def photon_orbit_radius(spin):
    """Radius of the circular equatorial photon orbit moving in +phi, in units of M.

    Parameters
    ----------
    spin : float or array_like
        Dimensionless spin a/M; positive spin gives the prograde (co-rotating)
        orbit, negative spin the retrograde one.

    Returns
    -------
    r : float or ndarray
        ``2 (1 + cos(2/3 arccos(-a)))``: 3 M for Schwarzschild, 1 M (prograde)
        and 4 M (retrograde) in the extreme limit.

    References
    ----------
    Bardeen (1972), in Black Holes (Les Houches), eq. 2.18; Bardeen, Press &
    Teukolsky (1972), ApJ 178, 347, eq. 2.18.

    Examples
    --------
    >>> round(photon_orbit_radius(0.0), 12)
    3.0
    """
    a = np.asarray(spin, dtype=float)
    r = 2.0 * (1.0 + np.cos(2.0 / 3.0 * np.arccos(-a)))
    return float(r) if r.ndim == 0 else r


def photon_orbit_radii(spin):
    """Prograde and retrograde circular photon-orbit radii, in units of M.

    Here prograde means co-rotating with the hole, whatever the sign of spin.

    Parameters
    ----------
    spin : float
        Dimensionless spin a/M.

    Returns
    -------
    r_prograde, r_retrograde : float

    References
    ----------
    Bardeen (1972), in Black Holes (Les Houches), eq. 2.18.

    Examples
    --------
    >>> [round(x, 12) for x in photon_orbit_radii(0.0)]
    [3.0, 3.0]
    """
    a = abs(float(spin))
    return photon_orbit_radius(a), photon_orbit_radius(-a)


def _circular_orbit_root(r, spin):
    r = np.asarray(r, dtype=float)
    a = float(spin)
    sqrt_r = np.sqrt(r)
    with np.errstate(invalid="ignore"):
        return r, a, sqrt_r, np.sqrt(r * sqrt_r - 3.0 * sqrt_r + 2.0 * a)


def keplerian_angular_velocity(r, spin):
    """Coordinate angular velocity d(phi)/dt of a circular equatorial geodesic.

    Parameters
    ----------
    r : float or array_like
        Boyer–Lindquist radius in units of M.
    spin : float
        Dimensionless spin a/M (negative: the orbit is retrograde).

    Returns
    -------
    omega : float or ndarray
        ``1 / (r^(3/2) + a)`` in units of 1/M.

    References
    ----------
    Bardeen, Press & Teukolsky (1972), ApJ 178, 347, eq. 2.16.

    Examples
    --------
    >>> keplerian_angular_velocity(4.0, 0.0)
    0.125
    """
    r = np.asarray(r, dtype=float)
    omega = 1.0 / (r ** 1.5 + float(spin))
    return float(omega) if omega.ndim == 0 else omega


def circular_orbit_energy(r, spin):
    """Specific energy -u_t of a circular equatorial geodesic (NaN where none exists).

    Parameters
    ----------
    r : float or array_like
        Radius in units of M.
    spin : float
        Dimensionless spin a/M.

    Returns
    -------
    energy : float or ndarray
        ``(r^(3/2) - 2 r^(1/2) + a) / (r^(3/4) sqrt(r^(3/2) - 3 r^(1/2) + 2a))``.

    References
    ----------
    Bardeen, Press & Teukolsky (1972), ApJ 178, 347, eq. 2.12.

    Examples
    --------
    >>> round(circular_orbit_energy(6.0, 0.0) ** 2 * 9, 12)
    8.0
    """
    r, a, sqrt_r, root = _circular_orbit_root(r, spin)
    energy = (r * sqrt_r - 2.0 * sqrt_r + a) / (r ** 0.75 * root)
    return float(energy) if energy.ndim == 0 else energy


def circular_orbit_angular_momentum(r, spin):
    """Specific angular momentum u_phi of a circular equatorial geodesic, in units of M.

    Parameters
    ----------
    r : float or array_like
        Radius in units of M.
    spin : float
        Dimensionless spin a/M.

    Returns
    -------
    angular_momentum : float or ndarray
        ``(r^2 - 2 a r^(1/2) + a^2) / (r^(3/4) sqrt(r^(3/2) - 3 r^(1/2) + 2a))``.

    References
    ----------
    Bardeen, Press & Teukolsky (1972), ApJ 178, 347, eq. 2.13.

    Examples
    --------
    >>> round(circular_orbit_angular_momentum(6.0, 0.0) ** 2, 12)
    12.0
    """
    r, a, sqrt_r, root = _circular_orbit_root(r, spin)
    angular_momentum = (r * r - 2.0 * a * sqrt_r + a * a) / (r ** 0.75 * root)
    return float(angular_momentum) if angular_momentum.ndim == 0 else angular_momentum


def circular_orbit_time_component(r, spin):
    """Contravariant time component u^t = dt/dtau of a circular equatorial geodesic.

    Parameters
    ----------
    r : float or array_like
        Radius in units of M.
    spin : float
        Dimensionless spin a/M.

    Returns
    -------
    u_t : float or ndarray
        ``(r^(3/2) + a) / (r^(3/4) sqrt(r^(3/2) - 3 r^(1/2) + 2a))``; NaN inside
        the circular photon orbit, where no timelike circular orbit exists.

    References
    ----------
    Bardeen, Press & Teukolsky (1972), ApJ 178, 347, eqs. 2.12-2.16
    (u^t = E / (1 - Omega L) ... combined; equivalently their eq. 2.15).

    Examples
    --------
    >>> round(circular_orbit_time_component(6.0, 0.0) ** 2, 12)
    2.0
    """
    r, a, sqrt_r, root = _circular_orbit_root(r, spin)
    u_t = (r * sqrt_r + a) / (r ** 0.75 * root)
    return float(u_t) if u_t.ndim == 0 else u_t


def metric_functions(r, theta, spin):
    """The Kerr metric functions Sigma, Delta and A at (r, theta).

    Parameters
    ----------
    r, theta : float or array_like
        Boyer–Lindquist radius (M) and polar angle (rad).
    spin : float
        Dimensionless spin a/M.

    Returns
    -------
    sigma, delta, big_a : ndarray
        ``r^2 + a^2 cos^2 theta``, ``r^2 - 2r + a^2`` and
        ``(r^2 + a^2)^2 - a^2 Delta sin^2 theta``.

    References
    ----------
    Bardeen, Press & Teukolsky (1972), ApJ 178, 347, eq. 2.1.
    """
    a = float(spin)
    r = np.asarray(r, dtype=float)
    sigma = r * r + a * a * np.cos(theta) ** 2
    delta = r * r - 2.0 * r + a * a
    big_a = (r * r + a * a) ** 2 - a * a * delta * np.sin(theta) ** 2
    return sigma, delta, big_a


# A ray counts as captured once r < r_+ (1 + CAPTURE_MARGIN): the radial motion
# is regular there in Mino time, but phi and t diverge logarithmically.
CAPTURE_MARGIN = 1e-6


def capture_radius(spin):
    """Radius below which a traced ray counts as captured: r_+ (1 + CAPTURE_MARGIN), in M.

    Examples
    --------
    >>> round(capture_radius(0.0), 9)
    2.000002
    """
    r_plus, _ = horizon_radii(spin)
    return r_plus * (1.0 + CAPTURE_MARGIN)
