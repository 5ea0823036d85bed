"""Closed-form transfer for a distant observer: Kerr null geodesics to the equatorial plane.

For an observer at infinity the Mino-time equations (see :mod:`render.geodesics`)
are solved by elliptic integrals and Jacobi elliptic functions (Gralla &
Lupsasca 2020a, b), so each equatorial crossing costs a handful of special
function evaluations instead of hundreds of integration steps.

Polar motion
------------
With mu = cos(theta), (dmu/dsigma)^2 = a^2 (u+ - mu^2)(mu^2 - u-), where u+ > 0 >
u- are the roots of a^2 w^2 + (eta + lam^2 - a^2) w - eta = 0 (eta > 0: the only
rays that cross the equator).  Writing nu = -a^2 u- (finite as a -> 0) and
m = u+/u- = -a^2 eta / nu^2 <= 0, the Mino time from the equator to mu is
G(mu) = F(arcsin(mu/sqrt(u+)) | m) / sqrt(nu) (Gralla & Lupsasca 2020b, eq. 29,
from memory).  A ray that has passed T polar turning points on its way to its
n-th crossing (T = n if it first moves towards the equator, n + 1 otherwise)
reaches it at

    G_n = 2 T G_half + s G(mu_o),    s = +1 (towards) or -1 (away),

with G_half = K(m)/sqrt(nu).  The polar parts of the azimuth and of the time,
int dsigma / (1 - mu^2) and int mu^2 dsigma, follow the same pattern with
Legendre's third-kind Pi(u+; . | m) and D(. | m) = (F - E)/m, all as Carlson
integrals (:mod:`render.elliptic`).

Radial motion
-------------
R(r) = r^4 + (a^2 - eta - lam^2) r^2 + 2 (eta + (lam - a)^2) r - a^2 eta has the
roots r1 <= r2 <= r3 <= r4 (by Ferrari's resolvent cubic; Gralla & Lupsasca
2020a, sec. IV, from memory).  For eta > 0 two roots are real, r1 < 0 <= r2, and
three classes of root structure occur:

* class 2 (four real roots, r4 > r_+): the ray turns at r4 and escapes,
      r(sigma) = r4 + r43 r41 sn^2(X | k) / (r31 - r41 sn^2(X | k)),
      X = sigma sqrt(r31 r42)/2 - F(arcsin sqrt(r31/r41) | k),  k = r32 r41 / (r31 r42)
  (Byrd & Friedman 1971, 258.00; the same form as in Gralla & Lupsasca 2020b, from memory);
* class 3 (four real roots, r4 < r_+): the same formula until the ray is captured;
* class 4 (r3, r4 complex): the ray falls in monotonically,
      r(sigma) = (r2 B - r1 A + (r2 B + r1 A) cn(X | k)) / (B - A + (A + B) cn(X | k)),
      X = F(arccos((A - B)/(A + B)) | k) - sigma sqrt(A B),
      A = |r2 - r3|, B = |r1 - r3|,  k = ((A + B)^2 - r21^2) / (4 A B)
  (Byrd & Friedman 1971, 260.00).
Rays with eta <= 0 (the vortical ones of Gralla & Lupsasca, and the pole-grazers
with eta = 0) never cross the equator; their fate alone is given, from whether
R has a real root outside the horizon.  (The class numbers are meant to follow
Gralla & Lupsasca 2020a, from memory; their remaining class, no real root at
all, needs eta < 0 and so never reaches the equator.)

The radial parts of the azimuth, int a (2 r - a lam)/Delta dsigma, and of the
regularised delay, int (r^2 + a^2)(eta + (lam - a)^2) / (r^2 + a^2 - a lam + sqrt R)
dsigma (the difference (r^2+a^2)/Delta ((r^2+a^2-a lam) - sqrt R) without its
cancellation), are integrated by Gauss–Legendre quadrature in Mino time over
the closed-form r(sigma): the integrands are analytic in sigma on each radial
leg (including sigma = 0, r = infinity, in terms of u = 1/r), so the quadrature
converges exponentially; on the outgoing leg the delay adds
2 (r*(r) - r*(r4)), the exact integral of the difference of the two legs.

Everything else follows the integrator's conventions (:mod:`render.geodesics`):
phi is the Boyer–Lindquist azimuth of the crossing in [0, 2 pi), measured as the
integrator does from the observer's azimuth (rays with lam = 0 pass through the
poles, where phi jumps by pi); the fates and the capture radius are the same.

References
----------
Gralla & Lupsasca (2020a), "Null geodesics of the Kerr exterior",
Phys. Rev. D 101, 044032, arXiv:1910.12881 (journal reference from memory).
Gralla & Lupsasca (2020b), "Lensing by Kerr black holes", Phys. Rev. D 101,
044031, arXiv:1910.12873 (from memory).
Byrd & Friedman (1971), Handbook of Elliptic Integrals for Engineers and
Scientists, 2nd ed., formulas 258.00 and 260.00.
Carlson (1995), Numer. Algorithms 10, 13.
"""

