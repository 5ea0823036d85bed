"""Keyframes, frame sequences, resume after interruption, and time on the disk."""

import dataclasses
import json
import os
import signal
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import yaml
from PIL import Image

import render
import render.geodesics.closed_form
import render.geodesics.tracing
from conftest import run_cli
from render import default_scene, render_still
from render.api import render_sequence
from render.film.frame import render_frame
from render.film.keyframes import interpolate
from render.film.sequence import plan_sequence
from render.light.pattern import emission_time, tortoise_radius
from render.errors import SceneError

REPO = Path(__file__).resolve().parents[1]

SMALL = {"image.width": 32, "image.height": 18, "observer.placement": "distant",
         "observer.field_of_view": 30.0, "output.npz": False}


def small(**values):
    return default_scene(**{**SMALL, **values})


# --- keyframes ------------------------------------------------------------------------------

@pytest.mark.parametrize("kind", ["linear", "smooth", "cubic"])
def test_interpolation_passes_through_the_keyframes(kind):
    points = [(0, 1.0, kind), (3, 4.0, kind), (9, -2.0, kind)]
    for frame, value, _ in points:
        assert interpolate(points, frame) == pytest.approx(value, abs=1e-12)


def test_cubic_reproduces_straight_lines_and_smooth_rests_at_keyframes():
    # Cubic Hermite with Catmull–Rom tangents is exact for linear data; smoothstep has zero
    # slope at both ends (common practice: Catmull & Rom 1974; smoothstep 3s^2 - 2s^3).
    line = [(0, 0.0, "cubic"), (2, 4.0, "cubic"), (7, 14.0, "cubic")]
    for f in np.linspace(0, 7, 29):
        assert interpolate(line, f) == pytest.approx(2.0 * f, abs=1e-12)
    smooth = [(0, 0.0, "smooth"), (10, 1.0, None)]
    h = 1e-6
    assert (interpolate(smooth, h) - interpolate(smooth, 0)) / h == pytest.approx(0.0, abs=1e-5)
    assert interpolate(smooth, 2.5) == pytest.approx(0.15625, abs=1e-12)  # 3/16 - 2/64


@pytest.mark.parametrize("values, message", [
    ({"animation.frames": 0}, "animation.frames = 0"),
    ({"animation.frames": -3}, "animation.frames = -3"),
    ({"animation.frames": 4, "animation.keyframes": [
        {"frame": 2, "observer.inclination": 10}, {"frame": 1, "observer.inclination": 20}]},
     "out of order"),
    ({"animation.frames": 4, "animation.keyframes": [
        {"frame": 1, "observer.inclination": 10}, {"frame": 1, "observer.inclination": 20}]},
     "out of order"),
    ({"animation.frames": 4, "animation.keyframes": [{"frame": 9, "observer.inclination": 10}]},
     "has 4 frames"),
    ({"animation.frames": 4, "animation.duration": 2.0}, "both given"),
    ({"animation.keyframes": [{"frame": 0, "image.width": 10}]}, "cannot be keyframed"),
    ({"animation.keyframes": [{"frame": 0, "observer.inclination": "x"}]}, "a finite number"),
    ({"animation.keyframes": [{"observer.inclination": 3}]}, "'frame'"),
    # Keyframes placed by screen time or by a fraction of the film.
    ({"animation.keyframes": [{"time": -1.0, "observer.inclination": 3}]},
     r"animation.keyframes\[0\].time = -1.0"),
    ({"animation.keyframes": [{"at": 1.5, "observer.inclination": 3}]},
     r"animation.keyframes\[0\].at = 1.5.*0 <= at <= 1"),
    ({"animation.keyframes": [{"at": "half", "observer.inclination": 3}]}, "'half'"),
    ({"animation.keyframes": [{"frame": 0, "at": 0.5, "observer.inclination": 3}]},
     "placed by frame and at"),
    ({"animation.keyframes": [{"at": 0.6, "observer.inclination": 3},
                              {"at": 0.2, "observer.inclination": 5}]}, "out of order"),
    ({"animation.frames": 10, "animation.keyframes": [{"at": 0.5, "observer.inclination": 3},
                                                      {"frame": 2, "observer.inclination": 5}]},
     r"frame = 2 \(frame 2\) is out of order"),
    ({"animation.frames": 12, "animation.fps": 24.0,
      "animation.keyframes": [{"time": 2.5, "observer.inclination": 3}]},
     r"time = 2.5 is frame 60, but the sequence has 12 frames"),
])
def test_bad_animation_input_is_one_line(values, message):
    with pytest.raises(SceneError, match=message) as info:
        small(**values)
    assert "\n" not in str(info.value)


