"""Numba kernels that trace Kerr null geodesics backwards from the observer.

Formulation
-----------
A photon with conserved energy E, axial angular momentum L and Carter constant
Q is described by ``lam = L/E`` and ``eta = Q/E^2``.  In Mino time sigma
(d sigma = d(affine)/Sigma) the radial and polar motions decouple (Carter 1968;
Mino 2003):

    (dr/dsigma)^2 = R(r),          R = (r^2 + a^2 - a lam)^2 - Delta (eta + (lam - a)^2)
    (dtheta/dsigma)^2 = Theta(theta), Theta = eta + a^2 cos^2 theta - lam^2 cot^2 theta

We integrate their second-order forms, d^2 x/dsigma^2 = (1/2) dV/dx, which pass
through turning points without the sign bookkeeping of the square roots.  The
radial variable is ``u = 1/r``: then (du/dsigma)^2 = P(u) = u^4 R(1/u) is the
polynomial 1 + c2 u^2 + c3 u^3 + c4 u^4, regular at u = 0.  A distant observer
therefore starts *exactly at infinity* (u = 0, du/dsigma = 1), with no
truncation error of order beta/r from starting at a large finite radius.

The polar variable is ``mu = cos(theta)``, for which
(dmu/dsigma)^2 = eta - (eta + lam^2 - a^2) mu^2 - a^2 mu^4 is also a
polynomial: the equations of motion need no trigonometric function at all.

Photons of negative conserved energy (seen only inside the ergoregion; Misner,
Thorne & Wheeler 1973, sec. 33.8) use Mino time per |E|, d sigma =
|E| d(affine)/Sigma: R and Theta above are then unchanged (they are R/E^2 and
Theta/E^2 of the momenta), and so are the (u, mu) equations, while dphi/dsigma
and dt/dsigma, linear in the momenta, change sign with E.  The kernel takes
the sign of E per ray (``energy_sign``).  Such photons cannot reach infinity:
their radial motion turns inside the ergoregion, so they never "escape".

State vector, in the backward (into the past) direction:
    y = (u, du/dsigma, mu, dmu/dsigma, phi, delay)
where ``delay`` is the regularised coordinate-time delay
    delay = (t_obs - t) - (r*_obs - r*),   dr*/dr = (r^2 + a^2)/Delta,
finite at infinity (zero at the observer).

Stepping is an adaptive Dormand–Prince 5(4) pair (Dormand & Prince 1980;
Hairer, Norsett & Wanner, Solving ODEs I, sec. II.5).  An equatorial crossing
(mu = 0) is first bracketed on the cubic Hermite
interpolant of the accepted step, then refined by Newton iteration on true
partial Dormand–Prince steps from the start of the step, so the crossing is as
accurate as an ordinary step (well below 1e-9 M at the default tolerance).

References
----------
Carter (1968), Phys. Rev. 174, 1559.
Mino (2003), Phys. Rev. D 67, 084027.
Bardeen (1973), in Black Holes (Les Houches), 215.
Dormand & Prince (1980), J. Comput. Appl. Math. 6, 19.
"""

import contextlib
import math
import os
import signal
import threading

import numba
import numpy as np
from numba import njit, prange

@contextlib.contextmanager
def deferred_interrupts():
    """Hold SIGINT and SIGTERM back while a parallel kernel runs; they arrive right after it.

    Ctrl-C during a parallel kernel call crashed the process now and then (a
    segmentation fault in about one run in six; blocking the signal alone did
    not cure it).  Here both signals are blocked in the calling (main) thread, so
    the worker threads it starts inherit the block, and a Python handler only
    records them; each is handed to the handler it had before (KeyboardInterrupt
    for Ctrl-C, the command line's clean stop for SIGTERM) once the kernel has
    returned, at a clean point between kernel calls.
    """
    numbers = [signal.SIGINT] + ([signal.SIGTERM] if hasattr(signal, "SIGTERM") else [])
    if (threading.current_thread() is not threading.main_thread()
            or not hasattr(signal, "pthread_sigmask") or signal.getsignal(signal.SIGINT) is None):
        yield
        return
    received = []
    handlers = {number: signal.signal(number, lambda n, frame: received.append(n))
                for number in numbers}
    previous = signal.pthread_sigmask(signal.SIG_BLOCK, set(numbers))
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, previous)
        for number, handler in handlers.items():
            signal.signal(number, handler)
    for number in dict.fromkeys(received):
        # Now hand the deferred signal to whatever handled it before.
        handler = handlers[number]
        if handler is signal.default_int_handler:
            raise KeyboardInterrupt
        if handler == signal.SIG_DFL:
            if number == signal.SIGINT:
                raise KeyboardInterrupt
            signal.pthread_sigmask(signal.SIG_UNBLOCK, {number})
            os.kill(os.getpid(), number)   # the default action (SIGTERM ends the process)
        elif callable(handler):
            handler(number, None)


