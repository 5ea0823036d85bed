"""Closed-form radial integrals of Kerr null geodesics that come in from infinity.

The azimuth and the coordinate time of a Kerr null geodesic split into polar and
radial parts (Carter 1968).  In Mino time sigma the radial parts are, for E = 1,

    phi_r(sigma) = int a (2 r - a lam) / Delta dsigma,
    t_r(sigma)   = int (r^2 + a^2)(r^2 + a^2 - a lam) / Delta dsigma,

along r(sigma), which :mod:`render.geodesics.closed_form` writes with Jacobi elliptic
functions of an argument X.  This module gives their antiderivatives in X in
closed form, through Legendre's integrals written as Carlson's R_F, R_D, R_J
(:mod:`render.geodesics.elliptic`), logarithms and arctangents.  Partial fractions with
the horizon radii r_+- give (Gralla & Lupsasca 2020a, sec. V, from memory)

    a (2 r - a lam) / Delta = a [A_+ / (r - r_+) + A_- / (r - r_-)],
        A_+- = +-(2 r_+- - a lam) / (r_+ - r_-),
    (r^2+a^2)(r^2+a^2-a lam) / Delta = r^2 + 2 r + (4 + a^2 - a lam)
        + B_+ / (r - r_+) + B_- / (r - r_-),  B_+- = +-2 r_+- (2 r_+- - a lam)/(r_+ - r_-),

and, instead of the quadratic integral, the identity (for a root r_i of R)

    int r^2 dsigma = dr/dsigma / (r - r_i) + r_i^2 sigma + R'(r_i)/2 int dsigma / (r - r_i),

which follows from d^2 r / dsigma^2 = R'(r)/2 (checked term by term in the tests).
The integral of r itself diverges like ln r at infinity; so does r*(r), and the
regularised delay t_r - r* is finite.  Its value at infinity is taken from the
closed forms by dropping the matched logarithms and linear terms exactly (the
finite parts below), never by evaluating at a large radius.

Root classes (as in :mod:`render.geodesics.closed_form`)
----------------------------------------------
* real roots r1 < r2 < r3 < r4 (classes 2, 3):
  r = r3 + r43 / (1 - n sn^2(X | k)), n = r41 / r31 > 1, |X| < K(k);
  1 / (r - r_p) = 1/(r4 - r_p) - [r43 / ((r4 - r_p)(r3 - r_p))] (1/(1 - n_p sn^2) - 1)
  gives Pi(n_p; am X | k) with n_p = n (r3 - r_p) / (r4 - r_p); the root used in
  the identity above is r3.
* complex r3, r4 (class 4): r = (c_c + c_d cn) / (c_a + c_b cn); every term is
  an integral of a Moebius function of cn, reduced to Pi, an elementary integral
  G and X; the root used above is r2.

For a characteristic n > 1 (a pole of the integrand on the real line),
Pi(n; phi | k) = F - Pi(k/n; phi | k) + ln|(dn cn + p sn)/(dn cn - p sn)| / (2 p),
p = sqrt((n - 1)(1 - k/n)) (Byrd & Friedman 1971, 117.03), which holds on each
side of the pole and makes every logarithmic singularity explicit.

References
----------
Gralla & Lupsasca (2020a), "Null geodesics of the Kerr exterior", Phys. Rev. D 101,
044032, arXiv:1910.12881 (journal reference from memory).
Byrd & Friedman (1971), Handbook of Elliptic Integrals for Engineers and Scientists,
2nd ed., 117.03 (third kind, n > 1), 336-341 (integrands in sn and cn).
Carlson (1995), Numer. Algorithms 10, 13.
Carter (1968), Phys. Rev. 174, 1559.
"""

import math

from numba import njit

from .elliptic import FAST_ARITHMETIC, elliprd_rj3

__all__ = ["third_kind_set", "real_time", "complex_time"]


# --- Legendre's third kind (three characteristics at once) and D, from sn, cn, dn ---

