"""Null geodesics traced by the kernel (via ``render.trace_points``) against outside results.

* the Schwarzschild shadow edge b = sqrt(27) M (Synge 1966; Luminet 1979);
* Darwin's (1959) exact Schwarzschild deflection angle (elliptic integrals, scipy.special),
  itself cross-checked by quadrature, and Einstein's weak-field limit 4M/b;
* the face-on Schwarzschild redshift g = sqrt(1 - 3M/r);
* an independent Hamiltonian integration in Boyer–Lindquist coordinates with
  scipy.integrate.solve_ivp (DOP853) for a = 0.9, i = 60 deg.
"""

import cmath
import math

import numpy as np
import pytest
from scipy.integrate import quad, solve_ivp
from scipy.special import ellipk, ellipkinc

from render import trace_points

B_CRIT = math.sqrt(27.0)  # Schwarzschild critical impact parameter (Synge 1966; Luminet 1979)


# --- Schwarzschild shadow --------------------------------------------------------------

@pytest.mark.parametrize("inclination, direction", [
    (90.0, 0.0), (90.0, math.pi / 2), (17.0, 1.0), (0.0, 2.0), (120.0, -2.5)])
def test_schwarzschild_shadow_edge_by_bisection(inclination, direction):
    # Synge (1966); Luminet (1979): for a = 0 rays with b < sqrt(27) M are captured and
    # rays with b > sqrt(27) M escape, in every direction on the sky and for every
    # inclination (spherical symmetry).  Four rounds of 201 rays shrink the bracket
    # from 0.4 M to 1e-9 M; the edge must lie within 1e-6 M of sqrt(27) (the tracer's
    # tolerance 1e-10 resolves the capture/escape decision to far below that).
    lo, hi = 5.0, 5.4
    for _ in range(4):
        b = np.linspace(lo, hi, 201)
        out = trace_points(b * math.cos(direction), b * math.sin(direction), spin=0.0,
                           inclination_deg=inclination, max_orders=1, tolerance=1e-10)
        captured = out["fate"] == "captured"
        escaped = out["fate"] == "escaped"
        assert np.all(captured | escaped)
        first_escaped = int(np.argmax(escaped))
        # One clean edge: captured below it, escaped above it.
        assert 0 < first_escaped
        assert captured[:first_escaped].all() and escaped[first_escaped:].all()
        lo, hi = b[first_escaped - 1], b[first_escaped]
    assert lo - 1e-6 <= B_CRIT <= hi + 1e-6
    assert hi - lo < 1e-8


# --- Schwarzschild deflection ----------------------------------------------------------

def periastron(b):
    """Closest approach r0 (M) of a Schwarzschild ray with impact parameter b > sqrt(27).

    Largest root of r^3 - b^2 r + 2 b^2 = 0 (turning point of (dr/dphi)^2 =
    r^4/b^2 - r^2 + 2r; e.g. Chandrasekhar 1983, ch. 3, from memory), by the trigonometric
    form of Cardano's solution.
    """
    return 2.0 * b / math.sqrt(3.0) * math.cos(math.acos(-3.0 * math.sqrt(3.0) / b) / 3.0)


def darwin_deflection(b):
    """Exact Schwarzschild deflection angle (rad) for impact parameter b (M).

    Darwin (1959), Proc. R. Soc. A 249, 180: with Q^2 = (r0 - 2)(r0 + 6),
    k^2 = (Q - r0 + 6) / (2Q), sin^2 chi = (Q - r0 + 2) / (Q - r0 + 6),
    delta = 4 sqrt(r0/Q) [K(k) - F(chi, k)] - pi.  scipy's ellipk/ellipkinc take m = k^2.
    """
    r0 = periastron(b)
    q = math.sqrt((r0 - 2.0) * (r0 + 6.0))
    m = (q - r0 + 6.0) / (2.0 * q)
    chi = math.asin(math.sqrt((q - r0 + 2.0) / (q - r0 + 6.0)))
    return 4.0 * math.sqrt(r0 / q) * (ellipk(m) - ellipkinc(chi, m)) - math.pi


