"""Polarised disk light: emission (Chandrasekhar 1960), transport (Walker–Penrose), Stokes maps."""

import functools
import math

import numpy as np
import pytest
from conftest import kerr_metric
from scipy import linalg
from scipy.integrate import solve_ivp

from render.imaging.still import render_still
from render.light.polarisation import (Polarisation, chandrasekhar_degree,
                                       distant_screen_vector, emitted_kappa, evpa_from_screen,
                                       walker_penrose)

# ---------------------------------------------------------------------------------------
# Emission: an independent numerical solution of the transfer problem itself.


def _milne_thomson(n_cells, n_mu=24, tau_max=60.0):
    """Emergent (I_l, I_r)(mu) of the conservative Milne problem with Thomson scattering.

    Our own solution, independent of H-functions: the azimuth-free transfer equations
    (Chandrasekhar 1960, sec. 17, eq. for the Rayleigh phase matrix)
        mu dI_l/dtau = I_l - 3/8 [2 (1 - mu^2) P + mu^2 R],  mu dI_r/dtau = I_r - 3/8 R,
        P = int (1 - mu'^2) I_l dmu',  R = int (mu'^2 I_l + I_r) dmu'  (over -1..1),
    are discretised with a source constant on each of ``n_cells`` cells (geometric in
    tau), integrated exactly along each Gauss direction, and the linear system for
    (P, R) is solved with scipy; a diffusion field enters at tau_max.
    """
    x, w = np.polynomial.legendre.leggauss(n_mu)
    mus, ws = 0.5 * (x + 1.0), 0.5 * w
    edges = np.concatenate([[0.0], np.geomspace(1e-6, tau_max, n_cells)])
    lo, hi, mid = edges[:-1], edges[1:], 0.5 * (edges[:-1] + edges[1:])
    n = mid.size
    system, rhs = np.eye(2 * n), np.zeros(2 * n)
    for m, wm in zip(mus, ws):
        up_a = np.clip(lo[None, :], mid[:, None], None) - mid[:, None]
        up_b = hi[None, :] - mid[:, None]
        up = np.where(up_b > 0, np.exp(-up_a / m) - np.exp(-np.maximum(up_b, 0) / m), 0.0)
        dn_a = mid[:, None] - np.clip(hi[None, :], None, mid[:, None])
        dn_b = mid[:, None] - lo[None, :]
        dn = np.where(dn_b > 0, np.exp(-dn_a / m) - np.exp(-np.maximum(dn_b, 0) / m), 0.0)
        bottom = 0.5 * (tau_max + m + 0.7) * np.exp(-(tau_max - mid) / m)
        for weights, inflow in ((up, bottom), (dn, 0.0 * mid)):
            l_p, l_r, r_r = weights * 0.75 * (1 - m * m), weights * 0.375 * m * m, weights * 0.375
            system[:n, :n] -= wm * (1 - m * m) * l_p
            system[:n, n:] -= wm * (1 - m * m) * l_r
            system[n:, :n] -= wm * m * m * l_p
            system[n:, n:] -= wm * (m * m * l_r + r_r)
            rhs[:n] += wm * (1 - m * m) * inflow
            rhs[n:] += wm * (m * m + 1) * inflow
    solution = linalg.solve(system, rhs)
    p, r = solution[:n], solution[n:]

    def emergent(mu):
        mu = np.atleast_1d(mu)[:, None]
        with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
            cell = np.where(mu > 0, np.exp(-lo / np.where(mu > 0, mu, 1.0))
                            - np.exp(-hi / np.where(mu > 0, mu, 1.0)), (lo == 0).astype(float))
        i_l = (cell * 0.375 * (2 * (1 - mu * mu) * p + mu * mu * r)).sum(axis=1)
        i_r = (cell * 0.375 * r).sum(axis=1)
        return i_l, i_r

    return emergent


@functools.lru_cache(maxsize=None)
def _emergent(cells):
    return _milne_thomson(cells)


