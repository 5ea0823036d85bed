"""Elliptic integrals and Jacobi elliptic functions as numba kernels.

Carlson's symmetric integrals R_F, R_D, R_J (and the degenerate R_C) are
computed by the duplication theorem followed by a fifth-order Taylor
expansion about the mean (Carlson 1995).  Legendre's incomplete integrals of
the first, second and third kinds and D = (F - E)/m follow from them
(Carlson 1995, eqs. 4.5-4.8; DLMF 19.25), for any real amplitude (reduced to
|phi| <= pi/2 by quasi-periodicity) and any parameter m < 1, negative included.
The Jacobi functions sn, cn, dn use the arithmetic-geometric mean and
descending Landen transformation (Abramowitz & Stegun 1964, 16.4).

All functions are scalar ``@njit`` kernels, safe to call from other kernels.

References
----------
Carlson (1995), Numer. Algorithms 10, 13, "Numerical computation of real or
complex elliptic integrals".
Abramowitz & Stegun (1964), Handbook of Mathematical Functions, 16.4, 17.
DLMF (NIST Digital Library of Mathematical Functions), ch. 19 and 22.

Examples
--------
>>> round(ellipk(0.0) * 2.0 / math.pi, 12)
1.0
>>> sn, cn, dn = ellipj(0.3, 0.0)
>>> abs(sn - math.sin(0.3)) < 1e-15
True
"""

import math

import numpy as np
from numba import njit

__all__ = ["elliprf", "elliprd", "elliprj", "elliprc", "ellipk", "ellipk_agm", "complete_kdpi",
           "elliprf_pair", "ellipf", "ellipe", "ellipd", "ellippi", "ellipj", "ellipj_work",
           "ellipj_doubling", "elliprd_rj3", "elliprf_rd_rj"]

# Floating-point contraction (FMA), reciprocal multiplication and sign-of-zero freedom
# in the elliptic kernels (and those built on them): ~15% faster, results unchanged
# to ~1e-15 (the tests hold them to 1e-13).  Not "nnan"/"ninf": NaN and inf carry meaning.
FAST_ARITHMETIC = {"contract", "arcp", "nsz"}

