"""Input files the user names: special files, caps, contents never echoed, where they may be.

A scene file, an emission profile (CSV) and a sky panorama are read only when
they are regular files (a FIFO, /dev/zero, a socket or a folder is refused in
one line without blocking), with a byte cap, a row cap for the CSV, and a
panorama's decoded size checked from its header against tracing.memory_budget
before any pixel is decoded.  A scene file's side files must lie in its folder
unless --allow-outside-files; a file named with --set is the user's own.
"""

import os
import socket
import subprocess
import sys
from pathlib import Path

import pytest

from render import default_scene
from render.errors import SceneError
from render.light.emission import MAX_PROFILE_BYTES, MAX_PROFILE_ROWS, read_profile_table
from render.light.observing import prepare_observation
from render.imaging.sensor import prepare_sky
from render.scene.loader import load_scene

from conftest import run_cli
from test_scene import assert_one_line_error

REPO = Path(__file__).resolve().parents[1]
PROFILE = b"r,emissivity\n2,1\n30,0.5\n"


def _nullray(args, cwd, timeout=120):
    # A real process: a FIFO opened for a blocking read would hang it, so the
    # timeout is the failure (no timing is asserted).
    env = dict(os.environ, PYTHONPATH=str(REPO))
    return subprocess.run([sys.executable, "-m", "render", *map(str, args)], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=timeout)


def _assert_one_line(done, fragments):
    assert done.returncode == 2, done.stderr
    assert done.stdout == ""
    assert done.stderr.startswith("nullray: error: ") and done.stderr.count("\n") == 1, done.stderr
    for fragment in fragments:
        assert fragment in done.stderr, (fragment, done.stderr)


def test_fifo_scene_file_is_refused_without_blocking(tmp_path):
    fifo = tmp_path / "scene.yaml"
    os.mkfifo(fifo)
    done = _nullray(["still", fifo, "--output-dir", tmp_path / "out"], tmp_path)
    _assert_one_line(done, ["scene.yaml", "FIFO", "not a regular file"])
    assert not (tmp_path / "out").exists()


def test_fifo_profile_and_panorama_are_refused_without_blocking(tmp_path):
    os.mkfifo(tmp_path / "table.csv")
    os.mkfifo(tmp_path / "sky.png")
    (tmp_path / "a.yaml").write_text("emission:\n  law: profile\n  profile: table.csv\n")
    (tmp_path / "b.yaml").write_text("sky:\n  backdrop: image\n  image: sky.png\n")
    for scene, name in (("a.yaml", "table.csv"), ("b.yaml", "sky.png")):
        done = _nullray(["still", scene, "--output-dir", "out"], tmp_path)
        _assert_one_line(done, [name, "FIFO"])
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("key,extra", [("emission.profile", "emission.law=profile"),
                                       ("sky.image", "sky.backdrop=image")])
def test_dev_zero_side_file_is_refused(tmp_path, capsys, no_tracing, key, extra):
    out = tmp_path / "out"
    status, stdout, err = run_cli(["still", "--set", extra, "--set", f"{key}=/dev/zero",
                                   "--output-dir", out], capsys)
    assert_one_line_error(status, stdout, err, [key if key == "sky.image" else "/dev/zero",
                                                "character device"])
    assert not out.exists()


def test_dev_zero_and_socket_as_scene_file_are_refused(tmp_path, capsys, no_tracing):
    server = socket.socket(socket.AF_UNIX)
    server.bind(str(tmp_path / "s.yaml"))
    try:
        for path, kind in (("/dev/zero", "character device"), (tmp_path / "s.yaml", "socket"),
                           (tmp_path, "folder")):
            status, out, err = run_cli(["still", path, "--output-dir", tmp_path / "out"], capsys)
            assert_one_line_error(status, out, err, [kind])
    finally:
        server.close()


def test_a_million_row_csv_is_refused_by_its_size(tmp_path):
    table = tmp_path / "big.csv"
    with open(table, "w") as handle:
        handle.write("r,emissivity\n")
        handle.writelines(f"{1 + i * 1e-4:.6f},1\n" for i in range(1_000_000))
    assert table.stat().st_size > MAX_PROFILE_BYTES
    with pytest.raises(ValueError, match=f"at most {MAX_PROFILE_BYTES} bytes"):
        read_profile_table(table)


def test_a_csv_under_the_byte_cap_with_too_many_rows_is_refused(tmp_path):
    table = tmp_path / "rows.csv"
    table.write_text("1,1\n" * (MAX_PROFILE_ROWS + 1))
    assert table.stat().st_size < MAX_PROFILE_BYTES
    with pytest.raises(ValueError, match=f"more than {MAX_PROFILE_ROWS} rows"):
        read_profile_table(table)
    table.write_text("".join(f"{i + 1},1\n" for i in range(MAX_PROFILE_ROWS)))
    r, _ = read_profile_table(table)   # exactly the cap is fine
    assert len(r) == MAX_PROFILE_ROWS