def _transfer_degree(mus):
    """Degree p(mu) of the transfer solution above, extrapolated in the number of cells.

    The cell-constant source converges as cells^-2 (400 -> 800 changes the limb value
    by 0.012 points, 200 -> 400 by 0.045): Richardson's extrapolation, with its own
    error well below 0.005 percentage points.
    """
    degrees = []
    for cells in (400, 800):
        i_l, i_r = _emergent(cells)(np.asarray(mus, dtype=float))
        degrees.append((i_r - i_l) / (i_r + i_l))
    return degrees[1] + (degrees[1] - degrees[0]) / 3.0


def test_chandrasekhar_degree_matches_an_independent_transfer_solution():
    mus = np.array([0.0, 0.02, 0.05, 0.1, 0.2, 0.3, 0.5, 0.7, 0.9, 1.0])
    reference = _transfer_degree(mus)
    assert np.max(np.abs(chandrasekhar_degree(mus) - reference)) < 1e-4   # 0.01 points
    # Chandrasekhar (1960), Table XXIV (from memory): 11.71 % at the limb, E along the surface.
    assert reference[0] == pytest.approx(0.1171, abs=5e-4)
    assert np.all(np.diff(reference) < 0)


def test_tabulated_degree_matches_the_h_function_solution():
    # The fast table (linear in sqrt(mu)) against the H-functions evaluated at each point:
    # its interpolation error is ~(1/4096)^2 p'' ~ 1e-8; 1e-7 is far below the 1e-4
    # accuracy claimed against the transfer solution above.
    from render.light.polarisation import chandrasekhar_degree_exact

    mu = np.random.default_rng(1).random(3000) ** 3
    assert np.max(np.abs(chandrasekhar_degree(mu) - chandrasekhar_degree_exact(mu))) < 1e-7


# ---------------------------------------------------------------------------------------
# Transport: the Walker–Penrose constant against scipy parallel transport.

def _kerr_metric(x, a):
    """Boyer–Lindquist Kerr metric g_ab at x = (t, r, theta, phi) (tests/conftest.py)."""
    return kerr_metric(x[1], x[2], a)


def _christoffel(x, a, h=1e-5):
    """Gamma^a_bc by central differences of the metric (error ~h^2, about 1e-10 here)."""
    dg = np.zeros((4, 4, 4))
    for c in (1, 2):
        step = np.zeros(4)
        step[c] = h
        dg[c] = (_kerr_metric(x + step, a) - _kerr_metric(x - step, a)) / (2 * h)
    inverse = np.linalg.inv(_kerr_metric(x, a))
    # Gamma^a_bc = 1/2 g^ad (d_b g_dc + d_c g_db - d_d g_bc)
    lower = 0.5 * (np.einsum("bdc->dbc", dg) + np.einsum("cdb->dbc", dg) - dg)
    return np.einsum("ad,dbc->abc", inverse, lower)


def _transport(state, a):
    x, k, f = state[:4], state[4:8], state[8:]
    gamma = _christoffel(x, a)
    return np.concatenate([k, -np.einsum("abc,b,c->a", gamma, k, k),
                           -np.einsum("abc,b,c->a", gamma, k, f)])


@pytest.mark.parametrize("spin", [0.0, 0.9])
def test_walker_penrose_constant_is_conserved_by_parallel_transport(spin):
    # Walker & Penrose (1970): kappa is constant along a null geodesic for any parallel
    # transported f with k.f = 0.  Independent check: scipy's DOP853 integrates the
    # geodesic and d f^a / dl = -Gamma^a_bc k^b f^c from the disk outwards, through a
    # polar turning point; kappa (the code's formula) must stay put.
    lam, eta, r0 = 2.0, 20.0, 6.0
    x0 = np.array([0.0, r0, math.pi / 2, 0.0])
    g0 = _kerr_metric(x0, spin)
    delta = r0 * r0 - 2 * r0 + spin ** 2
    big_r = (r0 * r0 + spin ** 2 - spin * lam) ** 2 - delta * (eta + (lam - spin) ** 2)
    k_low = np.array([-1.0, math.sqrt(big_r) / delta, -math.sqrt(eta), lam])
    k0 = np.linalg.solve(g0, k_low)
    v, w = np.array([0.3, -0.2, 0.7, 0.1]), np.array([1.0, 0.0, 0.0, 0.0])
    f0 = v - (v @ g0 @ k0) / (w @ g0 @ k0) * w
    assert abs(k0 @ g0 @ k0) < 1e-10 and abs(f0 @ g0 @ k0) < 1e-12
    solution = solve_ivp(lambda s, y: _transport(y, spin), (0.0, 120.0),
                         np.concatenate([x0, k0, f0]), method="DOP853", rtol=1e-11,
                         atol=1e-13, dense_output=True)
    assert solution.success
    values = []
    for s in np.linspace(0.0, 120.0, 13):
        y = solution.sol(s)
        values.append(walker_penrose(y[4:8], y[8:], y[1], math.cos(y[2]), math.sin(y[2]),
                                     spin))
    values = np.array(values)
    # The theta motion turns (the ray leaves the equator and comes back towards it).
    thetas = [solution.sol(s)[2] for s in np.linspace(0.0, 120.0, 200)]
    assert min(thetas) < math.pi / 2 - 0.3
    # Integrator and finite-difference Christoffels are good to ~1e-9; a wrong sign
    # anywhere in kappa drifts by order one.
    scale = np.hypot(*values[0])
    assert np.max(np.abs(values - values[0])) < 1e-7 * scale


