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
finite at infinity (zero at the observer).  On a radially outgoing leg of the
backward ray the delay grows like 2 r*, and the kernel carries delay - 2 r*(u)
there instead (its rate stays bounded out to infinity); it adds 2 r* back
wherever a delay leaves the kernel.  So every component, the delay included,
is in the step control.

Stepping is the adaptive Dormand–Prince 8(5,3) method "DOP853" (Hairer,
Norsett & Wanner, Solving ODEs I, sec. II.10; tableau in
:mod:`render.geodesics.tableau853`), with Hairer's error norm blending its 5th-
and 3rd-order estimates.  On these rays it takes about 3 times fewer steps
than the Dormand–Prince 5(4) pair used before.  An equatorial crossing
(mu = 0), and the capture or escape radius, are located on the step's
7th-order dense output (Newton's method on the interpolant); a crossing is
then recomputed by one true partial step to that point plus one Newton
correction, so it is as accurate as an ordinary step.

References
----------
Carter (1968), Phys. Rev. 174, 1559.
Mino (2003), Phys. Rev. D 67, 084027.
Bardeen (1973), in Black Holes (Les Houches), 215.
Hairer, Norsett & Wanner (1993), Solving Ordinary Differential Equations I, sec. II.10.
"""

import contextlib
import math
import os
import signal
import threading

import numba
import numpy as np
from numba import njit, prange

from . import tableau853 as T


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
# Every component is in the error norm, the delay too: on outgoing legs the kernel
# carries delay - 2 r*, whose rate stays bounded out to infinity (see _derivatives).
# Left out, the long 8th-order steps lost the delay at crossings by up to 1e-3.
N_CONTROLLED = 6
# Hairer's blend E5^2 / sqrt(E5^2 + 0.01 E3^2) assumes a step in the asymptotic regime;
# a step much too long (here: passes near the axis, where dphi/dsigma = lam/sin^2 peaks)
# can make E3 huge and the blend small while the 8th-order solution is off by 1e3 x the
# tolerance (phi by 3.7e-5 rad at tolerance 1e-9).  So a step is also refused when the
# 5th-order estimate E5 alone exceeds FIFTH_ORDER_GUARD times the tolerance: ~25% more
# steps, every crossing within 1e-7 of the closed form at tolerance 1e-9.
FIFTH_ORDER_GUARD = 10.0

@njit(cache=True, inline="always", fastmath=_FAST, error_model="numpy")
def _derivatives(y, spin, lam, eta, sign, leg, out):
    """Backward Mino-time derivatives of the state ``y`` into ``out`` (no trigonometry).

    ``leg`` is +1 where y[5] is the delay itself (a radially ingoing backward ray),
    -1 where it is delay - 2 r*(u) (outgoing); see :func:`_tortoise`.

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
    # the r^2 terms cancel through excess = (1 - p_s)/u^2 (p_s = sign p_u), which on
    # the orbit (1 - p_s^2 = 1 - P = -(c2 u^2 + c3 u^3 + c4 u^4)) is -C/(1 + p_s),
    # C = c2 + c3 u + c4 u^2: regular on an ingoing leg (leg = +1).  On an outgoing
    # leg (leg = -1) the delay grows like 2 r*, and y[5] holds delay - 2 r*(u)
    # instead (see _tortoise), whose rate is the same with -C/(1 - p_s):
    # bounded out to infinity, so the delay can be in the step control.
    p_s = sign * p_u
    excess = -(c2 + c3 * u + c4 * u * u) / (1.0 + leg * p_s)
    out[5] = sign * ((1.0 + a2 * u * u) / delta_u * (excess + a2 - spin * lam)
                     - spin * (spin * sin2 - lam))


@njit(cache=True, error_model="numpy")
def _tortoise(u, spin):
    """The Kerr tortoise coordinate r*(r = 1/u), dr*/dr = (r^2 + a^2)/Delta (0 for u <= 0).

    r* = r + (2 r+ ln(r - r+) - 2 r- ln(r - r-)) / (r+ - r-), up to a constant that
    cancels: on an outgoing leg the kernel carries delay - 2 r*(u), and adds 2 r*(u)
    back wherever the delay is read, with the same constant.  At or past infinity
    (u <= 0, only the step that escapes) the term is taken as 0.

    References
    ----------
    Chandrasekhar (1983), The Mathematical Theory of Black Holes (the tortoise coordinate).
    """
    if not u > 0.0:
        return 0.0
    r = 1.0 / u
    root = math.sqrt(max(1.0 - spin * spin, 0.0))
    r_plus = 1.0 + root
    r_minus = 1.0 - root
    far = 2.0 * r_plus * math.log(r - r_plus)
    if r_minus > 0.0:
        far -= 2.0 * r_minus * math.log(r - r_minus)
    return r + far / (r_plus - r_minus)


@njit(cache=True, error_model="numpy")
def _delay_offset(u, spin, leg):
    """What y[5] lacks of the delay on a leg: 2 r*(u) on an outgoing one (leg -1), else 0."""
    return 2.0 * _tortoise(u, spin) if leg < 0.0 else 0.0


@njit(cache=True, fastmath=_FAST, error_model="numpy")
def _stages(y, h, spin, lam, eta, sign, leg, k, tmp):
    """Stages 1-11 of a DOP853 step of size h from y into ``k[1:12]`` (``k[0]`` holds f(y))."""
    for i in range(N_STATE):
        tmp[i] = y[i] + h * (T.A1_0 * k[0, i])
    _derivatives(tmp, spin, lam, eta, sign, leg, k[1])
    for i in range(N_STATE):
        tmp[i] = y[i] + h * (T.A2_0 * k[0, i] + T.A2_1 * k[1, i])
    _derivatives(tmp, spin, lam, eta, sign, leg, k[2])
    for i in range(N_STATE):
        tmp[i] = y[i] + h * (T.A3_0 * k[0, i] + T.A3_2 * k[2, i])
    _derivatives(tmp, spin, lam, eta, sign, leg, k[3])
    for i in range(N_STATE):
        tmp[i] = y[i] + h * (T.A4_0 * k[0, i] + T.A4_2 * k[2, i] + T.A4_3 * k[3, i])
    _derivatives(tmp, spin, lam, eta, sign, leg, k[4])
    for i in range(N_STATE):
        tmp[i] = y[i] + h * (T.A5_0 * k[0, i] + T.A5_3 * k[3, i] + T.A5_4 * k[4, i])
    _derivatives(tmp, spin, lam, eta, sign, leg, k[5])
    for i in range(N_STATE):
        tmp[i] = y[i] + h * (T.A6_0 * k[0, i] + T.A6_3 * k[3, i] + T.A6_4 * k[4, i]
                + T.A6_5 * k[5, i])
    _derivatives(tmp, spin, lam, eta, sign, leg, k[6])
    for i in range(N_STATE):
        tmp[i] = y[i] + h * (T.A7_0 * k[0, i] + T.A7_3 * k[3, i] + T.A7_4 * k[4, i]
                + T.A7_5 * k[5, i] + T.A7_6 * k[6, i])
    _derivatives(tmp, spin, lam, eta, sign, leg, k[7])
    for i in range(N_STATE):
        tmp[i] = y[i] + h * (T.A8_0 * k[0, i] + T.A8_3 * k[3, i] + T.A8_4 * k[4, i]
                + T.A8_5 * k[5, i] + T.A8_6 * k[6, i] + T.A8_7 * k[7, i])
    _derivatives(tmp, spin, lam, eta, sign, leg, k[8])
    for i in range(N_STATE):
        tmp[i] = y[i] + h * (T.A9_0 * k[0, i] + T.A9_3 * k[3, i] + T.A9_4 * k[4, i]
                + T.A9_5 * k[5, i] + T.A9_6 * k[6, i] + T.A9_7 * k[7, i] + T.A9_8 * k[8, i])
    _derivatives(tmp, spin, lam, eta, sign, leg, k[9])
    for i in range(N_STATE):
        tmp[i] = y[i] + h * (T.A10_0 * k[0, i] + T.A10_3 * k[3, i] + T.A10_4 * k[4, i]
                + T.A10_5 * k[5, i] + T.A10_6 * k[6, i] + T.A10_7 * k[7, i] + T.A10_8 * k[8, i]
                + T.A10_9 * k[9, i])
    _derivatives(tmp, spin, lam, eta, sign, leg, k[10])
    for i in range(N_STATE):
        tmp[i] = y[i] + h * (T.A11_0 * k[0, i] + T.A11_3 * k[3, i] + T.A11_4 * k[4, i]
                + T.A11_5 * k[5, i] + T.A11_6 * k[6, i] + T.A11_7 * k[7, i] + T.A11_8 * k[8, i]
                + T.A11_9 * k[9, i] + T.A11_10 * k[10, i])
    _derivatives(tmp, spin, lam, eta, sign, leg, k[11])


@njit(cache=True, fastmath=_FAST, error_model="numpy")
def _dop853_step(y, h, spin, lam, eta, sign, leg, k, tmp, y_out, rtol, atol):
    """One Dormand–Prince 8(5,3) step of size h from y (with ``k[0]`` = f(y)).

    Writes the 8th-order solution into ``y_out`` and returns Hairer's error norm
    (<= 1 means acceptable), which blends the 5th- and 3rd-order estimates:
    err = |h| E5^2 / sqrt(n (E5^2 + 0.01 E3^2)) with E5, E3 the scaled RMS sums
    (Hairer, Norsett & Wanner, sec. II.10), or the 5th-order norm over
    :data:`FIFTH_ORDER_GUARD` where that is larger.  f(y_out) is left to the caller, who
    needs it only for an accepted step (``k[12]``, the next step's ``k[0]``).
    """
    _stages(y, h, spin, lam, eta, sign, leg, k, tmp)
    for i in range(N_STATE):
        y_out[i] = y[i] + h * (T.B0 * k[0, i] + T.B5 * k[5, i] + T.B6 * k[6, i] + T.B7 * k[7, i]
            + T.B8 * k[8, i] + T.B9 * k[9, i] + T.B10 * k[10, i] + T.B11 * k[11, i])
    err5 = 0.0
    err3 = 0.0
    for i in range(N_CONTROLLED):
        # u = 1/r needs a tiny absolute floor (relative accuracy in r at large
        # r), and so does phi (it swings by ~pi on passes near the axis, and a
        # loose floor there let its error grow to ~1e3 x the tolerance); mu and
        # the Mino velocities are O(1) and cross zero, where a relative
        # criterion alone would force needlessly small steps.
        floor = atol if (i == 0 or i == 4) else rtol
        scale = floor + rtol * max(abs(y[i]), abs(y_out[i]))
        inverse_scale = 1.0 / scale
        e5 = (T.E5_0 * k[0, i] + T.E5_5 * k[5, i] + T.E5_6 * k[6, i] + T.E5_7 * k[7, i]
              + T.E5_8 * k[8, i] + T.E5_9 * k[9, i] + T.E5_10 * k[10, i] + T.E5_11 * k[11, i])
        e3 = (T.E3_0 * k[0, i] + T.E3_5 * k[5, i] + T.E3_6 * k[6, i] + T.E3_7 * k[7, i]
              + T.E3_8 * k[8, i] + T.E3_9 * k[9, i] + T.E3_10 * k[10, i] + T.E3_11 * k[11, i])
        err5 += (e5 * inverse_scale) ** 2
        err3 += (e3 * inverse_scale) ** 2
    if err5 == 0.0:
        return 0.0
    blended = abs(h) * err5 / math.sqrt((err5 + 0.01 * err3) * N_CONTROLLED)
    return max(blended, abs(h) * math.sqrt(err5 / N_CONTROLLED) / FIFTH_ORDER_GUARD)


@njit(cache=True, fastmath=_FAST, error_model="numpy")
def _dense_output(y, y_new, h, spin, lam, eta, sign, leg, k, tmp, dense):
    """Coefficients ``dense`` (7, N_STATE) of the 7th-order dense output of an accepted step.

    Needs the step's stages ``k[0:13]`` (``k[12]`` = f(y_new)); adds the three
    extra stages 13-15 (Hairer, Norsett & Wanner, sec. II.10, "dense output").
    :func:`_dense_value` evaluates the result.
    """
    for i in range(N_STATE):
        tmp[i] = y[i] + h * (T.A13_0 * k[0, i] + T.A13_6 * k[6, i] + T.A13_7 * k[7, i]
                + T.A13_8 * k[8, i] + T.A13_9 * k[9, i] + T.A13_10 * k[10, i] + T.A13_11 * k[11, i]
                + T.A13_12 * k[12, i])
    _derivatives(tmp, spin, lam, eta, sign, leg, k[13])
    for i in range(N_STATE):
        tmp[i] = y[i] + h * (T.A14_0 * k[0, i] + T.A14_5 * k[5, i] + T.A14_6 * k[6, i]
                + T.A14_7 * k[7, i] + T.A14_10 * k[10, i] + T.A14_11 * k[11, i]
                + T.A14_12 * k[12, i] + T.A14_13 * k[13, i])
    _derivatives(tmp, spin, lam, eta, sign, leg, k[14])
    for i in range(N_STATE):
        tmp[i] = y[i] + h * (T.A15_0 * k[0, i] + T.A15_5 * k[5, i] + T.A15_6 * k[6, i]
                + T.A15_7 * k[7, i] + T.A15_8 * k[8, i] + T.A15_12 * k[12, i] + T.A15_13 * k[13, i]
                + T.A15_14 * k[14, i])
    _derivatives(tmp, spin, lam, eta, sign, leg, k[15])
    for i in range(N_STATE):
        dy = y_new[i] - y[i]
        dense[0, i] = dy
        dense[1, i] = h * k[0, i] - dy
        dense[2, i] = 2.0 * dy - h * (k[12, i] + k[0, i])
        dense[3, i] = h * (T.D0_0 * k[0, i] + T.D0_5 * k[5, i] + T.D0_6 * k[6, i]
            + T.D0_7 * k[7, i] + T.D0_8 * k[8, i] + T.D0_9 * k[9, i] + T.D0_10 * k[10, i]
            + T.D0_11 * k[11, i] + T.D0_12 * k[12, i] + T.D0_13 * k[13, i] + T.D0_14 * k[14, i]
            + T.D0_15 * k[15, i])
        dense[4, i] = h * (T.D1_0 * k[0, i] + T.D1_5 * k[5, i] + T.D1_6 * k[6, i]
            + T.D1_7 * k[7, i] + T.D1_8 * k[8, i] + T.D1_9 * k[9, i] + T.D1_10 * k[10, i]
            + T.D1_11 * k[11, i] + T.D1_12 * k[12, i] + T.D1_13 * k[13, i] + T.D1_14 * k[14, i]
            + T.D1_15 * k[15, i])
        dense[5, i] = h * (T.D2_0 * k[0, i] + T.D2_5 * k[5, i] + T.D2_6 * k[6, i]
            + T.D2_7 * k[7, i] + T.D2_8 * k[8, i] + T.D2_9 * k[9, i] + T.D2_10 * k[10, i]
            + T.D2_11 * k[11, i] + T.D2_12 * k[12, i] + T.D2_13 * k[13, i] + T.D2_14 * k[14, i]
            + T.D2_15 * k[15, i])
        dense[6, i] = h * (T.D3_0 * k[0, i] + T.D3_5 * k[5, i] + T.D3_6 * k[6, i]
            + T.D3_7 * k[7, i] + T.D3_8 * k[8, i] + T.D3_9 * k[9, i] + T.D3_10 * k[10, i]
            + T.D3_11 * k[11, i] + T.D3_12 * k[12, i] + T.D3_13 * k[13, i] + T.D3_14 * k[14, i]
            + T.D3_15 * k[15, i])


@njit(cache=True, inline="always", error_model="numpy")
def _dense_value(dense, y, i, s):
    """Component i of the dense output at fraction s of the step, and its derivative in s.

    The interpolant is y + s (F0 + (1-s) (F1 + s (F2 + (1-s) (F3 + ...)))), evaluated
    from the inside out with its derivative carried alongside.
    """
    value = 0.0
    slope = 0.0
    for j in range(6, -1, -1):
        value += dense[j, i]
        if j % 2 == 0:
            slope = slope * s + value
            value *= s
        else:
            slope = slope * (1.0 - s) - value
            value *= 1.0 - s
    return y[i] + value, slope


@njit(cache=True, error_model="numpy")
def _dense_root(dense, y, i, target):
    """Fraction s in [0, 1] where component i of the dense output meets ``target``.

    Newton's method on the interpolant, kept inside a bisection bracket: it
    converges in a few iterations to the polynomial's root to rounding.
    """
    lo = 0.0
    hi = 1.0
    f_lo = y[i] - target
    f_hi = f_lo + dense[0, i]
    s = f_lo / (f_lo - f_hi) if f_lo != f_hi else 0.5
    s = min(max(s, 0.0), 1.0)
    for _ in range(60):
        value, slope = _dense_value(dense, y, i, s)
        f = value - target
        if f == 0.0:
            return s
        if (f < 0.0) == (f_lo < 0.0):
            lo = s
        else:
            hi = s
        s_new = s - f / slope if slope != 0.0 else -1.0
        if not (lo < s_new < hi):
            s_new = 0.5 * (lo + hi)
        if abs(s_new - s) <= 1e-15:
            return s_new
        s = s_new
    return s


@njit(cache=True, error_model="numpy")
def _dense_state(dense, y, s, out):
    """The whole state at fraction s of the step, from the dense output."""
    for i in range(N_STATE):
        out[i] = _dense_value(dense, y, i, s)[0]


@njit(cache=True, error_model="numpy")
def _step_factor(err):
    """Step-size factor after a step with error norm ``err``: 0.9 err^(-1/8) within [1/3, 6].

    The exponent is 1/(q+1) for the order q = 7 of the error estimate, and the
    limits are those of Hairer, Norsett & Wanner (sec. II.4 and II.10) for DOP853.
    err^(-1/8) is taken as three square roots, cheaper than a power.
    """
    if err <= 0.0:
        return 6.0
    return min(6.0, max(1.0 / 3.0, 0.9 / math.sqrt(math.sqrt(math.sqrt(err)))))


@njit(cache=True, error_model="numpy")
def _record_crossing(y_cross, shift, n_cross, n_record, row, out_r, out_phi, out_delay,
                     out_inward):
    """Write crossing number ``n_cross`` (if recorded) from its state; return its radius."""
    r_c = 1.0 / y_cross[0]
    if n_cross < n_record:
        out_r[row, n_cross] = r_c
        out_phi[row, n_cross] = (y_cross[4] + shift) % (2.0 * math.pi)
        out_delay[row, n_cross] = y_cross[5]
        out_inward[row, n_cross] = y_cross[1] > 0.0
    return r_c


@njit(cache=True, error_model="numpy")
def _crossing_state(y, h_cross, spin, lam, eta, sign, leg, k, k_part, tmp, y_cross):
    """The state where mu = 0, a step ``h_cross`` (found on the dense output) from ``y``.

    The dense output is of order 7, one less than the step: a true partial step
    of size ``h_cross`` and one Newton correction along f (first order in a shift
    of ~1e-10 of the step) bring the crossing to the accuracy of an ordinary
    step.  The delay in ``y_cross`` is the delay itself, whatever the leg.
    """
    for i in range(N_STATE):
        k_part[0, i] = k[0, i]
    _dop853_step(y, h_cross, spin, lam, eta, sign, leg, k_part, tmp, y_cross, 1.0, 1.0)
    _derivatives(y_cross, spin, lam, eta, sign, leg, k_part[12])
    d_sigma = -y_cross[2] / k_part[12, 2] if k_part[12, 2] != 0.0 else 0.0
    # Only a small shift is a Newton correction; a ray grazing the plane (mu' ~ 0)
    # keeps the partial step's state.
    if abs(d_sigma) <= 1e-3 * abs(h_cross):
        for i in range(N_STATE):
            y_cross[i] += d_sigma * k_part[12, i]
    y_cross[5] += _delay_offset(y_cross[0], spin, leg)


@njit(cache=True, error_model="numpy")
def _trace_one(y0, spin, lam, eta, sign, u_escape, u_capture, rtol, atol, h_initial,
               max_steps, max_crossings, n_record, stop_on_disk, r_in, r_out,
               out_r, out_phi, out_delay, out_inward, row, record_final, out_final):
    """Trace one ray; fill crossing rows; return (fate, n_crossings, steps, theta_end, phi_end).

    With ``record_final`` the state where the ray ended is written to
    ``out_final[row]``: the crossing state for a disk hit or a crossing cap, the
    accepted step that passed the capture or escape radius, or the last
    accepted state when the step cap was reached.  Crossings and end points are
    located on the 7th-order dense output of the step that contains them.
    """
    y = np.empty(N_STATE)
    y_new = np.empty(N_STATE)
    y_cross = np.empty(N_STATE)
    tmp = np.empty(N_STATE)
    k = np.empty((16, N_STATE))
    k_part = np.empty((16, N_STATE))
    dense = np.empty((7, N_STATE))
    is_finite = math.isfinite(lam) and math.isfinite(eta)
    for i in range(N_STATE):
        y[i] = y0[i]
        is_finite = is_finite and math.isfinite(y0[i])
    if not is_finite:
        # Every step would be rejected: stop at once instead of spending max_steps.
        return FATE_UNRESOLVED, 0, 0, np.nan, np.nan
    # y[5] holds delay - 2 r*(u) on outgoing legs (see _derivatives).
    leg = 1.0 if sign * y[1] >= 0.0 else -1.0
    y[5] -= _delay_offset(y[0], spin, leg)
    _derivatives(y, spin, lam, eta, sign, leg, k[0])
    # Rays with lam = 0 reach the axis: each polar turning point is then a
    # passage through a pole, where the azimuth jumps by pi.
    through_poles = lam == 0.0
    pole_shift = 0.0
    h = h_initial
    n_cross = 0
    steps = 0
    fate = FATE_UNRESOLVED
    while steps < max_steps:
        err = _dop853_step(y, h, spin, lam, eta, sign, leg, k, tmp, y_new, rtol, atol)
        steps += 1
        if not (err <= 1.0) or abs(y_new[2] - y[2]) > 0.5 or not math.isfinite(y_new[4]):
            is_jump = not math.isfinite(err) or abs(y_new[2] - y[2]) > 0.5
            h *= 0.25 if is_jump else _step_factor(err)
            continue
        _derivatives(y_new, spin, lam, eta, sign, leg, k[12])
        turned = through_poles and y[3] * y_new[3] < 0.0
        is_crossing = (y[2] * y_new[2] < 0.0) or (y_new[2] == 0.0 and y[2] != 0.0)
        is_captured = y_new[0] >= u_capture
        is_escaped = sign > 0.0 and y_new[0] <= u_escape and y_new[1] < 0.0
        if is_crossing or is_captured or is_escaped:
            _dense_output(y, y_new, h, spin, lam, eta, sign, leg, k, tmp, dense)
        # Where does this step end the ray, as a fraction of the step?
        s_end = 2.0
        if is_captured:
            s_end = _dense_root(dense, y, 0, u_capture)
        elif is_escaped:
            s_end = _dense_root(dense, y, 0, u_escape)
        if is_crossing:
            s = _dense_root(dense, y, 2, 0.0)
            if s <= s_end:
                _crossing_state(y, s * h, spin, lam, eta, sign, leg, k, k_part, tmp, y_cross)
                shift = pole_shift + (math.pi if turned and y[3] * y_cross[3] < 0.0 else 0.0)
                r_c = _record_crossing(y_cross, shift, n_cross, n_record, row,
                                       out_r, out_phi, out_delay, out_inward)
                n_cross += 1
                is_disk = stop_on_disk and r_in <= r_c <= r_out
                if is_disk or n_cross >= max_crossings:
                    fate = FATE_DISK if is_disk else FATE_UNRESOLVED
                    if record_final:
                        out_final[row, :] = y_cross
                    return fate, n_cross, steps, np.nan, np.nan
        if is_captured or is_escaped:
            if record_final:
                out_final[row, :] = y_new
                out_final[row, 5] += _delay_offset(y_new[0], spin, leg)
            if is_captured:
                return FATE_CAPTURED, n_cross, steps, np.nan, np.nan
            _dense_state(dense, y, s_end, y_cross)
            shift = pole_shift + (math.pi if turned and y[3] * y_cross[3] < 0.0 else 0.0)
            theta_end = math.acos(min(1.0, max(-1.0, y_cross[2])))
            return FATE_ESCAPED, n_cross, steps, theta_end, (y_cross[4] + shift) % (2.0 * math.pi)
        if turned:
            pole_shift += math.pi
        if (sign * y_new[1] >= 0.0) != (leg > 0.0):
            # A radial turning point: the delay changes representation.
            y_new[5] += _delay_offset(y_new[0], spin, leg) - _delay_offset(y_new[0], spin, -leg)
            leg = -leg
            _derivatives(y_new, spin, lam, eta, sign, leg, k[12])
        for i in range(N_STATE):
            y[i] = y_new[i]
            k[0, i] = k[12, i]
        h *= _step_factor(err)
    if record_final:
        out_final[row, :] = y
        out_final[row, 5] += _delay_offset(y[0], spin, leg)
    return fate, n_cross, steps, np.nan, np.nan


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