import math

import numpy as np
from numba import njit, prange

from .elliptic import elliprd, elliprf, elliprj, ellipj_work
from .geodesics import FATE_CAPTURED, FATE_DISK, FATE_ESCAPED, FATE_UNRESOLVED

__all__ = ["closed_form_crossings", "closed_form_bundle", "resolve_method", "radial_roots",
           "METHODS", "QUADRATURE_NODES"]

CLASS_NONE = 0      # eta <= 0: no equatorial crossing
CLASS_TURNING = 2   # four real roots, r4 > r_+: turns and escapes
CLASS_REAL_IN = 3   # four real roots, r4 < r_+: captured
CLASS_COMPLEX = 4   # r3, r4 complex: captured

# Gauss–Legendre rule on each panel of at most _PANEL in the elliptic argument X:
# 12 nodes on panels of 0.5 give phi and the delay to ~2e-10 (16 nodes on 0.4: ~1e-13,
# at 1.7x the cost), checked against a 24-node rule and, in tests/test_closed_form.py,
# against the integrator.
QUADRATURE_NODES = 12
_NODES, _WEIGHTS = np.polynomial.legendre.leggauss(QUADRATURE_NODES)
_PANEL = 0.5
# Terms of the Maclaurin series of sn, cn, dn at the node offsets (|h| <= 0.25:
# truncation below 0.16^20 ~ 1e-16).
_TAYLOR_ORDER = 21
_SCRATCH = 32 + 3 * _TAYLOR_ORDER + 3 * QUADRATURE_NODES


@njit(cache=True, error_model="numpy")
def radial_roots(spin, lam, eta):
    """Roots of the radial potential R(r); returns (r1, r2, r3, r4, im34, are_34_real).

    r1 <= r2 are real whenever eta > 0; if ``are_34_real`` is False, r3 = r4 is the
    real part of the complex pair and ``im34`` its imaginary part.  Ferrari's
    method with the largest root of the resolvent cubic (Gralla & Lupsasca
    2020a, eqs. 95-97, from memory), polished by Newton steps.
    """
    a2 = spin * spin
    big_a = a2 - eta - lam * lam
    big_b = 2.0 * (eta + (lam - spin) * (lam - spin))
    big_c = -a2 * eta
    # Resolvent y^3 + A y^2 + (A^2/4 - C) y - B^2/8 = 0; its largest root is > 0.
    c2 = big_a
    c1 = 0.25 * big_a * big_a - big_c
    c0 = -0.125 * big_b * big_b
    p = c1 - c2 * c2 / 3.0
    q = 2.0 * c2 * c2 * c2 / 27.0 - c2 * c1 / 3.0 + c0
    disc = 0.25 * q * q + p * p * p / 27.0
    if disc >= 0.0:
        sq = math.sqrt(disc)
        t = math.copysign(abs(-0.5 * q + sq) ** (1.0 / 3.0), -0.5 * q + sq) \
            + math.copysign(abs(-0.5 * q - sq) ** (1.0 / 3.0), -0.5 * q - sq)
    else:
        rho = math.sqrt(-p / 3.0)
        arg = min(1.0, max(-1.0, -0.5 * q / (rho * rho * rho)))
        t = 2.0 * rho * math.cos(math.acos(arg) / 3.0)
    y = t - c2 / 3.0
    for _ in range(3):
        f = ((y + c2) * y + c1) * y + c0
        df = (3.0 * y + 2.0 * c2) * y + c1
        if df == 0.0:
            break
        step = f / df
        y -= step
        if abs(step) <= 1e-16 * abs(y):
            break
    if y <= 0.0:
        y = 1e-300
    z = math.sqrt(0.5 * y)
    d12 = -0.5 * big_a - z * z + big_b / (4.0 * z)
    d34 = -0.5 * big_a - z * z - big_b / (4.0 * z)
    s12 = math.sqrt(max(d12, 0.0))
    r1 = -z - s12
    r2 = -z + s12
    if d34 >= 0.0:
        s34 = math.sqrt(d34)
        r3 = z - s34
        r4 = z + s34
        # One Newton step on R for the roots that set the motion (skipped at a
        # double root, where R' vanishes and the root is ill-conditioned anyway).
        for k in range(2):
            r = r4 if k == 0 else r3
            f = ((r * r + big_a) * r + big_b) * r + big_c
            df = (4.0 * r * r + 2.0 * big_a) * r + big_b
            if abs(df) > 1e-8 * (abs(r) ** 3 + 1.0):
                r -= f / df
            if k == 0:
                r4 = r
            else:
                r3 = r
        return r1, r2, r3, r4, 0.0, True
    return r1, r2, z, z, math.sqrt(-d34), False