# ---------------------------------------------------------------------------------------
# The flat-space limit and the norm of the transported vector.

@pytest.mark.parametrize("inclination", [20.0, 60.0, 85.0])
@pytest.mark.parametrize("chi_deg", [0.0, 30.0, -70.0])
def test_flat_space_limit_keeps_the_emitted_angle(inclination, chi_deg):
    # Far from the hole (r ~ 1e7 M: bending ~4/r, Keplerian speed v ~ r^-1/2 ~ 3e-4) the
    # E-vector reaches the observer unchanged.  Flat-space geometry (common practice):
    # the surface-parallel E-vector of light leaving towards the observer is n x z,
    # which lies along the image's horizontal axis for every point of the disk; an
    # angle chi turns it counter-clockwise on the observer's sky.  Tolerance 1e-3 rad
    # covers the aberration, which turns the angle by about v / sin i <= 4e-4 rad here.
    cos_i, sin_i = math.cos(math.radians(inclination)), math.sin(math.radians(inclination))
    alpha = np.array([3e7, -4e7, 1e7, 0.0])
    beta = np.array([2e7 * cos_i, -1e7 * cos_i, 5e7 * cos_i, 6e7 * cos_i])
    r = np.hypot(alpha, beta / cos_i)[:, None]
    lam, eta = -alpha * sin_i, beta ** 2 + alpha ** 2 * cos_i ** 2
    # Light from the far side (beta > 0) first falls inwards (k^r < 0); it leaves the
    # disk upwards, towards the observer's hemisphere (k^theta < 0).
    sign_r = np.where(beta > 0, -1.0, 1.0)[:, None]
    for spin in (0.0, 0.9):
        k1, k2 = emitted_kappa(r, lam, eta, spin, sign_r, -1.0, np.radians(chi_deg))
        e_a, e_b = distant_screen_vector(k1, k2, alpha[:, None], beta[:, None], spin,
                                         inclination)
        # Parallel transport keeps f.f = 1 (Misner, Thorne & Wheeler 1973, sec. 22.5).
        assert np.allclose(np.hypot(e_a, e_b), 1.0, atol=1e-6)
        screen = np.degrees(np.arctan2(e_b, e_a))
        folded = (screen - chi_deg + 90.0) % 180.0 - 90.0
        assert np.max(np.abs(folded)) < math.degrees(1e-3)


def _rest_frame_cross(g, u, left, right):
    """(left x right)^a in the rest frame of u: eps_{dabc} u^d left^b right^c, index raised.

    eps_{t r theta phi} = +sqrt(-det g), so that e_r x e_theta = e_phi (common practice).
    """
    root = math.sqrt(-np.linalg.det(g))
    lower = np.array([root * np.linalg.det(np.array([u, basis, left, right]))
                      for basis in np.eye(4)])
    return np.linalg.solve(g, lower)


