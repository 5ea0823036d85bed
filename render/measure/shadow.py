"""The analytic shadow: the critical curve of a Kerr black hole and its moments.

The edge of the shadow (the *critical curve*) is the image of the rays that
approach the unstable spherical photon orbits asymptotically.  An orbit of
Boyer–Lindquist radius r between the prograde and retrograde circular photon
orbits has the constants of motion (Bardeen 1973, eqs. 2.11–2.12; written as in
Teo 2003, eqs. 11–12)

    lam(r) = -(r^3 - 3 r^2 + a^2 r + a^2) / (a (r - 1)),
    eta(r) = -r^3 (r^3 - 6 r^2 + 9 r - 4 a^2) / (a^2 (r - 1)^2),

and a distant observer at inclination i sees it at (Bardeen 1973, eq. 2.10)

    alpha = -lam / sin i,       beta = +-sqrt(eta + a^2 cos^2 i - lam^2 cot^2 i),

in the core's convention (alpha to the right, beta up; :mod:`render.camera.observers`).
The retrograde orbits (large r, lam < 0) lie at alpha > 0, so for a > 0 the
shadow is pushed towards +alpha and flattened on its -alpha side, where the
disk approaches the observer.

Finite-distance camera
    For ``distance`` given, the curve is computed *exactly* in the camera's
    frame (not in the distant-observer approximation): the photon's covariant
    momentum at the camera, p = (-1, sqrt(R)/Delta, sqrt(Theta), lam), is
    projected on the camera's orthonormal frame (:func:`render.camera.observers.observer_frame`)
    and mapped to the pinhole image plane at the hole's distance as the camera
    does, x = -r_o p_(phi)/p_(r), y = r_o p_(theta)/p_(r).  The
    distant-observer curve differs from it by a relative amount of order
    M / r_o (0.1 % in size at r_o = 1000 M; Synge 1966 for a = 0:
    sin(theta_sh) = sqrt(27) M sqrt(1 - 2M/r_o) / r_o).

Moments (all in M, all of the region inside the closed curve)
    ``area``                 A = (1/2) closed-integral (alpha dbeta - beta dalpha)
    ``radius``               area-equivalent radius sqrt(A / pi)
    ``centroid_alpha``, ``centroid_beta``  centroid of the enclosed region
    ``alpha_min``, ``alpha_max``, ``beta_min``, ``beta_max``  extents
    ``width``, ``height``    alpha_max - alpha_min, beta_max - beta_min
    ``displacement``         (alpha_max + alpha_min)/2, the horizontal offset of
                             the curve's centre (Johannsen & Psaltis 2010, D)
    ``mean_radius``          R_bar = (1/2 pi) integral R(phi) dphi, R measured from
                             (displacement, (beta_max+beta_min)/2)
    ``asymmetry``            2 sqrt((1/2 pi) integral (R - R_bar)^2 dphi)
                             (Johannsen & Psaltis 2010, their A; definitions from memory)
    ``circularity``          rms(R - R_bar) / R_bar (dimensionless)
    ``perimeter``            length of the curve

References
----------
Bardeen (1973), in Black Holes (Les Houches), 215.
Teo (2003), Gen. Relativ. Gravit. 35, 1909.
Synge (1966), MNRAS 131, 463.
Johannsen & Psaltis (2010), ApJ 718, 446.
"""

import math

import numpy as np

from ..camera.observers import FRAMES, observer_frame
from ..spacetime.kerr import check_spin, metric_functions, photon_orbit_radii

__all__ = [
    "spherical_photon_orbit_constants",
    "critical_curve",
    "shadow_moments",
    "closed_curve_moments",
    "DEFAULT_CURVE_POINTS",
]

DEFAULT_CURVE_POINTS = 4096
# Below this |a| the spherical-orbit formulas (which divide by a) lose
# precision and the curve is the Schwarzschild circle to better than 1e-10 M.
_SCHWARZSCHILD_SPIN = 1e-10