def quadrature_deflection(b):
    """delta = 2 int_0^{u0} du / sqrt(1/b^2 - u^2 + 2u^3) - pi by scipy.integrate.quad.

    The orbit equation (du/dphi)^2 = 1/b^2 - u^2 + 2u^3 (Schwarzschild, u = M/r;
    e.g. Misner, Thorne & Wheeler 1973, sec. 25.6, from memory).  The substitution
    u = u0 (1 - s^2) removes the inverse-square-root singularity at u0 = 1/r0.
    """
    u0 = 1.0 / periastron(b)

    def integrand(s):
        u = u0 * (1.0 - s * s)
        return 2.0 * u0 * s / math.sqrt(1.0 / b ** 2 - u * u + 2.0 * u ** 3)

    value, _ = quad(integrand, 0.0, 1.0, epsabs=1e-13, epsrel=1e-13, limit=200)
    return 2.0 * value - math.pi


IMPACT_SAMPLE = [5.25, 5.3, 5.5, 6.0, 8.0, 12.0, 30.0, 100.0, 1e3, 1e4]


@pytest.mark.parametrize("b", IMPACT_SAMPLE)
def test_darwin_formula_as_coded_matches_quadrature(b):
    # Guards the coding of Darwin (1959) above: the two independent evaluations
    # (elliptic integrals vs adaptive quadrature) agree to 1e-10 rad (both ~1e-12 exact).
    assert b * b == pytest.approx(periastron(b) ** 3 / (periastron(b) - 2.0), rel=1e-13)
    assert darwin_deflection(b) == pytest.approx(quadrature_deflection(b), abs=1e-10)


@pytest.fixture(scope="module")
def equatorial_deflections():
    """Deflection of equatorial rays (a = 0, i = 90 deg, beta = 0, alpha = b) from the tracer.

    The backward ray starts at phi = 0 (the observer) with lam = -b, so phi grows and
    an undeflected ray would leave at phi = pi: the deflection is the total swept
    azimuth minus pi.  phi_end is reported modulo 2 pi, so it is unwrapped along a
    dense decreasing-b sequence starting where the deflection is tiny (4e-4 rad at
    b = 1e4): no expected value is used to resolve the 2 pi ambiguity, and
    deflections beyond pi (b < 5.36) come out right.
    """
    b = np.geomspace(1e4, 5.25, 400)
    out = trace_points(b, np.zeros_like(b), spin=0.0, inclination_deg=90.0, max_orders=1,
                       tolerance=1e-10)
    assert np.all(out["fate"] == "escaped")
    # Equatorial rays stay equatorial.
    assert np.allclose(out["theta_end"], math.pi / 2, rtol=0, atol=1e-9)
    return b, np.unwrap(out["phi_end"]) - math.pi


def test_deflection_matches_darwin(equatorial_deflections):
    # Darwin (1959) exact result; 1e-7 rad, about 100x the tracer's error at
    # tolerance 1e-10 even for the near-critical rays (b = 5.25, delta ~ 4.6 rad).
    b, deflection = equatorial_deflections
    expected = np.array([darwin_deflection(x) for x in b])
    assert deflection[-1] > math.pi  # the sample does include deflections beyond pi
    assert np.allclose(deflection, expected, rtol=0, atol=1e-7)


def test_weak_field_deflection(equatorial_deflections):
    # Einstein (1916): delta -> 4M/b; the next term is 15 pi M^2 / (4 b^2) (Epstein &
    # Shapiro 1980, Phys. Rev. D 22, 2947; Keeton & Petters 2005, Phys. Rev. D 72,
    # 104006; from memory) and the one after is 128 M^3 / (3 b^3).  So the
    # excess over 4M/b must be 15 pi/(4 b^2) within that third-order term (plus the
    # 1e-9 rad numerical floor).
    b, deflection = equatorial_deflections
    far = b >= 300.0
    excess = deflection[far] - 4.0 / b[far]
    second = 15.0 * math.pi / (4.0 * b[far] ** 2)
    assert np.all(np.abs(excess - second) <= 128.0 / (3.0 * b[far] ** 3) * 1.5 + 1e-9)
    # Relative form of the same statement at the largest b.
    assert deflection[0] / (4.0 / b[0]) - 1.0 == pytest.approx(15.0 * math.pi / (16.0 * b[0]),
                                                               rel=0.05)


