"""Moving observers: the local frame of a camera that moves relative to the ZAMO.

A camera with 3-velocity ``v`` measured in a local orthonormal frame
(e_t, e_r, e_theta, e_phi) (the ZAMO or static frame of :mod:`render.camera.observers`)
carries the boosted frame

    e_t' = gamma (e_t + v^j e_j),
    e_i' = e_i + gamma v_i e_t + (gamma - 1) v_i v^j e_j / v^2,

a pure boost without rotation (Misner, Thorne & Wheeler 1973, eq. 2.45), so its
spatial axes stay as parallel to the rest frame's as special relativity allows.
Pixel directions are set up in the boosted frame, so aberration and the Doppler
shift of what the camera sees follow from the same photon 4-momentum; the
photon energy it measures per unit conserved energy (``energy_ratio``) enters
the redshift factor g.

The velocity of a camera moving with coordinate velocities (dr/dt, dtheta/dt,
dphi/dt) relative to the ZAMO at its position (Bardeen, Press & Teukolsky
1972, eq. 3.2: lapse N = sqrt(Sigma Delta / A), frame dragging omega = 2 a r / A,
varpi = sqrt(A / Sigma) sin(theta)) is

    v_r = sqrt(Sigma / Delta) (dr/dt) / N,   v_theta = sqrt(Sigma) (dtheta/dt) / N,
    v_phi = varpi (dphi/dt - omega) / N,

and its clock runs at dtau/dt = N sqrt(1 - v^2).

References
----------
Bardeen, Press & Teukolsky (1972), ApJ 178, 347.
Misner, Thorne & Wheeler (1973), Gravitation, sec. 2.9 and 33.4.
"""

import numpy as np

from .kerr import horizon_radii, metric_functions

__all__ = ["boost_frame", "zamo_quantities", "velocity_from_coordinates",
           "time_dilation", "MotionError"]


class MotionError(ValueError):
    """A camera motion that is not physical (faster than light, inside the horizon...)."""


def boost_frame(tetrad, velocity):
    """Frame of an observer moving with 3-velocity ``velocity`` in the frame ``tetrad``.

    Parameters
    ----------
    tetrad : ndarray, shape (4, 4)
        Rows e_t, e_r, e_theta, e_phi (contravariant components).
    velocity : array_like, shape (3,)
        (v_r, v_theta, v_phi) in units of c, measured in ``tetrad``; |v| < 1.

    Returns
    -------
    ndarray, shape (4, 4)
        The boosted frame's rows e_t', e_r', e_theta', e_phi'.

    References
    ----------
    Misner, Thorne & Wheeler (1973), eq. 2.45 (general pure boost).

    Examples
    --------
    >>> e = np.eye(4)
    >>> b = boost_frame(e, [0.6, 0.0, 0.0])
    >>> [round(float(x), 6) for x in b[0]]
    [1.25, 0.75, 0.0, 0.0]
    """
    tetrad = np.asarray(tetrad, dtype=float)
    v = np.asarray(velocity, dtype=float).reshape(3)
    speed2 = float(v @ v)
    if not speed2 < 1.0:
        raise MotionError(f"speed {np.sqrt(speed2):.6g} c is not below the speed of light")
    if speed2 == 0.0:
        return tetrad.copy()
    gamma = 1.0 / np.sqrt(1.0 - speed2)
    spatial = tetrad[1:]
    boosted = np.empty_like(tetrad)
    boosted[0] = gamma * (tetrad[0] + v @ spatial)
    along = v @ spatial  # sum_j v_j e_j
    for i in range(3):
        boosted[i + 1] = (spatial[i] + gamma * v[i] * tetrad[0]
                          + (gamma - 1.0) * v[i] / speed2 * along)
    return boosted


def zamo_quantities(spin, r, theta):
    """Lapse N, frame-dragging omega and cylindrical radius varpi of the ZAMO at (r, theta).

    References
    ----------
    Bardeen, Press & Teukolsky (1972), ApJ 178, 347, eq. 3.2.

    Examples
    --------
    >>> n, omega, varpi = zamo_quantities(0.0, 4.0, np.pi / 2)
    >>> round(float(n ** 2), 12), float(omega), round(float(varpi), 12)
    (0.5, 0.0, 4.0)
    """
    sigma, delta, big_a = metric_functions(r, theta, spin)
    lapse = np.sqrt(sigma * delta / big_a)
    omega = 2.0 * spin * r / big_a
    varpi = np.sqrt(big_a / sigma) * np.sin(theta)
    return lapse, omega, varpi


def velocity_from_coordinates(spin, r, theta, dr_dt, dtheta_dt, dphi_dt):
    """3-velocity (v_r, v_theta, v_phi) relative to the ZAMO of coordinate motion.

    Raises :class:`MotionError` inside the horizon or when the motion is not
    slower than light.
    """
    r_plus, _ = horizon_radii(spin)
    if not r > r_plus:
        raise MotionError(f"r = {r:.6g} M is not outside the horizon r_+ = {r_plus:.6g} M")
    sigma, delta, _ = metric_functions(r, theta, spin)
    lapse, omega, varpi = zamo_quantities(spin, r, theta)
    v = np.array([np.sqrt(sigma / delta) * dr_dt, np.sqrt(sigma) * dtheta_dt,
                  varpi * (dphi_dt - omega)]) / lapse
    speed = float(np.linalg.norm(v))
    if not speed < 1.0:
        raise MotionError(f"the motion needs speed {speed:.6g} c relative to the local ZAMO "
                          f"at r = {r:.6g} M")
    return v


def time_dilation(spin, r, theta, velocity):
    """dtau/dt = N sqrt(1 - v^2) of an observer with ZAMO-relative velocity ``velocity``."""
    lapse, _, _ = zamo_quantities(spin, r, theta)
    v = np.asarray(velocity, dtype=float)
    return float(lapse * np.sqrt(1.0 - v @ v))
