"""The composer's session and server without a browser: validation, newest wins, probe,
critical curve, saved scenes, the served files.  The page itself is tested in a real
browser in tests/test_composer_browser.py."""

import json
import threading
import urllib.error
import urllib.request

import numpy as np
import pytest

from render import load_scene, render_still
from render.api import open_scene
from render.composer.controls import CONTROL_KEYS
from render.composer.server import make_server, server_url
from render.composer.session import ComposerSession, Superseded, preview_values
from render.errors import SceneError, UsageError

DISTANT = ("name: trial\nobserver:\n  placement: distant\n  inclination: 60\n"
           "  field_of_view: 40\nimage:\n  width: 512\n  height: 512\ndisk:\n"
           "  outer_radius: 20\ntracing:\n  method: auto\n")   # fixed, not the defaults


@pytest.fixture
def scene_file(tmp_path):
    path = tmp_path / "scenes" / "trial.yaml"
    path.parent.mkdir()
    path.write_text(DISTANT)
    return path


@pytest.fixture
def session(scene_file, tmp_path):
    return ComposerSession(scene_file, tmp_path / "out")


def test_a_bad_value_gets_the_command_lines_message_and_nothing_is_rendered(session, scene_file,
                                                                             no_tracing):
    with pytest.raises(SceneError) as direct:
        open_scene(scene_file, ["disk.outer_radius=1"])
    with pytest.raises(SceneError) as composed:
        session.preview({"disk.outer_radius": "1"}, 64)
    assert str(composed.value) == str(direct.value)
    assert str(composed.value).startswith("disk.outer_radius = 1.0 is not allowed")


def test_only_the_composers_controls_can_be_changed(session):
    with pytest.raises(UsageError, match="not a control"):
        session.scene_for({"emission.profile": "/etc/passwd"})


def test_a_side_file_outside_the_scenes_folder_is_refused(tmp_path):
    path = tmp_path / "inner" / "s.yaml"
    path.parent.mkdir()
    (tmp_path / "table.csv").write_text("r, emissivity\n2, 1\n30, 0.1\n")
    path.write_text("emission:\n  law: profile\n  profile: ../table.csv\n")
    with pytest.raises(SceneError, match="outside the scene"):
        ComposerSession(path, tmp_path / "out")


def test_the_preview_is_a_render_of_the_same_scene(session, scene_file):
    shown = session.preview({"observer.inclination": "30"}, 64)
    direct = render_still(load_scene(scene_file, [
        "observer.inclination=30", "image.width=64", "image.height=64", "output.npz=false",
        "tracing.tolerance=1e-6"]))
    assert np.array_equal(session.png(shown["id"]), direct.pixels)


def test_preview_values_keep_the_aspect_ratio():
    scene = open_scene(None, ["image.width=300", "image.height=100", "image.supersampling=3"])
    values = preview_values(scene, 120)
    assert (values["image.width"], values["image.height"], values["image.supersampling"]) == (
        120, 40, 1)


def test_an_older_preview_gives_way_to_a_newer_one(session):
    # Both wait on the render lock; whichever gets it first, the older must stop unrendered.
    outcomes = {}

    def ask(name, inclination):
        try:
            outcomes[name] = session.preview({"observer.inclination": inclination}, 32)["id"]
        except Superseded:
            outcomes[name] = "superseded"

    with session._render_lock:
        older = threading.Thread(target=ask, args=("older", "20"))
        older.start()
        while session._latest_ticket < 1:
            threading.Event().wait(0.01)
        newer = threading.Thread(target=ask, args=("newer", "40"))
        newer.start()
        while session._latest_ticket < 2:
            threading.Event().wait(0.01)
    older.join()
    newer.join()
    assert outcomes["older"] == "superseded"
    assert outcomes["newer"] != "superseded"


def test_probe_reads_the_maps_of_the_shown_preview(session):
    shown = session.preview({}, 64)
    centre = session.probe(shown["id"], 32, 32)
    # The centre of a face-on-ish image at alpha = beta ~ 0 is inside the shadow (common practice).
    assert centre["fate"] == "captured" and centre["crossings"] == []
    assert abs(centre["alpha"]) < 0.5 and abs(centre["beta"]) < 0.5
    # 6.2e6 M_sun at 11.5 kpc: GM/(c^2 D) = 2.58e-11 rad = 5.32 uas (G, M_sun, c, pc from CODATA/IAU).
    assert centre["alpha_uas"] == pytest.approx(centre["alpha"] * 5.32, rel=2e-3)
    edge = session.probe(shown["id"], 32, 20)   # above the shadow, on the disk's far side
    assert edge["fate"] == "disk" and edge["crossings"][0]["order"] == 0
    assert 2.3 < edge["crossings"][0]["r"] < 20.0 and 0 < edge["crossings"][0]["g"] < 2
    with pytest.raises(UsageError):
        session.probe(shown["id"], 64, 0)


