"""Carlson's symmetric integrals, Legendre's integrals and Jacobi functions against scipy.special.

scipy.special.elliprf/elliprd/elliprj/elliprc (Carlson's algorithms in their own
implementation), ellipkinc/ellipeinc/ellipk and ellipj (cephes) are the outside
computations; the third kind is checked against scipy.integrate.quad of its
defining integral, and the Jacobi functions near m = 1 against mpmath.  The tolerance is 1e-13 relative (absolute for the bounded Jacobi
functions): both sides are accurate to a few units of 1e-16 per operation, and the
largest differences seen over the samples below are ~5e-14.
"""

import math

import mpmath
import numpy as np
import pytest
import scipy.special as sp
from scipy.integrate import quad

from render.geodesics import elliptic

RNG = np.random.default_rng(20260)
TOL = 1e-13


def _args(count, n, decades=10.0):
    # Arguments spread over many decades, where the duplication loop runs longest.
    return 10.0 ** RNG.uniform(-0.6 * decades, 0.4 * decades, size=(count, n))


@pytest.mark.parametrize("ours, theirs, n", [
    (elliptic.elliprf, sp.elliprf, 3), (elliptic.elliprd, sp.elliprd, 3),
    (elliptic.elliprj, sp.elliprj, 4), (elliptic.elliprc, sp.elliprc, 2)])
def test_carlson_against_scipy(ours, theirs, n):
    # scipy.special's Carlson functions (an independent implementation).  R_J spans
    # six decades only: with p 1e-9 of x, y, z both implementations differ from mpmath
    # by ~1e-13 (the sum of R_C terms is ill-conditioned there).
    for args in _args(1500, n, 6.0 if n == 4 else 10.0):
        assert abs(ours(*args) / theirs(*args) - 1.0) <= TOL, args


def test_carlson_with_a_zero_argument():
    # Complete cases: R_F(0, y, z) and R_D(0, y, z) against scipy.special.
    for y, z in _args(300, 2):
        assert abs(elliptic.elliprf(0.0, y, z) / sp.elliprf(0.0, y, z) - 1.0) <= TOL
        assert abs(elliptic.elliprd(0.0, y, z) / sp.elliprd(0.0, y, z) - 1.0) <= TOL
        assert abs(elliptic.elliprj(0.0, y, z, y + z) / sp.elliprj(0.0, y, z, y + z) - 1) <= TOL


def test_legendre_first_and_second_kind_against_scipy():
    # scipy.special.ellipkinc / ellipeinc / ellipk, amplitudes over several periods and
    # negative parameters (the polar motion of a photon uses m = u+/u- < 0).
    phis = RNG.uniform(-12.0, 12.0, 3000)
    ms = np.concatenate([RNG.uniform(-30.0, 0.0, 1500), RNG.uniform(0.0, 0.999999, 1500)])
    for phi, m in zip(phis, ms):
        f_ref = sp.ellipkinc(phi, m)
        e_ref = sp.ellipeinc(phi, m)
        assert abs(elliptic.ellipf(phi, m) - f_ref) <= TOL * max(1.0, abs(f_ref))
        assert abs(elliptic.ellipe(phi, m) - e_ref) <= TOL * max(1.0, abs(e_ref))
        d_ref = (f_ref - e_ref) / m if abs(m) > 1e-3 else None
        if d_ref is not None:
            # (F - E)/m loses ~|1/m| digits from scipy's side; 1e-12 covers |m| >= 1e-3.
            assert abs(elliptic.ellipd(phi, m) - d_ref) <= 1e-12 * max(1.0, abs(d_ref))
    for m in ms[::10]:
        assert abs(elliptic.ellipk(m) / sp.ellipk(m) - 1.0) <= TOL


def test_third_kind_against_quadrature():
    # Pi(n; phi | m) = int_0^phi dt / ((1 - n sin^2 t) sqrt(1 - m sin^2 t)) by
    # scipy.integrate.quad (epsabs 1e-13, epsrel 1e-13).
    for _ in range(60):
        n = RNG.uniform(-5.0, 0.9)
        m = RNG.uniform(-10.0, 0.99)
        phi = RNG.uniform(-4.0, 4.0)
        ref, _ = quad(lambda t: 1.0 / ((1.0 - n * math.sin(t) ** 2)
                                       * math.sqrt(1.0 - m * math.sin(t) ** 2)),
                      0.0, phi, epsabs=1e-13, epsrel=1e-13, limit=200)
        # 1e-12: quad's own error estimate on these smooth integrands is ~1e-14.
        assert abs(elliptic.ellippi(n, phi, m) - ref) <= 1e-12 * max(1.0, abs(ref))