@pytest.mark.parametrize("spin", [0.0, 0.9])
def test_emitted_kappa_matches_a_frame_built_from_the_metric(spin):
    # Independent construction (Misner, Thorne & Wheeler 1973, sec. 22.5; Bardeen, Press &
    # Teukolsky 1972 for the Keplerian Omega): the gas's 4-velocity from the metric, the
    # photon's direction n in its rest frame, f_par = n x e_theta and f_perp = n x f_par by
    # the Levi-Civita tensor, and kappa of cos(chi) f_par + sin(chi) f_perp from the
    # Walker–Penrose formula (itself checked against parallel transport above).  Both
    # are unit vectors, so kappa agrees up to the sign of f; 1e-9 covers rounding.
    rng = np.random.default_rng(7)
    checked = 0
    while checked < 12:
        r, lam, eta = rng.uniform(2.5, 15.0), rng.uniform(-7.0, 5.0), rng.uniform(0.0, 30.0)
        delta = r * r - 2 * r + spin ** 2
        big_r = (r * r + spin ** 2 - spin * lam) ** 2 - delta * (eta + (lam - spin) ** 2)
        if big_r <= 0.0 or r < 3.0 + 3.0 * (spin == 0.0):   # outside the ISCO, R > 0
            continue
        sign_r, sign_theta = rng.choice([-1.0, 1.0], 2)
        chi = rng.uniform(-1.5, 1.5)
        g = _kerr_metric(np.array([0.0, r, math.pi / 2, 0.0]), spin)
        omega = 1.0 / (r ** 1.5 + spin)
        u = np.array([1.0, 0.0, 0.0, omega])
        u /= math.sqrt(-(u @ g @ u))
        k = np.linalg.solve(g, np.array([-1.0, sign_r * math.sqrt(big_r) / delta,
                                         sign_theta * math.sqrt(eta), lam]))
        energy = -(k @ g @ u)
        n = k / energy - u
        normal = np.array([0.0, 0.0, 1.0 / r, 0.0])
        f_par = _rest_frame_cross(g, u, n, normal)
        f_par /= math.sqrt(f_par @ g @ f_par)
        f_perp = _rest_frame_cross(g, u, n, f_par)
        f = math.cos(chi) * f_par + math.sin(chi) * f_perp
        expected = np.array(walker_penrose(k, f, r, 0.0, 1.0, spin))
        got = np.array([v[0, 0] for v in emitted_kappa(
            np.array([[r]]), np.array([lam]), np.array([eta]), spin, sign_r, sign_theta, chi)])
        sign = 1.0 if expected @ got > 0 else -1.0
        assert np.allclose(sign * got, expected, rtol=1e-9, atol=1e-9 * np.abs(expected).max())
        checked += 1


def test_iau_angle_convention():
    # IAU (1974): from north (up) through east (left); E along the horizontal is 90 deg.
    assert np.degrees(evpa_from_screen(1.0, 0.0)) == pytest.approx(90.0)
    assert np.degrees(evpa_from_screen(0.0, -1.0)) == pytest.approx(0.0)
    assert np.degrees(evpa_from_screen(1.0, 1.0)) == pytest.approx(-45.0)


# ---------------------------------------------------------------------------------------
# Whole stills: symmetry, methods, observers.

def _polarised(small_scene, **values):
    base = {"image.width": 24, "image.height": 24, "polarisation.model": "electron_scattering",
            "disk.surface": "transparent", "disk.orders": 2, "observer.field_of_view": 30.0,
            "output.npz": False}
    base.update(values)
    return render_still(small_scene(**base)).products


def test_face_on_schwarzschild_disk_has_no_net_polarisation(small_scene):
    # Symmetry (common practice): about the axis every E-vector has a partner turned by
    # the same angle, so the integrated Q and U cancel to rounding.
    maps = _polarised(small_scene, **{"black_hole.spin": 0.0, "observer.inclination": 0.0})
    scale = np.abs(maps["stokes_q"]).sum()
    assert scale > 0.0   # there is polarised light to cancel
    assert abs(maps["stokes_q"].sum()) < 1e-10 * scale
    assert abs(maps["stokes_u"].sum()) < 1e-10 * scale