# Rays handed to a kernel thread at a time.  Rays differ in cost by orders of magnitude
# (a grazer of the photon orbit takes thousands of steps), and on a shared machine one
# thread can be descheduled: equal static shares then leave a core idle, and two threads
# ran slower than one under load.  Small dynamic chunks keep every thread busy.
RAYS_PER_CHUNK = 64


@contextlib.contextmanager
def parallel_kernel_call():
    """Around a parallel tracing kernel: signals deferred, rays handed out in small chunks.

    Combines :func:`deferred_interrupts` with ``numba.parallel_chunksize`` (dynamic
    scheduling of the kernel's ``prange`` loop in chunks of :data:`RAYS_PER_CHUNK`).
    The results do not depend on the chunking: every ray is traced on its own.
    """
    with deferred_interrupts(), numba.parallel_chunksize(RAYS_PER_CHUNK):
        yield


FATE_ESCAPED = 0
FATE_CAPTURED = 1
FATE_DISK = 2
FATE_UNRESOLVED = 3

FATE_NAMES = {
    FATE_ESCAPED: "escaped",
    FATE_CAPTURED: "captured",
    FATE_DISK: "disk",
    FATE_UNRESOLVED: "unresolved",
}

N_STATE = 6
# Floating-point contraction (FMA) and reciprocal approximations are allowed in
# the hot arithmetic; "nnan"/"ninf" are not, since the step control tests
# for non-finite values.
_FAST = {"contract", "arcp", "nsz", "reassoc"}
# The delay is left out of the error norm: it is a passive quadrature whose
# integrand grows like r^2 on outgoing legs, and it never feeds back.
N_CONTROLLED = 5

# Dormand–Prince 5(4) tableau (Dormand & Prince 1980, table 2).
_A21 = 1.0 / 5.0
_A31, _A32 = 3.0 / 40.0, 9.0 / 40.0
_A41, _A42, _A43 = 44.0 / 45.0, -56.0 / 15.0, 32.0 / 9.0
_A51, _A52, _A53, _A54 = 19372.0 / 6561.0, -25360.0 / 2187.0, 64448.0 / 6561.0, -212.0 / 729.0
_A61, _A62, _A63, _A64, _A65 = (
    9017.0 / 3168.0, -355.0 / 33.0, 46732.0 / 5247.0, 49.0 / 176.0, -5103.0 / 18656.0)
_B1, _B3, _B4, _B5, _B6 = 35.0 / 384.0, 500.0 / 1113.0, 125.0 / 192.0, -2187.0 / 6784.0, 11.0 / 84.0
_E1, _E3, _E4, _E5, _E6, _E7 = (
    71.0 / 57600.0, -71.0 / 16695.0, 71.0 / 1920.0, -17253.0 / 339200.0, 22.0 / 525.0, -1.0 / 40.0)

