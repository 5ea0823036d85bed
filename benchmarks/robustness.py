"""Robustness measured: hostile inputs, interrupts, concurrency, a full disk, random scenes, lost workers.

Prints one line of JSON on stdout (progress on stderr).  Every case counts as
handled only when nothing is lost and no traceback is shown:

* ``hostile``: scene files and side files made to hurt (special files, huge
  CSVs, bad UTF-8, deep nesting, YAML tags and aliases, huge numbers, names
  that leave the folder, outside side files, ...), each run as ``nullray still``
  in a fresh process with a timeout.  Handled: exit status 2, one
  ``nullray: error:`` line, no traceback, no output folder made, no file
  contents echoed.
* ``interrupts``: SIGINT, SIGTERM and SIGKILL sent to real renders while they
  trace a tiled still and while they write the NPZ.  Clean: status 130 / 143
  with one line (SIGKILL: -9), and after the next start in the same folder
  nothing but that run's own files.
* ``concurrency``: two ``--overwrite`` renders of one name with different
  scenes, at once.  Consistent: the PNG's ``nullray-scene`` is the NPZ's scene.
* ``disk_full``: a still written to a 64 KiB tmpfs (root only; skipped with the
  reason otherwise).  Handled: status 1, one line, nothing left.
* ``numerical``: random valid scenes rendered in this process.  Finite: every
  pixel and every defined intensity finite.
* ``workers_lost``: a pool worker of ``nullray sequence --workers 2`` killed.
  Handled: status 1, one line, and the rerun finishes every frame.

Usage::

    python benchmarks/robustness.py > robustness.json      # about 3-5 minutes on 2 cores
    python benchmarks/robustness.py --quick                # fewer rounds
"""

import argparse
import json
import os
import random
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))   # measure this checkout, not an installed copy
TINY = ["--set", "observer.placement=distant", "--set", "image.width=16", "--set",
        "image.height=16"]
SECRET = "PRIVATE-LINE-MUST-NOT-SHOW"


def log(message):
    print(message, file=sys.stderr, flush=True)


def _env():
    return dict(os.environ, PYTHONPATH=str(REPO), PYTHONUNBUFFERED="1")