def spherical_photon_orbit_constants(r, spin):
    """Constants of motion (lam, eta) of the spherical photon orbit of radius r.

    Parameters
    ----------
    r : float or array_like
        Orbit radius in M, between the prograde and retrograde circular photon orbits.
    spin : float
        a/M, nonzero.

    Returns
    -------
    lam, eta : ndarray
        L/E and Q/E^2.

    References
    ----------
    Bardeen (1973), eqs. 2.11-2.12; Teo (2003), eqs. 11-12.

    Examples
    --------
    >>> lam, eta = spherical_photon_orbit_constants(3.0, 1e-3)
    >>> round(float(lam ** 2 + eta), 3)
    27.0
    """
    r = np.asarray(r, dtype=float)
    a = float(spin)
    lam = -(r ** 3 - 3.0 * r ** 2 + a * a * r + a * a) / (a * (r - 1.0))
    eta = -r ** 3 * (r ** 3 - 6.0 * r ** 2 + 9.0 * r - 4.0 * a * a) / (a * a * (r - 1.0) ** 2)
    return lam, eta


def _check_inclination(inclination_deg):
    inclination = float(inclination_deg)
    if not 0.0 <= inclination <= 180.0:
        raise ValueError(f"inclination_deg must be in [0, 180], got {inclination_deg!r}")
    # The shadow is symmetric under beta -> -beta, so i and 180 - i agree.
    return min(inclination, 180.0 - inclination)