@njit(cache=True, inline="always", fastmath=_FAST, error_model="numpy")
def _derivatives(y, spin, lam, eta, sign, out):
    """Backward Mino-time derivatives of the state ``y`` into ``out`` (no trigonometry).

    ``sign`` is the sign of the conserved energy E: sigma is Mino time per |E|,
    so the (u, mu) equations are those of lam, eta for either sign, while
    dphi/dsigma and dt/dsigma (both linear in the momenta) carry the sign of E.
    """
    u = y[0]
    p_u = y[1]
    mu = y[2]
    a2 = spin * spin
    c2 = a2 - lam * lam - eta
    c3 = 2.0 * (eta + (lam - spin) * (lam - spin))
    c4 = -a2 * eta
    sin2 = 1.0 - mu * mu
    out[0] = p_u
    out[1] = u * (c2 + u * (1.5 * c3 + 2.0 * c4 * u))
    out[2] = y[3]
    out[3] = -mu * ((eta + lam * lam - a2) + 2.0 * a2 * mu * mu)
    # The lam/sin^2 term is absent for lam = 0, which is what lets rays with
    # zero angular momentum pass through the poles.
    azimuth_rate = lam / sin2 if lam != 0.0 else 0.0
    # Delta / r^2, written in u so that nothing cancels at large r.
    delta_u = 1.0 - 2.0 * u + a2 * u * u
    out[4] = -sign * (spin * u * (2.0 - spin * lam * u) / delta_u + azimuth_rate)
    # d delay/dsigma = sign T - (r^2+a^2)/Delta p_u/u^2, with T the per-|E| dt/dsigma:
    # the r^2 terms cancel through (1 - sign p_u)/u^2, written without cancellation
    # while sign p_u ~ sqrt(P) > 0 (1 - P = -(c2 u^2 + c3 u^3 + c4 u^4)).
    p_s = sign * p_u
    if p_s > 0.5:
        excess = -(c2 + c3 * u + c4 * u * u) / (1.0 + p_s)
    else:
        uu = max(u * u, 1e-300)
        excess = (1.0 - p_s) / uu
    out[5] = sign * ((1.0 + a2 * u * u) / delta_u * (excess + a2 - spin * lam)
                     - spin * (spin * sin2 - lam))


@njit(cache=True, fastmath=_FAST, error_model="numpy")
def _dopri_step(y, k1, h, spin, lam, eta, sign, k, y_out, rtol, atol):
    """One Dormand–Prince 5(4) step of size h from y (with k1 = f(y)).

    Writes the 5th-order solution into ``y_out`` and f(y_out) into ``k[5]``;
    returns the scaled RMS error norm (<= 1 means acceptable).
    """
    tmp = k[6]
    for i in range(N_STATE):
        tmp[i] = y[i] + h * _A21 * k1[i]
    _derivatives(tmp, spin, lam, eta, sign, k[0])
    for i in range(N_STATE):
        tmp[i] = y[i] + h * (_A31 * k1[i] + _A32 * k[0, i])
    _derivatives(tmp, spin, lam, eta, sign, k[1])
    for i in range(N_STATE):
        tmp[i] = y[i] + h * (_A41 * k1[i] + _A42 * k[0, i] + _A43 * k[1, i])
    _derivatives(tmp, spin, lam, eta, sign, k[2])
    for i in range(N_STATE):
        tmp[i] = y[i] + h * (_A51 * k1[i] + _A52 * k[0, i] + _A53 * k[1, i] + _A54 * k[2, i])
    _derivatives(tmp, spin, lam, eta, sign, k[3])
    for i in range(N_STATE):
        tmp[i] = y[i] + h * (_A61 * k1[i] + _A62 * k[0, i] + _A63 * k[1, i]
                             + _A64 * k[2, i] + _A65 * k[3, i])
    _derivatives(tmp, spin, lam, eta, sign, k[4])
    for i in range(N_STATE):
        y_out[i] = y[i] + h * (_B1 * k1[i] + _B3 * k[1, i] + _B4 * k[2, i]
                               + _B5 * k[3, i] + _B6 * k[4, i])
    _derivatives(y_out, spin, lam, eta, sign, k[5])
    total = 0.0
    for i in range(N_CONTROLLED):
        e = h * (_E1 * k1[i] + _E3 * k[1, i] + _E4 * k[2, i] + _E5 * k[3, i]
                 + _E6 * k[4, i] + _E7 * k[5, i])
        # u = 1/r needs a tiny absolute floor (relative accuracy in r at large
        # r), and so does phi (it swings by ~pi on passes near the axis, and a
        # loose floor there let its error grow to ~1e3 x the tolerance); mu and
        # the Mino velocities are O(1) and cross zero, where a relative
        # criterion alone would force needlessly small steps.
        floor = atol if (i == 0 or i == 4) else rtol
        scale = floor + rtol * max(abs(y[i]), abs(y_out[i]))
        total += (e / scale) ** 2
    return math.sqrt(total / N_CONTROLLED)