def test_inclination_and_its_mirror_give_mirrored_maps(small_scene):
    # Kerr is symmetric under theta -> pi - theta: the observer at 180 - i sees the image
    # flipped top to bottom, with E_beta reversed: Q the same, U opposite (common practice).
    one = _polarised(small_scene, **{"black_hole.spin": 0.9, "observer.inclination": 40.0})
    two = _polarised(small_scene, **{"black_hole.spin": 0.9, "observer.inclination": 140.0})
    scale = np.abs(one["stokes_q"]).max()
    assert np.allclose(np.flipud(two["stokes_q"]), one["stokes_q"], atol=1e-9 * scale)
    assert np.allclose(np.flipud(two["stokes_u"]), -one["stokes_u"], atol=1e-9 * scale)
    assert np.abs(one["stokes_u"]).max() > 1e-3 * scale


def test_integrator_and_closed_form_agree(small_scene):
    # Two independent tracers (Dormand–Prince and the elliptic closed form) give the same
    # crossings and the same direction flags, hence the same Stokes maps; their radii
    # agree to ~1e-7, so 1e-5 of the peak is a safe bound.
    values = {"black_hole.spin": 0.7, "observer.inclination": 70.0}
    one = _polarised(small_scene, **values, **{"tracing.method": "closed_form"})
    two = _polarised(small_scene, **values, **{"tracing.method": "integrate"})
    for name in ("stokes_q_order", "stokes_u_order"):
        scale = np.abs(one[name]).max()
        assert np.allclose(one[name], two[name], atol=1e-5 * scale)


def test_far_camera_matches_the_distant_observer(small_scene):
    # A camera far away (1e4 M) sees what the observer at infinity sees (README, camera);
    # differences are of order the field / distance = 3e-3.
    values = {"black_hole.spin": 0.9, "observer.inclination": 60.0,
              "polarisation.model": "constant", "polarisation.degree": 0.5,
              "polarisation.angle": 20.0, "disk.orders": 1}
    far = _polarised(small_scene, **values, **{"observer.placement": "camera",
                                               "observer.distance": 1e4})
    distant = _polarised(small_scene, **values)
    shining = (distant["stokes_i"] > 0) & (far["stokes_i"] > 0)
    assert shining.sum() > 50
    angle_gap = (far["polarisation_angle"] - distant["polarisation_angle"] + 90) % 180 - 90
    assert np.max(np.abs(angle_gap[shining])) < 0.5   # degrees
    assert np.allclose(far["polarised_degree"][shining], 0.5, atol=1e-9)


def test_constant_polarisation_keeps_its_degree_per_crossing(small_scene):
    # The degree is a Lorentz invariant carried unchanged along the ray (Misner, Thorne
    # & Wheeler 1973, sec. 22.6): one order at a time, sqrt(Q^2 + U^2) = p I.
    maps = _polarised(small_scene, **{"polarisation.model": "constant",
                                      "polarisation.degree": 0.3, "black_hole.spin": 0.5,
                                      "observer.inclination": 50.0})
    i, q, u = maps["stokes_i_order"], maps["stokes_q_order"], maps["stokes_u_order"]
    assert np.allclose(np.hypot(q, u), 0.3 * i, atol=1e-12 * i.max())


def _polarised_spectrum(small_scene, is_result=False, **values):
    """The spectrum table of a distant observer (its disk grid) with polarisation."""
    base = {"image.width": 8, "image.height": 8, "emission.law": "novikov_thorne",
            "observing.mode": "spectrum", "observing.spectrum_points": 7,
            "polarisation.model": "electron_scattering", "output.npz": False}
    base.update(values)
    result = render_still(small_scene(**base))
    if is_result:
        return result
    return result.tables["spectrum"], result.metadata["observing"]


POLARISED_COLUMNS = ("stokes_q_jy", "stokes_u_jy", "polarised_degree", "polarisation_angle_deg")