@njit(cache=True, inline="always", error_model="numpy")
def _u_from_jacobi(cls, sn, cn, c_a, c_b, c_c, c_d):
    """u = 1/r from sn or cn of the elliptic argument (no division by zero at r = infinity)."""
    if cls == CLASS_COMPLEX:
        # c_a = B - A, c_b = A + B, c_c = r2 B - r1 A, c_d = r2 B + r1 A
        return (c_a + cn * c_b) / (c_c + cn * c_d)
    # c_a = r31, c_b = r41, c_c = r4 r31, c_d = r3 r41
    s2 = sn * sn
    return (c_a - c_b * s2) / (c_c - c_d * s2)


@njit(cache=True, error_model="numpy")
def _inverse_radius(cls, x_arg, k, c_a, c_b, c_c, c_d, work_a, work_c):
    """u = 1/r at elliptic argument ``x_arg``."""
    sn, cn, _ = ellipj_work(x_arg, k, work_a, work_c)
    return _u_from_jacobi(cls, sn, cn, c_a, c_b, c_c, c_d)


@njit(cache=True, error_model="numpy")
def _jacobi_taylor(m, coef_s, coef_c, coef_d):
    """Maclaurin coefficients of sn, cn, dn(h | m) from sn' = cn dn, cn' = -sn dn, dn' = -m sn cn.

    The series converge for |h| < K(1 - m) >= pi/2 (the nearest poles are at +-i K';
    A&S 16.2); at |h| <= _PANEL / 2 = 0.25 the terms fall by >= 0.16 per order.
    """
    order = coef_s.shape[0]
    coef_s[0] = 0.0
    coef_c[0] = 1.0
    coef_d[0] = 1.0
    for n in range(order - 1):
        ss = 0.0
        sc = 0.0
        sd = 0.0
        for j in range(n + 1):
            ss += coef_c[j] * coef_d[n - j]
            sc += coef_s[j] * coef_d[n - j]
            sd += coef_s[j] * coef_c[n - j]
        coef_s[n + 1] = ss / (n + 1)
        coef_c[n + 1] = -sc / (n + 1)
        coef_d[n + 1] = -m * sd / (n + 1)


@njit(cache=True, inline="always")
def _horner(coef, h):
    value = 0.0
    for i in range(coef.shape[0] - 1, -1, -1):
        value = value * h + coef[i]
    return value


@njit(cache=True, inline="always", error_model="numpy")
def _radial_rates(u, spin, lam, eta):
    """(dphi_r/dsigma, ddelay_r/dsigma) on the inward leg, written in u = 1/r."""
    a2 = spin * spin
    delta_u = 1.0 - 2.0 * u + a2 * u * u
    rate_phi = spin * u * (2.0 - spin * lam * u) / delta_u
    e_const = eta + (lam - spin) * (lam - spin)
    p_u = 1.0 + u * u * ((a2 - lam * lam - eta) + u * (2.0 * e_const - a2 * eta * u))
    root = math.sqrt(max(p_u, 0.0))
    big_a = 1.0 + (a2 - spin * lam) * u * u
    if big_a > 0.0:
        rate_t = (1.0 + a2 * u * u) * e_const / (big_a + root)
    else:
        rate_t = (1.0 + a2 * u * u) / delta_u * (big_a - root) / (u * u)
    return rate_phi, rate_t


@njit(cache=True, error_model="numpy")
def _panels(x0, x1, k, cls, c_a, c_b, c_c, c_d, spin, lam, eta, work):
    """Gauss–Legendre sums of the two radial rates over [x0, x1] in panels of <= _PANEL.

    sn, cn at the nodes come from one Jacobi evaluation at each panel's centre and
    the addition theorem (DLMF 22.8.1-22.8.2) with the Maclaurin series at the
    node offsets, which costs a few dozen flops per node instead of a full
    arithmetic-geometric mean.
    """
    work_a, work_c, coef_s, coef_c, coef_d, off_s, off_c, off_d = work
    length = x1 - x0
    panels = max(1, int(math.ceil(abs(length) / _PANEL)))
    h = length / panels
    for i in range(QUADRATURE_NODES):
        offset = 0.5 * h * _NODES[i]
        off_s[i] = _horner(coef_s, offset)
        off_c[i] = _horner(coef_c, offset)
        off_d[i] = _horner(coef_d, offset)
    total_phi = 0.0
    total_t = 0.0
    for j in range(panels):
        sn0, cn0, dn0 = ellipj_work(x0 + (j + 0.5) * h, k, work_a, work_c)
        for i in range(QUADRATURE_NODES):
            sh = off_s[i]
            ch = off_c[i]
            dh = off_d[i]
            denominator = 1.0 - k * sn0 * sn0 * sh * sh
            sn = (sn0 * ch * dh + sh * cn0 * dn0) / denominator
            cn = (cn0 * ch - sn0 * sh * dn0 * dh) / denominator
            u = _u_from_jacobi(cls, sn, cn, c_a, c_b, c_c, c_d)
            rp, rt = _radial_rates(u, spin, lam, eta)
            total_phi += _WEIGHTS[i] * rp
            total_t += _WEIGHTS[i] * rt
    return 0.5 * abs(h) * total_phi, 0.5 * abs(h) * total_t


