"""Closed-form transfer for a distant observer: Kerr null geodesics to the equatorial plane.

For an observer at infinity the Mino-time equations (see :mod:`render.geodesics.integrator`)
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
integrals (:mod:`render.geodesics.elliptic`).

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
with eta = 0) never cross the equator, and those that reach a distant observer
have no radial turning point outside the horizon (Gralla & Lupsasca 2020a, from
memory; checked on R itself in tests/test_radial_integrals.py): they are captured
and have no escape direction.  (The class numbers are meant to follow Gralla &
Lupsasca 2020a, from memory; their remaining class, no real root at all, needs
eta < 0 and so never reaches the equator.)

The radial parts of the azimuth, int a (2 r - a lam)/Delta dsigma, and of the
regularised delay are closed forms too (:mod:`render.geodesics.radial_integrals`): partial
fractions in r reduce them to Legendre's third kind Pi at the horizon radii, D,
logarithms and, for complex roots, an arctangent or logarithm in sn/dn; the
delay's divergence at infinity is removed exactly (its finite part).  sn, cn,
dn come from argument halving and doubling (:func:`render.geodesics.elliptic.ellipj_doubling`),
and the R_D and R_J that share their first three arguments from one duplication.

Everything else follows the integrator's conventions (:mod:`render.geodesics.integrator`):
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
Fukushima (2009), Celest. Mech. Dyn. Astr. 105, 305 (from memory).
Carlson (1995), Numer. Algorithms 10, 13.
"""

import math

import numpy as np
from numba import njit, prange

from .elliptic import (FAST_ARITHMETIC, complete_kdpi, elliprf, elliprf_pair, elliprf_rd_rj,
                       elliprj, ellipj_doubling, ellipj_work, ellipk_agm)
from .radial_integrals import complex_time, real_time
from .integrator import (FATE_CAPTURED, FATE_DISK, FATE_ESCAPED, FATE_UNRESOLVED,
                         parallel_kernel_call)
from ..camera.observers import polar_position
from ..spacetime.kerr import capture_radius

__all__ = ["closed_form_crossings", "closed_form_bundle", "radial_roots"]

CLASS_NONE = 0      # eta <= 0: no equatorial crossing
CLASS_TURNING = 2   # four real roots, r4 > r_+: turns and escapes
CLASS_REAL_IN = 3   # four real roots, r4 < r_+: captured
CLASS_COMPLEX = 4   # r3, r4 complex: captured

# What the crossings' azimuth and delay are computed for (``want_maps``).
MAPS_NONE = 0       # none: an image needs only r (and g from it)
MAPS_DISK = 1       # the recorded crossings between r_in and r_out (on the disk)
MAPS_ALL = 2        # every recorded crossing

_SCRATCH = 32   # two AGM level arrays for the Jacobi functions
# Below this 1 - u+ the AGM's complete Pi(u+ | m) would lose more than two digits.
_AGM_PI_LIMIT = 1e-2


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
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


@njit(cache=True, inline="always", error_model="numpy", fastmath=FAST_ARITHMETIC)
def _u_from_jacobi(cls, sn, cn, c_a, c_b, c_c, c_d):
    """u = 1/r from sn or cn of the elliptic argument (no division by zero at r = infinity)."""
    if cls == CLASS_COMPLEX:
        # c_a = B - A, c_b = A + B, c_c = r2 B - r1 A, c_d = r2 B + r1 A
        return (c_a + cn * c_b) / (c_c + cn * c_d)
    # c_a = r31, c_b = r41, c_c = r4 r31, c_d = r3 r41
    s2 = sn * sn
    return (c_a - c_b * s2) / (c_c - c_d * s2)


@njit(cache=True, inline="always")
def _radial_parts(cls, x, s, c, d, r, k, n, r1, r2, r3, r4, big_a, big_b, c_a, c_b, c_c, c_d,
                  spin, lam, r_plus, r_minus, dsigma_dx, at_infinity):
    """(Phi, T~) of :mod:`render.geodesics.radial_integrals` for the ray's root class."""
    if cls == CLASS_COMPLEX:
        return complex_time(x, s, c, d, r, k, r1, r2, big_a, big_b, c_a, c_b, c_c, c_d, spin,
                            lam, r_plus, r_minus, dsigma_dx, at_infinity)
    return real_time(x, s, c, d, r, k, n, r1, r2, r3, r4, spin, lam, r_plus, r_minus,
                     dsigma_dx, at_infinity)


