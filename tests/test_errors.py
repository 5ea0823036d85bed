"""render/errors.py: each error reaches the user as one line with the right exit status.

Failures while running (exit 1): a write that fails part-way (a full disk) and a worker
process that dies.  Refusals before any work (exit 2): every other error class, each
through the command-line path where it is used.  The statuses and the one-line rule
are the house convention (DEVELOPERS.md, "Errors"; render/errors.py).
"""

import errno
import multiprocessing
import os
import subprocess
from concurrent.futures import ProcessPoolExecutor

import pytest

import render.cli as cli
import render.parallel
import render.output.files as files
from render.errors import (BAD_INPUT_ERRORS, RUN_ERRORS, OutputExists, OutputFolderError,
                           OutputWriteError, SceneError, SchedulerError, SequenceFolderError,
                           TableIncomplete, UsageError, WorkerLostError)
from render.output.files import atomic_write
from render.parallel import _results_in_order

from conftest import run_cli  # noqa: E402  (shared test helpers)

SMALL = ["--set", "image.width=16", "--set", "image.height=16", "--set", "observer.placement=distant",
         "--set", "disk.orders=1"]


def no_space(handle):
    """A writer that gets some bytes out and then finds the disk full."""
    handle.write(b"x" * 1000)
    raise OSError(errno.ENOSPC, "No space left on device")


def leftovers(folder):
    return sorted(p.name for p in folder.iterdir())


def assert_one_error_line(status, expected_status, err, *fragments):
    assert status == expected_status, err
    assert "Traceback" not in err
    lines = err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("nullray: error: "), err
    for fragment in fragments:
        assert fragment in lines[0], (fragment, lines[0])


# --- a write that fails: ENOSPC ----------------------------------------------------------------

def test_a_full_disk_raises_output_write_error_and_leaves_nothing(tmp_path):
    target = tmp_path / "image.png"
    with pytest.raises(OutputWriteError) as info:
        atomic_write(target, no_space)
    message = str(info.value)
    assert "\n" not in message
    assert str(target) in message and "No space left on device" in message
    assert info.value.__cause__.errno == errno.ENOSPC   # the system's reason is kept
    assert leftovers(tmp_path) == []                    # no final file, no .part file


def test_a_full_disk_does_not_touch_an_existing_file_being_overwritten(tmp_path):
    target = tmp_path / "image.png"
    target.write_bytes(b"the old image")
    with pytest.raises(OutputWriteError):
        atomic_write(target, no_space, overwrite=True)
    assert target.read_bytes() == b"the old image"
    assert leftovers(tmp_path) == ["image.png"]


def test_other_errors_of_the_writer_pass_through_unchanged(tmp_path):
    # Only OSErrors become OutputWriteError; a bug (here a ValueError) keeps its type,
    # and the temporary file is removed all the same.
    def broken(handle):
        raise ValueError("a bug")

    with pytest.raises(ValueError, match="a bug"):
        atomic_write(tmp_path / "x.npz", broken)
    assert leftovers(tmp_path) == []


def test_full_disk_through_the_command_line_exits_1_with_one_line(tmp_path, capsys, monkeypatch):
    original = files.atomic_write

    def failing_atomic_write(path, write, overwrite=False):
        def write_then_fail(handle):
            write(handle)        # the real bytes go out, then the disk is full
            raise OSError(errno.ENOSPC, "No space left on device")

        return original(path, write_then_fail, overwrite)

    # The PNG and NPZ writers of render.output.files call atomic_write through the module.
    monkeypatch.setattr(files, "atomic_write", failing_atomic_write)
    out = tmp_path / "out"
    status, _, err = run_cli(["still", *SMALL, "--quiet", "--output-dir", out], capsys)
    assert_one_error_line(status, 1, err, "No space left on device", "default.png")
    assert leftovers(out) == []


@pytest.fixture
def tiny_filesystem(tmp_path):
    """A 64 KiB tmpfs mounted for the test (root only); unmounted afterwards."""
    if os.geteuid() != 0:
        pytest.skip("mounting a small tmpfs needs root")
    mount_point = tmp_path / "small"
    mount_point.mkdir()
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=64k", "tmpfs", str(mount_point)],
                          capture_output=True, text=True)
    if done.returncode != 0:
        pytest.skip(f"mounting a tmpfs is not permitted here: {done.stderr.strip()}")
    try:
        yield mount_point
    finally:
        subprocess.run(["umount", str(mount_point)], check=True)


def test_a_real_full_filesystem(tiny_filesystem):
    target = tiny_filesystem / "big.bin"
    with pytest.raises(OutputWriteError) as info:
        atomic_write(target, lambda handle: handle.write(os.urandom(256 * 1024)))
    assert "\n" not in str(info.value) and "No space left on device" in str(info.value)
    assert leftovers(tiny_filesystem) == []
    # The space is given back: a small file fits afterwards.
    atomic_write(tiny_filesystem / "small.txt", lambda handle: handle.write(b"ok"))
    assert leftovers(tiny_filesystem) == ["small.txt"]


def test_a_real_full_filesystem_through_the_command_line(tiny_filesystem, capsys):
    # A 128 x 128 still's compressed NPZ (float maps, ~0.5 MB raw) does not fit in 64 KiB,
    # whatever fits before it.
    args = ["still", "--set", "image.width=128", "--set", "image.height=128",
            "--set", "observer.placement=distant", "--set", "disk.orders=1", "--quiet",
            "--output-dir", tiny_filesystem]
    status, _, err = run_cli(args, capsys)
    assert_one_error_line(status, 1, err, "No space left on device")
    names = leftovers(tiny_filesystem)
    assert "default.npz" not in names and not [n for n in names if n.endswith(".part")]