def keyframed_inclinations(frames):
    """Inclination per frame of a film whose keyframes sit at 0, 1/4 and 1 of it."""
    scene = small(**{"animation.frames": frames, "animation.interpolation": "cubic",
                     "animation.keyframes": [{"at": 0.0, "observer.inclination": 20.0},
                                             {"at": 0.25, "observer.inclination": 70.0},
                                             {"at": 1.0, "observer.inclination": 35.0}]})
    return [job.scene["observer.inclination"] for job in plan_sequence(scene).jobs]


def test_keyframes_placed_by_fraction_keep_their_moments_whatever_the_frame_count():
    # The same fraction of the film gets the same value: frame k of N sits at k / (N - 1),
    # so fractions 0, 1/8, ..., 1 are frames 0, 1, ..., 8 of 9 and 0, 12, ..., 96 of 97
    # (common practice: a timeline independent of the frame rate).
    short = keyframed_inclinations(9)
    long = keyframed_inclinations(97)
    for k in range(9):
        assert long[12 * k] == pytest.approx(short[k], rel=1e-12, abs=1e-12), k
    # ... and the keyframed values themselves are reached at their fractions.
    assert short[0] == 20.0 and short[2] == pytest.approx(70.0) and short[8] == 35.0


def test_keyframes_placed_by_time_land_on_their_frames():
    # time t is screen time t: frame t x fps (24 frames per second).
    scene = small(**{"animation.frames": 25, "animation.fps": 24.0,
                     "animation.interpolation": "linear", "animation.keyframes": [
                         {"time": 0.0, "observer.inclination": 20.0},
                         {"time": 1.0, "observer.inclination": 80.0}]})
    values = [job.scene["observer.inclination"] for job in plan_sequence(scene).jobs]
    # Linear between (frame 0, 20) and (frame 24, 80): 2.5 degrees per frame, by hand.
    assert values[12] == pytest.approx(50.0, abs=1e-12)
    assert values[24] == pytest.approx(80.0, abs=1e-12)


def test_preview_film_keeps_the_keyframes_moments():
    from render.scene.loader import preview_film

    full = small(**{"animation.frames": 97, "animation.interpolation": "cubic",
                    "animation.keyframes": [{"frame": 0, "observer.inclination": 20.0},
                                            {"frame": 24, "observer.inclination": 70.0},
                                            {"frame": 96, "observer.inclination": 35.0}]})
    quick = preview_film(full, frames=9)
    assert quick["animation.frames"] == 9 and quick["name"].endswith("-preview")
    assert quick["disk.orders"] == 1 and quick["image.width"] <= 160
    full_values = [job.scene["observer.inclination"] for job in plan_sequence(full).jobs]
    quick_values = [job.scene["observer.inclination"] for job in plan_sequence(quick).jobs]
    # Preview frame k shows the full film's frame 12 k: the same moment (fraction k / 8).
    for k in range(9):
        assert quick_values[k] == pytest.approx(full_values[12 * k], rel=1e-12), k
    # The observer's clock spans the same time: 96 x 10 M over 8 frames.
    assert quick["animation.time_step"] == pytest.approx(96 * 10.0 / 8)


def test_sequence_preview_writes_beside_the_full_film(tmp_path, capsys):
    scene = tmp_path / "film.yaml"
    scene.write_text(yaml.safe_dump({
        "observer": {"placement": "distant", "field_of_view": 30.0},
        "image": {"width": 32, "height": 18}, "tracing": {"method": "auto"},
        "animation": {"frames": 40, "keyframes": [
            {"at": 0.0, "observer.inclination": 30.0}, {"at": 1.0, "observer.inclination": 60.0}]},
    }), encoding="utf-8")
    full = tmp_path / "out" / "film"
    full.mkdir(parents=True)
    (full / "keep.txt").write_text("the full film's folder", encoding="utf-8")
    status, out, err = run_cli(["sequence", scene, "--preview", "--output-dir",
                                tmp_path / "out", "--workers", "1", "--quiet"], capsys)
    assert status == 0, err
    frames = sorted(p.name for p in (tmp_path / "out" / "film-preview").glob("frame_*.png"))
    assert frames == [f"frame_{k:05d}.png" for k in range(12)]
    # The full film's folder is untouched.
    assert sorted(p.name for p in full.iterdir()) == ["keep.txt"]


