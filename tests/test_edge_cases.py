"""Numerical edge cases of the parameter space, and Ctrl-C during a real render.

* rays grazing the photon sphere: crossings grow like ln(1/delta b)/pi, the caps
  on crossings and steps end them with the fate "unresolved", counted and reported;
* spin 0.9999: the ISCO close to the horizon;
* a zamo camera inside the ergoregion: photons of negative conserved energy, checked
  against an independent scipy integration of the geodesic equations;
* face-on and edge-on views, and the disk seen exactly edge-on (rays in its plane);
* SIGINT to a real ``nullray still`` process while it traces.
"""

import math
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from render import default_scene, trace_points
from render.camera.observers import camera_rays, image_plane_grid
from render.geodesics.tracing import trace_bundle
from render.spacetime.kerr import horizon_radii, isco_radius
from render.imaging.still import render_still

B_CRIT = math.sqrt(27.0)  # Schwarzschild critical impact parameter (Synge 1966; Luminet 1979)


def bpt_isco(a):
    """ISCO radius, Bardeen, Press & Teukolsky (1972), eq. 2.21 (prograde), written out here."""
    z1 = 1.0 + (1.0 - a * a) ** (1 / 3) * ((1.0 + a) ** (1 / 3) + (1.0 - a) ** (1 / 3))
    z2 = math.sqrt(3.0 * a * a + z1 * z1)
    return 3.0 + z2 - math.sqrt((3.0 - z1) * (3.0 + z1 + 2.0 * z2))


# --- the photon sphere ------------------------------------------------------------------


@pytest.mark.parametrize("side, fate", [(1.0, "escaped"), (-1.0, "captured")])
def test_crossings_grow_logarithmically_toward_the_photon_sphere(side, fate):
    # Near the Schwarzschild photon sphere a ray at b = b_c (1 + delta) circles it for
    # ~ln(1/delta)/(2 pi) orbits: the Lyapunov exponent of the photon orbit is 2 pi per
    # orbit (e.g. Johnson et al. 2020, Sci. Adv. 6, eaaz1310, from memory).  Seen face-on,
    # rays move in meridional planes and cross the equator twice per orbit, so each decade
    # in delta adds ln(10)/pi = 0.733 crossings.
    k = np.arange(1, 13)
    out = trace_points(B_CRIT + side * 10.0 ** -k, np.zeros(k.size), spin=0.0,
                       inclination_deg=0.0, max_orders=1, tolerance=1e-12,
                       max_crossings=100000)
    assert np.all(out["fate"] == fate)
    crossings = out["n_crossings"]
    assert np.all(np.diff(crossings) >= 0)
    slope = np.polyfit(k, crossings, 1)[0]
    # Integer counts sampled once per decade: the fitted slope is good to ~0.05.
    assert slope == pytest.approx(math.log(10.0) / math.pi, abs=0.06)


def test_crossing_and_step_caps_end_grazing_rays_as_unresolved():
    delta = 10.0 ** -np.arange(4, 13)
    alpha = B_CRIT * (1.0 + delta)
    capped = trace_points(alpha, np.zeros(alpha.size), spin=0.0, inclination_deg=0.0,
                          max_orders=1, max_crossings=4)
    # From delta ~1e-4 on these rays cross >= 4 times (previous test): all hit the cap.
    assert np.all(capped["fate"] == "unresolved") and np.all(capped["n_crossings"] == 4)
    # The 8th-order stepper needs about 30 steps for the least grazing of these rays
    # to escape; 25 steps is short of that for every one of them.
    stepped = trace_points(alpha, np.zeros(alpha.size), spin=0.0, inclination_deg=0.0,
                           max_orders=1, max_steps=25)
    assert np.all(stepped["fate"] == "unresolved")