class _Branch:
    """The upper half (beta >= 0) of the critical curve as a function of orbit radius.

    ``point(r)`` maps orbit radii in [r1, r2] to image-plane (x, y) with y >= 0.
    For a pole-on view the curve is a circle of radius ``circle_radius``.
    """

    def __init__(self, spin, inclination_deg, distance=None, frame="zamo"):
        a = check_spin(spin)
        self.mirror = a < 0.0  # a < 0 is the a > 0 picture reflected in alpha
        self.a = abs(a)
        self.inclination = _check_inclination(inclination_deg)
        self.distance = None if distance is None else float(distance)
        self.frame = frame
        if frame not in FRAMES:
            raise ValueError(f"frame must be one of {', '.join(FRAMES)}, got {frame!r}")
        theta = np.radians(self.inclination)
        self.sin_i = 0.0 if self.inclination == 0.0 else np.sin(theta)
        self.cos_i = 1.0 if self.inclination == 0.0 else np.cos(theta)
        self.theta = theta
        r_pro, r_ret = photon_orbit_radii(self.a)
        if self.distance is not None and not self.distance > r_ret:
            raise ValueError(f"the camera must lie outside the photon region (r > {r_ret:.6g} M "
                             f"for spin {spin:g}), got {self.distance:g} M")
        from scipy.optimize import brentq  # here: scipy.optimize costs ~1 s of every start

        self.circle_radius = None
        if self.a < _SCHWARZSCHILD_SPIN:
            self.r1 = self.r2 = 3.0
            self.circle_radius = self._pole_radius(3.0)
            return
        if self.sin_i == 0.0:
            # Only rays with L = 0 reach the axis: the single orbit with lam = 0.
            r0 = brentq(lambda r: spherical_photon_orbit_constants(r, self.a)[0], r_pro, r_ret,
                        xtol=1e-15, rtol=1e-15)
            self.r1 = self.r2 = r0
            self.circle_radius = self._pole_radius(r0)
            return
        r0 = brentq(lambda r: spherical_photon_orbit_constants(r, self.a)[0], r_pro, r_ret,
                    xtol=1e-15, rtol=1e-15)
        self.r1 = r_pro if self.theta_potential(r_pro) >= 0.0 else brentq(
            self.theta_potential, r_pro, r0, xtol=1e-15, rtol=1e-15)
        self.r2 = r_ret if self.theta_potential(r_ret) >= 0.0 else brentq(
            self.theta_potential, r0, r_ret, xtol=1e-15, rtol=1e-15)

    def theta_potential(self, r):
        """Theta(theta_o) = beta^2 of the orbit of radius r (Bardeen 1973, eq. 2.10)."""
        if self.a < _SCHWARZSCHILD_SPIN:
            return 27.0 + 0.0 * np.asarray(r, dtype=float)
        lam, eta = spherical_photon_orbit_constants(r, self.a)
        cot = self.cos_i / self.sin_i
        return eta + self.a ** 2 * self.cos_i ** 2 - lam ** 2 * cot ** 2

    def _constants(self, r):
        if self.a < _SCHWARZSCHILD_SPIN:
            return 0.0 * np.asarray(r, dtype=float), 27.0 + 0.0 * np.asarray(r, dtype=float)
        return spherical_photon_orbit_constants(r, self.a)

    def _radial_potential(self, lam, eta):
        r_o, a = self.distance, self.a
        delta = r_o * r_o - 2.0 * r_o + a * a
        return (r_o ** 2 + a * a - a * lam) ** 2 - delta * (eta + (lam - a) ** 2), delta

    def _pole_radius(self, r):
        lam, eta = self._constants(r)
        big_theta = float(eta) + self.a ** 2
        if self.distance is None:
            return float(np.sqrt(big_theta))
        radial, delta = self._radial_potential(0.0, float(eta))
        # Local components in the camera frame: p_(theta)/p_(r) = sqrt(Theta Delta / R).
        return self.distance * float(np.sqrt(big_theta * delta / radial))

    def point(self, r):
        """Image-plane (x, y >= 0) of the upper-half point of orbit radius r."""
        r = np.asarray(r, dtype=float)
        lam, eta = self._constants(r)
        big_theta = np.maximum(self.theta_potential(r), 0.0)
        if self.distance is None:
            x, y = -lam / self.sin_i, np.sqrt(big_theta)
        else:
            r_o = self.distance
            sigma, delta, _ = metric_functions(r_o, self.theta, self.a)
            radial, _ = self._radial_potential(lam, eta)
            tetrad = observer_frame(self.a, r_o, self.theta, self.frame)
            # Covariant photon momentum at the camera (outgoing; p_theta > 0 is a
            # photon moving south, seen above the centre), projected on the
            # frame: p_(a) = e_(a)^mu p_mu.
            p_t = -np.ones_like(lam)
            p_r = np.sqrt(radial) / delta
            p_theta = np.sqrt(big_theta)
            p_phi = lam
            local = [tetrad[k, 0] * p_t + tetrad[k, 1] * p_r + tetrad[k, 2] * p_theta
                     + tetrad[k, 3] * p_phi for k in range(4)]
            x = -r_o * local[3] / local[1]
            y = r_o * local[2] / local[1]
        if self.mirror:
            x = -x
        return x, y


def critical_curve(spin, inclination_deg, n_points=DEFAULT_CURVE_POINTS, *, distance=None,
                   frame="zamo"):
    """The shadow's edge as a dense closed curve in the image plane, in M.

    Parameters
    ----------
    spin : float
        a/M with |a| < 1 (negative: the a > 0 curve reflected in alpha).
    inclination_deg : float
        Observer inclination in [0, 180] degrees.
    n_points : int
        Points on the curve (the first point is repeated at the end).
    distance : float, optional
        Boyer–Lindquist radius of a finite-distance camera in M; then the curve
        is exact in that camera's image plane (see the module docstring).
        ``None`` (default): the distant observer.
    frame : {"zamo", "static"}
        The camera's frame (ignored for the distant observer).

    Returns
    -------
    alpha, beta : ndarray, shape (n_points + 1,)
        Counter-clockwise, starting on the -alpha side at beta = 0.  The
        parameter t in [0, 2 pi) is uniform: r(t) = r1 + (r2 - r1)(1 - cos t)/2
        on the upper half (beta >= 0) and its mirror image below, which makes
        the curve an analytic periodic function of t.

    References
    ----------
    Bardeen (1973), eqs. 2.10-2.12; Teo (2003).

    Examples
    --------
    >>> alpha, beta = critical_curve(0.0, 60.0, 64)
    >>> round(float(np.hypot(alpha, beta).max()), 9)  # sqrt(27) (Synge 1966)
    5.196152423
    """
    branch = _Branch(spin, inclination_deg, distance, frame)
    return _sample(branch, int(n_points))