@njit(cache=True, error_model="numpy")
def _radial_quadrature(cls, x0, x1, k, c_a, c_b, c_c, c_d, dsigma_dx, spin, lam, eta,
                       r_end, r_plus, work):
    """(phi_r, delay_r): the radial-rate integrals between elliptic arguments x0 and x1.

    Near the horizon the rates grow like 1/(r - r_+), a pole just beyond the end of a
    captured ray's leg: there the panels shrink geometrically towards x1 down to the
    pole's distance (otherwise a crossing at r - r_+ ~ 1e-2 M loses ~1e-4 in phi).
    """
    gap = 1e300
    if r_end - r_plus < 1.0:
        e_const = eta + (lam - spin) * (lam - spin)
        big_r = (((r_end * r_end + spin * spin - eta - lam * lam) * r_end + 2.0 * e_const)
                 * r_end - spin * spin * eta)
        slope = math.sqrt(max(big_r, 0.0)) * dsigma_dx
        if slope > 0.0:
            gap = (r_end - r_plus) / slope
    total_phi = 0.0
    total_t = 0.0
    lo = x0
    while abs(x1 - lo) > 4.0 * gap:
        step = max(0.5 * abs(x1 - lo), 2.0 * gap)
        mid = x1 - math.copysign(step, x1 - lo)
        dp, dt = _panels(lo, mid, k, cls, c_a, c_b, c_c, c_d, spin, lam, eta, work)
        total_phi += dp
        total_t += dt
        lo = mid
    dp, dt = _panels(lo, x1, k, cls, c_a, c_b, c_c, c_d, spin, lam, eta, work)
    total_phi += dp
    total_t += dt
    return total_phi * dsigma_dx, total_t * dsigma_dx


@njit(cache=True, inline="always")
def _tortoise(r, r_plus, r_minus):
    """r*(r) up to a constant, dr*/dr = (r^2 + a^2)/Delta (r > r_+)."""
    width = r_plus - r_minus
    value = r + 2.0 * r_plus / width * math.log(r - r_plus)
    if r_minus > 0.0:
        value -= 2.0 * r_minus / width * math.log(r - r_minus)
    return value


@njit(cache=True, error_model="numpy")
def _in_plane_end(cls, x_start, x_end, k, c_a, c_b, c_c, c_d, dsigma_dx, spin, lam, eta, r4,
                  r_plus, phi_o, sigma_end, want_end, work):
    """(fate, 0, theta_end, phi_end) of a ray confined to the equatorial plane."""
    if cls != CLASS_TURNING:
        return FATE_CAPTURED, 0, np.nan, np.nan
    if not want_end:
        return FATE_ESCAPED, 0, np.nan, np.nan
    _jacobi_taylor(k, work[2], work[3], work[4])
    dp_in, _ = _radial_quadrature(cls, x_start, 0.0, k, c_a, c_b, c_c, c_d, dsigma_dx, spin,
                                  lam, eta, r4, r_plus, work)
    dp_out, _ = _radial_quadrature(cls, 0.0, x_end, k, c_a, c_b, c_c, c_d, dsigma_dx, spin,
                                   lam, eta, 1e300, r_plus, work)
    # On the equator dphi/dsigma = -(a (2r - a lam)/Delta + lam).
    phi_end = phi_o - dp_in - dp_out - lam * sigma_end
    return FATE_ESCAPED, 0, 0.5 * math.pi, phi_end % (2.0 * math.pi)