def test_grazing_pixels_are_counted_and_reported(tmp_path, capsys):
    from conftest import run_cli

    # A face-on Schwarzschild image whose pixel grid straddles the photon ring: with at
    # most 3 crossings followed, pixels just outside b_c end unresolved, only there.
    args = ["still", "--set", "observer.placement=distant", "--set", "black_hole.spin=0",
            "--set", "observer.inclination=0", "--set", "image.width=64", "--set",
            "image.height=64", "--set", "observer.field_of_view=12", "--set",
            "disk.surface=transparent", "--set", "tracing.max_crossings=3",
            "--output-dir", tmp_path]
    status, out, err = run_cli(args, capsys)
    assert status == 0, err
    with np.load(tmp_path / "default.npz") as npz:
        fate, alpha, beta = npz["fate"], npz["alpha"], npz["beta"]
        import json

        counts = json.loads(str(npz["metadata"]))["fate_counts"]
    unresolved = fate == 3
    assert counts["unresolved"] == int(unresolved.sum()) > 0
    b = np.hypot(alpha, beta)[unresolved]
    # Three crossings need delta <~ 1e-1 (previous test); the pixels are 0.19 M wide.
    assert np.all((b > B_CRIT) & (b < B_CRIT * 1.12))
    assert f"unresolved {counts['unresolved']}" in out


# --- extreme spin -----------------------------------------------------------------------


def test_spin_0_9999_isco_near_the_horizon():
    a = 0.9999
    r_plus, _ = horizon_radii(a)
    assert r_plus == pytest.approx(1.0 + math.sqrt(1.0 - a * a), rel=1e-14)  # MTW eq. 33.4
    assert isco_radius(a) == pytest.approx(bpt_isco(a), rel=1e-12)
    assert r_plus < isco_radius(a) < 1.1
    # A narrow field of view (pixels of 0.19 M) resolves the inner edge.
    still = render_still(default_scene(**{
        "black_hole.spin": a, "observer.placement": "distant", "observer.inclination": 30.0,
        "image.width": 64, "image.height": 64, "observer.field_of_view": 12.0,
        "disk.surface": "opaque"}))
    hits = still.on_disk
    r, g = still.r[hits], still.g[hits]
    assert hits.sum() > 500
    assert np.all(r >= isco_radius(a)) and r.min() < 1.3 * isco_radius(a)
    assert np.all(np.isfinite(g)) and np.all(g > 0.0)
    # Gas at the ISCO of a near-extremal hole is deeply redshifted (g -> 0 as a -> 1;
    # Bardeen, Press & Teukolsky 1972): the smallest g is far below the outer disk's.
    assert g.min() < 0.3 < g.max()
    assert np.all(np.isfinite(still.intensity)) and still.metadata["fate_counts"]["unresolved"] == 0


# --- camera inside the ergoregion -------------------------------------------------------


# Independent Kerr geodesics for these checks: Hamiltonian form H = g^{mu nu} p_mu p_nu / 2
# in Boyer–Lindquist coordinates and affine parameter (MTW 1973, eq. 33.2 for the inverse
# metric, eq. 25.27 for Hamilton's equations), integrated with scipy; dH/dr and dH/dtheta
# by complex-step differentiation (exact to rounding, no finite-difference error).


def _inverse_metric(r, theta, a):
    sigma = r * r + a * a * np.cos(theta) ** 2
    delta = r * r - 2.0 * r + a * a
    sin2 = np.sin(theta) ** 2
    big_a = (r * r + a * a) ** 2 - a * a * delta * sin2
    return (-big_a / (sigma * delta), -2.0 * a * r / (sigma * delta),
            (delta - a * a * sin2) / (sigma * delta * sin2), delta / sigma, 1.0 / sigma)


def _hamiltonian(r, theta, p, a):
    g_tt, g_tphi, g_phiphi, g_rr, g_thth = _inverse_metric(r, theta, a)
    p_t, p_r, p_th, p_phi = p
    return 0.5 * (g_tt * p_t ** 2 + 2.0 * g_tphi * p_t * p_phi + g_phiphi * p_phi ** 2
                  + g_rr * p_r ** 2 + g_thth * p_th ** 2)


def _null_residual(r, theta, p, a):
    """|g^{mu nu} p_mu p_nu| relative to the sum of the magnitudes of its terms."""
    g_tt, g_tphi, g_phiphi, g_rr, g_thth = _inverse_metric(r, theta, a)
    p_t, p_r, p_th, p_phi = p
    terms = [g_tt * p_t ** 2, 2.0 * g_tphi * p_t * p_phi, g_phiphi * p_phi ** 2,
             g_rr * p_r ** 2, g_thth * p_th ** 2]
    return np.abs(sum(terms)) / sum(np.abs(term) for term in terms)