def test_keyframed_value_out_of_range_names_the_frame():
    scene = small(**{"animation.frames": 5, "animation.interpolation": "cubic",
                     "animation.keyframes": [{"frame": 0, "black_hole.spin": 0.5},
                                             {"frame": 2, "black_hole.spin": 0.99},
                                             {"frame": 4, "black_hole.spin": 0.2}]})
    # Cubic overshoots above 0.99 between frames 2 and 4?  No: it is evaluated at frames
    # only; make one frame itself invalid instead.
    plan_sequence(scene)
    bad = small(**{"animation.frames": 3, "animation.keyframes": [
        {"frame": 0, "black_hole.spin": 0.5}, {"frame": 2, "black_hole.spin": 1.5}]})
    with pytest.raises(SceneError, match=r"^frame 1: black_hole.spin"):
        plan_sequence(bad)


def test_duration_and_fps_give_the_frame_count():
    plan = plan_sequence(small(**{"animation.duration": 0.5, "animation.fps": 12.0}))
    assert len(plan.jobs) == 6
    with pytest.raises(SceneError, match="needs animation.frames"):
        plan_sequence(small())


# --- sequences -------------------------------------------------------------------------------

def test_frames_are_numbered_in_order_with_one_exposure(tmp_path):
    # Each frame equals the still of its keyframed scene with the exposure of frame 0
    # (the same fixed rule as render_still; the law does not change along this sweep).
    scene = small(name="sweep", **{"animation.frames": 4, "animation.interpolation": "linear",
                                   "animation.keyframes": [{"frame": 0, "observer.inclination": 20},
                                                           {"frame": 3, "observer.inclination": 80}]})
    result = render_sequence(scene, tmp_path, products=False)
    folder = tmp_path / "sweep"
    assert result.rendered == [0, 1, 2, 3]
    assert sorted(p.name for p in folder.glob("frame_*.png")) == [
        f"frame_{k:05d}.png" for k in range(4)]
    for k, inclination in enumerate([20.0, 40.0, 60.0, 80.0]):
        still = render_still(small(**{"observer.inclination": inclination}))
        frame = np.asarray(Image.open(folder / f"frame_{k:05d}.png"))
        assert np.array_equal(frame, still.pixels), k
    manifest = json.loads((folder / "manifest.json").read_text())
    assert sorted(manifest["frames"]) == [f"{k:05d}" for k in range(4)]


def _write_scene(path, **values):
    document = {}
    for key, value in {**SMALL, **values}.items():
        section, _, leaf = key.partition(".")
        if leaf:
            document.setdefault(section, {})[leaf] = value
        else:
            document[section] = value
    path.write_text(yaml.safe_dump(document), encoding="utf-8")
    return path


def _logged_frames(text):
    return [int(line.split()[1]) for line in text.splitlines() if line.startswith("frame ")]


def _run_until(command, env, frames_seen, stop):
    """Start ``command``, read its per-frame log lines, send ``stop`` after ``frames_seen``."""
    process = subprocess.Popen(command, stderr=subprocess.PIPE, stdout=subprocess.DEVNULL,
                               text=True, env=env)
    seen = []
    for line in process.stderr:
        seen += _logged_frames(line)
        if len(seen) >= frames_seen:
            process.send_signal(stop)
            break
    status = process.wait(timeout=120)
    process.stderr.close()
    return status, seen