def test_side_file_contents_are_never_echoed(tmp_path, capsys, no_tracing):
    # Like /etc/passwd: a file that is not a table, whose first line is private.
    private = tmp_path / "passwd"
    private.write_text("root:x:0:0:PRIVATE-WORD:/root:/bin/sh\nsecond,PRIVATE-TOO\n")
    status, out, err = run_cli(["still", "--set", "emission.law=profile", "--set",
                                f"emission.profile={private}", "--output-dir",
                                tmp_path / "out"], capsys)
    assert_one_line_error(status, out, err, [str(private), "line 1", "two numbers"])
    assert "PRIVATE" not in err and "root:x" not in err


def test_large_panorama_is_refused_from_its_header_before_decoding(tmp_path, monkeypatch):
    from PIL import Image

    # 11312 x 5656 one-bit pixels deflate to a small file; decoded to float RGB they
    # would take 64e6 x 24 bytes = 1.5 GB.
    Image.new("1", (11312, 5656)).save(tmp_path / "sky.png")
    assert (tmp_path / "sky.png").stat().st_size < 1_000_000

    def no_decoding(*args, **kwargs):
        raise AssertionError("the panorama was decoded before its size was checked")

    monkeypatch.setattr(Image.Image, "load", no_decoding)
    monkeypatch.setattr(Image.Image, "convert", no_decoding)
    scene = default_scene(**{"sky.backdrop": "image", "sky.image": str(tmp_path / "sky.png")})
    with pytest.raises(SceneError) as refused:
        prepare_sky(scene)
    message = str(refused.value)
    assert "\n" not in message
    for fragment in ("11312 x 5656", "tracing.memory_budget = 2 GB", "GB decoded"):
        assert fragment in message, message


def test_a_panorama_within_the_budget_is_read(tmp_path):
    from PIL import Image

    Image.new("RGB", (64, 32), (255, 0, 0)).save(tmp_path / "sky.png")
    scene = default_scene(**{"sky.backdrop": "image", "sky.image": str(tmp_path / "sky.png")})
    sky = prepare_sky(scene)
    # sRGB 255 decodes to linear 1 and 0 to 0 (IEC 61966-2-1).
    assert sky.panorama.shape == (32, 64, 3)
    assert sky.panorama[..., 0].min() == 1.0 and sky.panorama[..., 1].max() == 0.0


def _scene_with_outside_table(tmp_path):
    (tmp_path / "tables").mkdir(parents=True)
    (tmp_path / "tables" / "disk.csv").write_bytes(PROFILE)
    (tmp_path / "scenes").mkdir()
    scene = tmp_path / "scenes" / "s.yaml"
    scene.write_text("emission:\n  law: profile\n  profile: ../tables/disk.csv\n")
    return scene


def test_scene_side_file_outside_its_folder_is_refused(tmp_path, capsys, no_tracing):
    scene = _scene_with_outside_table(tmp_path)
    status, out, err = run_cli(["still", scene, "--output-dir", tmp_path / "out"], capsys)
    assert_one_line_error(status, out, err, ["emission.profile", "'../tables/disk.csv'",
                                             "outside the scene file's folder",
                                             "--allow-outside-files"])
    assert not (tmp_path / "out").exists()
    # The same through an absolute path and through a symbolic link inside the folder.
    for name in (str(tmp_path / "tables" / "disk.csv"), "link.csv"):
        if name == "link.csv":
            (scene.parent / "link.csv").symlink_to(tmp_path / "tables" / "disk.csv")
        scene.write_text(f"emission:\n  law: profile\n  profile: {name}\n")
        with pytest.raises(SceneError, match="outside the scene file's folder"):
            prepare_observation(load_scene(scene))


def test_outside_side_file_is_read_when_the_user_allows_it(tmp_path):
    scene = load_scene(_scene_with_outside_table(tmp_path), allow_outside_files=True)
    assert prepare_observation(scene).law.radii == (2.0, 30.0)
    from render.api import open_scene

    opened = open_scene(_scene_with_outside_table(tmp_path / "again"),
                               allow_outside_files=True)
    assert prepare_observation(opened).law.values == (1.0, 0.5)


def test_side_file_named_with_set_is_read_from_the_current_folder(tmp_path, monkeypatch):
    scene_file = _scene_with_outside_table(tmp_path)
    work = tmp_path / "work"
    work.mkdir()
    (work / "mine.csv").write_bytes(b"2,3\n40,1\n")
    monkeypatch.chdir(work)
    scene = load_scene(scene_file, ["emission.profile=mine.csv"])
    assert scene.side_file("emission.profile") == Path.cwd() / "mine.csv"   # absolute, for messages
    assert prepare_observation(scene).law.radii == (2.0, 40.0)