def _hamilton_equations(_, y, a):
    # y = (t, r, theta, phi, p_t, p_r, p_theta, p_phi); p_t and p_phi are constant.
    _, r, theta, _, p_t, p_r, p_th, p_phi = y
    g_tt, g_tphi, g_phiphi, g_rr, g_thth = _inverse_metric(r, theta, a)
    p = (p_t, p_r, p_th, p_phi)
    h = 1e-30
    dh_dr = _hamiltonian(r + 1j * h, theta, p, a).imag / h
    dh_dtheta = _hamiltonian(r, theta + 1j * h, p, a).imag / h
    return [g_tt * p_t + g_tphi * p_phi, g_rr * p_r, g_thth * p_th,
            g_tphi * p_t + g_phiphi * p_phi, 0.0, -dh_dr, -dh_dtheta, 0.0]


def _zamo_photon(a, r, theta, x, y):
    """Covariant p_mu of the photon of unit ZAMO-measured energy seen at pixel (x, y).

    ZAMO tetrad of Bardeen, Press & Teukolsky (1972), eq. 3.2, written out here; the
    pixel convention is the camera's (README, "Camera frames"): it looks along -e_r,
    right is +e_phi, up is -e_theta, and the pixel at (x, y) looks along (-1, x/r, y/r).
    """
    sigma = r * r + a * a * math.cos(theta) ** 2
    delta = r * r - 2.0 * r + a * a
    sin2 = math.sin(theta) ** 2
    big_a = (r * r + a * a) ** 2 - a * a * delta * sin2
    omega, lapse = 2.0 * a * r / big_a, math.sqrt(sigma * delta / big_a)
    varpi = math.sqrt(big_a / sigma) * math.sin(theta)
    look = np.array([-1.0, -y / r, x / r])  # (r, theta, phi)
    n_r, n_theta, n_phi = -look / np.linalg.norm(look)
    p_up = np.array([1.0 / lapse, n_r * math.sqrt(delta / sigma), n_theta / math.sqrt(sigma),
                     omega / lapse + n_phi / varpi])
    metric = np.zeros((4, 4))
    metric[0, 0] = -(1.0 - 2.0 * r / sigma)
    metric[0, 3] = metric[3, 0] = -2.0 * a * r * sin2 / sigma
    metric[3, 3], metric[1, 1], metric[2, 2] = big_a * sin2 / sigma, sigma / delta, sigma
    return metric @ p_up


def _carter_constant(theta, p_theta, energy, ang_mom, a):
    # Carter (1968): Q = p_theta^2 + cos^2 theta (L^2 / sin^2 theta - a^2 E^2).
    return p_theta ** 2 + np.cos(theta) ** 2 * (ang_mom ** 2 / np.sin(theta) ** 2
                                                 - a * a * energy ** 2)


def _backward_crossings(a, r_o, theta_o, p, orders):
    """(r, phi, t) at the first equatorial crossings of the photon traced into the past."""
    from scipy.integrate import solve_ivp

    r_plus = 1.0 + math.sqrt(1.0 - a * a)

    def crossing(_, y, a):
        return y[2] - 0.5 * math.pi

    def horizon(_, y, a):
        return y[1] - r_plus * (1.0 + 1e-4)

    horizon.terminal = True
    solution = solve_ivp(_hamilton_equations, (0.0, -100.0), [0.0, r_o, theta_o, 0.0, *p],
                         args=(a,), method="DOP853", rtol=1e-12, atol=1e-12,
                         events=[crossing, horizon])
    assert solution.status in (0, 1)
    states = solution.y_events[0][:orders]
    return states, solution.y