@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def third_kind_set(ch1, ch2, ch3, s, c, d, k):
    """(Pi(ch_i; am X | k) - X) / ch_i for three ch_i < 1, and D(am X | k) = int_0^X sn^2.

    Pi - F = (ch/3) sn^3 R_J(cn^2, dn^2, 1, 1 - ch sn^2) and D = (sn^3/3) R_D(cn^2, dn^2, 1)
    (DLMF 19.25.13-14), all four from one duplication (:func:`render.geodesics.elliptic.elliprd_rj3`);
    for X in (-2K, 2K) past |X| = K (cn < 0) by Pi(pi - phi) = 2 Pi(ch | k) - Pi(phi).
    """
    s2 = s * s
    s3 = s * s2 / 3.0
    rd, j1, j2, j3 = elliprd_rj3(c * c, d * d, 1.0, 1.0 - ch1 * s2, 1.0 - ch2 * s2,
                                 1.0 - ch3 * s2)
    v1 = s3 * j1
    v2 = s3 * j2
    v3 = s3 * j3
    vd = s3 * rd
    if c < 0.0:
        cd, c1, c2, c3 = elliprd_rj3(0.0, 1.0 - k, 1.0, 1.0 - ch1, 1.0 - ch2, 1.0 - ch3)
        v1 = math.copysign(2.0 * c1 / 3.0, s) - v1
        v2 = math.copysign(2.0 * c2 / 3.0, s) - v2
        v3 = math.copysign(2.0 * c3 / 3.0, s) - v3
        vd = math.copysign(2.0 * cd / 3.0, s) - vd
    return v1, v2, v3, vd


@njit(cache=True, inline="always")
def _log_ratio(s, c, d, rho):
    """ln|(dn cn + rho sn)/(dn cn - rho sn)| / (2 rho): the log of Byrd & Friedman 117.03."""
    return math.log(abs((d * c + rho * s) / (d * c - rho * s))) / (2.0 * rho)


# --- real roots ---------------------------------------------------------------------

@njit(cache=True, inline="always")
def _real_pole_char(k, n, r3, r4, r_pole):
    """Characteristic used for int dX/(r - r_pole): n_p if n_p < 1, else k / n_p (B&F 117.03)."""
    n_pole = n * (r3 - r_pole) / (r4 - r_pole)
    return n_pole if n_pole < 1.0 else k / n_pole


@njit(cache=True, inline="always")
def _real_pole_integral(x, s, c, d, k, n, r3, r4, r_pole, v):
    """int_0^X dX' / (r - r_pole), r = r3 + r43 / (1 - n sn^2), |X| < K, given v = (Pi - X)/ch.

    1 / (r - r_p) = 1/(r4 - r_p) - [r43 / ((r4 - r_p)(r3 - r_p))] (1 / (1 - n_p sn^2) - 1),
    n_p = n (r3 - r_p) / (r4 - r_p).
    """
    r43 = r4 - r3
    w4 = r4 - r_pole
    n_pole = n * (r3 - r_pole) / w4
    if n_pole < 1.0:
        # No division by r3 - r_p (which may vanish): n_p / (r3 - r_p) = n / (r4 - r_p).
        return x / w4 - r43 * n / (w4 * w4) * v
    conj = k / n_pole
    rho = math.sqrt((n_pole - 1.0) * (1.0 - conj))
    pi_minus_x = -x - conj * v + _log_ratio(s, c, d, rho)
    return x / w4 - r43 / (w4 * (r3 - r_pole)) * pi_minus_x


@njit(cache=True, inline="always")
def _tortoise(r, r_plus, r_minus):
    """r*(r) = r + 2 r_+ ln(r - r_+)/(r_+ - r_-) - 2 r_- ln(r - r_-)/(r_+ - r_-), r > r_+."""
    width = r_plus - r_minus
    value = r + 2.0 * r_plus / width * math.log(r - r_plus)
    if r_minus > 0.0:
        value -= 2.0 * r_minus / width * math.log(r - r_minus)
    return value


