"""The command line: exit statuses, overrides, the no-silent-overwrite rule, output contents.

Images are 32x16 (non-square, so that a swapped width and height shows) to keep
the suite fast.  Most runs call ``render.cli.main`` in-process; three go through
a real ``python -m render`` subprocess to check the exit status and that no
traceback reaches the user.
"""

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from render.cli import EXIT_BAD_INPUT, main
from render.scene.keys import KEYS
from render.scene.loader import load_scene, scene_from_dict

from conftest import run_cli  # noqa: E402  (shared test helpers)

REPO = Path(__file__).resolve().parents[1]
WIDTH, HEIGHT, ORDERS = 32, 16, 3
SMALL = [f"--set=image.width={WIDTH}", f"--set=image.height={HEIGHT}",
         f"--set=disk.orders={ORDERS}"]




# --- real subprocesses --------------------------------------------------------------------

SUBPROCESS_CASES = [
    ("unknown-key", "black_hole:\n  spn: 0.5\n", [], ["black_hole.spn", "black_hole.spin"]),
    ("python-object-tag", "black_hole: !!python/object/apply:os.system ['touch pwned']\n", [],
     ["python/object/apply"]),
    ("set-without-equals", "black_hole:\n  spin: 0.5\n", ["--set", "observer.inclination"],
     ["observer.inclination", "dotted.key=value"]),
]


@pytest.mark.parametrize("text,extra,fragments", [c[1:] for c in SUBPROCESS_CASES],
                         ids=[c[0] for c in SUBPROCESS_CASES])
def test_python_m_render_exits_2_without_traceback(tmp_path, text, extra, fragments):
    scene = tmp_path / "scene.yaml"
    scene.write_text(text, encoding="utf-8")
    out_dir = tmp_path / "out"
    done = subprocess.run(
        [sys.executable, "-m", "render", "still", str(scene), "--output-dir", str(out_dir),
         *extra], capture_output=True, text=True, cwd=tmp_path, timeout=300)
    assert done.returncode == 2
    assert done.stdout == ""
    assert "Traceback" not in done.stderr
    lines = done.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith("nullray: error: "), done.stderr
    for fragment in fragments:
        assert fragment in lines[0]
    assert not out_dir.exists()
    # The tag must never be executed (it would create this file).
    assert not (tmp_path / "pwned").exists()


# --- one small render shared by the content checks ------------------------------------------


@pytest.fixture(scope="module")
def rendered(tmp_path_factory):
    """Render the default camera scene at 32x16 through the CLI; return (folder, stdout)."""
    folder = tmp_path_factory.mktemp("still")
    status = main(["still", *SMALL, "--set", "name=small", "--set", "black_hole.spin=0.7",
                   "--output-dir", str(folder)])
    assert status == 0
    return folder


def test_png_is_8_bit_with_the_image_size(rendered):
    with Image.open(rendered / "small.png") as image:
        assert image.format == "PNG"
        assert image.size == (WIDTH, HEIGHT)  # PIL reports (width, height)
        assert image.mode in ("L", "RGB")  # 8 bits per channel
        scene_text = image.text["nullray-scene"]
        pixels = np.asarray(image)
    assert pixels.dtype == np.uint8
    assert scene_from_dict(json.loads(scene_text)).values["black_hole.spin"] == 0.7


def test_npz_holds_every_map_with_its_shape(rendered):
    with np.load(rendered / "small.npz") as data:
        names = set(data.files)
        for name in ("r", "phi", "g", "delay"):
            assert data[name].shape == (ORDERS, HEIGHT, WIDTH), name
            assert data[name].dtype.kind == "f", name
        for name in ("fate", "alpha", "beta", "intensity"):
            assert data[name].shape == (HEIGHT, WIDTH), name
        assert set(np.unique(data["fate"])) <= {0, 1, 2, 3}
        # A crossing that does not exist has no redshift and no delay either.
        missing = np.isnan(data["r"])
        assert np.all(np.isnan(data["g"][missing])) and np.all(np.isnan(data["delay"][missing]))
        assert np.all(data["intensity"] >= 0.0)
        with Image.open(rendered / "small.png") as image:
            assert np.array_equal(np.asarray(image), data["pixels"])
    assert {"r", "phi", "g", "delay", "fate", "alpha", "beta", "intensity",
            "metadata"} <= names