@pytest.mark.slow   # a scipy integration in Boyer-Lindquist coordinates, ~8 s; the deep-ergoregion test stays
def test_negative_energy_photons_match_an_independent_geodesic_integration():
    # A ZAMO deep in the ergoregion of an a = 0.998 hole (equatorial ergoregion
    # 1.063 M < r < 2 M, MTW 1973 sec. 33.8) sees photons with E = -p_t < 0.  Each ray is
    # compared with the full geodesic equations integrated by scipy from the 4-momentum
    # built here from the ZAMO tetrad: lam = L/E and eta = Q/E^2 (Carter 1968), and
    # r, phi and the regularised delay at the first two equatorial crossings.
    from scipy.integrate import quad

    a, r_o, inclination = 0.998, 1.5, 80.0
    theta_o = math.radians(inclination)
    x, y = (v.ravel() for v in image_plane_grid(12, 12, 40.0))
    bundle = camera_rays(x, y, a, r_o, inclination, 0.0, "zamo")
    raw = trace_bundle(bundle, a, n_record=2, tolerance=1e-11, final_state=True)
    photons = [_zamo_photon(a, r_o, theta_o, x[i], y[i]) for i in range(x.size)]
    energy = np.array([-p[0] for p in photons])
    is_negative = energy < 0.0
    assert 0 < is_negative.sum() < x.size
    assert np.array_equal(is_negative, bundle.energy_ratio < 0.0)
    # No ray ends unresolved, and no photon of negative E escapes (it cannot reach
    # infinity, MTW 1973 sec. 33.8): the backward rays fall to the horizon or cross the disk.
    assert np.all(raw["fate"] != 3)
    assert np.all(raw["fate"][is_negative] == 1)  # no disk here (stop_on_disk off)
    compared = 0  # negative-E crossings compared
    # All negative-E rays and, as a control, every seventh positive one that falls in
    # (a camera ray that leaves outward past the camera's radius counts as escaped there).
    control = (np.arange(x.size) % 7 == 0) & (raw["fate"] == 1)
    for i in np.nonzero(is_negative | control)[0]:
        p = photons[i]
        e, ang_mom = -p[0], p[3]
        q = _carter_constant(theta_o, p[2], e, ang_mom, a)
        # Constants as set by the camera, to rounding of the frame arithmetic.
        assert bundle.lam[i] == pytest.approx(ang_mom / e, rel=1e-12, abs=1e-12)
        assert bundle.eta[i] == pytest.approx(q / e ** 2, rel=1e-10, abs=1e-10)
        crossings, path = _backward_crossings(a, r_o, theta_o, p, 2)
        # The scipy ray keeps its Carter constant and stays null (checks the checker):
        # at rtol 1e-12 over a path this short both drift by < 1e-9 relative.
        assert np.allclose(_carter_constant(path[2], path[6], e, ang_mom, a), q,
                           rtol=1e-9, atol=1e-9 * abs(q) + 1e-12)
        assert np.max(_null_residual(path[1], path[2], path[4:], a)) < 1e-9
        kernel_orders = int(np.count_nonzero(np.isfinite(raw["r"][i])))
        assert kernel_orders == len(crossings)
        for n, state in enumerate(crossings):
            t, r_c, _, phi_c = state[:4]
            r_star = quad(lambda s: (s * s + a * a) / (s * s - 2.0 * s + a * a), r_c, r_o,
                          epsabs=1e-13, epsrel=1e-13)[0]
            # Both integrations run at ~1e-11..1e-12 over a few M of path; what is left
            # is the accumulated error of the two (measured: < 3e-9 near the horizon,
            # ~1e-11 elsewhere), so 1e-8 leaves margin without hiding a sign error
            # (a wrong sign of dphi or dt changes these at order 1).
            assert raw["r"][i, n] == pytest.approx(r_c, rel=1e-8)
            assert (raw["phi"][i, n] - phi_c + math.pi) % (2 * math.pi) - math.pi == (
                pytest.approx(0.0, abs=1e-8))
            assert raw["delay"][i, n] == pytest.approx(-t - r_star, abs=1e-8)
            compared += int(is_negative[i])
    # Many negative-E rays fall in without crossing the plane; enough of them do.
    assert compared >= 20
    # Where each negative-E ray ended (the first step past r_+ (1 + 1e-6)): theta and phi
    # of the scipy ray at the same radius.  phi diverges like ln(r - r_+) there (Boyer-
    # Lindquist coordinates), so its accumulated error is larger than at the crossings
    # (measured: 2e-8 for phi, 7e-13 for cos(theta)); bounds 1e-7 and 1e-10.
    from scipy.integrate import solve_ivp

    ended = 0
    for i in np.nonzero(is_negative & (raw["fate"] == 1))[0][::2]:
        final = raw["final_state"][i]
        r_end = 1.0 / final[0]

        def at_end(_, y, a, r_end=r_end):
            return y[1] - r_end

        at_end.terminal, at_end.direction = True, -1  # first time r falls through r_end
        solution = solve_ivp(_hamilton_equations, (0.0, -100.0),
                             [0.0, r_o, theta_o, 0.0, *photons[i]], args=(a,),
                             method="DOP853", rtol=1e-12, atol=1e-12, events=[at_end])
        (state,) = solution.y_events[0]
        assert math.cos(state[2]) == pytest.approx(final[2], abs=1e-10)
        assert (state[3] - final[4] + math.pi) % (2 * math.pi) - math.pi == pytest.approx(
            0.0, abs=1e-7)
        ended += 1
    assert ended >= 10
    from test_properties import carter_residuals

    residuals = carter_residuals(raw["final_state"], bundle.lam, bundle.eta, a)
    assert max(float(v.max()) for v in residuals) <= 1e-9