@pytest.mark.slow   # real processes killed mid-film, ~13 s; resume logic also in the corrupt-frame test
def test_resume_after_ctrl_c_and_kill_renders_only_missing_frames(tmp_path):
    # Ctrl-C, then kill -9, mid-sequence, then rerun: every frame present and intact, none
    # rendered twice.  One worker keeps it quick (the pool's own kill -9 clean-up is in
    # test_distributed.py).
    frames = 12
    scene = _write_scene(tmp_path / "resume.yaml", **{
        "image.width": 48, "image.height": 27, "animation.frames": frames,
        "animation.keyframes": [{"frame": 0, "observer.inclination": 10},
                                {"frame": frames - 1, "observer.inclination": 85}]})
    out = tmp_path / "out"
    command = [sys.executable, "-m", "render", "sequence", str(scene), "--output-dir", str(out),
               "--workers", "1"]
    env = dict(os.environ)
    status, seen = _run_until(command, env, 2, signal.SIGINT)
    assert status == 130  # the CLI's exit status after Ctrl-C
    manifest = json.loads((out / "resume" / "manifest.json").read_text())
    interrupted = {int(k) for k in manifest["frames"]}
    assert set(seen) <= interrupted and len(interrupted) < frames - 4, "Ctrl-C came too late"
    status, resumed = _run_until(command, env, 2, signal.SIGKILL)
    assert status == -signal.SIGKILL
    assert not set(resumed) & interrupted  # the resumed run skipped the finished frames
    manifest = json.loads((out / "resume" / "manifest.json").read_text())
    finished = {int(k) for k in manifest["frames"]}
    # The manifest is rewritten at most once a second (and at a clean stop), so kill -9 may
    # lose the listing of the last second's frames: they are rendered again, never trusted.
    assert interrupted <= finished and len(finished) < frames, "kill came too late"
    second = subprocess.run(command, capture_output=True, text=True, env=env, timeout=300)
    assert second.returncode == 0, second.stderr
    again = _logged_frames(second.stderr)
    assert sorted(again) == sorted(set(range(frames)) - finished)  # none rendered twice
    manifest = json.loads((out / "resume" / "manifest.json").read_text())
    assert sorted(int(k) for k in manifest["frames"]) == list(range(frames))
    import hashlib

    for k in range(frames):
        path = out / "resume" / f"frame_{k:05d}.png"
        assert hashlib.sha256(path.read_bytes()).hexdigest() == manifest["frames"][f"{k:05d}"]["sha256"]
        assert np.asarray(Image.open(path)).shape == (27, 48)
    assert not list((out / "resume").glob(".*.part"))


def test_a_corrupt_frame_is_rendered_again_and_a_changed_scene_is_refused(tmp_path, capsys):
    scene = _write_scene(tmp_path / "edit.yaml", **{"animation.frames": 3})
    out = tmp_path / "out"
    status, text, err = run_cli(["sequence", scene, "--output-dir", out, "--quiet"], capsys)
    assert status == 0 and text == "" and err == "", err
    frame = out / "edit" / "frame_00001.png"
    frame.write_bytes(frame.read_bytes()[:40])  # truncated, as by a crash of another tool
    status, out_text, _ = run_cli(["sequence", scene, "--output-dir", out], capsys)
    assert status == 0 and "1 frames rendered, 2 already finished" in out_text
    assert np.asarray(Image.open(frame)).shape == (18, 32)
    before = {p.name: p.read_bytes() for p in (out / "edit").glob("frame_*.png")}
    status, _, err = run_cli(["sequence", scene, "--output-dir", out,
                              "--set", "black_hole.spin=0.5"], capsys)
    assert status == 2 and "different scene" in err and len(err.strip().splitlines()) == 1
    assert {p.name: p.read_bytes() for p in (out / "edit").glob("frame_*.png")} == before
    status, out_text, _ = run_cli(["sequence", scene, "--output-dir", out, "--overwrite",
                                   "--set", "black_hole.spin=0.5"], capsys)
    assert status == 0 and "3 frames rendered, 0 already finished" in out_text


def test_unreachable_scheduler_for_a_still_exits_2_with_nothing_written(tmp_path, capsys,
                                                                       no_tracing):
    out = tmp_path / "out"
    status, _, err = run_cli(["still", "--set", "image.width=8", "--set", "image.height=8",
                              "--output-dir", out, "--scheduler", "tcp://127.0.0.1:9"], capsys)
    assert status == 2 and "cannot be reached" in err and len(err.strip().splitlines()) == 1
    assert not out.exists()


@pytest.mark.parametrize("extra, message", [
    (["--set", "animation.frames=0"], "animation.frames = 0"),
    (["--set", "animation.frames=-2"], "animation.frames = -2"),
    (["--scheduler", "tcp://127.0.0.1:9"], "cannot be reached"),
    (["--set", "observer.placement=camera", "--set", "animation.camera_path=plunge",
      "--set", "observer.distance=12", "--set", "animation.time_step=20"], "horizon"),
])
def test_bad_sequence_input_exits_2_with_nothing_written(tmp_path, capsys, no_tracing, extra,
                                                         message):
    scene = _write_scene(tmp_path / "bad.yaml", **{"animation.frames": 3})
    out = tmp_path / "out"
    status, _, err = run_cli(["sequence", scene, "--output-dir", out] + extra, capsys)
    assert status == 2 and message in err and len(err.strip().splitlines()) == 1
    assert not out.exists()


# --- time on the disk ------------------------------------------------------------------------