# Duplication stops once the spread of the arguments about their mean is below
# this fraction (Carlson 1995, eq. 2.2 with r = 1e-16: the truncation error of the
# fifth-order expansion is then below 1e-16 relative).
_STOP = 1e-16
_Q_RF = (3.0 * _STOP) ** (-1.0 / 6.0)
_Q_RD = (0.25 * _STOP) ** (-1.0 / 6.0)
# Levels of the arithmetic-geometric mean kept for the Landen recursion: it converges
# quadratically, in <= 9 steps even for 1 - m = 1e-16.
_AGM_LEVELS = 16


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def elliprf(x, y, z):
    """Carlson's R_F(x, y, z) for x, y, z >= 0 (at most one zero); Carlson 1995, sec. 2."""
    a0 = (x + y + z) / 3.0
    q = _Q_RF * max(abs(a0 - x), abs(a0 - y), abs(a0 - z))
    a = a0
    xm, ym, zm = x, y, z
    f = 1.0
    while q * f >= abs(a):
        sx, sy, sz = math.sqrt(xm), math.sqrt(ym), math.sqrt(zm)
        lam = sx * sy + sx * sz + sy * sz
        xm = 0.25 * (xm + lam)
        ym = 0.25 * (ym + lam)
        zm = 0.25 * (zm + lam)
        a = 0.25 * (a + lam)
        f *= 0.25
    dx = (a0 - x) * f / a
    dy = (a0 - y) * f / a
    dz = -(dx + dy)
    e2 = dx * dy - dz * dz
    e3 = dx * dy * dz
    return (1.0 - e2 / 10.0 + e3 / 14.0 + e2 * e2 / 24.0 - 3.0 * e2 * e3 / 44.0) / math.sqrt(a)


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def elliprf_pair(x1, y1, z1, x2, y2, z2):
    """(R_F(x1, y1, z1), R_F(x2, y2, z2)) from one loop, as :func:`elliprf` gives each.

    The two duplications are independent, so interleaving them lets the processor
    overlap their square roots (each chain alone waits on its own); each keeps its own
    stopping test and stops moving once converged, so each value equals
    :func:`elliprf`'s to rounding (Carlson 1995, sec. 2).
    """
    a0_1 = (x1 + y1 + z1) / 3.0
    a0_2 = (x2 + y2 + z2) / 3.0
    q1 = _Q_RF * max(abs(a0_1 - x1), abs(a0_1 - y1), abs(a0_1 - z1))
    q2 = _Q_RF * max(abs(a0_2 - x2), abs(a0_2 - y2), abs(a0_2 - z2))
    a1, a2 = a0_1, a0_2
    xm1, ym1, zm1 = x1, y1, z1
    xm2, ym2, zm2 = x2, y2, z2
    f1 = 1.0
    f2 = 1.0
    going1 = q1 * f1 >= abs(a1)
    going2 = q2 * f2 >= abs(a2)
    while going1 or going2:
        if going1:
            sx, sy, sz = math.sqrt(xm1), math.sqrt(ym1), math.sqrt(zm1)
            lam = sx * sy + sx * sz + sy * sz
            xm1 = 0.25 * (xm1 + lam)
            ym1 = 0.25 * (ym1 + lam)
            zm1 = 0.25 * (zm1 + lam)
            a1 = 0.25 * (a1 + lam)
            f1 *= 0.25
            going1 = q1 * f1 >= abs(a1)
        if going2:
            sx, sy, sz = math.sqrt(xm2), math.sqrt(ym2), math.sqrt(zm2)
            lam = sx * sy + sx * sz + sy * sz
            xm2 = 0.25 * (xm2 + lam)
            ym2 = 0.25 * (ym2 + lam)
            zm2 = 0.25 * (zm2 + lam)
            a2 = 0.25 * (a2 + lam)
            f2 *= 0.25
            going2 = q2 * f2 >= abs(a2)
    return _rf_series(x1, y1, a0_1, a1, f1), _rf_series(x2, y2, a0_2, a2, f2)