@pytest.mark.parametrize("m_low, m_high", [(0.0, 1.0 - 1e-6), (0.0, 1e-9)])
def test_jacobi_functions_against_scipy(m_low, m_high):
    # scipy.special.ellipj (cephes), including its limiting form near m = 0.
    for _ in range(3000):
        u = RNG.uniform(-30.0, 30.0)
        m = RNG.uniform(m_low, m_high)
        ours = np.array(elliptic.ellipj(u, m))
        theirs = np.array(sp.ellipj(u, m)[:3])
        assert np.abs(ours - theirs).max() <= TOL, (u, m)


def test_jacobi_functions_near_m_one_against_mpmath():
    # mpmath.ellipfun at 30 digits.  Near m = 1 (photons grazing a spherical photon
    # orbit) cephes' own limiting form is used by scipy for 1 - m < 1e-9 and is off by
    # O(1) beyond u ~ K, so scipy cannot serve as the reference there.
    mpmath.mp.dps = 30
    for _ in range(150):
        u = RNG.uniform(-30.0, 30.0)
        m = 1.0 - 10.0 ** RNG.uniform(-16.0, -6.0)
        ours = np.array(elliptic.ellipj(u, m))
        ref = np.array([float(mpmath.ellipfun(name, u, m=mpmath.mpf(m)))
                        for name in ("sn", "cn", "dn")])
        assert np.abs(ours - ref).max() <= TOL, (u, m)
    assert elliptic.ellipj(0.7, 1.0) == (math.tanh(0.7), 1.0 / math.cosh(0.7),
                                         1.0 / math.cosh(0.7))


def test_jacobi_functions_negative_parameter_against_mpmath():
    # mpmath.ellipfun for m < 0 (the polar motion of photons has m = u+/u- < 0).
    # Relative to max(1, |value|): nd = 1/dn reaches sqrt(1 - m) ~ 10 here.
    mpmath.mp.dps = 30
    for _ in range(150):
        u = RNG.uniform(-20.0, 20.0)
        m = -(10.0 ** RNG.uniform(-6.0, 2.0))
        ours = np.array(elliptic.ellipj(u, m))
        ref = np.array([complex(mpmath.ellipfun(name, u, m=m)).real
                        for name in ("sn", "cn", "dn")])
        assert np.all(np.abs(ours - ref) <= TOL * np.maximum(1.0, np.abs(ref))), (u, m)


def test_jacobi_inverts_first_kind():
    # sn(F(phi | m) | m) = sin(phi) (DLMF 22.15.11): F from scipy.special.ellipkinc.
    for _ in range(500):
        phi = RNG.uniform(-1.5, 1.5)
        m = RNG.uniform(0.0, 0.999)
        sn, cn, dn = elliptic.ellipj(sp.ellipkinc(phi, m), m)
        assert abs(sn - math.sin(phi)) <= TOL and abs(cn - math.cos(phi)) <= TOL
        assert abs(dn - math.sqrt(1.0 - m * math.sin(phi) ** 2)) <= TOL


def test_shared_duplication_sets_against_scipy():
    # The families that share one duplication of x, y, z against scipy.special's
    # separate R_F, R_D, R_J (same tolerance as the single functions above).
    for x, y, z, p1, p2, p3 in _args(800, 6, 6.0):
        rd, j1, j2, j3 = elliptic.elliprd_rj3(x, y, z, p1, p2, p3)
        for ours, theirs in ((rd, sp.elliprd(x, y, z)), (j1, sp.elliprj(x, y, z, p1)),
                             (j2, sp.elliprj(x, y, z, p2)), (j3, sp.elliprj(x, y, z, p3))):
            assert abs(ours / theirs - 1.0) <= TOL, (x, y, z, p1, p2, p3)
        rf, rd, rj = elliptic.elliprf_rd_rj(x, y, z, p1)
        for ours, theirs in ((rf, sp.elliprf(x, y, z)), (rd, sp.elliprd(x, y, z)),
                             (rj, sp.elliprj(x, y, z, p1))):
            assert abs(ours / theirs - 1.0) <= TOL, (x, y, z, p1)
    # A zero argument (the complete integrals) is allowed in x.
    for y, p in 10.0 ** RNG.uniform(-3, 2, size=(200, 2)):
        rf, rd, rj = elliptic.elliprf_rd_rj(0.0, y, 1.0, p)
        assert abs(rf / sp.elliprf(0.0, y, 1.0) - 1.0) <= TOL
        assert abs(rd / sp.elliprd(0.0, y, 1.0) - 1.0) <= TOL
        assert abs(rj / sp.elliprj(0.0, y, 1.0, p) - 1.0) <= TOL