def test_light_curve_period_of_an_orbiting_spot():
    # A spot on the circular orbit at r = 8 M (spin 0.5) comes back after the coordinate-time
    # period 2 pi (r^1.5 + a) (Bardeen, Press & Teukolsky 1972, eq. 2.16); the spacetime is
    # stationary, so the flux at the distant observer repeats with that period exactly.
    # The period is measured as the shift P that best maps the light curve onto itself
    # (scipy minimisation); 1e-4 relative tolerance covers the minimiser's resolution, well
    # below the 2 % a Schwarzschild or proper-time angular velocity would give.
    from scipy.optimize import minimize_scalar

    spin, radius = 0.5, 8.0
    expected = 2 * np.pi * (radius ** 1.5 + spin)
    scene = default_scene(**{
        "image.width": 48, "image.height": 48, "observer.placement": "distant",
        "black_hole.spin": spin, "observer.inclination": 70.0, "observer.field_of_view": 24.0,
        "disk.outer_radius": 12.0, "pattern.shape": "spot", "pattern.radius": radius,
        "pattern.size": 1.5, "animation.frames": 1})
    job = plan_sequence(scene).jobs[0]
    samples = np.linspace(0.0, 1.3 * expected, 60)

    def flux(t):
        return render_frame(dataclasses.replace(job, clock=t, coordinate_time=t)).flux

    base = np.array([flux(t) for t in samples])
    assert base.max() > 1.05 * base.min()  # the spot is seen

    def mismatch(period):
        return float(np.mean((np.array([flux(t + period) for t in samples]) - base) ** 2))

    best = minimize_scalar(mismatch, bounds=(0.9 * expected, 1.1 * expected), method="bounded",
                           options={"xatol": 1e-3})
    assert best.x == pytest.approx(expected, rel=1e-4)


def _schwarzschild_ray_to_the_equator(b, r_o):
    """Radius and coordinate time where a ray from the axis at r_o meets the equator (a = 0).

    The orbit is planar and meets the equatorial plane after sweeping pi/2 in its plane.
    Binet's equation d^2u/dphi^2 + u = 3 u^2 with (du/dphi)^2 = 1/b^2 - u^2 (1 - 2u), and
    dt/dphi = 1 / (b u^2 (1 - 2u)) (Misner, Thorne & Wheeler 1973, sec. 25.6, from memory),
    integrated with scipy's solve_ivp (no trouble at the periapsis, unlike dt/dr).
    """
    from scipy.integrate import solve_ivp

    u0 = 1.0 / r_o
    slope = np.sqrt(1.0 / b ** 2 - u0 ** 2 * (1 - 2 * u0))  # moving inward: u grows

    def rhs(phi, y):
        u = y[0]
        return [y[1], 3 * u * u - u, 1.0 / (b * u * u * (1 - 2 * u))]

    sol = solve_ivp(rhs, (0.0, np.pi / 2), [u0, slope, 0.0], rtol=1e-12, atol=1e-14)
    return 1.0 / sol.y[0, -1], sol.y[2, -1]


def test_emission_time_of_a_camera_matches_a_direct_integration():
    # A static camera on the axis at r_o = 60 M of a Schwarzschild hole: t_obs - t_em from
    # render.light.pattern.emission_time (the kernel's regularised delay plus tortoise terms) equals
    # the coordinate time along the ray integrated independently with scipy.  Tolerance
    # 1e-7 relative: the kernel runs at tolerance 1e-11.
    from render.camera.observers import camera_rays, image_plane_grid
    from render.geodesics.tracing import trace_bundle

    r_o = 60.0
    x, y = image_plane_grid(10, 1, 40.0)  # pixel centres at 6, 10 and 14 M off the axis
    bundle = camera_rays(x[:, 6:9], y[:, 6:9], 0.0, r_o, 0.0, 0.0, "static")
    raw = trace_bundle(bundle, 0.0, n_record=1, tolerance=1e-11)
    b = np.sqrt(bundle.eta + bundle.lam ** 2)
    t_em = emission_time(1000.0, raw["delay"][:, 0], raw["r"][:, 0], 0.0, observer_radius=r_o)
    for i in range(b.size):
        r_em, travel = _schwarzschild_ray_to_the_equator(b[i], r_o)
        assert raw["r"][i, 0] == pytest.approx(r_em, rel=1e-7)
        assert 1000.0 - t_em[i] == pytest.approx(travel, rel=1e-7)


