"""Time on the disk: brightness patterns that move with the gas, seen at their emission time.

A ray that crosses the disk at (r_em, phi_em) left it at the Boyer–Lindquist
time t_em.  The kernel integrates the regularised delay

    delay = (t_obs - t_em) - (r*_obs - r*_em),   dr*/dr = (r^2 + a^2) / Delta,

(:mod:`render.geodesics.integrator`), so

* for a camera at finite radius r_obs whose clock shows coordinate time t_obs,
  t_em = t_obs - delay - r*(r_obs) + r*(r_em);
* for the distant observer, whose r*_obs is infinite, the observer's clock is
  the retarded time u = t_obs - r*_obs, and t_em = u - delay + r*(r_em).

Both use the same tortoise coordinate :func:`tortoise_radius`, so a camera far
away and the distant observer agree once the camera's clock is read as
u = t - r*(r_obs).

Patterns (scene section ``pattern``) multiply the emission law:
I_em -> I_em (1 + contrast P), with

* ``spot``: P = exp(-d^2 / (2 size^2)), d the flat distance in the disk plane
  from the spot centre, which moves on the circular orbit at ``radius`` with the
  Keplerian angular velocity Omega = 1/(r^(3/2) + a) (Bardeen, Press &
  Teukolsky 1972, eq. 2.16), so its period at the observer is 2 pi (r^(3/2) + a);
* ``spiral``: P = ((1 + cos psi) / 2)^2 with psi = m (phi - Omega(r) t_em - phase)
  - m ln(r) / tan(pitch): m logarithmic arms whose gas at each radius turns at
  the local Keplerian Omega(r) (the arms wind up, as co-moving features must).

References
----------
Bardeen, Press & Teukolsky (1972), ApJ 178, 347.
Cunningham & Bardeen (1973), ApJ 183, 237 (images of an orbiting source).
"""

import math

import numpy as np
from numba import njit, prange

from ..spacetime.kerr import horizon_radii, keplerian_angular_velocity

__all__ = ["tortoise_radius", "emission_time", "pattern_factor", "PATTERNS"]

PATTERNS = ("none", "spot", "spiral")


def tortoise_radius(r, spin):
    """Kerr tortoise coordinate r*(r), dr*/dr = (r^2 + a^2)/Delta, in M.

    r* = r + 2 r_+ / (r_+ - r_-) ln((r - r_+)/2) - 2 r_- / (r_+ - r_-) ln((r - r_-)/2).

    References
    ----------
    Chandrasekhar (1983), The Mathematical Theory of Black Holes, sec. 63
    (partial fractions of (r^2 + a^2)/Delta).

    Examples
    --------
    >>> float(tortoise_radius(4.0, 0.0))   # 4 + 2 ln((4 - 2)/2) for a = 0
    4.0
    """
    r = np.asarray(r, dtype=float)
    r_plus, r_minus = horizon_radii(spin)
    split = r_plus - r_minus
    with np.errstate(invalid="ignore", divide="ignore"):
        if split < 1e-8:  # (near-)extremal: (r^2 + 1)/(r - 1)^2 integrates in closed form
            return r + 2.0 * np.log(np.abs(r - 1.0)) - 2.0 / (r - 1.0)
        return (r + 2.0 * r_plus / split * np.log((r - r_plus) / 2.0)
                - 2.0 * r_minus / split * np.log(np.abs(r - r_minus) / 2.0))


def emission_time(observer_time, delay, r_em, spin, observer_radius=None):
    """Boyer–Lindquist time t_em at which light seen at ``observer_time`` left the disk.

    Parameters
    ----------
    observer_time : float
        Coordinate time t of a camera at ``observer_radius``, or the retarded
        time u = t - r*_obs of the distant observer (``observer_radius=None``).
    delay : array_like
        The kernel's regularised delay (t_obs - t_em) - (r*_obs - r*_em), in M.
    r_em : array_like
        Radius of the disk crossing, in M.
    spin : float
    observer_radius : float, optional
        Radius of the camera; None for the distant observer.

    Returns
    -------
    t_em : ndarray
    """
    t_em = observer_time - np.asarray(delay, dtype=float) + tortoise_radius(r_em, spin)
    if observer_radius is not None:
        t_em = t_em - float(tortoise_radius(observer_radius, spin))
    return t_em


def pattern_factor(shape, r, phi, t_em, spin, *, radius=8.0, phase_deg=0.0, size=1.0,
                   contrast=1.0, arms=2, pitch_deg=20.0):
    """Emission multiplier 1 + contrast P(r, phi, t_em) of a co-moving pattern.

    Parameters
    ----------
    shape : {"none", "spot", "spiral"}
    r, phi, t_em : array_like
        Disk crossing radius (M), Boyer–Lindquist azimuth (rad) and emission time (M).
    spin : float
    radius, phase_deg, size, contrast, arms, pitch_deg
        The ``pattern.*`` scene keys.

    Returns
    -------
    ndarray
        >= 1 where defined; NaN where r is NaN.

    Examples
    --------
    >>> float(pattern_factor("spot", 8.0, 0.0, 0.0, 0.0, radius=8.0, contrast=3.0))
    4.0
    """
    if shape not in PATTERNS:
        raise ValueError(f"pattern shape must be one of {', '.join(PATTERNS)}, got {shape!r}")
    r = np.asarray(r, dtype=float)
    if shape == "none":
        return np.ones_like(r)
    r, phi, t_em = np.broadcast_arrays(r, np.asarray(phi, dtype=float),
                                       np.asarray(t_em, dtype=float))
    out = np.empty(r.shape)
    flat = [np.ascontiguousarray(x).reshape(-1) for x in (r, phi, t_em)] + [out.reshape(-1)]
    phase = math.radians(phase_deg)
    if shape == "spot":
        omega = float(keplerian_angular_velocity(radius, spin))
        _spot_kernel(*flat, radius, phase, omega, size, contrast)
    else:
        with np.errstate(invalid="ignore"):
            omega = keplerian_angular_velocity(np.maximum(flat[0], 1e-300), spin)
        _spiral_kernel(*flat, np.asarray(omega, dtype=float), phase, float(arms),
                       math.tan(math.radians(pitch_deg)), contrast)
    return out


@njit(parallel=True, cache=True)
def _spot_kernel(r, phi, t_em, out, radius, phase, omega, size, contrast):
    """out = 1 + contrast exp(-d^2 / (2 size^2)), the spot's centre at phase + omega t_em."""
    for i in prange(r.size):
        d2 = (r[i] * r[i] + radius * radius
              - 2.0 * r[i] * radius * math.cos(phi[i] - phase - omega * t_em[i]))
        if math.isnan(d2):
            out[i] = math.nan
        else:
            out[i] = 1.0 + contrast * math.exp(-max(d2, 0.0) / (2.0 * size * size))


@njit(parallel=True, cache=True)
def _spiral_kernel(r, phi, t_em, out, omega, phase, arms, tan_pitch, contrast):
    """out = 1 + contrast ((1 + cos psi) / 2)^2, psi = m (phi - omega t - phase) - m ln r / tan."""
    for i in prange(r.size):
        psi = arms * (phi[i] - omega[i] * t_em[i] - phase) - arms * math.log(r[i]) / tan_pitch
        half = 0.5 * (1.0 + math.cos(psi))
        out[i] = 1.0 + contrast * half * half