def test_the_critical_curve_of_a_schwarzschild_hole_is_a_circle_in_pixels(session):
    # Spin 0: a circle of radius sqrt(27) M about the image centre (Synge 1966), at any roll.
    shown = session.preview({"black_hole.spin": "0", "observer.roll": "33",
                             "observer.field_of_view": "20"}, 100)
    x, y = np.array(shown["curve"]).T
    pixels_per_m = 100 / 20
    assert np.allclose(np.hypot(x - 50, y - 50), np.sqrt(27) * pixels_per_m, atol=0.02)
    camera = session.preview({"observer.placement": "camera"}, 32)
    assert camera["curve"] is None


def test_a_saved_scene_loads_back_to_the_same_scene(session, scene_file, tmp_path):
    settings = {"observer.inclination": "25", "emission.index": "2.5", "name": "kept"}
    path = session.save_scene(settings)
    assert path == tmp_path / "out" / "kept.yaml"
    expected = load_scene(scene_file, ["observer.inclination=25", "emission.index=2.5",
                                       "name=kept"])
    assert load_scene(path).values == expected.values
    with pytest.raises(Exception, match="tick 'overwrite'"):
        session.save_scene(settings)
    assert session.save_scene(settings, overwrite=True) == path


def test_a_still_writes_into_the_output_folder(session, tmp_path):
    session.start_still({"image.width": "24", "image.height": "24", "name": "small"})
    session._still_thread.join()
    assert session.still["state"] == "done", session.still["message"]
    assert (tmp_path / "out" / "small.png").exists()
    assert session.output_file("small.png") == tmp_path / "out" / "small.png"
    with pytest.raises(UsageError):
        session.output_file("../scenes/trial.yaml")
    with pytest.raises(UsageError, match="at most 4096"):
        session.start_still({"image.width": "5000"})


def _fetch(url, body=None):
    data = None if body is None else json.dumps(body).encode()
    try:
        with urllib.request.urlopen(urllib.request.Request(url, data=data), timeout=30) as reply:
            return reply.status, reply.read()
    except urllib.error.HTTPError as error:
        return error.code, error.read()


def test_the_server_answers_only_its_routes(session):
    server = make_server(session)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        url = server_url(server)
        assert url.startswith("http://127.0.0.1:")
        status, page = _fetch(url)
        assert status == 200 and b"nullray composer" in page
        status, state = _fetch(url + "state")
        assert [c["key"] for c in json.loads(state)["controls"]] == list(CONTROL_KEYS)
        for path in ("static/..%2f..%2fsession.py", "static/session.py", "output/trial.yaml",
                     "../../etc/passwd"):
            assert _fetch(url + path)[0] in (404, 422), path
        status, reply = _fetch(url + "preview", {"settings": {"black_hole.spin": "2"}})
        assert status == 422 and json.loads(reply) == {
            "error": "black_hole.spin = 2 is not allowed; expected -1 < spin < 1",
            "key": "black_hole.spin"}
        assert _fetch(url + "preview", {"settings": {}, "side": 4096})[0] == 422
    finally:
        server.shutdown()
        server.server_close()


def test_the_command_prints_its_url_serves_and_stops_cleanly_on_ctrl_c(scene_file, tmp_path):
    import signal
    import subprocess
    import sys

    process = subprocess.Popen(
        [sys.executable, "-m", "render", "compose", str(scene_file), "--output-dir",
         str(tmp_path / "out")], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        line = process.stdout.readline()
        assert line.startswith("composer at http://127.0.0.1:"), line
        url = line.split()[2]
        assert _fetch(url + "state")[0] == 200
        process.send_signal(signal.SIGINT)
        _, errors = process.communicate(timeout=60)
    finally:
        if process.poll() is None:
            process.kill()
    assert process.returncode == 130
    assert errors.strip().splitlines()[-1].startswith("nullray: interrupted")
    assert not (tmp_path / "out").exists()   # nothing written without being asked


def test_a_bad_port_is_one_line_with_status_2(capsys):
    from render.cli import main

    assert main(["compose", "--port", "70000"]) == 2
    assert capsys.readouterr().err == ("nullray: error: --port 70000 is not allowed; "
                                       "expected 0 to 65535\n")


def test_an_overlong_value_is_refused_not_cut(session):
    with pytest.raises(SceneError, match="name is given 300 characters; at most 200"):
        session.scene_for({"name": "x" * 300})
