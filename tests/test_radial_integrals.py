"""Closed-form radial integrals (render.geodesics.radial_integrals) against scipy.integrate.quad in r.

For rays from infinity with eta > 0 the radial parts of the azimuth and of the
regularised delay are, written in r with dsigma = dr / sqrt(R) (Carter 1968),

    phi_r(r)   = int_r^inf a (2 r' - a lam) / (Delta sqrt R) dr',
    delay_r(r) = int_r^inf [(r'^2+a^2)(r'^2+a^2-a lam)/Delta - (r'^2+a^2) sqrt(R)/Delta] / sqrt R dr'

on the inward leg; past a turning point r4 the outgoing leg adds
int_r4^r (...)/sqrt R dr' for the azimuth and int_r4^r f_t / sqrt R dr' + r*(r) - r*(r4)
for the delay.  These are integrated here by scipy's adaptive quadrature, with the
roots of R from numpy.roots and X from scipy.special.ellipkinc, independently of the
closed forms (which go through Pi, D, logarithms and the finite part at infinity).
Tolerance 1e-9 relative (absolute below 1): quad is asked for 1e-11 and the closed
forms are good to ~1e-13, so 1e-9 leaves room for quad's harder cases near r_+.
"""

import math

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.special import ellipkinc

from render.geodesics.radial_integrals import complex_time, real_time

RNG = np.random.default_rng(31)
TOL = 1e-9


def _potential(r, a, lam, eta):
    return r**4 + (a * a - eta - lam * lam) * r * r + 2.0 * (eta + (lam - a) ** 2) * r \
        - a * a * eta


def _rates(r, a, lam, eta):
    """(dphi_r, dt_r, dt_r minus the tortoise rate, sqrt R) per unit Mino time."""
    delta = r * r - 2.0 * r + a * a
    root = math.sqrt(max(_potential(r, a, lam, eta), 0.0))
    rate_phi = a * (2.0 * r - a * lam) / delta
    big = r * r + a * a - a * lam
    rate_t = (r * r + a * a) * big / delta
    if big > 0.0:
        # R = big^2 - Delta (eta + (lam - a)^2) (Carter 1968), so the difference of the
        # two large rates needs no cancellation far out.
        regular = (r * r + a * a) * (eta + (lam - a) ** 2) / (big + root)
    else:
        regular = rate_t - (r * r + a * a) * root / delta
    return rate_phi, rate_t, regular, root


def _tortoise(r, a):
    rp, rm = 1 + math.sqrt(1 - a * a), 1 - math.sqrt(1 - a * a)
    value = r + 2 * rp / (rp - rm) * math.log(r - rp)
    if rm > 0:
        value -= 2 * rm / (rp - rm) * math.log(r - rm)
    return value


def _inward_by_quad(r, a, lam, eta):
    """(phi_r, delay_r) from infinity to r on the inward leg, in u = 1/r to tame infinity."""
    def integrand(u, which):
        if u == 0.0:
            return 0.0   # never a node of quad's rules; guards the division only
        rr = 1.0 / u
        rate_phi, _, regular, root = _rates(rr, a, lam, eta)
        return (rate_phi if which == 0 else regular) / (root * u * u)
    phi = quad(integrand, 0.0, 1.0 / r, args=(0,), epsabs=1e-12, epsrel=1e-11, limit=200)[0]
    delay = quad(integrand, 0.0, 1.0 / r, args=(1,), epsabs=1e-12, epsrel=1e-11,
                 limit=200)[0]
    return phi, delay


def _from_turning_point(r, r4, a, lam, eta, which):
    """int_r4^r rate / sqrt R dr' (rate: phi, t, or t - sqrt(R)(r^2+a^2)/Delta), r = r4 + t^2."""
    def integrand(t):
        if t == 0.0:
            return 0.0   # never a node of quad's rules; guards the division only
        rr = r4 + t * t
        rates = _rates(rr, a, lam, eta)
        return 2.0 * t * rates[which] / rates[3]
    return quad(integrand, 0.0, math.sqrt(r - r4), epsabs=1e-12, epsrel=1e-11, limit=200)[0]


def _outward_by_quad(r, r4, a, lam, eta):
    """(phi_r, delay_r) from infinity through the turning point r4 out to r."""
    # In from infinity to 2 r4 in u, then on to r4 in t (the turning point's
    # 1/sqrt(r - r4) removed), then out again to r.
    phi_far, delay_far = _inward_by_quad(2.0 * r4, a, lam, eta)
    phi_in = phi_far + _from_turning_point(2.0 * r4, r4, a, lam, eta, 0)
    delay_in = delay_far + _from_turning_point(2.0 * r4, r4, a, lam, eta, 2)
    phi = phi_in + _from_turning_point(r, r4, a, lam, eta, 0)
    t_leg = _from_turning_point(r, r4, a, lam, eta, 1)
    return phi, delay_in + t_leg + _tortoise(r, a) - _tortoise(r4, a)


def _close(ours, theirs):
    return abs(ours - theirs) <= TOL * max(1.0, abs(theirs))


def _sample_rays(kind, count):
    """(a, lam, eta, roots) with four real roots and r4 > r_+ ("real") or complex r3, r4."""
    found = []
    while len(found) < count:
        a = RNG.uniform(-0.99, 0.99)
        lam = RNG.uniform(-8.0, 8.0)
        eta = RNG.uniform(0.2, 60.0)
        roots = np.roots([1.0, 0.0, a * a - eta - lam * lam, 2.0 * (eta + (lam - a) ** 2),
                          -a * a * eta])
        real = np.all(np.abs(roots.imag) < 1e-12)
        r_plus = 1 + math.sqrt(1 - a * a)
        if kind == "real" and real and roots.real.max() > r_plus + 0.05:
            found.append((a, lam, eta, np.sort(roots.real)))
        elif kind == "complex" and not real:
            found.append((a, lam, eta, roots))
    return found