def test_negative_energy_photons_seen_from_deep_in_the_ergoregion(tmp_path):
    # An opaque disk from the ISCO (1.237 M at a = 0.998, Bardeen, Press & Teukolsky 1972,
    # eq. 2.21) reaches into the ergoregion (r < 2 M in the plane): a ZAMO camera there
    # sees parts of it by photons of negative E.  They are traced (none unresolved),
    # counted in the metadata, and their redshift factor g = (p.u_obs)/(p.u_em) is
    # finite, positive and equal to the one computed here from the scipy geodesic.
    a, r_o, inclination = 0.998, 1.3, 85.0
    theta_o = math.radians(inclination)
    scene = default_scene(**{
        "black_hole.spin": a, "observer.placement": "camera", "observer.frame": "zamo",
        "observer.distance": r_o, "observer.inclination": inclination,
        "observer.field_of_view": 40.0, "image.width": 24, "image.height": 24,
        "disk.surface": "opaque", "disk.outer_radius": 20.0})
    still = render_still(scene)
    x, y = still.alpha.ravel(), still.beta.ravel()
    photons = [_zamo_photon(a, r_o, theta_o, x[i], y[i]) for i in range(x.size)]
    is_negative = np.array([p[0] > 0.0 for p in photons])  # E = -p_t < 0
    assert is_negative.mean() > 0.1
    assert still.metadata["negative_energy_rays"] == int(is_negative.sum())
    assert still.metadata["fate_counts"]["unresolved"] == 0
    assert "unresolved_negative_energy" not in still.metadata
    # Rendered in bands of rows, the count is summed over the tiles.
    tiled = render_still(scene, memory_budget=2e5, workdir=tmp_path)
    try:
        assert tiled.metadata["tiles"]["count"] > 1
        assert tiled.metadata["negative_energy_rays"] == int(is_negative.sum())
        assert np.array_equal(np.asarray(tiled.fate), still.fate)
    finally:
        tiled.release()
    fate = still.fate.ravel()
    assert np.all(np.isin(fate[is_negative], (1, 2)))  # never escaped
    hits = still.on_disk[0].ravel() & is_negative
    assert hits.sum() > 20
    g = still.g[0].ravel()[hits]
    assert np.all(np.isfinite(g)) and np.all(g > 0.0)
    assert np.all(np.isfinite(still.intensity)) and np.all(still.intensity.ravel()[hits] > 0.0)
    r_isco = isco_radius(a)
    from render.light.emission import emission_cosine

    bundle = camera_rays(x, y, a, r_o, inclination, 0.0, "zamo")
    for i in np.nonzero(hits)[0][::4]:
        p = photons[i]
        (state,), _ = _backward_crossings(a, r_o, theta_o, p, 1)
        r_c = state[1]
        # Keplerian emitter, Omega = 1/(r^{3/2} + a) (Bardeen, Press & Teukolsky 1972,
        # eq. 2.16), u^t from g_{mu nu} u^mu u^nu = -1; the camera measures energy 1.
        omega = 1.0 / (r_c ** 1.5 + a)
        sigma, delta = r_c * r_c, r_c * r_c - 2.0 * r_c + a * a
        g_tt, g_tphi = -(1.0 - 2.0 / r_c), -2.0 * a / r_c
        g_phiphi = ((r_c * r_c + a * a) ** 2 - a * a * delta) / sigma
        u_t = 1.0 / math.sqrt(-(g_tt + 2.0 * g_tphi * omega + g_phiphi * omega ** 2))
        emitted = -u_t * (p[0] + omega * p[3])
        assert r_c >= r_isco and emitted > 0.0
        # Tolerance: the crossing radius agrees to ~1e-9 (previous test) and g is smooth in r.
        g_i = g[np.searchsorted(np.nonzero(hits)[0], i)]
        assert g_i == pytest.approx(1.0 / emitted, rel=1e-7)
        # Emission angle from the disk normal e_theta = d_theta / r in the emitter's frame:
        # cos = |p_theta| / (r E_em) (Cunningham 1975, sec. II), with p_theta from scipy.
        cosine = emission_cosine(r_c, bundle.eta[i], g_i, bundle.energy_ratio[i])
        assert 0.0 < cosine <= 1.0
        assert cosine == pytest.approx(abs(state[6]) / (r_c * emitted), rel=1e-6)