# --- face-on Schwarzschild redshift ------------------------------------------------------

def test_face_on_schwarzschild_redshift():
    # Face-on (lam = 0): no Doppler term, g = 1/u^t = sqrt(1 - 3M/r) for a circular
    # Schwarzschild orbit (standard result; Luminet 1979, from memory).
    # Both the direct (n = 0) and the first lensed (n = 1) image; 1e-10 is rounding.
    rng = np.random.default_rng(7)
    # 5.5 < b < 6.1 M: the n = 1 image of r > 6 M; b > 7 M: the n = 0 image of r > 6 M.
    b = np.concatenate([rng.uniform(5.5, 6.1, 150), rng.uniform(7.0, 40.0, 150)])
    psi = rng.uniform(0.0, 2.0 * math.pi, b.size)
    for inclination in (0.0, 180.0):
        out = trace_points(b * np.cos(psi), b * np.sin(psi), spin=0.0,
                           inclination_deg=inclination, max_orders=2)
        r, g = out["r"], out["g"]
        finite = np.isfinite(g)
        assert finite[:, 0].sum() >= 150 and finite[:, 1].sum() >= 140
        # g is defined exactly where the crossing is outside the ISCO (6 M).
        with np.errstate(invalid="ignore"):
            assert np.array_equal(finite, r >= 6.0)
        assert np.allclose(g[finite], np.sqrt(1.0 - 3.0 / r[finite]), rtol=0, atol=1e-10)


# --- an independent integration: Hamiltonian form in Boyer–Lindquist coordinates ----------

SPIN = 0.9
INCLINATION = 60.0
START_RADIUS = 1e6


def hamiltonian(r, theta, p_r, p_theta, lam, a):
    """H = (1/2) g^{mu nu} p_mu p_nu for p_t = -1, p_phi = lam (works for complex r, theta).

    Inverse Kerr metric in Boyer–Lindquist coordinates (e.g. Misner, Thorne &
    Wheeler 1973, eq. 33.2 inverted, from memory): g^tt = -A/(Sigma Delta),
    g^tphi = -2ar/(Sigma Delta), g^phiphi = (Delta - a^2 sin^2)/(Sigma Delta sin^2),
    g^rr = Delta/Sigma, g^thth = 1/Sigma.
    """
    s, c = cmath.sin(theta), cmath.cos(theta)
    sigma = r * r + a * a * c * c
    delta = r * r - 2.0 * r + a * a
    big_a = (r * r + a * a) ** 2 - a * a * delta * s * s
    g_tt = -big_a / (sigma * delta)
    g_tphi = -2.0 * a * r / (sigma * delta)
    g_phiphi = (delta - a * a * s * s) / (sigma * delta * s * s)
    return 0.5 * (g_tt - 2.0 * g_tphi * lam + g_phiphi * lam * lam
                  + delta / sigma * p_r * p_r + p_theta * p_theta / sigma)


def hamilton_equations(_, y, lam, a):
    """dx/dtau = dH/dp, dp/dtau = -dH/dx; x-derivatives by complex step (Squire & Trapp 1998)."""
    r, theta, _, p_r, p_theta = y
    s, c = math.sin(theta), math.cos(theta)
    sigma = r * r + a * a * c * c
    delta = r * r - 2.0 * r + a * a
    g_tphi = -2.0 * a * r / (sigma * delta)
    g_phiphi = (delta - a * a * s * s) / (sigma * delta * s * s)
    h = 1e-30
    dh_dr = hamiltonian(complex(r, h), theta, p_r, p_theta, lam, a).imag / h
    dh_dtheta = hamiltonian(r, complex(theta, h), p_r, p_theta, lam, a).imag / h
    return [delta / sigma * p_r, p_theta / sigma, -g_tphi + g_phiphi * lam, -dh_dr, -dh_dtheta]