def test_npz_pixel_grid_follows_the_field_of_view_definition(rendered):
    # README: square pixels, full width field_of_view (default 40 M), row 0 at the top,
    # alpha to the right; pixel centres at (i + 1/2 - W/2) * fov / W (common practice).
    fov = KEYS["observer.field_of_view"].default
    with np.load(rendered / "small.npz") as data:
        alpha, beta = data["alpha"], data["beta"]
    step = fov / WIDTH
    expected_x = (np.arange(WIDTH) + 0.5 - WIDTH / 2) * step
    expected_y = (HEIGHT / 2 - np.arange(HEIGHT) - 0.5) * step
    np.testing.assert_allclose(alpha[0], expected_x, rtol=0, atol=1e-12)
    np.testing.assert_allclose(beta[:, 0], expected_y, rtol=0, atol=1e-12)


def test_npz_metadata_round_trips_into_the_same_scene(rendered):
    with np.load(rendered / "small.npz") as data:
        metadata = json.loads(str(data["metadata"]))
    echoed = scene_from_dict(metadata["scene"])
    expected = load_scene(REPO / "scenes" / "default.yaml", [
        f"image.width={WIDTH}", f"image.height={HEIGHT}", f"disk.orders={ORDERS}",
        "name=small", "black_hole.spin=0.7"])
    assert echoed.values == expected.values
    assert metadata["program"] == "nullray"


def test_default_output_folder_and_name(tmp_path, monkeypatch, capsys):
    # `nullray still` with no scene writes outputs/default.png and outputs/default.npz.
    monkeypatch.chdir(tmp_path)
    status, out, err = run_cli(["still", *SMALL], capsys)
    assert status == 0 and err == ""
    assert sorted(p.name for p in (tmp_path / "outputs").iterdir()) == ["default.npz",
                                                                         "default.png"]
    assert "wrote outputs/default.png" in out and "wrote outputs/default.npz" in out


def test_scene_file_name_names_the_outputs(tmp_path, capsys):
    scene = tmp_path / "aurel-b.yaml"
    scene.write_text("black_hole:\n  spin: -0.4\noutput:\n  npz: false\n", encoding="utf-8")
    status, out, err = run_cli(["still", scene, *SMALL, "--quiet", "--output-dir",
                                tmp_path / "out"], capsys)
    assert status == 0 and out == "" and err == ""
    assert [p.name for p in (tmp_path / "out").iterdir()] == ["aurel-b.png"]


def test_set_overrides_reach_the_outputs(tmp_path, capsys):
    status, _, _ = run_cli(["still", *SMALL, "--set", "observer.placement=distant",
                            "--set", "observer.inclination=17.5", "--set", "output.png=false",
                            "--set", "name=tilted", "--output-dir", tmp_path], capsys)
    assert status == 0
    assert [p.name for p in tmp_path.iterdir()] == ["tilted.npz"]
    with np.load(tmp_path / "tilted.npz") as data:
        scene = json.loads(str(data["metadata"]))["scene"]
    assert scene["observer"]["placement"] == "distant"
    assert scene["observer"]["inclination"] == 17.5
    assert scene["output"]["png"] is False


def test_later_set_wins(tmp_path, capsys):
    status, _, _ = run_cli(["still", *SMALL, "--set", "black_hole.spin=0.2", "--set",
                            "black_hole.spin=-0.6", "--output-dir", tmp_path], capsys)
    assert status == 0
    with np.load(tmp_path / "default.npz") as data:
        assert json.loads(str(data["metadata"]))["scene"]["black_hole"]["spin"] == -0.6


def test_existing_output_is_not_overwritten(tmp_path, capsys, no_tracing):
    png = tmp_path / "default.png"
    png.write_bytes(b"the user's own file")
    before = png.stat()
    status, out, err = run_cli(["still", *SMALL, "--output-dir", tmp_path], capsys)
    assert status == EXIT_BAD_INPUT and out == ""
    assert err.count("\n") == 1 and str(png) in err and "--overwrite" in err
    assert png.read_bytes() == b"the user's own file"
    assert png.stat().st_mtime_ns == before.st_mtime_ns
    # Nothing else was written either (the NPZ did not exist and still does not).
    assert [p.name for p in tmp_path.iterdir()] == ["default.png"]