def test_real_roots_inward_and_outward_legs():
    for a, lam, eta, (r1, r2, r3, r4) in _sample_rays("real", 12):
        rp = 1 + math.sqrt(1 - a * a)
        rm = 1 - math.sqrt(1 - a * a)
        r31, r41, r32, r42 = r3 - r1, r4 - r1, r3 - r2, r4 - r2
        k = r32 * r41 / (r31 * r42)
        n = r41 / r31
        dsigma_dx = 2.0 / math.sqrt(r31 * r42)

        def point(r, outward):
            s = math.sqrt((1.0 - (r4 - r3) / (r - r3)) / n) * (1.0 if outward else -1.0)
            x = math.copysign(ellipkinc(math.asin(abs(s)), k), s)
            return x, s, math.sqrt(1 - s * s), math.sqrt(1 - k * s * s)

        s_inf = -math.sqrt(1.0 / n)
        x_inf = -ellipkinc(math.asin(-s_inf), k)
        phi_inf, time_inf = real_time(x_inf, s_inf, math.sqrt(1 - 1 / n),
                                      math.sqrt(1 - k / n), math.inf, k, n, r1, r2, r3, r4,
                                      a, lam, rp, rm, dsigma_dx, True)
        for outward in (False, True):
            for r in r4 * np.array([1.05, 1.7, 6.0, 40.0]):
                if not outward and r < 2.0 * r4:
                    continue   # the inward-leg quadrature in u needs r well above r4
                x, s, c, d = point(r, outward)
                phi_x, time_x = real_time(x, s, c, d, r, k, n, r1, r2, r3, r4, a, lam, rp,
                                          rm, dsigma_dx, False)
                ours = (a * dsigma_dx * (phi_x - phi_inf), time_x - time_inf)
                theirs = (_outward_by_quad(r, r4, a, lam, eta) if outward
                          else _inward_by_quad(r, a, lam, eta))
                assert _close(ours[0], theirs[0]), ("phi", a, lam, eta, r, outward)
                assert _close(ours[1], theirs[1]), ("delay", a, lam, eta, r, outward)


def test_complex_roots_inward_leg_down_to_the_horizon():
    for a, lam, eta, roots in _sample_rays("complex", 12):
        rp = 1 + math.sqrt(1 - a * a)
        rm = 1 - math.sqrt(1 - a * a)
        real = np.sort(roots[np.abs(roots.imag) < 1e-12].real)
        r1, r2 = real
        pair = roots[np.abs(roots.imag) >= 1e-12][0]
        big_a, big_b = abs(r2 - pair), abs(r1 - pair)
        k = ((big_a + big_b) ** 2 - (r2 - r1) ** 2) / (4 * big_a * big_b)
        dsigma_dx = 1.0 / math.sqrt(big_a * big_b)
        c_a, c_b = big_b - big_a, big_a + big_b
        c_c, c_d = r2 * big_b - r1 * big_a, r2 * big_b + r1 * big_a

        def point(c):
            s = math.sqrt(1 - c * c)
            return ellipkinc(math.acos(c), k), s, c, math.sqrt(1 - k * s * s)

        phi_inf, time_inf = complex_time(*point((big_a - big_b) / (big_a + big_b)), math.inf,
                                         k, r1, r2, big_a, big_b, c_a, c_b, c_c, c_d, a, lam,
                                         rp, rm, dsigma_dx, True)
        for r in [rp * 1.02, rp * 1.3, 3.0, 9.0, 70.0]:
            x, s, c, d = point((c_c - r * c_a) / (r * c_b - c_d))
            phi_x, time_x = complex_time(x, s, c, d, r, k, r1, r2, big_a, big_b, c_a, c_b,
                                         c_c, c_d, a, lam, rp, rm, dsigma_dx, False)
            ours = (-a * dsigma_dx * (phi_x - phi_inf), time_x - time_inf)
            theirs = _inward_by_quad(r, a, lam, eta)
            assert _close(ours[0], theirs[0]), ("phi", a, lam, eta, r)
            assert _close(ours[1], theirs[1]), ("delay", a, lam, eta, r)


@pytest.mark.parametrize("spin", [0.5, 0.99, -0.9])
def test_vortical_rays_from_infinity_are_all_captured(spin):
    # eta < 0 rays reaching a distant observer have no radial turning point outside
    # the horizon (Gralla & Lupsasca 2020a, from memory): R's real roots, if any, lie
    # inside r_+.  Checked here on the potential itself with numpy.roots, over the
    # whole vortical region eta in (-(|lam| - |a|)^2, 0) of the (lam, eta) plane.
    r_plus = 1 + math.sqrt(1 - spin * spin)
    for _ in range(400):
        lam = RNG.uniform(-abs(spin), abs(spin))
        eta = -RNG.uniform(0.0, (abs(spin) - abs(lam)) ** 2)
        roots = np.roots([1.0, 0.0, spin * spin - eta - lam * lam,
                          2.0 * (eta + (lam - spin) ** 2), -spin * spin * eta])
        real = roots[np.abs(roots.imag) < 1e-9].real
        assert not np.any(real > r_plus + 1e-9), (lam, eta, real)
