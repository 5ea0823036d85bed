"""Camera paths: where a sequence's camera is, how it moves and what its clock reads per frame.

``animation.camera_path`` moves a camera: ``still`` (at rest in
``observer.frame`` wherever the keyframes put it), ``orbit`` (circular at
``observer.distance`` and constant inclination with dphi/dt =
``angular_velocity`` or the Keplerian 1/(r^1.5 + a), which is a geodesic in the
equatorial plane), ``plunge`` (free fall from rest at infinity with zero
angular momentum and Carter constant: E = 1, L = Q = 0 keep theta fixed exactly)
or ``keyframed`` (along the keyframed distance, inclination and azimuth, at the
speed the keyframes imply).  Moving cameras are boosted from the ZAMO frame
(:mod:`render.spacetime.motion`).  Frame k happens at the observer's own clock
``k x animation.time_step``: the proper time of a camera, the retarded time of
the distant observer.

References
----------
Bardeen, Press & Teukolsky (1972), ApJ 178, 347 (orbits, ZAMO);
Misner, Thorne & Wheeler (1973), sec. 33.5 (Kerr geodesic first integrals).
"""

import numpy as np

from ..spacetime.kerr import horizon_radii, keplerian_angular_velocity, metric_functions
from ..spacetime.motion import (MotionError, time_dilation, velocity_from_coordinates,
                                zamo_quantities)
from .keyframes import interpolate

__all__ = ["camera_states"]


def camera_states(scene, scenes, tracks, path, step, frames):
    """(clock, coordinate time, position dict or None, velocity or None) per frame.

    Parameters
    ----------
    scene : Scene
        The sequence's scene.
    scenes : list of Scene
        Each frame's scene with the keyframed values applied.
    tracks : dict
        The keyframe tracks (:func:`render.film.keyframes.keyframe_tracks`).
    path : str
        ``animation.camera_path``.
    step : float
        ``animation.time_step``: the observer's clock between frames, M.
    frames : int

    Returns
    -------
    list of tuple
        The position is a dict of observer keys for a moving camera (None when
        the frame scene already has it); the velocity is relative to the ZAMO.

    Raises
    ------
    MotionError
        A path that no camera can follow (inside the horizon, faster than light...).
    """
    clocks = [k * step for k in range(frames)]
    if scene["observer.placement"] == "distant":
        return [(c, c, None, None) for c in clocks]
    if path == "still":
        return _still_states(scene.spin, scenes, clocks, step)
    if path == "orbit":
        return _orbit_states(scene, scenes, clocks)
    if path == "plunge":
        return _plunge_states(scene, clocks)
    return _keyframed_states(scene, tracks, clocks, step)


def _still_states(spin, scenes, clocks, step):
    """A camera at rest: coordinate time from its clock rate dtau/dt, by the trapezoid rule."""
    rates = []
    for s in scenes:
        r, theta = s["observer.distance"], np.radians(s["observer.inclination"])
        if s["observer.frame"] == "zamo":
            rates.append(float(zamo_quantities(spin, r, theta)[0]))
        else:
            sigma, _, _ = metric_functions(r, theta, spin)
            rates.append(float(np.sqrt(1.0 - 2.0 * r / sigma)))
    frames = len(clocks)
    t = np.concatenate([[0.0], np.cumsum(
        [0.5 * step * (1 / rates[j] + 1 / rates[j + 1]) for j in range(frames - 1)])])
    return [(clocks[k], float(t[k]), None, None) for k in range(frames)]


def _orbit_states(scene, scenes, clocks):
    """A circular orbit at each frame's distance and inclination, at constant dphi/dt."""
    spin = scene.spin
    states = []
    t = 0.0
    phi = np.radians(scene["observer.azimuth"])
    previous = None
    for k, s in enumerate(scenes):
        r = s["observer.distance"]
        inclination = s["observer.inclination"]
        if not 0.0 < inclination < 180.0:
            raise MotionError(f"frame {k}: an orbit needs 0 < observer.inclination < 180 "
                              f"(got {inclination:g})")
        theta = np.radians(inclination)
        omega = scene["animation.angular_velocity"]
        if omega is None:
            omega = float(keplerian_angular_velocity(r, spin))
            if not np.isfinite(omega):
                raise MotionError(f"frame {k}: no circular orbit at r = {r:.6g} M")
        try:
            v = velocity_from_coordinates(spin, r, theta, 0.0, 0.0, omega)
        except MotionError as exc:
            raise MotionError(f"frame {k}: {exc} (dphi/dt = {omega:.6g} rad/M); inside the "
                              f"photon orbit or the ergoregion a slower orbit is impossible")
        rate = time_dilation(spin, r, theta, v)
        if previous is not None:
            dt = (clocks[k] - clocks[k - 1]) * 0.5 * (1.0 / rate + 1.0 / previous[0])
            t += dt
            phi += 0.5 * (omega + previous[1]) * dt
        previous = (rate, omega)
        position = {"observer.distance": r, "observer.azimuth": float(np.degrees(phi))}
        states.append((clocks[k], t, position, tuple(float(x) for x in v)))
    return states