def test_tortoise_coordinate_derivative():
    # dr*/dr = (r^2 + a^2)/Delta (Chandrasekhar 1983, sec. 63), checked by central differences.
    for a in (0.0, 0.6, -0.95):
        for r in (2.5, 5.0, 40.0):
            h = 1e-6
            slope = (tortoise_radius(r + h, a) - tortoise_radius(r - h, a)) / (2 * h)
            assert slope == pytest.approx((r * r + a * a) / (r * r - 2 * r + a * a), rel=1e-7)


@pytest.mark.parametrize("name", ["orbit-kestrel", "sweep-inclination-marrow",
                                  "sweep-spin-ondine"])
def test_example_sequence_scenes_plan_without_error(name, no_tracing):
    from render import load_scene

    plan = plan_sequence(load_scene(REPO / "scenes" / f"{name}.yaml"))
    assert len(plan.jobs) in (72, 120)


def test_one_white_for_a_sweep_is_the_largest_frame_white():
    # A spin sweep moves the inner edge (the ISCO) and with it the exposure's white,
    # I_em(r_in) = r_in^-3 for the power law (README exposure rule); the sequence uses the
    # largest, so no frame saturates for want of its own white and all share one exposure.
    from render.spacetime.kerr import isco_radius

    scene = small(**{"animation.frames": 3, "animation.keyframes": [
        {"frame": 0, "black_hole.spin": 0.0}, {"frame": 2, "black_hole.spin": 0.9}]})
    plan = plan_sequence(scene)
    assert {job.white for job in plan.jobs} == {plan.white}
    assert plan.white == pytest.approx(isco_radius(0.9) ** -3, rel=1e-12)


# --- sequences honour tracing.method --------------------------------------------------------

def _method_film(method):
    # An invented sweep: a distant observer at rest, 3 frames of 16x16, its inclination
    # keyframed from 35 to 65 degrees, traced as tracing.method says.
    return small(**{"name": f"film-{method}", "image.width": 16, "image.height": 16,
                    "black_hole.spin": 0.6, "observer.field_of_view": 28.0,
                    "tracing.method": method, "animation.frames": 3,
                    "animation.camera_path": "still", "animation.keyframes": [
                        {"frame": 0, "observer.inclination": 35.0, "interpolation": "linear"},
                        {"frame": 2, "observer.inclination": 65.0}]})


def _refuse(monkeypatch, module, name):
    def refuse(*args, **kwargs):
        raise AssertionError(f"{name} ran although the film asked for the other method")

    monkeypatch.setattr(module, name, refuse)


def _count_calls(monkeypatch, module, name):
    calls = []
    original = getattr(module, name)

    def counted(*args, **kwargs):
        calls.append(name)
        return original(*args, **kwargs)

    monkeypatch.setattr(module, name, counted)
    return calls


def _frames_of(result):
    return [np.asarray(Image.open(result.folder / f"frame_{k:05d}.png"), dtype=int)
            for k in range(3)]


@pytest.mark.parametrize("method", ["closed_form", "auto"])
def test_a_distant_film_asked_for_the_closed_form_never_integrates(tmp_path, monkeypatch, method):
    # auto means the closed form for a distant observer (README, tracing.method).
    _refuse(monkeypatch, render.geodesics.tracing, "trace_rays")
    closed_form = _count_calls(monkeypatch, render.geodesics.closed_form, "closed_form_crossings")
    result = render_sequence(_method_film(method), tmp_path, products=False)
    assert result.rendered == [0, 1, 2]
    # Every frame has its own inclination, so none can reuse another's rays.
    assert len(closed_form) >= 3
    assert all(frame.max() > 0 for frame in _frames_of(result))


def test_a_film_asked_to_integrate_never_uses_the_closed_form(tmp_path, monkeypatch):
    _refuse(monkeypatch, render.geodesics.closed_form, "closed_form_crossings")
    integrator = _count_calls(monkeypatch, render.geodesics.tracing, "trace_rays")
    result = render_sequence(_method_film("integrate"), tmp_path, products=False)
    assert result.rendered == [0, 1, 2]
    assert len(integrator) >= 3


def test_closed_form_and_integrated_films_agree_to_one_level(tmp_path):
    # The two methods agree to ~1e-8 relative in r and g away from the critical curve
    # (docs/closed_form.md, checked in tests/test_closed_form.py); a relative change of 1e-8
    # in a pixel's intensity can move its 8-bit value across at most one rounding boundary.
    closed = _frames_of(render_sequence(_method_film("closed_form"), tmp_path, products=False))
    integrated = _frames_of(render_sequence(_method_film("integrate"), tmp_path, products=False))
    for a, b in zip(closed, integrated):
        assert np.max(np.abs(a - b)) <= 1
    # The frames do differ from one another (the sweep is seen), so the match is not trivial.
    assert np.max(np.abs(closed[0] - closed[2])) > 10