@njit(cache=True, inline="always")
def _horizon_weights(spin, lam, r_plus, r_minus):
    """(A_+, A_-, B_+, B_-, c_0) of the partial fractions in the module docstring."""
    width = r_plus - r_minus
    a_plus = (2.0 * r_plus - spin * lam) / width
    a_minus = -(2.0 * r_minus - spin * lam) / width
    return (a_plus, a_minus, 2.0 * r_plus * a_plus, 2.0 * r_minus * a_minus,
            4.0 + spin * spin - spin * lam)


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def real_time(x, s, c, d, r, k, n, r1, r2, r3, r4, spin, lam, r_plus, r_minus, dsigma_dx,
              at_infinity):
    """Real roots: (Phi, T~) with dPhi/dX = sum A_+- / (r - r_+-) and T~ = t_r(X) + r*(r(X)).

    sigma = dsigma_dx (X - X_inf).  ``at_infinity`` gives the finite part of T~ at
    the start X_inf (sn^2 = 1/n, r = infinity): there the ln(r - r3) of Pi(n) and
    the linear term of dr/dsigma / (r - r3) cancel against r* = r + 2 ln r + O(1/r).
    The azimuth's radial part is a * dsigma_dx * (Phi(X) - Phi(X_inf)).
    """
    r31 = r3 - r1
    r32 = r3 - r2
    r42 = r4 - r2
    r43 = r4 - r3
    a_plus, a_minus, b_plus, b_minus, c0 = _horizon_weights(spin, lam, r_plus, r_minus)
    # int r dX = (r3 + r43) X - r43 Pi(k/n) + r43 L, Pi(n) = X - Pi(k/n) + L (B&F 117.03),
    # with k/n = r32/r42 and rho = sqrt((n-1)(1-k/n)) = r43 / sqrt(r31 r42).
    conj = r32 / r42
    ch_plus = _real_pole_char(k, n, r3, r4, r_plus)
    ch_minus = _real_pole_char(k, n, r3, r4, r_minus) if spin != 0.0 else 0.0
    v_plus, v_minus, v_conj, v_d = third_kind_set(ch_plus, ch_minus, conj, s, c, d, k)
    j_plus = _real_pole_integral(x, s, c, d, k, n, r3, r4, r_plus, v_plus)
    j_minus = 0.0
    if spin != 0.0:
        j_minus = _real_pole_integral(x, s, c, d, k, n, r3, r4, r_minus, v_minus)
    phi_part = a_plus * j_plus + a_minus * j_minus
    rho = r43 / math.sqrt(r31 * r42)
    pi_conj = x + conj * v_conj
    if at_infinity:
        # (dn cn + rho sn)(dn cn - rho sn) = (1 - n sn^2)(1 - (k/n) sn^2), 1 - n sn^2 =
        # r43/(r - r3); the factor dn cn + rho sn vanishes at infinity; ln(r - r3) dropped.
        log_l = (math.log(r43) + math.log(1.0 - conj * s * s)
                 - 2.0 * math.log(d * c - rho * s)) / (2.0 * rho)
    else:
        log_l = _log_ratio(s, c, d, rho)
    j3 = (x - n * v_d) / r43      # int dX / (r - r3)
    y = ((c0 + r3 * r3 + 2.0 * r3 + 2.0 * r43) * x - 2.0 * r43 * pi_conj + 2.0 * r43 * log_l
         - 0.5 * r31 * r32 * r43 * j3 + b_plus * j_plus + b_minus * j_minus)
    if at_infinity:
        return phi_part, dsigma_dx * y - r3
    # dr/dsigma / (r - r3) = 2 n sn cn dn / (dsigma_dx (1 - n sn^2)).
    rate_term = 2.0 * n * s * c * d * (r - r3) / (dsigma_dx * r43)
    return phi_part, dsigma_dx * y + rate_term + _tortoise(r, r_plus, r_minus)


# --- complex r3, r4 -----------------------------------------------------------------

# Below this relative distance r_- and r2 count as one root (see complex_time): the
# substitution then errs by ~1e-9 relative, the Moebius form near it by about as much.
_SAME_ROOT = 1e-9