def _plunge_states(scene, clocks):
    """Free fall with E = 1, L = Q = 0 (theta constant): integrate r, t, phi in proper time."""
    from scipy.integrate import solve_ivp

    a = scene.spin
    r0 = scene["observer.distance"]
    inclination = scene["observer.inclination"]
    theta = np.radians(inclination)
    r_plus, _ = horizon_radii(a)

    def rhs(tau, y):
        r = y[0]
        sigma, delta, big_a = metric_functions(r, theta, a)
        # Misner, Thorne & Wheeler (1973), eq. 33.32 with E = 1, L = Q = 0:
        # Sigma dr/dtau = -sqrt(2 r (r^2 + a^2)), dt/dtau = A/(Sigma Delta), dphi/dtau = 2ar/(Sigma Delta).
        return [-np.sqrt(2.0 * r * (r * r + a * a)) / sigma, big_a / (sigma * delta),
                2.0 * a * r / (sigma * delta)]

    def near_horizon(tau, y):
        return y[0] - r_plus * (1.0 + 1e-3)

    near_horizon.terminal = True
    end = clocks[-1]
    solution = solve_ivp(rhs, (0.0, end if end > 0 else 1.0), [r0, 0.0, 0.0],
                         t_eval=clocks, events=near_horizon, rtol=1e-10, atol=1e-12)
    if solution.t_events[0].size:
        tau_h = float(solution.t_events[0][0])
        k = next(i for i, c in enumerate(clocks) if c >= tau_h)
        raise MotionError(f"the camera reaches the horizon r_+ = {r_plus:.6g} M at proper "
                          f"time {tau_h:.6g} M, before frame {k} ({clocks[k]:.6g} M); use "
                          f"fewer frames or a shorter animation.time_step")
    states = []
    for k in range(len(clocks)):
        r, t, dphi = solution.y[:, k]
        lapse, _, _ = zamo_quantities(a, r, theta)
        # ZAMO-measured energy E/N = 1/N: gamma = 1/N, radial speed sqrt(1 - N^2), inward.
        v = (-float(np.sqrt(max(1.0 - lapse * lapse, 0.0))), 0.0, 0.0)
        position = {"observer.distance": float(r),
                    "observer.azimuth": float(scene["observer.azimuth"] + np.degrees(dphi))}
        states.append((clocks[k], float(t), position, v))
    return states


def _keyframed_states(scene, tracks, clocks, step):
    """Positions from the keyframes; dt/dframe from dtau/dframe = time_step."""
    a = scene.spin
    default = scene["animation.interpolation"]

    def position(f):
        out = []
        for key in ("observer.distance", "observer.inclination", "observer.azimuth"):
            out.append(interpolate(tracks[key], f, default) if key in tracks else scene[key])
        return out[0], np.radians(out[1]), np.radians(out[2])

    def derivative(f, h=1e-4):
        lo, hi = position(f - h), position(f + h)
        return [(y - x) / (2 * h) for x, y in zip(lo, hi)]

    def dt_dframe(f):
        r, theta, _ = position(f)
        dr, dth, dph = derivative(f)
        sigma, delta, big_a = metric_functions(r, theta, a)
        lapse, omega, varpi = zamo_quantities(a, r, theta)
        # -dtau^2 = g_ab dx^a dx^b per frame, solved for T = dt/dframe (future root):
        # (N^2 - varpi^2 omega^2) T^2 + 2 varpi^2 omega phi' T - (varpi^2 phi'^2 + S + dtau^2) = 0.
        qa = lapse ** 2 - (varpi * omega) ** 2
        if not qa > 0.0:
            raise MotionError(f"at frame {f:.4g} the camera is in the ergoregion (r = {r:.6g} M), "
                              "where a keyframed path is not supported")
        qb = 2.0 * varpi ** 2 * omega * dph
        qc = -(varpi ** 2 * dph ** 2 + sigma / delta * dr ** 2 + sigma * dth ** 2 + step ** 2)
        return (-qb + np.sqrt(qb * qb - 4.0 * qa * qc)) / (2.0 * qa), (r, theta, dr, dth, dph)

    r_plus, _ = horizon_radii(a)
    substeps = 8
    t = 0.0
    states = []
    for k in range(len(clocks)):
        if k > 0:
            grid = np.linspace(k - 1, k, substeps + 1)
            values = [dt_dframe(f)[0] for f in grid]
            t += float(np.trapezoid(values, grid) if hasattr(np, "trapezoid")
                       else np.trapz(values, grid))
        r, theta, phi = position(k)
        if not r > r_plus:
            raise MotionError(f"frame {k} puts the camera at r = {r:.6g} M, inside the "
                              f"horizon r_+ = {r_plus:.6g} M")
        T, (r, theta, dr, dth, dph) = dt_dframe(k)
        try:
            v = velocity_from_coordinates(a, r, theta, dr / T, dth / T, dph / T)
        except MotionError as exc:
            raise MotionError(f"frame {k}: {exc}") from None
        states.append((clocks[k], t, {"observer.distance": float(r)},
                       tuple(float(x) for x in v)))
    return states