def nullray(args, cwd, timeout=120):
    """Run ``python -m render ARGS``; a run that outlives ``timeout`` is killed and returns None."""
    try:
        return subprocess.run([sys.executable, "-m", "render", *map(str, args)], cwd=cwd,
                              env=_env(), capture_output=True, text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        return None


def one_line(stderr, prefix="nullray: "):
    return stderr.count("\n") == 1 and stderr.startswith(prefix) and "Traceback" not in stderr


# --- hostile inputs ------------------------------------------------------------------------------


def _hostile_files(folder):
    """Make the side files; return {name: (scene text or None, extra args)}."""
    from PIL import Image

    os.mkfifo(folder / "fifo.yaml")
    os.mkfifo(folder / "fifo.csv")
    os.mkfifo(folder / "fifo.png")
    server = socket.socket(socket.AF_UNIX)
    server.bind(str(folder / "socket.yaml"))
    (folder / "private.txt").write_text(f"root:x:0:0:{SECRET}\n")
    with open(folder / "million.csv", "w") as handle:
        handle.writelines(f"{1 + i * 1e-4:.6f},1\n" for i in range(1_000_000))
    (folder / "rows.csv").write_text("1,1\n" * 100_001)
    (folder / "badutf8.csv").write_bytes(b"r,e\n2,\xff\n")
    (folder / "nan.csv").write_text("2,nan\n4,1\n")
    (folder / "down.csv").write_text("4,1\n2,1\n")
    Image.new("1", (11312, 5656)).save(folder / "huge.png")
    (folder / "text.png").write_text("not an image")
    Image.new("RGB", (30, 10)).save(folder / "wide.png")
    (folder / "out").mkdir()
    (folder / "sub").mkdir()
    outside = folder.parent / f"{folder.name}-outside.csv"
    outside.write_text("2,1\n4,1\n")
    return server, outside


def _hostile_cases(folder, outside):
    """[(case, scene file text or a path, extra args)]."""
    profile = "emission:\n  law: profile\n  profile: {}\n"
    sky = "sky:\n  backdrop: image\n  image: {}\n"
    texts = {
        "oversized": "#" * 300_000, "nul": "name: a\x00b\n", "deep-lists": "a: " + "[" * 5000,
        "deep-maps": "".join("  " * i + f"k{i}:\n" for i in range(200)),
        "python-tag": "name: !!python/object/apply:os.system ['true']\n",
        "alias-bomb": "a: &a [1, 1]\nb: [*a, *a]\n", "merge-key": "a: &x {b: 1}\nc:\n  <<: *x\n",
        "huge-float": "black_hole:\n  spin: 1e400\n", "huge-int": "image:\n  width: " + "9" * 5000,
        "nan": "black_hole:\n  spin: .nan\n", "out-of-range": "black_hole:\n  spin: 1.0e308\n",
        "string-number": "black_hole:\n  spin: fast\n", "list": "- 1\n- 2\n", "empty": "",
        "binary": "black_hole:\n  spin: !!binary AAAA\n", "timestamp": "image:\n  width: 2001-01-01\n",
        "set": "image:\n  width: !!set {a: null}\n", "repeated": "black_hole:\n  spin: 0.1\n  spin: 0.2\n",
        "dotted-repeat": "black_hole:\n  spin: 0.1\nblack_hole.spin: 0.2\n",
        "yaml-1.1-bool": "output:\n  png: yes\n", "unknown": "black_hole:\n  spn: 0.5\n",
        "int-key": "1: 2\n", "name-dots": "name: ..\n", "name-slash": "name: ../escape\n",
        "huge-image": "image:\n  width: 1000000\n  height: 1000000\n",
        "profile-dev-zero": profile.format("/dev/zero"), "profile-fifo": profile.format("fifo.csv"),
        "profile-million-rows": profile.format("million.csv"), "profile-rows": profile.format("rows.csv"),
        "profile-bad-utf8": profile.format("badutf8.csv"), "profile-nan": profile.format("nan.csv"),
        "profile-decreasing": profile.format("down.csv"), "profile-folder": profile.format("sub"),
        "profile-outside": profile.format(f"../{outside.name}"),
        "profile-absolute-outside": profile.format("/etc/hostname"),
        "sky-dev-zero": sky.format("/dev/zero"), "sky-fifo": sky.format("fifo.png"),
        "sky-huge-header": sky.format("huge.png"), "sky-not-an-image": sky.format("text.png"),
        "sky-not-2-to-1": sky.format("wide.png"),
    }
    cases = [(name, text, []) for name, text in texts.items()]
    cases += [(f"scene-{kind}", folder / name, []) for kind, name in
              (("fifo", "fifo.yaml"), ("socket", "socket.yaml"), ("folder", "sub"))]
    cases += [("scene-dev-zero", Path("/dev/zero"), []),
              ("set-private-file", None, ["--set", "emission.law=profile", "--set",
                                          f"emission.profile={folder / 'private.txt'}"]),
              ("set-no-equals", None, ["--set", "black_hole.spin"]),
              ("output-dir-empty", None, ["--output-dir", ""])]
    return cases


# Cases that could block or fill memory if they were not refused run in their own process.
SPECIAL = ("scene-fifo", "scene-socket", "scene-dev-zero", "profile-dev-zero", "profile-fifo",
           "sky-dev-zero", "sky-fifo")


def _in_process(args):
    """Run ``nullray`` in this process: (status, stdout, stderr); a crash is status None."""
    import contextlib
    import io

    from render.cli import main

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            status = main([str(a) for a in args])
        except BaseException as exc:   # a traceback would reach the user: not handled
            status, err = None, io.StringIO(f"{type(exc).__name__}: {exc}")
    return status, out.getvalue(), err.getvalue()


def _hostile_run(name, args, folder):
    if name in SPECIAL:
        done = nullray(args, folder, timeout=90)
        return (None, "", "timed out") if done is None else (done.returncode, done.stdout,
                                                              done.stderr)
    previous = os.getcwd()
    os.chdir(folder)
    try:
        return _in_process(args)
    finally:
        os.chdir(previous)


def hostile_inputs():
    """Every hostile case through the command line: (tried, handled, [names not handled])."""
    folder = Path(tempfile.mkdtemp(prefix="nullray-hostile-"))
    server, outside = _hostile_files(folder)
    failed = []
    cases = _hostile_cases(folder, outside)
    try:
        for name, scene, extra in cases:
            if isinstance(scene, str):
                (folder / f"{name}.yaml").write_text(scene, encoding="utf-8")
                scene = folder / f"{name}.yaml"
            out = folder / "runs" / name
            args = ["still"] + ([scene] if scene is not None else []) + extra
            if "--output-dir" not in extra:
                args += ["--output-dir", out]
            status, stdout, stderr = _hostile_run(name, args, folder)
            ok = (status == 2 and stdout == "" and one_line(stderr, "nullray: error: ")
                  and SECRET not in stderr and not out.exists())
            if not ok:
                failed.append(name)
            log(f"hostile {name}: {'handled' if ok else f'NOT HANDLED ({status}: {stderr[-200:]!r})'}")
    finally:
        server.close()
        outside.unlink()
        shutil.rmtree(folder, ignore_errors=True)
    return len(cases), len(cases) - len(failed), failed


# --- interrupts --------------------------------------------------------------------------------

SLOW_NPZ = """
import sys, time, pathlib
import render.output.files as files
real = files.write_npz
def slow(*args, **kwargs):
    pathlib.Path(sys.argv[1]).write_text("writing the NPZ")
    time.sleep(120)
    return real(*args, **kwargs)
files.write_npz = slow
from render.cli import main
sys.exit(main(sys.argv[2:]))
"""
TILED = ["--set", "observer.placement=distant", "--set", "image.width=512", "--set",
         "image.height=512", "--set", "tracing.memory_budget=0.01", "--set",
         "tracing.tolerance=1e-11"]


def _wait(condition, process, timeout=180.0):
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline and process.poll() is None:
        if condition():
            return True
        time.sleep(0.05)
    return False


def one_interrupt(number, moment, folder):
    """Stop a render with ``number`` at ``moment`` ('tracing' or 'npz'); whether it was clean."""
    out, marker = folder / "out", folder / "marker"
    if moment == "npz":
        command = [sys.executable, "-c", SLOW_NPZ, str(marker), "still", *TINY]
        ready = marker.exists
    else:
        command = [sys.executable, "-m", "render", "still", *TILED]
        ready = lambda: out.exists() and any(p.name.startswith(".nullray-tiles-")
                                             for p in out.iterdir())
    process = subprocess.Popen(command + ["--output-dir", str(out)], cwd=folder, env=_env(),
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    if not _wait(ready, process):
        process.kill()
        process.communicate()
        return False
    process.send_signal(number)
    _, err = process.communicate(timeout=120)
    expected = {signal.SIGINT: 130, signal.SIGTERM: 143, signal.SIGKILL: -9}[number]
    clean = process.returncode == expected
    if number != signal.SIGKILL:
        clean = clean and one_line(err)
    after = nullray(["still", *TINY, "--set", "name=next", "--quiet", "--output-dir", out], folder)
    names = sorted(p.name for p in out.iterdir())
    return clean and after is not None and after.returncode == 0 and names == ["next.npz", "next.png"]


def interrupts():
    tried = clean = 0
    for number in (signal.SIGINT, signal.SIGTERM, signal.SIGKILL):
        for moment in ("tracing", "npz"):
            folder = Path(tempfile.mkdtemp(prefix="nullray-interrupt-"))
            try:
                ok = one_interrupt(number, moment, folder)
            finally:
                shutil.rmtree(folder, ignore_errors=True)
            tried, clean = tried + 1, clean + ok
            log(f"interrupt {signal.Signals(number).name} during {moment}: "
                f"{'clean' if ok else 'NOT CLEAN'}")
    return tried, clean


# --- concurrency, disk full --------------------------------------------------------------------


def concurrency(rounds):
    import numpy as np
    from PIL import Image

    folder = Path(tempfile.mkdtemp(prefix="nullray-concurrent-"))
    consistent = 0
    try:
        for _ in range(rounds):
            runs = [subprocess.Popen(
                [sys.executable, "-m", "render", "still", *TINY, "--set", "name=twin", "--set",
                 f"black_hole.spin={spin}", "--overwrite", "--quiet", "--output-dir", "out"],
                cwd=folder, env=_env(), stdout=subprocess.PIPE, stderr=subprocess.PIPE)
                for spin in (0.1, 0.9)]
            ok = all(run.wait(timeout=300) == 0 for run in runs)
            with np.load(folder / "out" / "twin.npz") as data:
                npz = json.loads(str(data["metadata"]))["scene"]
            with Image.open(folder / "out" / "twin.png") as image:
                png = json.loads(image.text["nullray-scene"])
            names = sorted(p.name for p in (folder / "out").iterdir())
            consistent += ok and png == npz and names == ["twin.npz", "twin.png"]
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    log(f"concurrency: {consistent} of {rounds} rounds consistent")
    return rounds, consistent


def disk_full():
    """A still written to a 64 KiB tmpfs: (tried, handled, reason skipped or None)."""
    folder = Path(tempfile.mkdtemp(prefix="nullray-full-"))
    small = folder / "small"
    small.mkdir()
    mounted = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=64k", "tmpfs", str(small)],
                             capture_output=True, text=True)
    if mounted.returncode != 0:
        shutil.rmtree(folder, ignore_errors=True)
        return 0, 0, f"mounting a tmpfs was refused: {mounted.stderr.strip()}"
    try:
        done = nullray(["still", "--set", "observer.placement=distant", "--set", "image.width=128",
                        "--set", "image.height=128", "--quiet", "--output-dir", small], folder)
        handled = (done is not None and done.returncode == 1 and one_line(done.stderr)
                   and "No space left" in done.stderr and list(small.iterdir()) == [])
    finally:
        subprocess.run(["umount", str(small)], capture_output=True)
        shutil.rmtree(folder, ignore_errors=True)
    log(f"disk full: {'handled' if handled else 'NOT HANDLED'}")
    return 1, int(handled), None


# --- random scenes, lost workers ---------------------------------------------------------------


def numerical_sweep(count, seed=13):
    import numpy as np
    from render import default_scene, render_still

    rng = random.Random(seed)
    finite = 0
    for _ in range(count):
        placement = rng.choice(["distant", "camera"])
        values = {"black_hole.spin": rng.uniform(-0.999, 0.999),
                  "observer.inclination": rng.uniform(0.0, 180.0),
                  "observer.placement": placement, "observer.distance": rng.uniform(20.0, 1e4),
                  "observer.field_of_view": rng.uniform(5.0, 60.0),
                  "disk.orders": rng.randint(1, 3), "disk.surface": rng.choice(["opaque", "transparent"]),
                  "disk.outer_radius": rng.uniform(10.0, 100.0),
                  "image.width": 16, "image.height": 16}
        try:
            still = render_still(default_scene(**values))
            ok = bool(np.all(np.isfinite(still.pixels)))
            ok = ok and bool(np.all(np.isfinite(still.intensity[np.isfinite(still.intensity)])))
            ok = ok and bool(np.all(np.isin(still.fate, (0, 1, 2, 3))))
        except Exception as exc:   # a crash is what this sweep looks for
            log(f"numerical: {values} raised {type(exc).__name__}: {exc}")
            ok = False
        finite += ok
    log(f"numerical: {finite} of {count} random scenes finite")
    return count, finite


def _children(pid):
    try:
        text = Path(f"/proc/{pid}/task/{pid}/children").read_text()
    except OSError:
        return []
    return [int(p) for p in text.split()]


def workers_lost():
    """Kill a pool worker of a sequence; handled if one line, status 1, and the rerun finishes."""
    folder = Path(tempfile.mkdtemp(prefix="nullray-workers-"))
    (folder / "film.yaml").write_text(
        "observer:\n  placement: distant\nimage:\n  width: 48\n  height: 48\n"
        "animation:\n  frames: 24\n  keyframes:\n    - {frame: 0, observer.inclination: 10}\n"
        "    - {frame: 23, observer.inclination: 80}\n")
    command = [sys.executable, "-m", "render", "sequence", "film.yaml", "--workers", "2",
               "--quiet", "--output-dir", "out"]
    try:
        process = subprocess.Popen(command, cwd=folder, env=_env(), stdout=subprocess.PIPE,
                                   stderr=subprocess.PIPE, text=True)
        # The spawned pool's workers are children whose command line runs multiprocessing.
        def worker():
            for child in _children(process.pid):
                try:
                    if b"multiprocessing" in Path(f"/proc/{child}/cmdline").read_bytes() and \
                            b"resource_tracker" not in Path(f"/proc/{child}/cmdline").read_bytes():
                        return child
                except OSError:
                    pass
            return None
        if not _wait(lambda: worker() is not None and (folder / "out" / "film").exists(), process):
            process.kill()
            process.communicate()
            return 1, 0, 0
        time.sleep(1.0)
        victim = worker()
        if victim is not None:
            os.kill(victim, signal.SIGKILL)
        _, err = process.communicate(timeout=300)
        lost = process.returncode == 1 and one_line(err, "nullray: error: ")
        finished = process.returncode == 0   # the film ended before the kill landed
        again = subprocess.run(command, cwd=folder, env=_env(), capture_output=True, text=True,
                               timeout=600)
        frames = len(list((folder / "out" / "film").glob("frame_*.png")))
        handled = (lost or finished) and again.returncode == 0 and frames == 24
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    log(f"workers lost: {'handled' if handled else 'NOT HANDLED'}"
        + ("" if lost else " (the film finished before the worker was killed)"))
    return 1, int(handled), int(lost)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer rounds and random scenes")
    args = parser.parse_args()
    started = time.time()
    hostile_tried, hostile_handled, hostile_failed = hostile_inputs()
    interrupts_tried, interrupts_clean = interrupts()
    rounds_tried, rounds_consistent = concurrency(2 if args.quick else 4)
    full_tried, full_handled, full_skipped = disk_full()
    sweep_tried, sweep_finite = numerical_sweep(8 if args.quick else 24)
    lost_tried, lost_handled, lost_mid_run = workers_lost()
    result = {
        "benchmark": "nullray robustness",
        "hostile_inputs_tried": hostile_tried, "hostile_inputs_handled": hostile_handled,
        "hostile_inputs_not_handled": hostile_failed,
        "interrupts_tried": interrupts_tried, "interrupts_clean": interrupts_clean,
        "concurrent_overwrite_rounds": rounds_tried,
        "concurrent_overwrite_consistent": rounds_consistent,
        "disk_full_tried": full_tried, "disk_full_handled": full_handled,
        "disk_full_skipped": full_skipped,
        "random_scenes_tried": sweep_tried, "random_scenes_finite": sweep_finite,
        "workers_lost_tried": lost_tried, "workers_lost_handled": lost_handled,
        "workers_lost_mid_run": lost_mid_run,
        "seconds": round(time.time() - started, 1),
        "load_average_1min": round(os.getloadavg()[0], 2),
    }
    result["all_handled"] = (hostile_handled == hostile_tried and interrupts_clean == interrupts_tried
                             and rounds_consistent == rounds_tried and full_handled == full_tried
                             and sweep_finite == sweep_tried and lost_handled == lost_tried)
    print(json.dumps(result))


if __name__ == "__main__":
    main()
