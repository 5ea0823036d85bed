"""Numerical edge cases of the parameter space, and Ctrl-C during a real render.

* rays grazing the photon sphere: crossings grow like ln(1/delta b)/pi, the caps
  on crossings and steps end them with the fate "unresolved", counted and reported;
* spin 0.9999: the ISCO close to the horizon;
* a zamo camera inside the ergoregion (photons of negative conserved energy);
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
from render.camera import camera_rays, image_plane_grid
from render.points import trace_bundle
from render.spacetime import horizon_radii, isco_radius
from render.still import render_still

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
    stepped = trace_points(alpha, np.zeros(alpha.size), spin=0.0, inclination_deg=0.0,
                           max_orders=1, max_steps=100)
    assert np.all(stepped["fate"] == "unresolved")


def test_grazing_pixels_are_counted_and_reported(tmp_path, capsys):
    from conftest import run_cli

    # A face-on Schwarzschild image whose pixel grid straddles the photon ring: with at
    # most 3 crossings followed, pixels just outside b_c end unresolved, only there.
    args = ["still", "--set", "observer.kind=distant", "--set", "black_hole.spin=0",
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
        "black_hole.spin": a, "observer.kind": "distant", "observer.inclination": 30.0,
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


def test_zamo_camera_inside_the_ergoregion():
    # Equatorial ergoregion 1.436 M < r < 2 M at a = 0.9 (MTW 1973, sec. 33.8); a ZAMO
    # exists there (Bardeen, Press & Teukolsky 1972).  Some photons it sees have negative
    # conserved energy E (possible only inside the ergoregion, MTW 1973 sec. 33.8): those
    # are not traced (the kernel's per-E states would point into their future) and are
    # reported as unresolved; every other ray satisfies its first integrals at its end.
    a, r = 0.9, 1.8
    alpha, beta = image_plane_grid(24, 24, 40.0)
    bundle = camera_rays(alpha, beta, a, r, 90.0, 0.0, "zamo")
    negative = bundle.energy_ratio < 0.0
    assert 0 < negative.sum() < negative.size
    raw = trace_bundle(bundle, a, n_record=2, tolerance=1e-10, final_state=True)
    assert np.all(raw["fate"][negative] == 3) and np.all(raw["steps"][negative] == 0)
    positive = ~negative
    assert np.all(raw["fate"][positive] != 3)
    from test_properties import carter_residuals

    final = raw["final_state"][positive]
    residuals = carter_residuals(final, bundle.lam[positive], bundle.eta[positive], a)
    assert max(float(x.max()) for x in residuals) <= 1e-9
    still = render_still(default_scene(**{
        "black_hole.spin": a, "observer.kind": "camera", "observer.frame": "zamo",
        "observer.distance": r, "observer.inclination": 90.0, "image.width": 24,
        "image.height": 24}))
    assert still.metadata["unresolved_negative_energy"] == int(negative.sum())
    assert still.metadata["fate_counts"]["unresolved"] == int(negative.sum())
    assert np.all(np.isfinite(still.intensity))


# --- face-on, edge-on, and the disk exactly edge-on -------------------------------------


@pytest.mark.parametrize("kind", ["distant", "camera"])
def test_face_on_view_is_symmetric_about_the_axis(kind):
    # Axisymmetry of Kerr (common practice): face-on, the image is unchanged by a
    # quarter turn (the grid maps onto itself; fates exactly, radii to the tolerance).
    still = render_still(default_scene(**{
        "black_hole.spin": 0.7, "observer.kind": kind, "observer.distance": 80.0,
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
        "black_hole.spin": 0.9, "observer.kind": kind, "observer.distance": 50.0,
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


def test_sigint_during_tracing_exits_130_and_leaves_no_files(tmp_path):
    # A real process: a 512 x 512 still under a 0.01 GB budget is rendered in tiles, so
    # a temporary folder exists in the output folder while it traces.  SIGINT then must
    # end it with status 130 (128 + SIGINT, common practice), one line saying where
    # finished outputs are, and nothing left behind.
    out_dir = tmp_path / "out"
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    process = subprocess.Popen(
        [sys.executable, "-m", "render", "still", "--set", "observer.kind=distant",
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
    process.send_signal(signal.SIGINT)
    out, err = process.communicate(timeout=120)
    assert process.returncode == 130, err
    assert err.count("\n") == 1 and "interrupted" in err and str(out_dir) in err, err
    assert "Traceback" not in err and out == ""
    assert list(out_dir.iterdir()) == []


def test_sigint_is_deferred_until_the_kernel_call_returns():
    from render.geodesics import deferred_interrupts

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