def test_the_frame_trace_cache_keeps_the_methods_apart(monkeypatch):
    # A frame whose geometry equals the last frame's reuses its rays (render.film.frame);
    # the same view traced by another method must be traced again.
    closed_job = plan_sequence(_method_film("closed_form")).jobs[2]
    integrated_job = plan_sequence(_method_film("integrate")).jobs[2]
    render_frame(closed_job)
    _refuse(monkeypatch, render.geodesics.closed_form, "closed_form_crossings")
    integrator = _count_calls(monkeypatch, render.geodesics.tracing, "trace_rays")
    first = render_frame(integrated_job)
    assert integrator, "the integrated frame reused the closed form's rays"
    traced = len(integrator)
    again = render_frame(integrated_job)
    assert len(integrator) == traced  # same view and method: the cache is used
    assert np.array_equal(first.pixels, again.pixels)


# --- trace once per film: the symmetry of Kerr in t and phi --------------------------------

def _symmetric_films():
    orbit = render.load_scene(Path(__file__).resolve().parents[1] / "scenes" / "orbit-kestrel.yaml",
                              ["image.width=32", "image.height=18", "animation.frames=4"])
    distant = default_scene(name="turning", **{
        "image.width": 24, "image.height": 24, "observer.placement": "distant",
        "pattern.shape": "spiral", "disk.surface": "transparent", "animation.frames": 3,
        "animation.keyframes": [{"frame": 0, "observer.azimuth": 0.0},
                                {"frame": 2, "observer.azimuth": 250.0}]})
    return {"orbiting-camera": orbit, "distant-turning": distant}


@pytest.mark.parametrize("which", ["orbiting-camera", "distant-turning"])
def test_a_film_that_only_turns_traces_once_and_equals_tracing_each_frame(which, monkeypatch):
    # Kerr is stationary and axisymmetric (Carter 1968): frames whose observers differ
    # only by a shift in t and phi see the same rays, turned.  Frames made from one
    # trace must equal frames traced one by one: r, g, delay to 1e-12, phi modulo 2 pi
    # to 1e-12 (a few ulps of the added angle), 8-bit pixels equal.
    import render.film.frame as frame
    from render.geodesics.tracing import trace
    from render.light.disk import redshift_factor

    calls = []
    monkeypatch.setattr(frame, "trace", lambda *a, **k: calls.append(1) or trace(*a, **k))
    frame._TRACE_CACHE.clear()
    plan = plan_sequence(_symmetric_films()[which])
    assert len({job.scene["observer.azimuth"] for job in plan.jobs}) == len(plan.jobs)
    for job in plan.jobs:
        bundle, raw = frame._trace(job.scene, job.velocity)
        alpha, beta, direct_bundle = job.scene.viewpoint().rays(velocity=job.velocity)
        direct = trace(job.scene.trace_settings(), alpha, beta, direct_bundle)
        assert np.array_equal(raw["fate"], direct["fate"])
        for name in ("r", "delay"):
            assert np.allclose(raw[name], direct[name], rtol=1e-12, atol=1e-12, equal_nan=True)
        turn = np.angle(np.exp(1j * (raw["phi"] - direct["phi"])))
        assert np.all(np.isnan(raw["phi"]) == np.isnan(direct["phi"]))
        assert np.nanmax(np.abs(turn), initial=0.0) < 1e-12
        g = redshift_factor(raw["r"], bundle.lam[:, None], job.scene.spin,
                            bundle.energy_ratio[:, None])
        g_direct = redshift_factor(direct["r"], direct_bundle.lam[:, None], job.scene.spin,
                                   direct_bundle.energy_ratio[:, None])
        assert np.allclose(g, g_direct, rtol=1e-12, equal_nan=True)
        pixels = []
        for b, r in ((bundle, raw), (direct_bundle, direct)):
            observation, shaded = frame._shade_traced(job.scene, job, b, r)
            pixels.append(frame._frame_pixels(job.scene, job, observation, shaded, r, b))
        assert np.array_equal(pixels[0], pixels[1])
        # The frame as a film renders it: shaded once, only the pattern per frame.
        assert frame._shades_by_pattern_only(job.scene)
        made = render_frame(job)
        assert np.array_equal(made.pixels.reshape(pixels[1].shape), pixels[1])
        pixel_area = (job.scene["observer.field_of_view"] / job.scene["image.width"]) ** 2
        assert made.flux == pytest.approx(np.nansum(shaded.intensity) * pixel_area, rel=1e-12)
    assert len(calls) == 1   # the film traced once (the direct traces above bypass it)