@njit(cache=True, inline="always", error_model="numpy", fastmath=FAST_ARITHMETIC)
def _polar_map_integrals(m_pol, u_plus, one_minus_u_plus, x_o, w_o, y_o):
    """(pi_c, pi_o, d_c, d_o): the polar third- and second-kind integrals of the maps.

    Complete: Pi(u+ | m) and D(m) from one arithmetic-geometric mean
    (:func:`render.geodesics.elliptic.complete_kdpi`); its Pi loses about
    log10(1 / (1 - u+)) digits, so below 1 - u+ = 1e-2 (|lam| small) Pi comes from
    Carlson's R_J instead.  Incomplete, at the observer: Pi(u+; asin x_o | m) and
    D(asin x_o | m) as R_F + u+ R_J / 3 and R_D / 3 (DLMF 19.25.13-14) from one
    duplication (Carlson 1995, sec. 2).
    """
    k_c, d_c, pi_c = complete_kdpi(m_pol, u_plus, one_minus_u_plus)
    if one_minus_u_plus < _AGM_PI_LIMIT:
        pi_c = k_c + u_plus * elliprj(0.0, 1.0 - m_pol, 1.0, one_minus_u_plus) / 3.0
    rf_o, rd_o, rj_o = elliprf_rd_rj(w_o, y_o, 1.0, one_minus_u_plus + u_plus * w_o)
    x3 = x_o * x_o * x_o
    return pi_c, x_o * rf_o + u_plus * x3 * rj_o / 3.0, d_c, x3 * rd_o / 3.0