def _sample(branch, n_points):
    if n_points < 8:
        raise ValueError(f"n_points must be >= 8, got {n_points!r}")
    t = 2.0 * np.pi * np.arange(n_points) / n_points
    if branch.circle_radius is not None:
        alpha = -branch.circle_radius * np.cos(t)
        beta = -branch.circle_radius * np.sin(t)
    else:
        r = branch.r1 + (branch.r2 - branch.r1) * 0.5 * (1.0 - np.cos(t))
        alpha, beta = branch.point(r)
        # t in (pi, 2 pi) runs back along the lower half: counter-clockwise
        # overall (from -alpha down through -beta to +alpha and back over the top).
        beta = -beta * np.sign(np.sin(t))
        if branch.mirror:
            beta = -beta
    return np.append(alpha, alpha[0]), np.append(beta, beta[0])


def _periodic_derivative(values):
    """d values / dt for samples uniform in t over one period (spectral)."""
    n = values.size
    spectrum = np.fft.rfft(values)
    k = np.fft.rfftfreq(n, d=1.0 / n)
    if n % 2 == 0:
        spectrum[-1] = 0.0
    return np.fft.irfft(1j * k * spectrum, n)


def closed_curve_moments(alpha, beta, *, smooth=True):
    """Moments of the region inside a closed curve (see the module docstring).

    Parameters
    ----------
    alpha, beta : array_like
        Points of a closed curve, in order (either orientation); a repeated
        final point equal to the first is dropped.
    smooth : bool
        The points are uniform in a parameter in which the curve is smooth and
        periodic (as returned by :func:`critical_curve` or sampled uniformly in
        polar angle): Green's theorem is then evaluated with spectral
        derivatives, accurate far beyond the polygon (shoelace) rule, which is
        used when ``smooth`` is false.

    Returns
    -------
    dict of float
        In M (M^2 for the area).

    Examples
    --------
    >>> t = np.linspace(0, 2 * np.pi, 65)[:-1]
    >>> m = closed_curve_moments(1 + 2 * np.cos(t), 2 * np.sin(t))
    >>> round(m["area"] / np.pi, 12), round(m["centroid_alpha"], 12)
    (4.0, 1.0)
    """
    x = np.asarray(alpha, dtype=float).ravel()
    y = np.asarray(beta, dtype=float).ravel()
    scale = max(float(np.ptp(x)), float(np.ptp(y)), 1e-300) if x.size else 1.0
    if x.size > 1 and math.hypot(x[-1] - x[0], y[-1] - y[0]) <= 1e-12 * scale:
        x, y = x[:-1], y[:-1]
    n = x.size
    if n < 3:
        raise ValueError("a closed curve needs at least 3 points")
    if smooth:
        dx, dy = _periodic_derivative(x), _periodic_derivative(y)
        dt = 2.0 * np.pi / n
        area = 0.5 * np.sum(x * dy - y * dx) * dt
        mx = 0.5 * np.sum(x * x * dy) * dt  # integral of alpha dA
        my = -0.5 * np.sum(y * y * dx) * dt
        perimeter = np.sum(np.hypot(dx, dy)) * dt
    else:
        xn, yn = np.roll(x, -1), np.roll(y, -1)
        cross = x * yn - xn * y
        area = 0.5 * np.sum(cross)
        mx = np.sum((x + xn) * cross) / 6.0
        my = np.sum((y + yn) * cross) / 6.0
        perimeter = np.sum(np.hypot(xn - x, yn - y))
    centroid_alpha, centroid_beta = mx / area, my / area
    area = abs(area)
    alpha_min, alpha_max = float(x.min()), float(x.max())
    beta_min, beta_max = float(y.min()), float(y.max())
    centre_x = 0.5 * (alpha_min + alpha_max)
    centre_y = 0.5 * (beta_min + beta_max)
    radius_of, phi = np.hypot(x - centre_x, y - centre_y), np.arctan2(y - centre_y, x - centre_x)
    order = np.argsort(phi)
    phi_sorted, radius_sorted = phi[order], radius_of[order]
    grid = np.linspace(-np.pi, np.pi, 4096, endpoint=False)
    radius_uniform = np.interp(grid, phi_sorted, radius_sorted, period=2.0 * np.pi)
    mean_radius = float(radius_uniform.mean())
    rms = float(np.sqrt(np.mean((radius_uniform - mean_radius) ** 2)))
    return {
        "area": float(area),
        "radius": float(np.sqrt(area / np.pi)),
        "centroid_alpha": float(centroid_alpha),
        "centroid_beta": float(centroid_beta),
        "alpha_min": alpha_min, "alpha_max": alpha_max,
        "beta_min": beta_min, "beta_max": beta_max,
        "width": alpha_max - alpha_min, "height": beta_max - beta_min,
        "displacement": float(centre_x),
        "mean_radius": mean_radius,
        "asymmetry": 2.0 * rms,
        "circularity": rms / mean_radius,
        "perimeter": float(perimeter),
    }