def test_spectrum_polarisation_comes_from_the_disk_grid(small_scene, tmp_path):
    # The disk grid (render.light.disk_integral) ignores the picture: the same columns at
    # two picture sizes and fields of view, exactly (common practice: an integral over
    # the disk may not depend on how its picture is framed).
    from astropy.io import fits

    from render.output.figures import read_still
    from render.output.files import write_still
    from render.output.products import write_products

    values = {"black_hole.spin": 0.9, "observer.inclination": 70.0,
              "observing.spectrum_low": 1e15, "observing.spectrum_high": 1e18,
              "observing.sampling_tolerance": 0.01}
    result = _polarised_spectrum(small_scene, True, **values, **{
        "output.npz": True, "output.fits": True})
    one, info = result.tables["spectrum"], result.metadata["observing"]
    two, _ = _polarised_spectrum(small_scene, **values, **{
        "image.width": 12, "image.height": 12, "observer.field_of_view": 25.0})
    assert info["sampling"].startswith("disk grid") and info["disk_grid"]["converged"]
    assert not info["warnings"]
    for name in ("flux_relativistic_jy",) + POLARISED_COLUMNS:
        assert np.array_equal(one[name], two[name]), name
    # Chandrasekhar's degree never exceeds 11.7 % and orders do not add degree.
    assert np.all((one["polarised_degree"] > 0.0) & (one["polarised_degree"] < 0.1172))
    # The CSV, NPZ and FITS files carry the columns (common practice: self-describing).
    paths = write_still(result, tmp_path) | write_products(result, tmp_path)
    table = np.genfromtxt(paths["spectrum_csv"], delimiter=",", names=True)
    with np.load(paths["npz"]) as data, fits.open(paths["fits"]) as hdus:
        for name in POLARISED_COLUMNS:
            assert np.allclose(table[name], one[name], rtol=1e-9)   # 10 digits in the CSV
            assert np.array_equal(data[f"spectrum_{name}"], one[name])
            assert np.array_equal(hdus["SPECTRUM"].data[name.upper()], one[name])
        assert hdus["SPECTRUM"].header["POLCONV"] == "IAU"
        assert hdus["SPECTRUM"].columns["STOKES_Q_JY"].unit == "Jy"
    assert np.array_equal(read_still(paths["npz"]).tables["spectrum"]["stokes_u_jy"],
                          one["stokes_u_jy"])   # and the NPZ reads back as a still


def test_face_on_schwarzschild_spectrum_has_no_net_polarisation(small_scene):
    # Symmetry (common practice): the disk grid is uniform in the position angle, and
    # about the axis every E-vector has a partner turned by the same angle.  Rounding of
    # the sums is ~1e-16 of the flux; 1e-10 leaves room and fails for any real pattern.
    table, info = _polarised_spectrum(small_scene, **{
        "black_hole.spin": 0.0, "observer.inclination": 0.0, "observing.spectrum_low": 1e15,
        "observing.spectrum_high": 1e18})
    flux = table["flux_relativistic_jy"]
    assert np.all(flux > 0.0) and info["disk_grid"]["converged"]
    assert np.all(np.abs(table["stokes_q_jy"]) < 1e-10 * flux)
    assert np.all(np.abs(table["stokes_u_jy"]) < 1e-10 * flux)


def test_far_disk_spectrum_has_chandrasekhars_degree_at_cos_i(small_scene):
    # A disk 1e4 M from the hole is seen as in flat space (bending ~4/r = 4e-4, orbital
    # speed v = r^-1/2 = 0.01): every emission angle is the inclination, every E-vector
    # lies along the disk, so the integrated degree is p(cos i) at every energy, with
    # p from our own solution of the transfer problem (Chandrasekhar 1960, sec. 70; the
    # solution above), and the IAU angle is 90 deg.  Doppler boosting correlates with the
    # emission angle's first-order change only in the Wien tail: below 1e-3 of the peak
    # flux is left out; 2e-4 covers v^2 = 1e-4 and the table's 1e-4.
    inclination = 75.0
    table, info = _polarised_spectrum(small_scene, **{
        "black_hole.spin": 0.0, "observer.inclination": inclination,
        "disk.inner_radius": 1e4, "disk.outer_radius": 2e4, "disk.surface": "opaque",
        "observing.spectrum_low": 1e13, "observing.spectrum_high": 1e16,
        "observing.sampling_tolerance": 0.01})
    flux = table["flux_relativistic_jy"]
    bright = flux > 1e-3 * flux.max()
    assert bright.sum() >= 3 and not info["warnings"]
    expected = _transfer_degree([math.cos(math.radians(inclination))])[0]
    assert expected == pytest.approx(0.0455, abs=5e-4)   # about 4.5 % at cos i = 0.26
    assert np.max(np.abs(table["polarised_degree"][bright] - expected)) < 2e-4
    assert np.max(np.abs(_fold(table["polarisation_angle_deg"][bright] - 90.0))) < 0.01