@njit(cache=True, error_model="numpy", fastmath=FAST_ARITHMETIC)
def _one_ray(alpha, beta, spin, sin_o, cos_o, phi_o, r_plus, r_minus, r_capture,
             max_crossings, n_record, stop_on_disk, r_in, r_out, want_end, want_maps,
             out_r, out_phi, out_delay, out_inward, row, scratch):
    """Crossings of one ray; returns (fate, n_crossings, theta_end, phi_end).

    ``scratch`` (length _SCRATCH) holds the AGM levels of the Jacobi functions, so
    that no array is allocated per ray.
    """
    work_a = scratch[0:16]
    work_c = scratch[16:32]
    lam = -alpha * sin_o
    eta = beta * beta + (alpha * alpha - spin * spin) * cos_o * cos_o
    r1, r2, r3, r4, im34, real34 = radial_roots(spin, lam, eta)
    # An edge-on observer's rays with beta = 0 stay in the equatorial plane (eta = 0,
    # mu = 0 throughout): no crossing, but a radial motion like the others.
    in_plane = eta == 0.0 and cos_o == 0.0
    if not eta > 0.0 and not in_plane:
        # Vortical or pole-grazing: no crossing.  Such rays from infinity have no
        # radial turning point outside the horizon (Gralla & Lupsasca 2020a, from
        # memory; checked on R with numpy.roots in tests/test_radial_integrals.py,
        # and by the integrator's fates over whole images): all are captured.
        return FATE_CAPTURED, 0, np.nan, np.nan

    # --- polar parameters (NaN for a ray in the plane, which never uses them) -----
    b_pol = eta + lam * lam - spin * spin
    nu = 0.5 * (b_pol + math.sqrt(b_pol * b_pol + 4.0 * spin * spin * eta))
    u_plus = eta / nu
    m_pol = -spin * spin * u_plus / nu
    one_minus_u_plus = lam * lam / (spin * spin + nu)
    root_nu = math.sqrt(nu)
    x_o = min(abs(cos_o) / math.sqrt(u_plus), 1.0)
    y_o = 1.0 - m_pol * x_o * x_o
    w_o = 1.0 - x_o * x_o

    # --- radial motion: class, elliptic parameter, sigma(X) and its end ----------
    if real34 and r4 > r_capture:
        cls = CLASS_TURNING
    elif real34:
        cls = CLASS_REAL_IN
    else:
        cls = CLASS_COMPLEX
    big_a = 0.0
    big_b = 0.0
    n_char = 0.0
    quarter = 0.0   # K(k), needed only where X can pass K (class 4)
    if cls != CLASS_COMPLEX:
        r31 = r3 - r1
        r41 = r4 - r1
        r32 = r3 - r2
        r42 = r4 - r2
        r43 = r4 - r3
        r21 = r2 - r1
        k = r32 * r41 / (r31 * r42)
        k1 = r21 * r43 / (r31 * r42)   # 1 - k without cancellation
        n_char = r41 / r31
        dsigma_dx = 2.0 / math.sqrt(r31 * r42)
        s2 = r31 / r41
        f_inf, rf_o = elliprf_pair(r43 / r41, r43 / r41 + k1 * s2, 1.0, w_o, y_o, 1.0)
        f_inf *= math.sqrt(s2)
        c_a, c_b, c_c, c_d = r31, r41, r4 * r31, r3 * r41
        # X = sigma / dsigma_dx - f_inf runs from -f_inf (infinity) through 0 (r4).
        x_start = -f_inf
        direction = 1.0
        # sn, cn, dn at infinity: sn^2 = r31/r41 (sn < 0).
        s_inf = -math.sqrt(s2)
        c_inf = math.sqrt(r43 / r41)
        d_inf = math.sqrt(r43 / r42)
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
        f_inf, rf_o = elliprf_pair(c_inf * c_inf, c_inf * c_inf + k1 * s_inf2, 1.0, w_o, y_o,
                                   1.0)
        f_inf *= math.sqrt(s_inf2)
        quarter = ellipk_agm(k1)
        if c_inf < 0.0:
            # arccos beyond pi/2: F(pi - phi) = 2K - F(phi).
            f_inf = 2.0 * quarter - f_inf
        s_inf = math.sqrt(s_inf2)
        d_inf = math.sqrt(c_inf * c_inf + k1 * s_inf2)
        c_a, c_b, c_c, c_d = big_b - big_a, big_a + big_b, r2 * big_b - r1 * big_a, \
            r2 * big_b + r1 * big_a
        x_start = f_inf
        direction = -1.0
        c_cap = (((big_a - big_b) * r_capture + r2 * big_b - r1 * big_a)
                 / ((big_a + big_b) * r_capture - r2 * big_b - r1 * big_a))
        s_cap2 = (1.0 - c_cap) * (1.0 + c_cap)
        x_end = math.sqrt(s_cap2) * elliprf(c_cap * c_cap, c_cap * c_cap + k1 * s_cap2, 1.0)
        if c_cap < 0.0:
            x_end = 2.0 * quarter - x_end
    sigma_end = abs(x_end - x_start) * dsigma_dx
    # The radial part of the azimuth, int a (2r - a lam)/Delta dsigma, is
    # phi_scale (Phi(X) - Phi(X_inf)); the regularised delay's is T~(X) - T~(X_inf).
    phi_scale = spin * dsigma_dx * direction
    if in_plane:
        if cls != CLASS_TURNING:
            return FATE_CAPTURED, 0, np.nan, np.nan
        if not want_end:
            return FATE_ESCAPED, 0, np.nan, np.nan
        phi_inf, _ = _radial_parts(cls, x_start, s_inf, c_inf, d_inf, np.inf, k, n_char, r1,
                                   r2, r3, r4, big_a, big_b, c_a, c_b, c_c, c_d, spin, lam,
                                   r_plus, r_minus, dsigma_dx, True)
        phi_out, _ = _radial_parts(cls, x_end, -s_inf, c_inf, d_inf, np.inf, k, n_char, r1,
                                   r2, r3, r4, big_a, big_b, c_a, c_b, c_c, c_d, spin, lam,
                                   r_plus, r_minus, dsigma_dx, True)
        # On the equator dphi/dsigma = -(a (2r - a lam)/Delta + lam).
        phi_end = phi_o - phi_scale * (phi_out - phi_inf) - lam * sigma_end
        return FATE_ESCAPED, 0, 0.5 * math.pi, phi_end % (2.0 * math.pi)

    # --- polar motion (F(asin x_o | m) is computed with the radial F at infinity) ---
    with_pi = lam != 0.0
    # K(m) by the AGM (a fifth of R_F's cost); the third- and second-kind polar
    # integrals of the azimuth and the delay come later, only if a crossing needs them.
    rf_c = ellipk_agm(1.0 - m_pol)
    polar_ready = False
    pi_c = 0.0
    pi_o = 0.0
    d_c = 0.0
    d_o = 0.0
    g_o = x_o * rf_o / root_nu
    g_half = rf_c / root_nu
    # Towards the equator first iff mu_o dmu/dsigma < 0 (dmu/dsigma = beta sin_o);
    # an observer in the plane itself first moves off it.
    towards = cos_o != 0.0 and cos_o * beta * sin_o <= 0.0
    sign_o = 1.0 if towards else -1.0
    turns0 = 0 if towards else 1

    # --- crossings: r, and for the recorded ones phi and the delay ----------------
    fate = FATE_ESCAPED if cls == CLASS_TURNING else FATE_CAPTURED
    n_cross = 0
    ready = False
    phi_inf = 0.0
    time_inf = 0.0
    while True:
        turns = n_cross + turns0
        sigma_n = 2.0 * turns * g_half + sign_o * g_o
        if not sigma_n < sigma_end:
            break
        if n_cross >= n_record and not stop_on_disk:
            # Only counted: neither r nor the maps of this crossing are wanted.
            n_cross += 1
            if n_cross >= max_crossings:
                fate = FATE_UNRESOLVED
                break
            continue
        x_n = x_start + direction * sigma_n / dsigma_dx
        sn, cn, dn = ellipj_doubling(x_n, k, quarter)
        r_n = 1.0 / _u_from_jacobi(cls, sn, cn, c_a, c_b, c_c, c_d)
        if n_cross < n_record:
            out_r[row, n_cross] = r_n
            out_inward[row, n_cross] = not (cls == CLASS_TURNING and x_n > 0.0)
        if n_cross < n_record and (want_maps == MAPS_ALL or (
                want_maps == MAPS_DISK and r_in <= r_n <= r_out)):
            if not ready:
                # Once per ray: the radial values at infinity.
                phi_inf, time_inf = _radial_parts(
                    cls, x_start, s_inf, c_inf, d_inf, np.inf, k, n_char, r1, r2, r3, r4,
                    big_a, big_b, c_a, c_b, c_c, c_d, spin, lam, r_plus, r_minus,
                    dsigma_dx, True)
                ready = True
            if not polar_ready:
                pi_c, pi_o, d_c, d_o = _polar_map_integrals(m_pol, u_plus, one_minus_u_plus,
                                                            x_o, w_o, y_o)
                polar_ready = True
            phi_x, time_x = _radial_parts(cls, x_n, sn, cn, dn, r_n, k, n_char, r1, r2, r3,
                                          r4, big_a, big_b, c_a, c_b, c_c, c_d, spin, lam,
                                          r_plus, r_minus, dsigma_dx, False)
            phi_theta = lam * (2.0 * turns * pi_c + sign_o * pi_o) / root_nu if with_pi \
                else 0.0
            mu2_integral = u_plus * (2.0 * turns * d_c + sign_o * d_o) / root_nu
            out_delay[row, n_cross] = (time_x - time_inf + spin * (lam - spin) * sigma_n
                                       + spin * spin * mu2_integral)
            phi = phi_o - phi_scale * (phi_x - phi_inf) - phi_theta
            if not with_pi:
                phi += math.pi * turns
            out_phi[row, n_cross] = phi % (2.0 * math.pi)
        n_cross += 1
        if stop_on_disk and r_in <= r_n <= r_out:
            fate = FATE_DISK
            break
        if n_cross >= max_crossings:
            fate = FATE_UNRESOLVED
            break
    if not (want_end and fate == FATE_ESCAPED):
        return fate, n_cross, np.nan, np.nan

    # --- escape direction -------------------------------------------------------
    if not ready:
        phi_inf, _ = _radial_parts(cls, x_start, s_inf, c_inf, d_inf, np.inf, k, n_char, r1,
                                   r2, r3, r4, big_a, big_b, c_a, c_b, c_c, c_d, spin, lam,
                                   r_plus, r_minus, dsigma_dx, True)
    if with_pi and not polar_ready:
        pi_c = rf_c + u_plus * elliprj(0.0, 1.0 - m_pol, 1.0, one_minus_u_plus) / 3.0
        p_o = one_minus_u_plus + u_plus * w_o
        pi_o = x_o * rf_o + u_plus * x_o ** 3 * elliprj(w_o, y_o, 1.0, p_o) / 3.0
    # The outgoing end X = f_inf mirrors infinity on the inward leg (sn -> -sn).
    phi_out, _ = _radial_parts(cls, x_end, -s_inf, c_inf, d_inf, np.inf, k, n_char, r1, r2,
                               r3, r4, big_a, big_b, c_a, c_b, c_c, c_d, spin, lam, r_plus,
                               r_minus, dsigma_dx, True)
    acc_phi = phi_scale * (phi_out - phi_inf)
    # Polar phase psi with mu = sqrt(u+) sn(psi | m): psi_o = sign(mu_o) F(asin x_o),
    # moving with dpsi/dsigma = sign(dmu/dsigma) sqrt(nu) (a ray starting at its
    # turning point, beta = 0, moves towards the equator).
    mu_sign = 1.0 if cos_o >= 0.0 else -1.0
    psi_o = mu_sign * x_o * rf_o
    dmu = beta * sin_o
    psi_dir = 1.0 if dmu > 0.0 else (-1.0 if dmu < 0.0 else -mu_sign)
    psi = psi_o + psi_dir * root_nu * sigma_end
    sn, _, _ = ellipj_work(psi, m_pol, work_a, work_c)
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
                          n_record, stop_on_disk, r_in, r_out, want_end, want_maps, first,
                          cross_r, cross_phi, cross_delay, cross_inward, fate, n_crossings,
                          theta_end, phi_end):
    """Equatorial crossings of distant-observer rays in closed form (one prange per ray).

    Ray i of ``alpha``, ``beta``, ``phi_o`` fills row ``first + i`` of the outputs, so
    that a caller tracing in chunks writes straight into its whole arrays (no copies).

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
        As for :func:`render.geodesics.integrator.trace_rays`.
    want_end : bool
        Also compute the escape direction (theta_end, phi_end).
    want_maps : int
        For which recorded crossings the azimuth and the delay are computed:
        ``MAPS_NONE``, ``MAPS_DISK`` (r_in <= r <= r_out) or ``MAPS_ALL``; r, the
        fates and the crossing counts never need them.
    first : int
        Row of the outputs that the first ray fills.
    cross_r, cross_phi, cross_delay, cross_inward : ndarray, shape (M, n_record)
        Outputs, filled with NaN (False) beforehand; ``cross_phi`` and
        ``cross_delay`` may have no rows at all with ``MAPS_NONE``.
    fate, n_crossings, theta_end, phi_end : ndarray, shape (M,)
        Outputs as :func:`render.geodesics.integrator.trace_rays` (theta_end and phi_end
        filled with NaN beforehand).
    """
    root = math.sqrt(1.0 - spin * spin)
    r_plus = 1.0 + root
    r_minus = spin * spin / r_plus   # = 1 - root, without its cancellation at small spin
    n = alpha.shape[0]
    scratch = np.empty((n, _SCRATCH))
    for i in prange(n):
        row = first + i
        result = _one_ray(alpha[i], beta[i], spin, sin_o, cos_o, phi_o[i], r_plus, r_minus,
                          r_capture, max_crossings, n_record, stop_on_disk, r_in, r_out,
                          want_end, want_maps, cross_r, cross_phi, cross_delay,
                          cross_inward, row, scratch[i])
        fate[row] = result[0]
        n_crossings[row] = result[1]
        theta_end[row] = result[2]
        phi_end[row] = result[3]