@njit(cache=True, error_model="numpy")
def _one_ray(alpha, beta, spin, sin_o, cos_o, phi_o, r_plus, r_minus, r_capture,
             max_crossings, n_record, stop_on_disk, r_in, r_out, want_end,
             out_r, out_phi, out_delay, out_inward, row, scratch):
    """Crossings of one ray; returns (fate, n_crossings, theta_end, phi_end).

    ``scratch`` (length _SCRATCH) holds the AGM levels, the Maclaurin coefficients
    and the node values, so that no array is allocated per ray.
    """
    t = _TAYLOR_ORDER
    q = QUADRATURE_NODES
    work = (scratch[0:16], scratch[16:32], scratch[32:32 + t], scratch[32 + t:32 + 2 * t],
            scratch[32 + 2 * t:32 + 3 * t], scratch[32 + 3 * t:32 + 3 * t + q],
            scratch[32 + 3 * t + q:32 + 3 * t + 2 * q], scratch[32 + 3 * t + 2 * q:_SCRATCH])
    lam = -alpha * sin_o
    eta = beta * beta + (alpha * alpha - spin * spin) * cos_o * cos_o
    r1, r2, r3, r4, im34, real34 = radial_roots(spin, lam, eta)
    # An edge-on observer's rays with beta = 0 stay in the equatorial plane (eta = 0,
    # mu = 0 throughout): no crossing, but a radial motion like the others.
    in_plane = eta == 0.0 and cos_o == 0.0
    if not eta > 0.0 and not in_plane:
        # Vortical or pole-grazing: no crossing; escaped iff a real turning point
        # lies outside the horizon.
        if real34 and r4 > r_capture:
            return FATE_ESCAPED, 0, np.nan, np.nan
        return FATE_CAPTURED, 0, np.nan, np.nan

    # --- radial motion: class, elliptic parameter, sigma(X) and its end ----------
    if real34 and r4 > r_capture:
        cls = CLASS_TURNING
    elif real34:
        cls = CLASS_REAL_IN
    else:
        cls = CLASS_COMPLEX
    if cls != CLASS_COMPLEX:
        r31 = r3 - r1
        r41 = r4 - r1
        r32 = r3 - r2
        r42 = r4 - r2
        r43 = r4 - r3
        r21 = r2 - r1
        k = r32 * r41 / (r31 * r42)
        k1 = r21 * r43 / (r31 * r42)   # 1 - k without cancellation
        dsigma_dx = 2.0 / math.sqrt(r31 * r42)
        s2 = r31 / r41
        f_inf = math.sqrt(s2) * elliprf(r43 / r41, r43 / r41 + k1 * s2, 1.0)
        c_a, c_b, c_c, c_d = r31, r41, r4 * r31, r3 * r41
        # X = sigma / dsigma_dx - f_inf runs from -f_inf (infinity) through 0 (r4).
        x_start = -f_inf
        direction = 1.0
        if cls == CLASS_TURNING:
            x_end = f_inf
        else:
            s2c = r31 * (r_capture - r4) / (r41 * (r_capture - r3))
            x_end = -math.sqrt(s2c) * elliprf(1.0 - s2c, 1.0 - s2c + k1 * s2c, 1.0)
    else:
        big_a = math.sqrt((r2 - r3) ** 2 + im34 * im34)
        big_b = math.sqrt((r1 - r3) ** 2 + im34 * im34)
        r21 = r2 - r1
        k = ((big_a + big_b) ** 2 - r21 * r21) / (4.0 * big_a * big_b)
        k1 = (r21 * r21 - (big_a - big_b) ** 2) / (4.0 * big_a * big_b)
        dsigma_dx = 1.0 / math.sqrt(big_a * big_b)
        c_inf = (big_a - big_b) / (big_a + big_b)
        s_inf2 = 1.0 - c_inf * c_inf
        f_inf = math.sqrt(s_inf2) * elliprf(c_inf * c_inf, c_inf * c_inf + k1 * s_inf2, 1.0)
        if c_inf < 0.0:
            # arccos beyond pi/2: F(pi - phi) = 2K - F(phi).
            f_inf = 2.0 * elliprf(0.0, k1, 1.0) - f_inf
        c_a, c_b, c_c, c_d = big_b - big_a, big_a + big_b, r2 * big_b - r1 * big_a, \
            r2 * big_b + r1 * big_a
        x_start = f_inf
        direction = -1.0
        c_cap = (((big_a - big_b) * r_capture + r2 * big_b - r1 * big_a)
                 / ((big_a + big_b) * r_capture - r2 * big_b - r1 * big_a))
        s_cap2 = (1.0 - c_cap) * (1.0 + c_cap)
        x_end = math.sqrt(s_cap2) * elliprf(c_cap * c_cap, c_cap * c_cap + k1 * s_cap2, 1.0)
        if c_cap < 0.0:
            x_end = 2.0 * elliprf(0.0, k1, 1.0) - x_end
    sigma_end = abs(x_end - x_start) * dsigma_dx
    if in_plane:
        return _in_plane_end(cls, x_start, x_end, k, c_a, c_b, c_c, c_d, dsigma_dx, spin,
                             lam, eta, r4, r_plus, phi_o, sigma_end, want_end, work)

    # --- polar motion ---------------------------------------------------------
    b_pol = eta + lam * lam - spin * spin
    nu = 0.5 * (b_pol + math.sqrt(b_pol * b_pol + 4.0 * spin * spin * eta))
    u_plus = eta / nu
    m_pol = -spin * spin * u_plus / nu
    one_minus_u_plus = lam * lam / (spin * spin + nu)
    root_nu = math.sqrt(nu)
    x_o = min(abs(cos_o) / math.sqrt(u_plus), 1.0)
    y_o = 1.0 - m_pol * x_o * x_o
    w_o = 1.0 - x_o * x_o
    rf_o = elliprf(w_o, y_o, 1.0)
    rf_c = elliprf(0.0, 1.0 - m_pol, 1.0)
    g_o = x_o * rf_o / root_nu
    g_half = rf_c / root_nu
    # Towards the equator first iff mu_o dmu/dsigma < 0 (dmu/dsigma = beta sin_o);
    # an observer in the plane itself first moves off it.
    towards = cos_o != 0.0 and cos_o * beta * sin_o <= 0.0
    sign_o = 1.0 if towards else -1.0
    turns0 = 0 if towards else 1

    # --- crossings ------------------------------------------------------------
    fate = FATE_ESCAPED if cls == CLASS_TURNING else FATE_CAPTURED
    n_cross = 0
    last_recorded = -1
    while True:
        sigma_n = 2.0 * (n_cross + turns0) * g_half + sign_o * g_o
        if not sigma_n < sigma_end:
            break
        x_n = x_start + direction * sigma_n / dsigma_dx
        u_n = _inverse_radius(cls, x_n, k, c_a, c_b, c_c, c_d, work[0], work[1])
        r_n = 1.0 / u_n
        if n_cross < n_record:
            out_r[row, n_cross] = r_n
            out_inward[row, n_cross] = not (cls == CLASS_TURNING and x_n > 0.0)
            last_recorded = n_cross
        n_cross += 1
        if stop_on_disk and r_in <= r_n <= r_out:
            fate = FATE_DISK
            break
        if n_cross >= max_crossings:
            fate = FATE_UNRESOLVED
            break

    # --- azimuth and delay of the recorded crossings ----------------------------
    n_last = last_recorded
    need_end = want_end and fate == FATE_ESCAPED
    if n_last < 0 and not need_end:
        return fate, n_cross, np.nan, np.nan
    _jacobi_taylor(k, work[2], work[3], work[4])
    with_pi = lam != 0.0
    pi_c = 0.0
    pi_o = 0.0
    if with_pi:
        pi_c = rf_c + u_plus * elliprj(0.0, 1.0 - m_pol, 1.0, one_minus_u_plus) / 3.0
        p_o = one_minus_u_plus + u_plus * w_o
        pi_o = x_o * rf_o + u_plus * x_o ** 3 * elliprj(w_o, y_o, 1.0, p_o) / 3.0
    d_c = elliprd(0.0, 1.0 - m_pol, 1.0) / 3.0
    d_o = x_o ** 3 * elliprd(w_o, y_o, 1.0) / 3.0
    tortoise_turn = _tortoise(r4, r_plus, r_minus) if cls == CLASS_TURNING else 0.0
    x_prev = x_start
    acc_phi = 0.0
    acc_t = 0.0
    for n in range(n_last + 1):
        turns = n + turns0
        sigma_n = 2.0 * turns * g_half + sign_o * g_o
        x_n = x_start + direction * sigma_n / dsigma_dx
        # Split the radial quadrature at the turning point X = 0 (sqrt R has a kink there).
        if x_prev < 0.0 < x_n and cls == CLASS_TURNING:
            dp, dt = _radial_quadrature(cls, x_prev, 0.0, k, c_a, c_b, c_c, c_d,
                                        dsigma_dx, spin, lam, eta, r4, r_plus, work)
            acc_phi += dp
            acc_t += dt
            x_prev = 0.0
        dp, dt = _radial_quadrature(cls, x_prev, x_n, k, c_a, c_b, c_c, c_d, dsigma_dx,
                                    spin, lam, eta, out_r[row, n], r_plus, work)
        acc_phi += dp
        acc_t += dt
        x_prev = x_n
        phi_theta = lam * (2.0 * turns * pi_c + sign_o * pi_o) / root_nu if with_pi else 0.0
        mu2_integral = u_plus * (2.0 * turns * d_c + sign_o * d_o) / root_nu
        delay = acc_t + spin * (lam - spin) * sigma_n + spin * spin * mu2_integral
        if cls == CLASS_TURNING and x_n > 0.0:
            delay += 2.0 * (_tortoise(out_r[row, n], r_plus, r_minus) - tortoise_turn)
        phi = phi_o - acc_phi - phi_theta
        if not with_pi:
            phi += math.pi * turns
        out_phi[row, n] = phi % (2.0 * math.pi)
        out_delay[row, n] = delay
    if not need_end:
        return fate, n_cross, np.nan, np.nan

    # --- escape direction -------------------------------------------------------
    if x_prev < 0.0:
        dp, _ = _radial_quadrature(cls, x_prev, 0.0, k, c_a, c_b, c_c, c_d, dsigma_dx,
                                   spin, lam, eta, r4, r_plus, work)
        acc_phi += dp
        x_prev = 0.0
    dp, _ = _radial_quadrature(cls, x_prev, x_end, k, c_a, c_b, c_c, c_d, dsigma_dx,
                               spin, lam, eta, 1e300, r_plus, work)
    acc_phi += dp
    # Polar phase psi with mu = sqrt(u+) sn(psi | m): psi_o = sign(mu_o) F(asin x_o),
    # moving with dpsi/dsigma = sign(dmu/dsigma) sqrt(nu) (a ray starting at its
    # turning point, beta = 0, moves towards the equator).
    mu_sign = 1.0 if cos_o >= 0.0 else -1.0
    psi_o = mu_sign * x_o * rf_o
    dmu = beta * sin_o
    psi_dir = 1.0 if dmu > 0.0 else (-1.0 if dmu < 0.0 else -mu_sign)
    psi = psi_o + psi_dir * root_nu * sigma_end
    sn, _, _ = ellipj_work(psi, m_pol, work[0], work[1])
    theta_end = math.acos(min(1.0, max(-1.0, math.sqrt(u_plus) * sn)))
    # P(psi) = int_0^psi dpsi' / (1 - u+ sn^2) = Pi(u+; am psi | m) grows by 2 Pi(u+ | m)
    # per period 2K of sn^2; int dsigma / (1 - mu^2) = psi_dir (P(psi) - P(psi_o)) / sqrt(nu).
    half = 2.0 * rf_c
    j = math.floor(psi / half + 0.5)
    if with_pi:
        x_r = sn if j % 2 == 0 else -sn
        w_r = 1.0 - x_r * x_r
        y_r = 1.0 - m_pol * x_r * x_r
        pi_r = x_r * elliprf(w_r, y_r, 1.0) + u_plus * x_r ** 3 * elliprj(
            w_r, y_r, 1.0, one_minus_u_plus + u_plus * w_r) / 3.0
        phi_theta = lam * psi_dir * (2.0 * j * pi_c + pi_r - mu_sign * pi_o) / root_nu
        turns_end = 0
    else:
        # Pole passages: psi crosses odd multiples of K = rf_c (not counting the start).
        phi_theta = 0.0
        shrink = 1e-12 * rf_c
        lo = min(psi, psi_o) + shrink
        hi = max(psi, psi_o) - shrink
        turns_end = int(math.floor((hi + rf_c) / half) - math.floor((lo + rf_c) / half))
    phi_end = phi_o - acc_phi - phi_theta + math.pi * turns_end
    return fate, n_cross, theta_end, phi_end % (2.0 * math.pi)