def _fold(angle_deg):
    return (angle_deg + 90.0) % 180.0 - 90.0


@pytest.mark.slow
def test_angle_turns_with_energy_more_for_faster_spin(small_scene):
    # Connors, Piran & Stark (1980), figs. 3-5 (qualitative, from memory): the
    # disk-integrated angle keeps the flat-space orientation (E along the disk: 90 deg
    # here) at low energy and turns at high energy, where the inner disk shines; the
    # turn grows with spin (a few degrees for a = 0, well over ten near a = 1 at i = 75).
    # The spectrum is integrated on the disk grid (distant observer).
    turns = []
    for spin in (0.0, 0.998):
        table, _ = _polarised_spectrum(small_scene, **{
            "observer.inclination": 75.0, "black_hole.spin": spin, "disk.outer_radius": 60.0,
            "observing.spectrum_low": 1e14, "observing.spectrum_high": 1e19,
            "observing.spectrum_points": 21})
        flux, angle = table["flux_relativistic_jy"], table["polarisation_angle_deg"]
        assert abs(_fold(angle[0] - 90.0)) < 1.0
        # The highest frequency still carrying 1e-3 of the peak flux.
        last = np.nonzero(flux > 1e-3 * flux.max())[0][-1]
        turns.append(abs(_fold(angle[last] - angle[0])))
    assert turns[1] > 5.0
    assert turns[1] > 2.0 * turns[0]


def test_outputs_carry_the_stokes_maps(small_scene, tmp_path):
    # The NPZ holds every map; the FITS file adds Stokes I, Q, U, degree and IAU angle
    # HDUs, with the convention in the header (common practice: self-describing files).
    from astropy.io import fits

    from render.output.files import write_still
    from render.output.products import write_products

    scene = small_scene(**{"image.width": 16, "image.height": 16, "output.fits": True,
                           "observing.mode": "monochromatic", "observing.frequency": 1e15,
                           "emission.law": "novikov_thorne", "observer.inclination": 60.0,
                           "polarisation.model": "electron_scattering",
                           "polarisation.ticks": True})
    result = render_still(scene)
    assert result.pixels.shape == (16, 16, 3)   # ticks turn the picture into RGB
    paths = write_still(result, tmp_path) | write_products(result, tmp_path)
    with np.load(paths["npz"]) as data:
        assert data["stokes_q_order"].shape == (scene["disk.orders"], 16, 16)
        assert np.allclose(data["stokes_i"], data["intensity"], equal_nan=True)
    with fits.open(paths["fits"]) as hdus:
        assert hdus["POLANG"].header["POLCONV"] == "IAU"
        assert np.allclose(hdus["STOKESQ"].data, np.flipud(result.products["stokes_q"]))


def test_ticks_cover_every_part_of_the_disk_the_picture_shows(tmp_path):
    # Regression: ticks were drawn only where a cell had 5 % of the brightest cell's
    # intensity, so on a log picture (2.5 decades here) the receding half of the disk, shown
    # plainly, had no tick at all.  Now both sides of the disk get ticks (common practice:
    # a polarisation map ticks everything it shows).
    from render import load_scene
    from render.imaging.ticks import TICK_COLOUR

    repo = __import__("pathlib").Path(__file__).resolve().parents[1]
    scene = load_scene(repo / "scenes" / "thermal-bolometric.yaml",
                       ["image.width=192", "image.height=192", "output.fits=false",
                        "polarisation.model=electron_scattering", "polarisation.ticks=true"])
    pixels = render_still(scene).pixels
    ticked = np.all(pixels == np.array(TICK_COLOUR, dtype=np.uint8), axis=2)
    # The receding side: the right third of the picture (the approaching side is left).
    left, right = ticked[:, :64].sum(), ticked[:, 128:].sum()
    assert left > 50 and right > 50, (left, right)