def initial_state(alpha, beta, inclination_deg, a, r0):
    """Photon state at r0 on its way to a distant observer seeing it at (alpha, beta).

    Position: the flat-space line of sight alpha e_alpha + beta e_beta + s n
    (n towards the observer at phi = 0, e_beta the projected spin axis, e_alpha = e_y;
    Bardeen 1973) at radius r0.  The Boyer–Lindquist angles of the true ray differ
    from this by O(a^2/r0^2, M b^3/r0^4, a/r0^2) ~ 1e-12 at r0 = 1e6 (expansion of
    the orbit integrals in 1/r, e.g. dphi/dr ~ 2a/r^3 beyond the flat part), so the
    start error is far below the 1e-6 compared.  Momentum: p_t = -1,
    p_phi = lam = -alpha sin i, p_theta = sign(beta) sqrt(Theta(theta0)) with
    eta = beta^2 + (alpha^2 - a^2) cos^2 i (Bardeen 1973, eqs. 2.8-2.11), and p_r > 0
    (outgoing) from H = 0.
    """
    inc = math.radians(inclination_deg)
    n = np.array([math.sin(inc), 0.0, math.cos(inc)])
    e_beta = np.array([-math.cos(inc), 0.0, math.sin(inc)])
    e_alpha = np.array([0.0, 1.0, 0.0])
    s = math.sqrt(r0 * r0 - alpha * alpha - beta * beta)
    x = alpha * e_alpha + beta * e_beta + s * n
    theta0 = math.acos(x[2] / r0)
    phi0 = math.atan2(x[1], x[0])
    lam = -alpha * math.sin(inc)
    eta = beta ** 2 + (alpha ** 2 - a * a) * math.cos(inc) ** 2
    big_theta = eta + a * a * math.cos(theta0) ** 2 - lam ** 2 / math.tan(theta0) ** 2
    p_theta = math.copysign(math.sqrt(big_theta), beta)
    # H = 0 solved for p_r (real part of the complex-capable H at p_r = 0 and 1).
    h0 = hamiltonian(r0, theta0, 0.0, p_theta, lam, a).real
    h1 = hamiltonian(r0, theta0, 1.0, p_theta, lam, a).real - h0
    p_r = math.sqrt(-h0 / h1)
    return [r0, theta0, phi0, p_r, p_theta], lam


def independent_crossings(alpha, beta, n_cross=2, start_radius=START_RADIUS):
    """(r, phi) of the first n_cross equatorial crossings, integrating into the past."""
    y0, lam = initial_state(alpha, beta, INCLINATION, SPIN, start_radius)

    def equator(_, y, *args):
        return y[1] - math.pi / 2

    equator.terminal = n_cross
    r_plus = 1.0 + math.sqrt(1.0 - SPIN ** 2)

    def near_horizon(_, y, *args):
        return y[0] - 1.05 * r_plus

    near_horizon.terminal = True
    sol = solve_ivp(hamilton_equations, (0.0, -3.0 * start_radius), y0, method="DOP853",
                    rtol=1e-12, atol=1e-12, events=[equator, near_horizon], args=(lam, SPIN))
    found = sol.y_events[0]
    r = np.full(n_cross, np.nan)
    phi = np.full(n_cross, np.nan)
    r[:len(found)] = found[:, 0]
    phi[:len(found)] = found[:, 2]
    return r, phi, lam


def keplerian_redshift(r, lam, a):
    """g = 1 / (-p.u) for p_t = -1, p_phi = lam and a circular equatorial geodesic at r.

    Emitter 4-velocity built here from the metric: Omega is the root > 0 of
    d_r g_tt + 2 Omega d_r g_tphi + Omega^2 d_r g_phiphi = 0 and u^t follows from
    u.u = -1 (Misner, Thorne & Wheeler 1973, eq. 33.2 at theta = pi/2).
    """
    g_tt, g_tphi, g_pp = -(1.0 - 2.0 / r), -2.0 * a / r, r * r + a * a + 2.0 * a * a / r
    d_tt, d_tphi, d_pp = -2.0 / r ** 2, 2.0 * a / r ** 2, 2.0 * r - 2.0 * a * a / r ** 2
    omega = (-d_tphi + np.sqrt(d_tphi ** 2 - d_tt * d_pp)) / d_pp
    u_t = 1.0 / np.sqrt(-(g_tt + 2.0 * omega * g_tphi + omega ** 2 * g_pp))
    return 1.0 / (u_t * (1.0 - omega * lam))