@njit(cache=True, parallel=True, error_model="numpy")
def closed_form_crossings(alpha, beta, phi_o, spin, sin_o, cos_o, r_capture, max_crossings,
                          n_record, stop_on_disk, r_in, r_out, want_end):
    """Equatorial crossings of distant-observer rays in closed form (one prange per ray).

    Parameters
    ----------
    alpha, beta, phi_o : ndarray, shape (N,)
        Image-plane coordinates (M) and the initial azimuth of each ray (rad).
    spin : float
        a/M, |a| < 1.
    sin_o, cos_o : float
        Sine and cosine of the observer's polar angle (exactly 0 and +-1 on the axis).
    r_capture : float
        Radius at which a ray counts as captured.
    max_crossings, n_record, stop_on_disk, r_in, r_out
        As for :func:`render.geodesics.trace_rays`.
    want_end : bool
        Also compute the escape direction (theta_end, phi_end).

    Returns
    -------
    tuple
        (cross_r, cross_phi, cross_delay, cross_inward, fate, n_crossings, steps,
        theta_end, phi_end), as :func:`render.geodesics.trace_rays` (steps are 0).
    """
    n = alpha.shape[0]
    cross_r = np.full((n, n_record), np.nan)
    cross_phi = np.full((n, n_record), np.nan)
    cross_delay = np.full((n, n_record), np.nan)
    cross_inward = np.zeros((n, n_record), dtype=np.bool_)
    fate = np.empty(n, dtype=np.int8)
    n_crossings = np.empty(n, dtype=np.int32)
    steps = np.zeros(n, dtype=np.int32)
    theta_end = np.full(n, np.nan)
    phi_end = np.full(n, np.nan)
    root = math.sqrt(1.0 - spin * spin)
    r_plus = 1.0 + root
    r_minus = 1.0 - root
    scratch = np.empty((n, _SCRATCH))
    for i in prange(n):
        result = _one_ray(alpha[i], beta[i], spin, sin_o, cos_o, phi_o[i], r_plus, r_minus,
                          r_capture, max_crossings, n_record, stop_on_disk, r_in, r_out,
                          want_end, cross_r, cross_phi, cross_delay, cross_inward, i,
                          scratch[i])
        fate[i] = result[0]
        n_crossings[i] = result[1]
        theta_end[i] = result[2]
        phi_end[i] = result[3]
    return (cross_r, cross_phi, cross_delay, cross_inward, fate, n_crossings, steps,
            theta_end, phi_end)