# --- a worker that dies ------------------------------------------------------------------------

def test_a_dead_pool_worker_becomes_worker_lost_error():
    context = multiprocessing.get_context("spawn")   # as render.parallel's pool
    with ProcessPoolExecutor(max_workers=1, mp_context=context) as pool:
        futures = [pool.submit(os._exit, 3), pool.submit(pow, 2, 10)]
        results = _results_in_order(futures)
        with pytest.raises(WorkerLostError) as info:
            next(results)
    message = str(info.value)
    assert "\n" not in message and "worker process died" in message and "after 0 results" in message
    assert all(f.done() for f in futures)


def test_a_dead_worker_through_the_command_line_exits_1(tmp_path, capsys, monkeypatch):
    def lose_the_worker(job, *args, **kwargs):
        raise WorkerLostError("a worker process died (killed, or out of memory) after 0 "
                              "results; what finished is kept, rerun to resume")

    # render.parallel.frame_results renders frames with render.film.frame.render_frame.
    monkeypatch.setattr(render.parallel, "render_frame", lose_the_worker)
    scene = write_sequence_scene(tmp_path)
    status, _, err = run_cli(["sequence", scene, "--workers", "1", "--quiet",
                              "--output-dir", tmp_path / "out"], capsys)
    assert_one_error_line(status, 1, err, "worker process died")


# --- refusals before any work: exit 2, one line --------------------------------------------------

def write_sequence_scene(folder, name="film"):
    path = folder / f"{name}.yaml"
    path.write_text("image:\n  width: 16\n  height: 16\nobserver:\n  placement: distant\n"
                    "animation:\n  frames: 2\n", encoding="utf-8")
    return path


def scene_error(tmp_path):
    return ["still", "--set", "black_hole.spin=2", "--output-dir", tmp_path / "out"], \
        ["black_hole.spin = 2"]


def output_exists(tmp_path):
    (tmp_path / "out").mkdir()
    (tmp_path / "out" / "default.png").write_bytes(b"keep")
    return ["still", *SMALL, "--output-dir", tmp_path / "out"], ["default.png exists"]


def output_folder(tmp_path):
    (tmp_path / "out").write_text("a file, not a folder")
    return ["still", *SMALL, "--output-dir", tmp_path / "out"], ["--output-dir"]


def usage_workers(tmp_path):
    return ["sequence", write_sequence_scene(tmp_path), "--workers", "0",
            "--output-dir", tmp_path / "out"], ["--workers 0", "N >= 1"]


def sequence_folder(tmp_path):
    (tmp_path / "out" / "film").mkdir(parents=True)
    (tmp_path / "out" / "film" / "notes.txt").write_text("someone else's")
    return ["sequence", write_sequence_scene(tmp_path), "--output-dir", tmp_path / "out"], \
        ["not a nullray sequence folder"]


def scheduler(tmp_path):
    # Port 9 (discard) on this machine's loopback: nothing listens, the connection is refused.
    return ["still", *SMALL, "--scheduler", "tcp://127.0.0.1:9", "--output-dir",
            tmp_path / "out"], ["cannot be reached"]


REFUSALS = {SceneError: scene_error, OutputExists: output_exists,
            OutputFolderError: output_folder, UsageError: usage_workers,
            SequenceFolderError: sequence_folder, SchedulerError: scheduler}


def test_every_error_class_has_a_command_line_case():
    # Every refusal class has a row below, and the run errors are tested above.
    assert set(REFUSALS) == set(BAD_INPUT_ERRORS)
    assert set(RUN_ERRORS) == {OutputWriteError, WorkerLostError, TableIncomplete}


def test_a_table_with_a_failed_point_exits_1_with_one_line(tmp_path, capsys, monkeypatch):
    # A grid point that fails (here: made to) is one warning line, then one error line,
    # exit status 1, and the finished point is kept for the next run.
    from render.tables import grid

    real = grid.point_spectrum

    def fail_at_40(observation, scene):
        if scene["observer.inclination"] == 40.0:
            raise RuntimeError("lost")
        return real(observation, scene)

    monkeypatch.setattr(grid, "point_spectrum", fail_at_40)
    scene = tmp_path / "scene.yaml"
    scene.write_text("name: t\nobserver:\n  placement: distant\nobserving:\n  mode: line\n"
                     "  sampling_tolerance: 0.05\ndisk:\n  orders: 1\n")
    status, out, err = run_cli(["table", scene, "--vary", "observer.inclination=20:40:2",
                                "--workers", "1", "--output-dir", tmp_path / "out", "--quiet"],
                               capsys)
    lines = err.strip().split("\n")
    assert status == 1 and "Traceback" not in err
    assert lines[0].startswith("nullray: warning: grid point") and "lost" in lines[0]
    assert lines[1].startswith("nullray: error: 1 of 2 grid points failed") and len(lines) == 2
    assert len(list((tmp_path / "out" / "t_table_points").glob("point_*.npz"))) == 1


@pytest.mark.parametrize("error", list(REFUSALS), ids=lambda e: e.__name__)
def test_refusals_exit_2_with_one_line_before_any_tracing(error, tmp_path, capsys, no_tracing,
                                                          monkeypatch):
    args, fragments = REFUSALS[error](tmp_path)
    raised = []
    original = cli._one_line_error

    def record(exc, status):
        raised.append(type(exc))
        return original(exc, status)

    monkeypatch.setattr(cli, "_one_line_error", record)
    status, _, err = run_cli(args, capsys)
    assert_one_error_line(status, 2, err, *fragments)
    assert raised == [error]   # the class this row is about, not another refusal