@njit(cache=True, inline="always", error_model="numpy", fastmath=FAST_ARITHMETIC)
def _rf_series(x, y, a0, a, f):
    """The fifth-order series term of R_F after duplication (Carlson 1995, eq. 2.2)."""
    dx = (a0 - x) * f / a
    dy = (a0 - y) * f / a
    dz = -(dx + dy)
    e2 = dx * dy - dz * dz
    e3 = dx * dy * dz
    return (1.0 - e2 / 10.0 + e3 / 14.0 + e2 * e2 / 24.0 - 3.0 * e2 * e3 / 44.0) / math.sqrt(a)


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def elliprd(x, y, z):
    """Carlson's R_D(x, y, z) for x, y >= 0 (at most one zero), z > 0; Carlson 1995, sec. 2."""
    a0 = (x + y + 3.0 * z) / 5.0
    q = _Q_RD * max(abs(a0 - x), abs(a0 - y), abs(a0 - z))
    a = a0
    xm, ym, zm = x, y, z
    f = 1.0
    total = 0.0
    while q * f >= abs(a):
        sx, sy, sz = math.sqrt(xm), math.sqrt(ym), math.sqrt(zm)
        lam = sx * sy + sx * sz + sy * sz
        total += f / (sz * (zm + lam))
        xm = 0.25 * (xm + lam)
        ym = 0.25 * (ym + lam)
        zm = 0.25 * (zm + lam)
        a = 0.25 * (a + lam)
        f *= 0.25
    return _rd_series(x, y, a0, a, f) + 3.0 * total


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def _rc_one(e):
    """R_C(1, 1 + e) for e > -1, by its closed forms (Carlson 1995, eq. 2.12) or a series."""
    if abs(e) < 1e-4:
        # Taylor series of the closed forms: error O(e^5) < 1e-20.
        return 1.0 + e * (-1.0 / 3.0 + e * (1.0 / 5.0 + e * (-1.0 / 7.0 + e / 9.0)))
    if e > 0.0:
        s = math.sqrt(e)
        return math.atan(s) / s
    s = math.sqrt(-e)
    return math.atanh(s) / s


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def elliprc(x, y):
    """Carlson's degenerate R_C(x, y) = R_F(x, y, y) for x >= 0, y > 0 (Carlson 1995, eq. 2.12)."""
    if x < y:
        d = math.sqrt(y - x)
        return math.atan(d / math.sqrt(x)) / d if x > 0.0 else 0.5 * math.pi / d
    if x > y:
        # DLMF 19.2.19 in logarithmic form, free of cancellation as y -> 0.
        d = math.sqrt(x - y)
        return math.log((math.sqrt(x) + d) / math.sqrt(y)) / d
    return 1.0 / math.sqrt(x)


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def elliprj(x, y, z, p):
    """Carlson's R_J(x, y, z, p) for x, y, z >= 0 (at most one zero), p > 0; Carlson 1995, sec. 2."""
    a0 = (x + y + z + 2.0 * p) / 5.0
    delta = (p - x) * (p - y) * (p - z)
    q = _Q_RD * max(abs(a0 - x), abs(a0 - y), abs(a0 - z), abs(a0 - p))
    a = a0
    xm, ym, zm, pm = x, y, z, p
    f = 1.0
    f3 = 1.0
    total = 0.0
    while q * f >= abs(a):
        sx, sy, sz, sp = math.sqrt(xm), math.sqrt(ym), math.sqrt(zm), math.sqrt(pm)
        lam = sx * sy + sx * sz + sy * sz
        d = (sp + sx) * (sp + sy) * (sp + sz)
        e = f3 * delta / (d * d)
        total += f * _rc_one(e) / d
        xm = 0.25 * (xm + lam)
        ym = 0.25 * (ym + lam)
        zm = 0.25 * (zm + lam)
        pm = 0.25 * (pm + lam)
        a = 0.25 * (a + lam)
        f *= 0.25
        f3 *= 1.0 / 64.0
    return _rj_series(x, y, z, a0, a, f) + 6.0 * total


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def ellipk(m):
    """Complete integral of the first kind K(m) = R_F(0, 1 - m, 1), m < 1."""
    return elliprf(0.0, 1.0 - m, 1.0)


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def ellipk_agm(m1):
    """Complete integral of the first kind K(m) from its complement m1 = 1 - m > 0.

    K(m) = pi / (2 AGM(1, sqrt(1 - m))) (Abramowitz & Stegun 1964, 17.6; DLMF 19.8.5):
    the arithmetic-geometric mean converges quadratically (about 5 square roots for
    |m| <= 10 where :func:`ellipk`'s duplication takes about 18), and each of its steps
    is exact to rounding.  Taking 1 - m lets a caller that knows it without
    cancellation (m near 1) keep its accuracy.

    Examples
    --------
    >>> abs(ellipk_agm(0.5) - ellipk(0.5)) < 1e-15
    True
    """
    if not m1 > 0.0:
        return np.inf if m1 == 0.0 else np.nan   # m = 1: logarithmic singularity
    a = 1.0
    b = math.sqrt(m1)
    # Stop once a and b agree to ~2 ulp: the next mean changes a by less than rounding.
    # Even m1 = 1e-300 needs fewer than 16 steps; the cap only guards the loop.
    for _ in range(64):
        if abs(a - b) <= 4e-16 * a:
            break
        a, b = 0.5 * (a + b), math.sqrt(a * b)
    return math.pi / (a + b)


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def complete_kdpi(m, n, one_minus_n):
    """Complete K(m), D(m) = (K - E)/m and Pi(n | m) from one arithmetic-geometric mean.

    With a_0 = 1, g_0 = sqrt(1 - m), c_j = (a_{j-1} - g_{j-1}) / 2:
    K = pi / (2 M(1, g_0)), K - E = K sum_j 2^(j-1) c_j^2 (c_0^2 = m; DLMF 19.8.5-19.8.6),
    and Pi(n | m) = (K / 2) (2 + n / (1 - n) sum_j Q_j) with p_0^2 = 1 - n, Q_0 = 1,
    p_{j+1} = (p_j^2 + a_j g_j) / (2 p_j), eps_j = (p_j^2 - a_j g_j) / (p_j^2 + a_j g_j),
    Q_{j+1} = Q_j eps_j / 2 (DLMF 19.8.7-19.8.8, from memory; checked against mpmath in
    the tests).  c_j^2 / m is carried as its own sequence (c_1 = m / (2 (1 + g_0)),
    c_{j+1} = c_j^2 / (4 a_{j+1})), so D keeps full accuracy as m -> 0.  For m < 1,
    n < 1 with ``one_minus_n`` = 1 - n > 0 given without cancellation.

    Examples
    --------
    >>> k, d, p = complete_kdpi(0.5, 0.0, 1.0)
    >>> abs(k - ellipk(0.5)) < 1e-15 and abs(p - k) < 1e-15
    True
    """
    a = 1.0
    g = math.sqrt(1.0 - m)
    p = math.sqrt(one_minus_n)
    q = 1.0
    q_sum = 0.0
    t = m / (4.0 * (1.0 + g) * (1.0 + g))   # c_1^2 / m
    d_sum = 0.5
    weight = 1.0                              # 2^(j-1), from j = 1
    for step in range(64):
        ag = a * g
        p2 = p * p
        q_sum += q
        q *= 0.5 * (p2 - ag) / (p2 + ag)
        p = 0.5 * (p2 + ag) / p
        a, g = 0.5 * (a + g), math.sqrt(ag)   # now a = a_j, j = step + 1
        if step > 0:
            t *= t * m / (16.0 * a * a)       # c_j^2 / m = (c_{j-1}^2 / m) c_{j-1}^2 / (16 a_j^2)
        d_sum += weight * t
        weight *= 2.0
        if abs(a - g) <= 4e-16 * a and abs(q) <= 1e-17 * abs(q_sum) \
                and abs(weight * t) <= 1e-17 * d_sum:
            break
    k = math.pi / (a + g)
    return k, k * d_sum, 0.5 * k * (2.0 + n / one_minus_n * q_sum)


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def _reduce(phi):
    """Write phi = j pi + r with |r| <= pi/2; return (j, r)."""
    j = math.floor(phi / math.pi + 0.5)
    return j, phi - j * math.pi


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def ellipf(phi, m):
    """Incomplete integral of the first kind F(phi | m) (DLMF 19.25.5), real phi, m < 1.

    1 - m sin^2 is formed as cos^2 + (1 - m) sin^2, which keeps its relative
    accuracy as m -> 1 and phi -> pi/2."""
    j, r = _reduce(phi)
    s = math.sin(r)
    c = math.cos(r)
    value = s * elliprf(c * c, c * c + (1.0 - m) * s * s, 1.0)
    if j != 0.0:
        value += 2.0 * j * ellipk(m)
    return value


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def ellipd(phi, m):
    """D(phi | m) = (F - E)/m = (sin^3 phi / 3) R_D(cos^2 phi, 1 - m sin^2 phi, 1) (DLMF 19.25.13)."""
    j, r = _reduce(phi)
    s = math.sin(r)
    c = math.cos(r)
    value = s * s * s * elliprd(c * c, c * c + (1.0 - m) * s * s, 1.0) / 3.0
    if j != 0.0:
        value += 2.0 * j * elliprd(0.0, 1.0 - m, 1.0) / 3.0
    return value


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def ellipe(phi, m):
    """Incomplete integral of the second kind E(phi | m) = F - m D (DLMF 19.25.9)."""
    return ellipf(phi, m) - m * ellipd(phi, m)


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def ellippi(n, phi, m):
    """Incomplete integral of the third kind Pi(n; phi | m) = int dt / ((1 - n sin^2) sqrt(1 - m sin^2)).

    For n < 1 and m < 1 (DLMF 19.25.14; the characteristic ``n`` as in DLMF's
    Pi(phi, n, k), sign convention 1 - n sin^2).
    """
    j, r = _reduce(phi)
    s = math.sin(r)
    c = math.cos(r)
    s2 = s * s
    q = c * c + (1.0 - m) * s2
    value = s * elliprf(c * c, q, 1.0) + n * s * s2 * elliprj(c * c, q, 1.0, 1.0 - n * s2) / 3.0
    if j != 0.0:
        value += 2.0 * j * (elliprf(0.0, 1.0 - m, 1.0)
                            + n * elliprj(0.0, 1.0 - m, 1.0, 1.0 - n) / 3.0)
    return value


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def ellipj(u, m):
    """Jacobi elliptic functions (sn, cn, dn)(u | m) for real u and m <= 1.

    Arithmetic-geometric mean and descending Landen transformation
    (Abramowitz & Stegun 1964, 16.4.2-16.4.3), the limiting form at m -> 0
    (A&S 16.13) and, for m > 0.999, one Newton correction of the amplitude.
    A negative parameter is mapped to 0 < m/(m-1) < 1 (A&S 16.10.2-16.10.4).
    """
    a_buf = np.empty(_AGM_LEVELS)
    c_buf = np.empty(_AGM_LEVELS)
    return ellipj_work(u, m, a_buf, c_buf)


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def ellipj_work(u, m, a_buf, c_buf):
    """:func:`ellipj` with caller-provided scratch arrays of length >= 16 (no allocation)."""
    if m < 0.0:
        root = math.sqrt(1.0 - m)
        s, c, d = ellipj_work(u * root, -m / (1.0 - m), a_buf, c_buf)
        return s / (d * root), c / d, 1.0 / d
    if m < 1e-9:
        s = math.sin(u)
        c = math.cos(u)
        t = 0.25 * m * (u - s * c)
        return s - t * c, c + t * s, 1.0 - 0.5 * m * s * s
    if m >= 1.0:
        sech = 1.0 / math.cosh(u)
        return math.tanh(u), sech, sech
    a = 1.0
    b = math.sqrt(1.0 - m)
    c = math.sqrt(m)
    twon = 1.0
    i = 0
    while abs(c / a) > 1e-16 and i < _AGM_LEVELS - 1:
        a_next = 0.5 * (a + b)
        c = 0.5 * (a - b)
        b = math.sqrt(a * b)
        a = a_next
        twon *= 2.0
        i += 1
        a_buf[i] = a
        c_buf[i] = c
    # Reduce u by the period 4K = 2 pi / a_N of sn and cn first: the Landen
    # recursion then works on |phi| <= pi and keeps full relative accuracy.
    period = 2.0 * math.pi / a
    u = u - period * math.floor(u / period + 0.5)
    phi = twon * a * u
    while i > 0:
        t = c_buf[i] * math.sin(phi) / a_buf[i]
        phi = 0.5 * (math.asin(t) + phi)
        i -= 1
    if m > 0.999:
        # Near m = 1 the Landen recursion loses digits around u = K (asin near +-1):
        # one Newton step on F(phi | m) = u, F by Carlson's R_F, restores them.
        s = math.sin(phi)
        c = math.cos(phi)
        phi -= (ellipf(phi, m) - u) * math.sqrt(c * c + (1.0 - m) * s * s)
    s = math.sin(phi)
    c = math.cos(phi)
    # dn from sn (dn > 0 for m <= 1): the usual cn / cos(phi_1 - phi_0) is 0/0-like near u = K.
    return s, c, math.sqrt(c * c + (1.0 - m) * s * s)


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def ellipj_doubling(u, m, quarter):
    """Jacobi (sn, cn, dn)(u | m) by argument halving and doubling, for |u| < 2 K(m), m < 1.

    u is halved N times to |u| / 2^N <= 2^-4 (divided by sqrt|m| if |m| > 1), where
    the Maclaurin series of z = 1 - cn converges fast (A&S 16.22.2, through u^10); then N
    doublings z(2u) = 2 sn^2 dn^2 / (1 - m sn^4) (from A&S 16.18.2-16.18.3), with
    sn^2 = z (2 - z), dn^2 = (1 - m) + m cn^2 and 1 - m sn^4 = cn^2 (1 + sn^2)
    + (1 - m) sn^4, keep every step free of cancellation (the scheme of Fukushima
    2009, in the complement 1 - cn).  No transcendental function is called.  For
    K < |u| < 2K, where 1 - z = cn would lose digits, sn(u) = sn(2K - u) and
    cn(u) = -cn(2K - u) (A&S 16.8) bring the argument back below K.  About 15
    times faster than :func:`ellipj`, and as accurate for |u| < 2K (tests).

    Parameters
    ----------
    u : float
        Argument, |u| < 2 K(m).
    m : float
        Parameter, m < 1 (negative allowed).
    quarter : float
        K(m), to reflect arguments beyond it; 0 if |u| <= K(m) is known.

    Returns
    -------
    (sn, cn, dn) : tuple of float

    References
    ----------
    Fukushima (2009), Celest. Mech. Dyn. Astr. 105, 305, "Fast computation of
    Jacobian elliptic functions and incomplete elliptic integrals for constant
    values of elliptic parameter and elliptic characteristic" (from memory).
    Abramowitz & Stegun (1964), 16.18, 16.22.
    """
    m1 = 1.0 - m
    h = abs(u)
    flip = 0.0 < quarter < h
    if flip:
        h = 2.0 * quarter - h
    halvings = 0
    # The series' terms scale as (h^2 max(1, |m|))^j: keep h sqrt(max(1, |m|)) <= 1/16.
    limit = 0.0625 if abs(m) <= 1.0 else 0.0625 / math.sqrt(abs(m))
    while h > limit:
        h *= 0.5
        halvings += 1
    h2 = h * h
    # 1 - cn(h) = h^2/2! - (1 + 4m) h^4/4! + (1 + 44m + 16m^2) h^6/6!
    #   - (1 + 408m + 912m^2 + 64m^3) h^8/8!
    #   + (1 + 3688m + 30768m^2 + 15808m^3 + 256m^4) h^10/10! + O(h^12)
    z = h2 * (0.5 - h2 * ((1.0 + 4.0 * m) / 24.0 - h2 * (
        (1.0 + m * (44.0 + 16.0 * m)) / 720.0
        - h2 * ((1.0 + m * (408.0 + m * (912.0 + 64.0 * m))) / 40320.0
                - h2 * (1.0 + m * (3688.0 + m * (30768.0 + m * (15808.0 + 256.0 * m))))
                / 3628800.0))))
    for _ in range(halvings):
        s2 = z * (2.0 - z)
        c = 1.0 - z
        c2 = c * c
        d2 = m1 + m * c2
        z = 2.0 * s2 * d2 / (c2 * (1.0 + s2) + m1 * s2 * s2)
    c = 1.0 - z
    s = math.sqrt(max(z * (2.0 - z), 0.0))
    if u < 0.0:
        s = -s
    d = math.sqrt(m1 + m * c * c)
    if flip:
        c = -c
    return s, c, d


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def elliprd_rj3(x, y, z, p1, p2, p3):
    """R_D(x, y, z) and R_J(x, y, z, p_i) for three p_i > 0, from one duplication of x, y, z.

    The duplication theorem moves x, y, z the same way for all four integrals
    (Carlson 1995, eqs. 2.26-2.28 with p = z for R_D), so the square roots of
    x, y, z are shared; each integral keeps its own mean, its own sum of R_C
    terms and its own fifth-order series, and the loop runs until all four
    have converged.  Equal to :func:`elliprd` and :func:`elliprj` to rounding.
    """
    a_d = (x + y + 3.0 * z) / 5.0
    a_1 = (x + y + z + 2.0 * p1) / 5.0
    a_2 = (x + y + z + 2.0 * p2) / 5.0
    a_3 = (x + y + z + 2.0 * p3) / 5.0
    a0_d, a0_1, a0_2, a0_3 = a_d, a_1, a_2, a_3
    q_d = _Q_RD * max(abs(a_d - x), abs(a_d - y), abs(a_d - z))
    q_1 = _Q_RD * max(abs(a_1 - x), abs(a_1 - y), abs(a_1 - z), abs(a_1 - p1))
    q_2 = _Q_RD * max(abs(a_2 - x), abs(a_2 - y), abs(a_2 - z), abs(a_2 - p2))
    q_3 = _Q_RD * max(abs(a_3 - x), abs(a_3 - y), abs(a_3 - z), abs(a_3 - p3))
    delta_1 = (p1 - x) * (p1 - y) * (p1 - z)
    delta_2 = (p2 - x) * (p2 - y) * (p2 - z)
    delta_3 = (p3 - x) * (p3 - y) * (p3 - z)
    xm, ym, zm = x, y, z
    pm1, pm2, pm3 = p1, p2, p3
    f = 1.0
    f3 = 1.0
    sum_d = 0.0
    sum_1 = 0.0
    sum_2 = 0.0
    sum_3 = 0.0
    while (q_d * f >= abs(a_d) or q_1 * f >= abs(a_1) or q_2 * f >= abs(a_2)
           or q_3 * f >= abs(a_3)):
        sx, sy, sz = math.sqrt(xm), math.sqrt(ym), math.sqrt(zm)
        lam = sx * sy + sx * sz + sy * sz
        sum_d += f / (sz * (zm + lam))
        sp = math.sqrt(pm1)
        dd = (sp + sx) * (sp + sy) * (sp + sz)
        sum_1 += f * _rc_one(f3 * delta_1 / (dd * dd)) / dd
        sp = math.sqrt(pm2)
        dd = (sp + sx) * (sp + sy) * (sp + sz)
        sum_2 += f * _rc_one(f3 * delta_2 / (dd * dd)) / dd
        sp = math.sqrt(pm3)
        dd = (sp + sx) * (sp + sy) * (sp + sz)
        sum_3 += f * _rc_one(f3 * delta_3 / (dd * dd)) / dd
        xm = 0.25 * (xm + lam)
        ym = 0.25 * (ym + lam)
        zm = 0.25 * (zm + lam)
        pm1 = 0.25 * (pm1 + lam)
        pm2 = 0.25 * (pm2 + lam)
        pm3 = 0.25 * (pm3 + lam)
        a_d = 0.25 * (a_d + lam)
        a_1 = 0.25 * (a_1 + lam)
        a_2 = 0.25 * (a_2 + lam)
        a_3 = 0.25 * (a_3 + lam)
        f *= 0.25
        f3 *= 1.0 / 64.0
    rd = _rd_series(x, y, a0_d, a_d, f) + 3.0 * sum_d
    return (rd, _rj_series(x, y, z, a0_1, a_1, f) + 6.0 * sum_1,
            _rj_series(x, y, z, a0_2, a_2, f) + 6.0 * sum_2,
            _rj_series(x, y, z, a0_3, a_3, f) + 6.0 * sum_3)