def critical_curve(a, inclination_deg, samples=4000):
    """Image of the spherical photon orbits (Bardeen 1973, eqs. 2.15-2.16, from memory).

    lam = -(r^3 - 3r^2 + a^2 r + a^2) / (a (r - 1)),
    eta = r^3 (4 a^2 - r (r - 3)^2) / (a^2 (r - 1)^2), for r between the equatorial
    photon orbits; alpha = -lam / sin i, beta = +/- sqrt(eta + a^2 cos^2 i - lam^2 cot^2 i).
    Used only to place test points at a known distance from the shadow edge.
    """
    r_pro = 2.0 * (1.0 + math.cos(2.0 / 3.0 * math.acos(-a)))
    r_retro = 2.0 * (1.0 + math.cos(2.0 / 3.0 * math.acos(a)))
    r = np.linspace(r_pro, r_retro, samples)
    lam = -(r ** 3 - 3.0 * r ** 2 + a * a * r + a * a) / (a * (r - 1.0))
    eta = r ** 3 * (4.0 * a * a - r * (r - 3.0) ** 2) / (a * a * (r - 1.0) ** 2)
    inc = math.radians(inclination_deg)
    beta2 = eta + a * a * math.cos(inc) ** 2 - lam ** 2 / math.tan(inc) ** 2
    keep = beta2 >= 0.0
    alpha, beta = -lam[keep] / math.sin(inc), np.sqrt(beta2[keep])
    return np.concatenate([alpha, alpha[::-1]]), np.concatenate([beta, -beta[::-1]])


def points_outside_critical_curve(offsets, n_directions):
    """Image points at the given radial offsets (M) outside the critical curve."""
    ca, cb = critical_curve(SPIN, INCLINATION)
    centre = 0.5 * (ca.max() + ca.min())
    angle = np.arctan2(cb, ca - centre)
    radius = np.hypot(ca - centre, cb)
    order = np.argsort(angle)
    psi = np.linspace(0.0, 2.0 * math.pi, n_directions, endpoint=False) + 0.1
    edge = np.interp(psi, angle[order], radius[order], period=2.0 * math.pi)
    alpha = np.concatenate([centre + (edge + d) * np.cos(psi) for d in offsets])
    beta = np.concatenate([(edge + d) * np.sin(psi) for d in offsets])
    distance = np.min(np.hypot(alpha[:, None] - ca[None, :], beta[:, None] - cb[None, :]),
                      axis=1)
    return alpha, beta, distance


@pytest.fixture(scope="module")
def kerr_comparison():
    """Tracer and independent crossings for ~32 points that cross the plane at least twice."""
    alpha, beta, distance = points_outside_critical_curve([0.12, 0.3], 16)
    assert np.all(distance > 0.05)  # away from the critical curve, as intended
    # |beta| well away from 0 so that the start has no polar turning point beyond r0.
    keep = np.abs(beta) > 0.5
    alpha, beta = alpha[keep], beta[keep]
    traced = trace_points(alpha, beta, spin=SPIN, inclination_deg=INCLINATION, max_orders=2,
                          tolerance=1e-10)
    twice = traced["n_crossings"] >= 2
    assert twice.sum() >= 20
    alpha, beta = alpha[twice], beta[twice]
    independent = [independent_crossings(x, y) for x, y in zip(alpha, beta)]
    r_ind = np.array([item[0] for item in independent])
    phi_ind = np.array([item[1] for item in independent])
    lam = np.array([item[2] for item in independent])
    return {"tracer": {k: v[twice] for k, v in traced.items()},
            "r": r_ind, "phi": phi_ind, "lam": lam}