@njit(cache=True, inline="always")
def _hermite(v0, v1, d0, d1, s):
    """Cubic Hermite interpolant on [0, 1]; d0, d1 are derivatives times the step."""
    s2 = s * s
    s3 = s2 * s
    return ((2.0 * s3 - 3.0 * s2 + 1.0) * v0 + (s3 - 2.0 * s2 + s) * d0
            + (-2.0 * s3 + 3.0 * s2) * v1 + (s3 - s2) * d1)


@njit(cache=True, error_model="numpy")
def _hermite_root(v0, v1, d0, d1, target):
    """Fraction s in [0, 1] where the Hermite interpolant meets ``target`` (bisection)."""
    lo = 0.0
    hi = 1.0
    f_lo = v0 - target
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        f_mid = _hermite(v0, v1, d0, d1, mid) - target
        if (f_mid < 0.0) == (f_lo < 0.0):
            lo = mid
            f_lo = f_mid
        else:
            hi = mid
    return 0.5 * (lo + hi)


@njit(cache=True, error_model="numpy")
def _trace_one(y0, spin, lam, eta, sign, u_escape, u_capture, rtol, atol, h_initial,
               max_steps, max_crossings, n_record, stop_on_disk, r_in, r_out,
               out_r, out_phi, out_delay, out_inward, row, record_final, out_final):
    """Trace one ray; fill crossing rows; return (fate, n_crossings, steps, theta_end, phi_end).

    With ``record_final`` the state where the ray ended is written to
    ``out_final[row]``: the refined crossing state for a disk hit or a crossing
    cap, the accepted step that passed the capture or escape radius, or the
    last accepted state when the step cap was reached.
    """
    y = np.empty(N_STATE)
    y_new = np.empty(N_STATE)
    y_part = np.empty(N_STATE)
    f = np.empty(N_STATE)
    k = np.empty((7, N_STATE))
    k_part = np.empty((7, N_STATE))
    is_finite = math.isfinite(lam) and math.isfinite(eta)
    for i in range(N_STATE):
        y[i] = y0[i]
        is_finite = is_finite and math.isfinite(y0[i])
    if not is_finite:
        # Every step would be rejected: stop at once instead of spending max_steps.
        return FATE_UNRESOLVED, 0, 0, np.nan, np.nan
    _derivatives(y, spin, lam, eta, sign, f)
    # Rays with lam = 0 reach the axis: each polar turning point is then a
    # passage through a pole, where the azimuth jumps by pi.
    through_poles = lam == 0.0
    pole_shift = 0.0
    h = h_initial
    n_cross = 0
    steps = 0
    fate = FATE_UNRESOLVED
    theta_end = np.nan
    phi_end = np.nan
    while steps < max_steps:
        err = _dopri_step(y, f, h, spin, lam, eta, sign, k, y_new, rtol, atol)
        steps += 1
        if not (err <= 1.0) or abs(y_new[2] - y[2]) > 0.5 or not math.isfinite(y_new[4]):
            if math.isfinite(err) and abs(y_new[2] - y[2]) <= 0.5:
                h *= max(0.2, 0.9 * err ** -0.25)
            else:
                h *= 0.25
            continue
        turned = through_poles and y[3] * y_new[3] < 0.0
        # Where does this step end the ray, as a fraction of the step?
        s_end = 2.0
        end_fate = FATE_UNRESOLVED
        if y_new[0] >= u_capture:
            s_end = _hermite_root(y[0], y_new[0], h * f[0], h * k[5, 0], u_capture)
            end_fate = FATE_CAPTURED
        elif sign > 0.0 and y_new[0] <= u_escape and y_new[1] < 0.0:
            s_end = _hermite_root(y[0], y_new[0], h * f[0], h * k[5, 0], u_escape)
            end_fate = FATE_ESCAPED
        # Equatorial crossing: mu = cos(theta) changes sign.
        if (y[2] * y_new[2] < 0.0) or (y_new[2] == 0.0 and y[2] != 0.0):
            s = _hermite_root(y[2], y_new[2], h * f[2], h * k[5, 2], 0.0)
            if s <= s_end:
                h_c = s * h
                for _ in range(6):
                    _dopri_step(y, f, h_c, spin, lam, eta, sign, k_part, y_part, rtol, atol)
                    if y_part[3] == 0.0 or abs(y_part[2]) < 1e-16:
                        break
                    correction = y_part[2] / y_part[3]
                    h_c = min(max(h_c - correction, 0.0), h)
                    if abs(correction) < 1e-13 * h:
                        _dopri_step(y, f, h_c, spin, lam, eta, sign, k_part, y_part, rtol, atol)
                        break
                r_c = 1.0 / y_part[0]
                if n_cross < n_record:
                    shift = pole_shift
                    if turned and y[3] * y_part[3] < 0.0:
                        shift += math.pi
                    out_r[row, n_cross] = r_c
                    out_phi[row, n_cross] = (y_part[4] + shift) % (2.0 * math.pi)
                    out_delay[row, n_cross] = y_part[5]
                    out_inward[row, n_cross] = y_part[1] > 0.0
                n_cross += 1
                if stop_on_disk and r_in <= r_c <= r_out:
                    fate = FATE_DISK
                    if record_final:
                        out_final[row, :] = y_part
                    break
                if n_cross >= max_crossings:
                    fate = FATE_UNRESOLVED
                    if record_final:
                        out_final[row, :] = y_part
                    break
        if end_fate != FATE_UNRESOLVED:
            fate = end_fate
            if record_final:
                out_final[row, :] = y_new
            if end_fate == FATE_ESCAPED:
                mu_e = _hermite(y[2], y_new[2], h * f[2], h * k[5, 2], s_end)
                phi_e = _hermite(y[4], y_new[4], h * f[4], h * k[5, 4], s_end) + pole_shift
                if turned and y[3] * _hermite(y[3], y_new[3], h * f[3], h * k[5, 3], s_end) < 0.0:
                    phi_e += math.pi
                theta_end = math.acos(min(1.0, max(-1.0, mu_e)))
                phi_end = phi_e % (2.0 * math.pi)
            break
        if turned:
            pole_shift += math.pi
        for i in range(N_STATE):
            y[i] = y_new[i]
            f[i] = k[5, i]
        if err > 0.0:
            h *= min(5.0, max(0.2, 0.9 * err ** -0.2))
        else:
            h *= 5.0
    if record_final and fate == FATE_UNRESOLVED and steps >= max_steps:
        out_final[row, :] = y
    return fate, n_cross, steps, theta_end, phi_end