def shadow_moments(spin, inclination_deg, *, distance=None, frame="zamo",
                   n_points=DEFAULT_CURVE_POINTS):
    """Area, centroid, extents and asymmetry of the analytic shadow, in M.

    Parameters
    ----------
    spin, inclination_deg, distance, frame, n_points
        As for :func:`critical_curve`.

    Returns
    -------
    dict of float
        The keys of :func:`closed_curve_moments` (``area``, ``radius``,
        ``centroid_alpha``, ``alpha_min``, ``alpha_max``, ``beta_max``, ...),
        with the extents refined beyond the sampling: alpha_min and alpha_max
        are the curve's ends at the bounding orbit radii, beta_max is maximised
        over r with a bounded scalar minimiser.

    References
    ----------
    Bardeen (1973); Johannsen & Psaltis (2010), ApJ 718, 446 (asymmetry).

    Examples
    --------
    >>> m = shadow_moments(0.0, 17.0)
    >>> round(m["area"] / np.pi, 9), round(m["radius"] ** 2, 9)   # Synge (1966)
    (27.0, 27.0)
    """
    from scipy.optimize import minimize_scalar

    branch = _Branch(spin, inclination_deg, distance, frame)
    moments = closed_curve_moments(*_sample(branch, int(n_points)))
    if branch.circle_radius is None:
        ends = [float(branch.point(r)[0]) for r in (branch.r1, branch.r2)]
        best = minimize_scalar(lambda r: -branch.point(r)[1], bounds=(branch.r1, branch.r2),
                               method="bounded", options={"xatol": 1e-12})
        top = float(-best.fun)
        moments.update(alpha_min=min(ends), alpha_max=max(ends), beta_max=top, beta_min=-top)
    else:
        radius = branch.circle_radius
        moments.update(alpha_min=-radius, alpha_max=radius, beta_max=radius, beta_min=-radius)
    moments["width"] = moments["alpha_max"] - moments["alpha_min"]
    moments["height"] = moments["beta_max"] - moments["beta_min"]
    moments["displacement"] = 0.5 * (moments["alpha_max"] + moments["alpha_min"])
    return moments