def test_crossing_radii_match_independent_integration(kerr_comparison):
    # solve_ivp DOP853 at rtol = atol = 1e-12 vs the tracer at tolerance 1e-10:
    # 1e-6 relative leaves a wide margin over both (observed ~1e-9).
    ours, theirs = kerr_comparison["tracer"]["r"], kerr_comparison["r"]
    assert np.all(np.isfinite(theirs)) and np.all(np.isfinite(ours))
    assert np.allclose(ours, theirs, rtol=1e-6, atol=0)


def test_crossing_azimuths_match_independent_integration(kerr_comparison):
    # Same integrations; azimuth compared modulo 2 pi to 1e-6 rad.
    ours, theirs = kerr_comparison["tracer"]["phi"], kerr_comparison["phi"]
    difference = np.angle(np.exp(1j * (ours - theirs)))
    assert np.all(np.abs(difference) <= 1e-6)


def test_crossing_redshifts_match_independent_emitter(kerr_comparison):
    # g from the emitter 4-velocity built in this test (keplerian_redshift) at the
    # independently integrated radius; 1e-6 relative.  The tracer reports NaN inside
    # the ISCO, so both orders are compared where the tracer has a value.
    g_ours = kerr_comparison["tracer"]["g"]
    lam = kerr_comparison["lam"][:, None]
    g_theirs = keplerian_redshift(kerr_comparison["r"], lam, SPIN)
    finite = np.isfinite(g_ours)
    assert finite[:, 0].sum() >= 15 and finite[:, 1].sum() >= 10
    assert np.allclose(g_ours[finite], g_theirs[finite], rtol=1e-6, atol=0)


def test_independent_integration_start_radius_is_far_enough():
    # The flat-space start at r0 = 1e6 M must not matter at the 1e-6 level: starting
    # 100x farther out changes the crossings by far less (start error ~1e-12 from the
    # 1/r expansion in initial_state; the ~1e-9 seen is DOP853's own error at
    # rtol = 1e-12 over the longer path).  Allowed 1e-8, 100x below what is compared.
    for alpha, beta in [(-4.0, 5.5), (3.0, -6.0)]:
        r_near, phi_near, _ = independent_crossings(alpha, beta, start_radius=1e6)
        r_far, phi_far, _ = independent_crossings(alpha, beta, start_radius=1e8)
        assert np.isfinite(r_near[0])
        assert np.allclose(r_near, r_far, rtol=1e-8, atol=0, equal_nan=True)
        found = np.isfinite(phi_near)
        assert np.allclose(np.angle(np.exp(1j * (phi_near[found] - phi_far[found]))), 0.0,
                           atol=1e-8)


# --- The integrator's tableau -------------------------------------------------------------

def _tableau853():
    """(A, b) of the DOP853 tableau as dense float arrays (stages 0-11 and the weights)."""
    from render.geodesics import tableau853 as tableau

    a = np.zeros((16, 16))
    b = np.zeros(12)
    for name, value in vars(tableau).items():
        if name.startswith("A") and "_" in name:
            row, col = map(int, name[1:].split("_"))
            a[row, col] = value
        elif name[0] == "B" and name[1:].isdigit():
            b[int(name[1:])] = value
    return a, b


def test_dop853_weights_meet_the_quadrature_order_conditions():
    # Runge–Kutta order conditions (Hairer, Norsett & Wanner, Solving ODEs I, sec. II.2):
    # an order-8 method integrates t^(k-1) exactly, sum_i b_i c_i^(k-1) = 1/k for k = 1..8,
    # with the nodes c_i = sum_j a_ij; and stage 12 (f at the new point) has c = 1.
    # 1e-14: the decimal coefficients are correctly rounded doubles, sums of ~12 terms.
    a, b = _tableau853()
    c = a.sum(axis=1)
    for k in range(1, 9):
        assert np.dot(b, c[:12] ** (k - 1)) == pytest.approx(1.0 / k, abs=1e-14), k
    assert np.allclose(a[12, :12], b, rtol=0, atol=0) and c[12] == pytest.approx(1.0, abs=1e-14)
    # The bushy-tree condition of order 3 (sum b_i a_ij c_j = 1/6) involves the stages too.
    assert np.dot(b, a[:12, :12] @ c[:12]) == pytest.approx(1.0 / 6.0, abs=1e-14)