# --- Python-level API ------------------------------------------------------------

METHODS = ("integrate", "closed-form", "auto")


def resolve_method(method, observer_kind="distant"):
    """The transfer method actually used: ``"integrate"`` or ``"closed-form"``.

    ``"auto"`` picks the closed form where it is valid, i.e. for a distant (static,
    at infinity) observer looking at nothing but the equatorial disk, and the
    integrator otherwise (a camera at finite distance).  Asking for
    ``"closed-form"`` with an observer it cannot describe is an error.

    Examples
    --------
    >>> resolve_method("auto", "distant"), resolve_method("auto", "camera")
    ('closed-form', 'integrate')
    """
    if method not in METHODS:
        raise ValueError(f"method must be one of {', '.join(METHODS)}, got {method!r}")
    if method == "auto":
        return "closed-form" if observer_kind == "distant" else "integrate"
    if method == "closed-form" and observer_kind != "distant":
        raise ValueError("method 'closed-form' needs a distant observer (observer.kind: "
                         f"distant), got {observer_kind!r}; use 'integrate' or 'auto'")
    return method


def closed_form_bundle(alpha, beta, bundle, spin, inclination_deg, *, n_record,
                       max_crossings=64, stop_on_disk=False, r_in=0.0, r_out=0.0,
                       want_end=True, chunk_rays=65536, progress=None):
    """Closed-form counterpart of :func:`render.points.trace_bundle` for a distant observer.

    Parameters
    ----------
    alpha, beta : array_like
        Image-plane coordinates (M) of the rays of ``bundle`` (same order).
    bundle : RayBundle
        From :func:`render.camera.distant_observer_rays` (supplies the initial azimuth).
    spin, inclination_deg : float
    n_record, max_crossings, stop_on_disk, r_in, r_out, progress
        As for :func:`render.points.trace_bundle`.
    want_end : bool
        Compute the escape direction ``theta_end``, ``phi_end`` (NaN otherwise, and
        always NaN for rays with eta <= 0).

    Returns
    -------
    dict of ndarray
        The keys of :func:`render.points.trace_bundle`: r, phi, delay, inward, fate,
        n_crossings, steps (all 0), theta_end, phi_end.
    """
    from .camera import _polar_position
    from .geodesics import deferred_interrupts
    from .points import CAPTURE_MARGIN
    from .spacetime import horizon_radii

    _, sin_o, cos_o = _polar_position(float(inclination_deg))
    alpha = np.ascontiguousarray(np.asarray(alpha, dtype=float).ravel())
    beta = np.ascontiguousarray(np.asarray(beta, dtype=float).ravel())
    phi_o = np.ascontiguousarray(bundle.states[:, 4], dtype=float)
    r_plus, _ = horizon_radii(spin)
    r_capture = r_plus * (1.0 + CAPTURE_MARGIN)
    names = ("r", "phi", "delay", "inward", "fate", "n_crossings", "steps", "theta_end",
             "phi_end")
    parts = {name: [] for name in names}
    total = alpha.size
    for start in range(0, max(total, 1), chunk_rays):
        stop = min(start + chunk_rays, total)
        # Like the integrator: Ctrl-C is held back during the parallel kernel call
        # (a signal inside it can crash the process) and raised after it.
        with deferred_interrupts():
            arrays = closed_form_crossings(
                alpha[start:stop], beta[start:stop], phi_o[start:stop], float(spin),
                float(sin_o), float(cos_o), float(r_capture), int(max_crossings),
                int(n_record), bool(stop_on_disk), float(r_in), float(r_out), bool(want_end))
        for name, array in zip(names, arrays):
            parts[name].append(array)
        if progress is not None:
            progress(stop, total)
    return {name: np.concatenate(chunks) for name, chunks in parts.items()}