@pytest.mark.parametrize("band", ["moderate", "near_one", "very_near_one", "negative"])
def test_jacobi_by_doubling_against_mpmath(band):
    # The halving-doubling Jacobi functions over |u| < 2K (the range the closed form
    # uses) against mpmath's at 30 digits.  1e-13 absolute, as for ellipj; near
    # m = 1 scipy's ellipj is itself only ~1e-9 accurate, hence mpmath.
    mpmath.mp.dps = 30
    count = 60
    if band == "moderate":
        ms = RNG.uniform(0.0, 0.99, count)
    elif band == "near_one":
        ms = 1.0 - 10.0 ** RNG.uniform(-8, -2, count)
    elif band == "very_near_one":
        ms = 1.0 - 10.0 ** RNG.uniform(-16, -8, count)
    else:
        ms = -(10.0 ** RNG.uniform(-3, 1.7, count))
    for m in ms:
        quarter = float(mpmath.ellipk(m))
        for u in RNG.uniform(-1.999, 1.999, 3) * quarter:
            ours = elliptic.ellipj_doubling(u, m, quarter)
            for value, name in zip(ours, ("sn", "cn", "dn")):
                exact = float(mpmath.re(mpmath.ellipfun(name, mpmath.mpf(u), m=mpmath.mpf(m))))
                assert abs(value - exact) <= TOL, (name, u, m)
            if abs(u) <= quarter:
                # Within K no reflection is needed (quarter = 0 means "|u| <= K").
                assert np.allclose(elliptic.ellipj_doubling(u, m, 0.0), ours, rtol=0,
                                   atol=TOL)


def test_complete_first_kind_by_the_agm_against_scipy():
    # scipy.special.ellipkm1 takes the complement 1 - m as ellipk_agm does (cephes, an
    # independent implementation); m from -1e3 to 1 - 1e-12, where the AGM runs longest.
    # Tolerance TOL as for the other integrals (the AGM is exact to rounding per step).
    for m1 in np.concatenate([10.0 ** RNG.uniform(-12.0, 3.0, 400), [1.0, 2.0]]):
        assert abs(elliptic.ellipk_agm(m1) / sp.ellipkm1(m1) - 1.0) <= TOL, m1
    assert elliptic.ellipk_agm(0.0) == math.inf and math.isnan(elliptic.ellipk_agm(-1.0))


def test_paired_carlson_first_kind_equals_two_single_ones():
    # elliprf_pair interleaves two duplications; each must equal scipy.special.elliprf
    # (an independent implementation) to TOL, whatever the other's arguments.
    for first, second in zip(_args(500, 3), _args(500, 3)):
        one, two = elliptic.elliprf_pair(*first, *second)
        assert abs(one / sp.elliprf(*first) - 1.0) <= TOL, first
        assert abs(two / sp.elliprf(*second) - 1.0) <= TOL, second


def test_complete_k_d_pi_by_the_agm_against_mpmath():
    # mpmath at 40 digits (an independent implementation; (K - E)/m at that precision
    # has no cancellation to speak of).  K and D to TOL; Pi to TOL for 1 - n >= 1e-2,
    # the only range the closed form uses it in (the sum n/(1 - n) sum Q_j amplifies
    # rounding by ~1/(1 - n); render.geodesics.closed_form takes R_J below).
    with mpmath.workdps(40):
        for m in np.concatenate([-(10.0 ** RNG.uniform(-8.0, 3.0, 40)), RNG.uniform(0, 0.99, 10)]):
            for n in (-3.0, 0.0, RNG.uniform(0.0, 0.99), 0.99):
                k, d, pi = elliptic.complete_kdpi(m, n, 1.0 - n)
                big_k, big_e = mpmath.ellipk(m), mpmath.ellipe(m)
                assert abs(k / float(big_k) - 1.0) <= TOL, (m, n)
                assert abs(d / float((big_k - big_e) / m) - 1.0) <= TOL, (m, n)
                assert abs(pi / float(mpmath.ellippi(n, m)) - 1.0) <= TOL, (m, n)