@njit(cache=True, parallel=True, error_model="numpy")
def trace_rays(initial_states, lam, eta, spin, u_escape, u_capture, tolerance,
               max_steps, max_crossings, n_record, stop_on_disk, r_in, r_out,
               record_final=False, energy_sign=None):
    """Trace many rays in parallel (one ``prange`` iteration per ray).

    Parameters
    ----------
    initial_states : ndarray, shape (N, 6)
        Backward Mino-time states (u, du/dsigma, mu, dmu/dsigma, phi, delay).
    lam, eta : ndarray, shape (N,)
        Conserved L/E and Q/E^2 of each ray.
    spin : float
        a/M.
    u_escape : float
        1/r beyond which an outgoing ray has escaped (0 for a distant observer).
    u_capture : float
        1/r at which a ray counts as captured (just outside the horizon).
    tolerance : float
        Tolerance of the step control: relative for every component, plus an
        absolute floor equal to it (1e-3 of it for u = 1/r and phi).
    max_steps, max_crossings : int
        Caps: a ray that reaches either gets the fate "unresolved".
    n_record : int
        Number of equatorial crossings recorded per ray (orders 0 .. n_record-1).
    stop_on_disk : bool
        End a ray at its first crossing with r_in <= r <= r_out (opaque disk).
    r_in, r_out : float
        Disk edges in M (used only with ``stop_on_disk``).
    record_final : bool, optional
        Also return each ray's state where it ended (for checks of the first
        integrals; costs 48 bytes per ray).
    energy_sign : ndarray, shape (N,), optional
        Sign (+1 or -1) of each ray's conserved energy E (default: all +1).
        A camera inside the ergoregion sees photons with E < 0; their states
        are then velocities per |E| (see the module docstring), and they never
        escape (MTW 1973, sec. 33.8), so ``u_escape`` does not apply to them.

    Returns
    -------
    cross_r, cross_phi, cross_delay : ndarray, shape (N, n_record)
        Radius, azimuth in [0, 2 pi) and regularised delay at each crossing (NaN if none).
    cross_inward : ndarray of bool, shape (N, n_record)
        Whether the backward ray was moving inward (dr/dsigma < 0) at the crossing.
    fate, n_crossings, steps : ndarray of int, shape (N,)
    theta_end, phi_end : ndarray, shape (N,)
        Direction (theta, phi) where the ray escaped (NaN otherwise).
    final_state : ndarray, shape (N, 6), or (0, 6) without ``record_final``
        State (u, du/dsigma, mu, dmu/dsigma, phi, delay) where each ray ended:
        the refined crossing for a disk hit or the crossing cap, the first
        accepted step at or past the capture or escape radius, the last
        accepted state at the step cap; NaN for a ray whose initial state or
        lam, eta were not finite (it is not traced: fate "unresolved", 0 steps).
    """
    n = initial_states.shape[0]
    cross_r = np.full((n, n_record), np.nan)
    cross_phi = np.full((n, n_record), np.nan)
    cross_delay = np.full((n, n_record), np.nan)
    cross_inward = np.zeros((n, n_record), dtype=np.bool_)
    fate = np.empty(n, dtype=np.int8)
    n_crossings = np.empty(n, dtype=np.int32)
    steps = np.empty(n, dtype=np.int32)
    theta_end = np.full(n, np.nan)
    phi_end = np.full(n, np.nan)
    final_state = np.full((n if record_final else 0, N_STATE), np.nan)
    atol = tolerance * 1e-3
    for i in prange(n):
        h0 = 1e-3 if initial_states[i, 0] > 0.0 else 1e-2
        sign = 1.0
        if energy_sign is not None:
            sign = -1.0 if energy_sign[i] < 0.0 else 1.0
        result = _trace_one(initial_states[i], spin, lam[i], eta[i], sign, u_escape, u_capture,
                            tolerance, atol, h0, max_steps, max_crossings, n_record,
                            stop_on_disk, r_in, r_out, cross_r, cross_phi, cross_delay,
                            cross_inward, i, record_final, final_state)
        fate[i] = result[0]
        n_crossings[i] = result[1]
        steps[i] = result[2]
        theta_end[i] = result[3]
        phi_end[i] = result[4]
    return (cross_r, cross_phi, cross_delay, cross_inward, fate, n_crossings, steps,
            theta_end, phi_end, final_state)