@njit(cache=True, inline="always", error_model="numpy", fastmath=FAST_ARITHMETIC)
def _rj_series(x, y, z, a0, a, f):
    """The fifth-order series term of R_J after duplication (Carlson 1995, eq. 2.39)."""
    dx = (a0 - x) * f / a
    dy = (a0 - y) * f / a
    dz = (a0 - z) * f / a
    dp = -0.5 * (dx + dy + dz)
    p2 = dp * dp
    e2 = dx * dy + dx * dz + dy * dz - 3.0 * p2
    xyz = dx * dy * dz
    e3 = xyz + 2.0 * e2 * dp + 4.0 * p2 * dp
    e4 = (2.0 * xyz + e2 * dp + 3.0 * p2 * dp) * dp
    e5 = xyz * p2
    series = (1.0 - 3.0 * e2 / 14.0 + e3 / 6.0 + 9.0 * e2 * e2 / 88.0 - 3.0 * e4 / 22.0
              - 9.0 * e2 * e3 / 52.0 + 3.0 * e5 / 26.0)
    return f * series / (a * math.sqrt(a))


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def elliprf_rd_rj(x, y, z, p):
    """R_F(x, y, z), R_D(x, y, z) and R_J(x, y, z, p) from one duplication of x, y, z.

    As :func:`elliprd_rj3`: the three share the square roots of x, y, z in every
    step (Carlson 1995, sec. 2) and each keeps its own mean and series.
    Equal to :func:`elliprf`, :func:`elliprd`, :func:`elliprj` to rounding.
    """
    a_f = (x + y + z) / 3.0
    a_d = (x + y + 3.0 * z) / 5.0
    a_j = (x + y + z + 2.0 * p) / 5.0
    a0_f, a0_d, a0_j = a_f, a_d, a_j
    q_f = _Q_RF * max(abs(a_f - x), abs(a_f - y), abs(a_f - z))
    q_d = _Q_RD * max(abs(a_d - x), abs(a_d - y), abs(a_d - z))
    q_j = _Q_RD * max(abs(a_j - x), abs(a_j - y), abs(a_j - z), abs(a_j - p))
    delta = (p - x) * (p - y) * (p - z)
    xm, ym, zm, pm = x, y, z, p
    f = 1.0
    f3 = 1.0
    sum_d = 0.0
    sum_j = 0.0
    while q_f * f >= abs(a_f) or q_d * f >= abs(a_d) or q_j * f >= abs(a_j):
        sx, sy, sz = math.sqrt(xm), math.sqrt(ym), math.sqrt(zm)
        lam = sx * sy + sx * sz + sy * sz
        sum_d += f / (sz * (zm + lam))
        sp = math.sqrt(pm)
        dd = (sp + sx) * (sp + sy) * (sp + sz)
        sum_j += f * _rc_one(f3 * delta / (dd * dd)) / dd
        xm = 0.25 * (xm + lam)
        ym = 0.25 * (ym + lam)
        zm = 0.25 * (zm + lam)
        pm = 0.25 * (pm + lam)
        a_f = 0.25 * (a_f + lam)
        a_d = 0.25 * (a_d + lam)
        a_j = 0.25 * (a_j + lam)
        f *= 0.25
        f3 *= 1.0 / 64.0
    dx = (a0_f - x) * f / a_f
    dy = (a0_f - y) * f / a_f
    dz = -(dx + dy)
    e2 = dx * dy - dz * dz
    e3 = dx * dy * dz
    rf = (1.0 - e2 / 10.0 + e3 / 14.0 + e2 * e2 / 24.0 - 3.0 * e2 * e3 / 44.0) / math.sqrt(a_f)
    return rf, _rd_series(x, y, a0_d, a_d, f) + 3.0 * sum_d, \
        _rj_series(x, y, z, a0_j, a_j, f) + 6.0 * sum_j


@njit(cache=True, inline="always", error_model="numpy", fastmath=FAST_ARITHMETIC)
def _rd_series(x, y, a0, a, f):
    """The fifth-order series term of R_D after duplication (Carlson 1995, eq. 2.29)."""
    dx = (a0 - x) * f / a
    dy = (a0 - y) * f / a
    dz = -(dx + dy) / 3.0
    xy = dx * dy
    z2 = dz * dz
    e2 = xy - 6.0 * z2
    e3 = (3.0 * xy - 8.0 * z2) * dz
    e4 = 3.0 * (xy - z2) * z2
    e5 = xy * z2 * dz
    return f * (1.0 - 3.0 * e2 / 14.0 + e3 / 6.0 + 9.0 * e2 * e2 / 88.0 - 3.0 * e4 / 22.0
                - 9.0 * e2 * e3 / 52.0 + 3.0 * e5 / 26.0) / (a * math.sqrt(a))