@njit(cache=True, inline="always")
def _mobius_char(alpha, k):
    """Characteristic for int dX/(1 + alpha cn): nn = alpha^2/(alpha^2 - 1) if < 1, else k/nn."""
    a2 = alpha * alpha
    nn = a2 / (a2 - 1.0)
    return nn if a2 < 1.0 else k / nn


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def _mobius_integral(p, q, alpha, x, s, c, d, k, v, at_pole, log_pole):
    """int_0^X (p + q cn) / (1 + alpha cn) dX' for X in (0, 2K), given v = (Pi - X)/ch.

    With Z = int cn^2 / (1 - alpha^2 cn^2) and G = int cn / (1 - alpha^2 cn^2)
    (an elementary function of t = sn/dn: int dt / ((1 - alpha^2) + (k + (1 - k) alpha^2)
    t^2)), the integral is p X + (p alpha^2 - q alpha) Z + (q - p alpha) G, and
    int dX / (1 - alpha^2 cn^2) = Pi(alpha^2/(alpha^2 - 1); am X | k) / (1 - alpha^2).
    For |alpha| > 1 the integrand has a pole at cn = -1/alpha; ``at_pole`` gives the
    finite part there, with ln|1 + alpha cn| replaced by ``log_pole``.
    """
    a2 = alpha * alpha
    big_p = 1.0 - a2
    big_q = k + (1.0 - k) * a2
    t = s / d
    if a2 < 1.0:
        z = x / big_p - v / (big_p * big_p)
        g = math.atan(t * math.sqrt(big_q / big_p)) / math.sqrt(big_p * big_q)
    else:
        nn = a2 / (a2 - 1.0)
        conj = k / nn
        root_p = math.sqrt(-big_p)
        root_q = math.sqrt(big_q)
        rho = math.sqrt((nn - 1.0) * (1.0 - conj))
        if at_pole:
            # (dn cn + rho sn)(dn cn - rho sn) = (1 + alpha cn)(alpha cn - 1)(1 - (k/nn) sn^2)
            # / (alpha^2 - 1), and the factor with sign(alpha) vanishes at the pole.
            sign = 1.0 if alpha > 0.0 else -1.0
            other = d * c - sign * rho * s
            log_part = sign * (log_pole + math.log(abs(alpha * c - 1.0))
                               + math.log(1.0 - conj * s * s) - math.log(a2 - 1.0)
                               - 2.0 * math.log(abs(other))) / (2.0 * rho)
            # (root_p + root_q t)(root_p - root_q t) = (alpha cn - 1)(alpha cn + 1) / dn^2
            g = -(2.0 * math.log(root_p + root_q * t) - math.log(abs(alpha * c - 1.0))
                  - log_pole + 2.0 * math.log(d)) / (2.0 * root_p * root_q)
        else:
            log_part = _log_ratio(s, c, d, rho)
            g = math.log(abs((root_q * t - root_p) / (root_q * t + root_p))) / (
                2.0 * root_p * root_q)
        # Pi(nn; am X | k) = F - Pi(k/nn) + log part (B&F 117.03), F = X.
        pi_nn = -conj * v + log_part
        z = (pi_nn / big_p - x) / a2
    return p * x + (p * a2 - q * alpha) * z + (q - p * alpha) * g


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def complex_time(x, s, c, d, r, k, r1, r2, big_a, big_b, c_a, c_b, c_c, c_d, spin, lam,
                 r_plus, r_minus, dsigma_dx, at_infinity):
    """Complex r3, r4: (Phi, T~) as :func:`real_time`, with sigma = dsigma_dx (X_inf - X).

    r = (c_c + c_d cn) / (c_a + c_b cn) for X in (0, 2K).  The azimuth's radial part is
    -a * dsigma_dx * (Phi(X) - Phi(X_inf)).  The root in the identity for int r^2 is
    r2, where r - r2 = A r21 (1 - cn) / (c_a + c_b cn); 1 / (r - r_p) = (c_a + c_b cn) /
    (P + Q cn) with P = c_c - r_p c_a, Q = c_d - r_p c_b.
    """
    r21 = r2 - r1
    a_plus, a_minus, b_plus, b_minus, c0 = _horizon_weights(spin, lam, r_plus, r_minus)
    p_plus = c_c - r_plus * c_a
    alpha_plus = (c_d - r_plus * c_b) / p_plus
    p_minus = c_c - r_minus * c_a
    alpha_minus = (c_d - r_minus * c_b) / p_minus if p_minus != 0.0 else 0.0
    alpha_inf = c_b / c_a
    # r_- = r2 (both ~a^2/2 at small spin) makes alpha_- = -1 and its Moebius form
    # degenerate; 1/(r - r_-) = 1/(r - r2) then, to O(|r_- - r2| / (r_+ - r2)).
    minus_is_r2 = abs(r_minus - r2) <= _SAME_ROOT * (1.0 + r2)
    use_minus = spin != 0.0 and not minus_is_r2
    v_plus, v_minus, v_inf, v_d = third_kind_set(
        _mobius_char(alpha_plus, k), _mobius_char(alpha_minus, k) if use_minus else 0.0,
        _mobius_char(alpha_inf, k), s, c, d, k)
    j_plus = _mobius_integral(c_a, c_b, alpha_plus, x, s, c, d, k, v_plus, False,
                              0.0) / p_plus
    # int dX / (r - r2), with int dX / (1 - cn) = k D - (1 + cn) dn / sn.
    j2 = (-c_b * x + 2.0 * big_b * (k * v_d - (1.0 + c) * d / s)) / (big_a * r21)
    j_minus = 0.0
    if use_minus:
        j_minus = _mobius_integral(c_a, c_b, alpha_minus, x, s, c, d, k, v_minus, False,
                                   0.0) / p_minus
    elif spin != 0.0:
        j_minus = j2
    phi_part = a_plus * j_plus + a_minus * j_minus
    # At infinity ln|1 + alpha cn| = ln|c_c + c_d cn| - ln|c_a| - ln r; ln r is dropped.
    log_pole = math.log(abs(c_c + c_d * c)) - math.log(abs(c_a)) if at_infinity else 0.0
    i_r = _mobius_integral(c_c, c_d, alpha_inf, x, s, c, d, k, v_inf, at_infinity,
                           log_pole) / c_a
    y = ((r2 * r2 + c0) * x + 0.5 * r21 * big_a * big_a * j2 + 2.0 * i_r + b_plus * j_plus
         + b_minus * j_minus)
    if at_infinity:
        return phi_part, -r2 - dsigma_dx * y
    rate_term = (c_d * c_a - c_b * c_c) * s * d / (
        dsigma_dx * (c_a + c_b * c) * big_a * r21 * (1.0 - c))
    return phi_part, -dsigma_dx * y + rate_term + _tortoise(r, r_plus, r_minus)