def test_overwrite_replaces_existing_outputs(tmp_path, capsys):
    png = tmp_path / "default.png"
    png.write_bytes(b"old")
    status, _, _ = run_cli(["still", *SMALL, "--overwrite", "--output-dir", tmp_path], capsys)
    assert status == 0
    with Image.open(png) as image:
        assert image.size == (WIDTH, HEIGHT)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["default.npz", "default.png"]


def test_no_temporary_file_is_left_after_a_run(tmp_path, capsys):
    status, _, _ = run_cli(["still", *SMALL, "--output-dir", tmp_path], capsys)
    assert status == 0
    names = [p.name for p in tmp_path.iterdir()]
    assert sorted(names) == ["default.npz", "default.png"]
    assert not any(name.endswith(".part") for name in names)


def test_output_dir_that_is_a_file_is_refused_before_tracing(tmp_path, capsys, no_tracing):
    blocker = tmp_path / "taken"
    blocker.write_text("not a folder")
    status, out, err = run_cli(["still", *SMALL, "--output-dir", blocker], capsys)
    assert status == EXIT_BAD_INPUT and out == ""
    assert err.count("\n") == 1 and "--output-dir" in err and "taken" in err
    assert blocker.read_text() == "not a folder"


def test_keys_prints_every_key(capsys):
    status, out, err = run_cli(["keys"], capsys)
    assert status == 0 and err == ""
    for key, spec in KEYS.items():
        assert f"`{key}`" in out, key
        row = next(line for line in out.splitlines() if f"`{key}`" in line)
        assert spec.unit in row and spec.allowed in row


def test_readme_documents_every_key():
    # The README's scene reference is pasted from `python -m render keys`: this keeps it
    # from drifting when keys are added or changed.
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    rows = {line for line in readme.splitlines() if line.startswith("| `")}
    for key, spec in KEYS.items():
        row = next((line for line in rows if line.startswith(f"| `{key}` |")), None)
        assert row is not None, f"README.md lacks the scene key {key}"
        assert spec.allowed in row, f"README.md's row for {key} is out of date"


def test_readme_setup_commands_match_ci():
    # The README's two set-up commands: the second is exactly what .ci/run executes.
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    ci = (REPO / ".ci" / "run").read_text(encoding="utf-8")
    # The first installs everything the README's examples use (the `all` extra), in one step.
    assert "pip install '.[all]' && nullray still" in readme
    assert "pip install '.[test]' && python -m pytest" in readme
    assert "pip install '.[test]' && python -m pytest" in ci.splitlines()


def test_unknown_command_is_a_usage_error(capsys):
    with pytest.raises(SystemExit) as info:
        main(["shine"])
    assert info.value.code == 2
    assert "Traceback" not in capsys.readouterr().err


def test_version(capsys):
    with pytest.raises(SystemExit) as info:
        main(["--version"])
    assert info.value.code == 0
    assert capsys.readouterr().out.startswith("nullray ")


def test_outputs_get_ordinary_permissions(tmp_path, capsys):
    # Files are readable by others as with a plain open(), not mkstemp's private 0600.
    old = os.umask(0o022)
    try:
        status, _, _ = run_cli(["still", *SMALL, "--output-dir", tmp_path], capsys)
    finally:
        os.umask(old)
    assert status == 0
    assert (tmp_path / "default.png").stat().st_mode & 0o777 == 0o644


def test_readme_python_snippet_runs(tmp_path, monkeypatch, capsys):
    # The README's API tour must keep working: run its python block as a user would.
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    blocks = readme.split("```python\n")
    assert len(blocks) == 2, "expected one python block in README.md"
    code = blocks[1].split("```", 1)[0]
    monkeypatch.chdir(tmp_path)
    exec(compile(code, "README.md", "exec"), {"__name__": "readme"})
    out = capsys.readouterr().out.splitlines()
    assert out[0] == "(64, 64) (2, 64, 64)"
    assert sorted(p.name for p in (tmp_path / "outputs").iterdir()) == ["api-demo.npz",
                                                                        "api-demo.png"]
    # Schwarzschild ISCO 6 M; r_+ = 1 + sqrt(1 - 0.81) (Bardeen, Press & Teukolsky 1972).
    assert out[2].startswith("6.0 (1.43588989")