def test_frames_finished_before_an_interruption_are_listed_in_the_manifest(tmp_path):
    # The manifest is rewritten at most once a second while frames arrive; an interruption
    # (Ctrl-C raises KeyboardInterrupt) must still leave every finished frame listed.
    from render.film import sequence

    scene = default_scene(**{"image.width": 16, "image.height": 9, "animation.frames": 5})

    def two_then_interrupt(jobs):
        for job in jobs[:2]:
            yield render_frame(job)
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        sequence.render_sequence(scene, tmp_path, run_frames=two_then_interrupt)
    manifest = json.loads((tmp_path / scene["name"] / "manifest.json").read_text())
    assert sorted(manifest["frames"]) == ["00000", "00001"]
    rerun = sequence.render_sequence(scene, tmp_path, products=False)
    assert rerun.rendered == [2, 3, 4] and rerun.reused == [0, 1]


def test_a_film_traced_and_shaded_once_runs_in_one_process_by_default(tmp_path, monkeypatch):
    # A pool would trace the film once in each of its processes; its frames cost a pattern
    # factor each.  A film whose frames need their own traces still gets a pool.
    import render.api as api
    from render.film.frame import shades_once

    counts = []

    def recording(jobs, workers=1, client=None):
        counts.append(workers)
        return (render_frame(job) for job in jobs)

    monkeypatch.setattr(api, "frame_results", recording)
    monkeypatch.setattr(api, "auto_workers", lambda frames, cores=None: 2)
    films = _symmetric_films()
    assert shades_once(plan_sequence(films["orbiting-camera"]).jobs)
    api.render_sequence(films["orbiting-camera"], tmp_path, workers=None, products=False)
    tilting = small(**{"animation.frames": 3, "animation.keyframes": [
        {"frame": 0, "observer.inclination": 20.0}, {"frame": 2, "observer.inclination": 70.0}]})
    assert not shades_once(plan_sequence(tilting).jobs)
    api.render_sequence(tilting, tmp_path, workers=None, products=False)
    assert counts == [1, 2]


def test_a_film_leaves_the_temporaries_of_a_live_run_alone(tmp_path):
    # Two runs in one folder: starting (or --overwrite-ing) a film must not delete the
    # half-written files of a run that is still alive; a dead run's leftovers go.
    from render.film import sequence
    from render.guards.runs import run_tag

    scene = small(name="shared", **{"animation.frames": 2})
    folder = tmp_path / "shared"
    folder.mkdir()
    (folder / "manifest.json").write_text("{}")   # a folder of another (unreadable) film
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True, check=True).stdout.strip()
    live_part = folder / f".frame_00001.png.{run_tag()}.abc.part"
    dead_part = folder / f".frame_00001.png.{run_tag().replace(str(os.getpid()), dead)}.abc.part"
    for path in (live_part, dead_part):
        path.write_bytes(b"half a frame")
    sequence.render_sequence(scene, tmp_path, overwrite=True, products=False)
    assert live_part.exists() and not dead_part.exists()


def test_a_film_says_which_still_only_keys_it_ignores(small_scene, tmp_path):
    # Frames carry no polarisation or visibilities and trace every pixel: a film given
    # those keys names them in one warning instead of dropping them silently (house rule:
    # nothing the user asked for is ignored without a word).
    from render.errors import NullrayWarning

    scene = small_scene(**{"image.width": 8, "image.height": 8, "animation.frames": 2,
                           "polarisation.model": "electron_scattering",
                           "visibilities.compute": True, "tracing.sampling": "adaptive"})
    with pytest.warns(NullrayWarning) as caught:
        render_sequence(scene, tmp_path, products=False)
    lines = [str(w.message) for w in caught if "a film ignores" in str(w.message)]
    assert len(lines) == 1 and "\n" not in lines[0]
    for key in ("polarisation.model", "visibilities.compute", "tracing.sampling"):
        assert key in lines[0]
    import warnings

    with warnings.catch_warnings():
        warnings.filterwarnings("error", message="a film ignores", category=NullrayWarning)
        render_sequence(small_scene(**{"image.width": 8, "image.height": 8,
                                       "animation.frames": 2}), tmp_path / "plain",
                        products=False)