# --- face-on, edge-on, and the disk exactly edge-on -------------------------------------


@pytest.mark.parametrize("kind", ["distant", "camera"])
def test_face_on_view_is_symmetric_about_the_axis(kind):
    # Axisymmetry of Kerr (common practice): face-on, the image is unchanged by a
    # quarter turn (the grid maps onto itself; fates exactly, radii to the tolerance).
    still = render_still(default_scene(**{
        "black_hole.spin": 0.7, "observer.placement": kind, "observer.distance": 80.0,
        "observer.inclination": 0.0, "image.width": 32, "image.height": 32,
        "disk.surface": "transparent", "disk.orders": 2}))
    assert np.array_equal(still.fate, np.rot90(still.fate))
    assert np.allclose(still.r, np.rot90(still.r, axes=(1, 2)), rtol=1e-7, equal_nan=True)


@pytest.mark.parametrize("kind", ["distant", "camera"])
def test_disk_exactly_edge_on(kind):
    # Inclination 90: the middle row of an odd-height image lies exactly in the plane
    # of the infinitely thin disk.  Those rays never cross it (zero thickness: nothing
    # to hit, by convention), end as escaped or captured, and have no crossing at all;
    # the rows just above and below see its two faces, mirror images of each other
    # (equatorial reflection symmetry, common practice).
    still = render_still(default_scene(**{
        "black_hole.spin": 0.9, "observer.placement": kind, "observer.distance": 50.0,
        "observer.inclination": 90.0, "image.width": 21, "image.height": 21,
        "disk.surface": "opaque"}))
    middle = 10
    assert np.all(np.isin(still.fate[middle], (0, 1)))
    assert np.all(np.isnan(still.r[:, middle]))
    assert np.array_equal(still.fate[middle - 1], still.fate[middle + 1])
    assert np.any(still.fate[middle - 1] == 2)
    assert np.allclose(still.r[:, middle - 1], still.r[:, middle + 1], rtol=1e-9,
                       equal_nan=True)
    assert np.all(np.isfinite(still.intensity))


@pytest.mark.parametrize("inclination", [89.999999, 90.000001])
def test_almost_edge_on_rays_cross_once_near_their_closest_approach(inclination):
    # A ray tilted by 1e-6 deg off the plane crosses it where its polar oscillation
    # changes sign, not never and not in a burst: no cap is reached.
    out = trace_points([-10.0, 10.0], [0.0, 0.0], spin=0.9, inclination_deg=inclination,
                       max_orders=2, max_crossings=64)
    assert np.all(out["fate"] == "escaped") and np.all(out["n_crossings"] <= 2)