def test_existing_extra_product_is_not_overwritten(tmp_path, capsys, no_tracing):
    # The no-overwrite check covers every file a still would write, not only PNG and NPZ.
    fits = tmp_path / "default.fits"
    fits.write_bytes(b"SIMPLE  =                    T")
    status, out, err = run_cli(["still", *SMALL, "--set", "output.fits=true",
                                "--output-dir", tmp_path], capsys)
    assert status == EXIT_BAD_INPUT and str(fits) in err and err.count("\n") == 1
    assert [p.name for p in tmp_path.iterdir()] == ["default.fits"]
    assert fits.read_bytes() == b"SIMPLE  =                    T"


def test_interrupt_exits_130_and_writes_nothing(tmp_path, capsys, monkeypatch):
    import render.api

    def interrupted(scene, *args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(render.api, "render_still", interrupted)
    status, out, err = run_cli(["still", *SMALL, "--output-dir", tmp_path / "out"], capsys)
    assert status == 130  # 128 + SIGINT (common practice for shells)
    assert err.count("\n") == 1 and "interrupted" in err and "Traceback" not in err
    out_dir = tmp_path / "out"
    assert not out_dir.exists() or not any(out_dir.iterdir())


def test_a_scene_file_name_that_cannot_name_outputs_is_refused(tmp_path, capsys, no_tracing):
    # The file's stem names the outputs by default; "my scene" would write "my scene.png".
    scene = tmp_path / "my scene.yaml"
    scene.write_text("black_hole:\n  spin: 0.5\n", encoding="utf-8")
    out_dir = tmp_path / "out"
    status, out, err = run_cli(["still", scene, "--output-dir", out_dir], capsys)
    assert status == EXIT_BAD_INPUT
    assert err.count("\n") == 1 and "'my scene'" in err and "--set name=" in err
    assert not out_dir.exists()


def test_naming_the_outputs_makes_any_scene_file_name_usable(tmp_path, capsys):
    scene = tmp_path / "my scene.yaml"
    scene.write_text("black_hole:\n  spin: 0.5\n", encoding="utf-8")
    out_dir = tmp_path / "out"
    status, _, _ = run_cli(["still", scene, "--output-dir", out_dir, *SMALL,
                            "--set", "name=my-scene", "--quiet"], capsys)
    assert status == 0 and (out_dir / "my-scene.png").is_file()


@pytest.mark.parametrize("command", ["still", "measure", "sequence"])
def test_an_empty_output_dir_is_refused(tmp_path, capsys, no_tracing, monkeypatch, command):
    monkeypatch.chdir(tmp_path)
    scene = tmp_path / "scene.yaml"
    scene.write_text("animation:\n  frames: 2\n", encoding="utf-8")
    status, out, err = run_cli([command, scene, "--output-dir", ""], capsys)
    assert status == EXIT_BAD_INPUT
    assert err.count("\n") == 1 and "--output-dir ''" in err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["scene.yaml"]


def test_a_still_says_that_it_ignores_keyframes(tmp_path, capsys):
    import render
    from render.errors import NullrayWarning

    keyframes = ["--set", "animation.keyframes=[{frame: 0, black_hole.spin: 0.1}, "
                 "{frame: 4, black_hole.spin: 0.8}]"]
    status, out, err = run_cli(["still", *SMALL, *keyframes, "--output-dir", tmp_path], capsys)
    assert status == 0
    lines = [line for line in err.splitlines() if "keyframes" in line]
    assert len(lines) == 1 and lines[0].startswith("nullray: warning:")
    with pytest.warns(NullrayWarning, match="keyframes are ignored"):
        result = render.render_still(render.default_scene(
            ["animation.keyframes=[{frame: 0, black_hole.spin: 0.1}]"],
            **{"image.width": 8, "image.height": 8}))
    assert any("keyframes" in w for w in result.metadata["observing"]["warnings"])