@njit(cache=True, parallel=True, error_model="numpy")
def trace_to_infinity(states, lam, eta, spin, u_capture, tolerance, max_steps, theta_out, phi_out):
    """Follow rays from ``states`` to u = 0 recording nothing; write where they arrive.

    The public kernel entry for a ray's direction at infinity: each ray of state
    (u, du/dsigma, mu, dmu/dsigma, phi, delay) (as :func:`trace_rays` takes and,
    with ``final_state``, returns) is integrated with tolerance ``tolerance``
    until u = 0, and its polar angle and azimuth there go to ``theta_out`` and
    ``phi_out`` (NaN for a ray that does not escape).  Rays must have E > 0.
    """
    n = states.shape[0]
    none_r = np.empty((1, 0))
    none_b = np.empty((1, 0), dtype=np.bool_)
    none_final = np.empty((0, 6))
    for i in prange(n):
        theta_out[i] = np.nan
        phi_out[i] = np.nan
        h0 = 1e-3 if states[i, 0] > 0.0 else 1e-2
        # Only escaped rays come here, and they have E > 0 (sign +1).
        result = _trace_one(states[i], spin, lam[i], eta[i], 1.0, 0.0, u_capture, tolerance,
                            tolerance * 1e-3, h0, max_steps, 1 << 30, 0, False, 0.0, 0.0,
                            none_r, none_r, none_r, none_b, 0, False, none_final)
        if result[0] == FATE_ESCAPED:
            theta_out[i] = result[3]
            phi_out[i] = result[4]