# --- Ctrl-C -----------------------------------------------------------------------------


@pytest.mark.parametrize("number,status,word", [(signal.SIGINT, 130, "interrupted"),
                                                (signal.SIGTERM, 143, "SIGTERM")])
def test_a_stop_signal_during_tracing_exits_cleanly_and_leaves_no_files(tmp_path, number, status,
                                                                       word):
    # A real process: a 512 x 512 still under a 0.01 GB budget is rendered in tiles, so
    # a temporary folder exists in the output folder while it traces.  SIGINT (or SIGTERM,
    # handled alike) then must end it with status 128 + the signal's number (common
    # practice: 130, 143), one line saying where finished outputs are, and nothing left
    # behind (SIGTERM left the tile folder and .part files before).
    out_dir = tmp_path / "out"
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    process = subprocess.Popen(
        [sys.executable, "-m", "render", "still", "--set", "observer.placement=distant",
         "--set", "image.width=512", "--set", "image.height=512", "--set",
         "tracing.memory_budget=0.01", "--set", "tracing.tolerance=1e-11",
         "--output-dir", str(out_dir)],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env,
        cwd=Path(__file__).resolve().parents[1])
    deadline = time.monotonic() + 120.0
    while time.monotonic() < deadline and process.poll() is None:
        if out_dir.exists() and any(p.name.startswith(".nullray-tiles-")
                                    for p in out_dir.iterdir()):
            break
        time.sleep(0.05)
    assert process.poll() is None, "the render ended before it could be interrupted"
    time.sleep(0.5)  # well inside the tracing of the first bands
    process.send_signal(number)
    out, err = process.communicate(timeout=120)
    assert process.returncode == status, err
    assert err.count("\n") == 1 and word in err and str(out_dir) in err, err
    assert "Traceback" not in err and out == ""
    assert list(out_dir.iterdir()) == []


def _wait_for_library(process, fragment, timeout=60.0):
    """Wait until the process has mapped a shared library whose path contains ``fragment``."""
    maps = Path(f"/proc/{process.pid}/maps")
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline and process.poll() is None:
        try:
            if fragment in maps.read_text():
                return True
        except OSError:
            pass
        time.sleep(0.002)
    return False


@pytest.mark.skipif(not Path("/proc/self/maps").exists(), reason="needs Linux's /proc maps")
@pytest.mark.parametrize("library", ["_multiarray_umath", "llvmlite"])
def test_ctrl_c_during_start_up_is_one_line(tmp_path, library):
    # Ctrl-C while the command is still importing (numpy, then numba's LLVM binding)
    # printed a traceback, ended with status -2 or with "ImportError: initialization
    # failed" before: it must be one line and 130.  The signal is sent as soon as the
    # process maps the library, i.e. in the middle of that import.
    process = subprocess.Popen(
        [sys.executable, "-m", "render", "still", "--set", "image.width=8", "--set",
         "image.height=8", "--output-dir", str(tmp_path / "out")],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        cwd=Path(__file__).resolve().parents[1])
    assert _wait_for_library(process, library), "the command never loaded " + library
    process.send_signal(signal.SIGINT)
    out, err = process.communicate(timeout=120)
    assert process.returncode == 130, err
    assert err.count("\n") == 1 and "interrupted" in err and "Traceback" not in err, err
    assert not (tmp_path / "out").exists()


def test_sigint_is_deferred_until_the_kernel_call_returns():
    from render.geodesics.integrator import deferred_interrupts

    reached_end = False
    with pytest.raises(KeyboardInterrupt):
        with deferred_interrupts():
            os.kill(os.getpid(), signal.SIGINT)
            time.sleep(0.05)  # a signal not held back would interrupt here
            reached_end = True
    assert reached_end
    # A handler installed by the caller gets the deferred signal instead.
    seen = []
    previous = signal.signal(signal.SIGINT, lambda number, frame: seen.append(number))
    try:
        with deferred_interrupts():
            os.kill(os.getpid(), signal.SIGINT)
            time.sleep(0.05)
            assert seen == []
        assert seen == [signal.SIGINT]
    finally:
        signal.signal(signal.SIGINT, previous)