# --- Python-level API ------------------------------------------------------------

def _maps_code(want_maps):
    """The kernel's ``want_maps`` code of True, False or "disk"."""
    if isinstance(want_maps, str):
        if want_maps != "disk":
            raise ValueError(f"want_maps must be True, False or 'disk', got {want_maps!r}")
        return MAPS_DISK
    return MAPS_ALL if want_maps else MAPS_NONE


def closed_form_bundle(alpha, beta, bundle, spin, inclination_deg, *, n_record,
                       max_crossings=64, stop_on_disk=False, r_in=0.0, r_out=0.0,
                       want_end=True, want_maps=True, chunk_rays=65536, progress=None):
    """Closed-form counterpart of :func:`render.geodesics.tracing.trace_bundle` for a distant observer.

    Parameters
    ----------
    alpha, beta : array_like
        Image-plane coordinates (M) of the rays of ``bundle`` (same order).
    bundle : RayBundle
        From :func:`render.camera.observers.distant_observer_rays` (supplies the initial azimuth).
    spin, inclination_deg : float
    n_record, max_crossings, stop_on_disk, r_in, r_out, progress
        As for :func:`render.geodesics.tracing.trace_bundle`.
    want_end : bool
        Compute the escape direction ``theta_end``, ``phi_end`` (NaN otherwise, and
        always NaN for rays with eta <= 0, which are all captured).
    want_maps : bool or "disk"
        Compute ``phi`` and ``delay`` of every recorded crossing (True), of those on
        the disk only (``"disk"``: r_in <= r <= r_out, NaN elsewhere), or of none
        (False: NaN).  An image needs only r (and g from it); the two maps take
        two to three times as long as r alone.

    Returns
    -------
    dict of ndarray
        The keys of :func:`render.geodesics.tracing.trace_bundle`: r, phi, delay, inward, fate,
        n_crossings, steps (all 0), theta_end, phi_end.
    """
    maps = _maps_code(want_maps)
    _, sin_o, cos_o = polar_position(float(inclination_deg))
    alpha = np.ascontiguousarray(np.asarray(alpha, dtype=float).ravel())
    beta = np.ascontiguousarray(np.asarray(beta, dtype=float).ravel())
    phi_o = np.ascontiguousarray(bundle.states[:, 4], dtype=float)
    r_capture = capture_radius(spin)
    total = alpha.size
    n_record = int(n_record)
    raw = {"r": np.full((total, n_record), np.nan)}
    if maps == MAPS_NONE:
        # Skipped maps are all-NaN read-only views (no memory); the kernel gets no rows.
        raw["phi"] = raw["delay"] = np.broadcast_to(np.nan, (total, n_record))
        phi_out = delay_out = np.empty((0, n_record))
    else:
        raw["phi"] = phi_out = np.full((total, n_record), np.nan)
        raw["delay"] = delay_out = np.full((total, n_record), np.nan)
    raw.update(inward=np.zeros((total, n_record), dtype=np.bool_),
               fate=np.empty(total, dtype=np.int8), n_crossings=np.empty(total, dtype=np.int32),
               steps=np.zeros(total, dtype=np.int32), theta_end=np.full(total, np.nan),
               phi_end=np.full(total, np.nan))
    for start in range(0, max(total, 1), chunk_rays):
        stop = min(start + chunk_rays, total)
        # Like the integrator: Ctrl-C is held back during the parallel kernel call
        # (a signal inside it can crash the process) and raised after it.
        with parallel_kernel_call():
            closed_form_crossings(
                alpha[start:stop], beta[start:stop], phi_o[start:stop], float(spin),
                float(sin_o), float(cos_o), float(r_capture), int(max_crossings),
                n_record, bool(stop_on_disk), float(r_in), float(r_out), bool(want_end),
                maps, start, raw["r"], phi_out, delay_out, raw["inward"], raw["fate"],
                raw["n_crossings"], raw["theta_end"], raw["phi_end"])
        if progress is not None:
            progress(stop, total)
    return raw
