"""Sequence benchmark: frames per minute of an orbit, serial against the local process pool.

Prints ONE line of JSON on stdout (progress goes to stderr)::

    /tmp/venv/bin/python benchmarks/bench_sequence.py > bench_sequence.json
    /tmp/venv/bin/python benchmarks/bench_sequence.py --frames 24   # a quicker look
    python benchmarks/bench_sequence.py --against /path/to/older/checkout --rounds 1
    python benchmarks/bench_sequence.py --size 1920x1080 --frames 240 --rounds 1 --modes pool

The scene is scenes/orbit-kestrel.yaml: a camera on a Keplerian orbit at 40 M
(spin 0.7, 80 deg), 320 x 180 pixels, opaque disk, a co-moving spot, 120 frames.
Every frame has its own camera position on the orbit, but the orbit is circular at a
constant angular velocity, so the frames see the same rays turned about the spin axis:
each process traces them once and shades every frame (docs/animation.md).
The two modes run in interleaved rounds (``--rounds``, default 2) and the
fastest round of each is reported, with its CPU time (this process plus its
finished child processes; idle numba threads that spin count as CPU time, so
the serial figure per CPU-second is a low estimate) and the load average at its
start.  Each run renders the whole sequence into a fresh temporary folder with
:func:`render.api.render_sequence` (frames, manifest; the video and other
products are left out, they are the same for both modes):

serial
    One process; numba's parallel kernel uses every core for each frame.
pool
    ``workers`` processes (default: the number of cores), each kernel call
    limited to cores // workers numba threads; frames are the unit of work.

Before timing, one frame is rendered in this process so that the serial mode
does not pay numba's cache load; the pool's workers do pay it (about 1.5 s per
worker), as they do in real use.

``--against PATH`` adds a comparison with another checkout of nullray (an older
commit, e.g. made with ``git worktree add PATH REV``): in the same interleaved
rounds, ``python -m render sequence`` runs as a whole fresh process on each
tree's own copy of the scene (same film, same ``--set`` values, default workers,
video and every product included), after one small warm-up film per tree so that
both use a warm numba cache.  So that both make the same film, both get this tree's
``observer.field_of_view`` and this tree also ``observer.aim=frame`` (older trees
point a moving camera along its boosted frame, and do not know the key).  ``against`` in the JSON holds each tree's best
wall time, its CPU time (the process and its children) and ``speedup`` (older
over this tree's best wall time; ``speedup_cpu`` the same in CPU time).

``--size WIDTHxHEIGHT`` overrides the picture size, ``--modes`` picks which of
serial and pool run (default both).
"""

import argparse
import json
import os
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))


def _cpu_seconds():
    """CPU time of this process and of its finished children (the pool's workers)."""
    import resource

    own = resource.getrusage(resource.RUSAGE_SELF)
    children = resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + children.ru_utime + children.ru_stime


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--frames", type=int, default=120)
    parser.add_argument("--workers", type=int, default=os.cpu_count() or 2)
    parser.add_argument("--rounds", type=int, default=2)
    parser.add_argument("--size", default=None, help="WIDTHxHEIGHT, default the scene's 320x180")
    parser.add_argument("--modes", default="serial,pool", help="serial, pool or both")
    parser.add_argument("--against", default=None,
                        help="another nullray checkout to compare with, whole command each")
    args = parser.parse_args()
    modes = [mode for mode in ("serial", "pool") if mode in args.modes.split(",")]
    load_start = os.getloadavg()[0]

    import numba

    from render import load_scene
    from render.api import render_sequence
    from render.film.frame import render_frame
    from render.film.sequence import plan_sequence

    settings = [f"animation.frames={args.frames}"]
    if args.size:
        width, height = args.size.lower().split("x")
        settings += [f"image.width={int(width)}", f"image.height={int(height)}"]
    scene = load_scene(REPO / "scenes" / "orbit-kestrel.yaml", settings)
    render_frame(plan_sequence(scene).jobs[0])  # warm-up (numba cache load)
    runs = {"serial": [], "pool": []}
    trees = {"this": REPO, "older": Path(args.against).resolve()} if args.against else {}
    whole = {name: [] for name in trees}
    same_film = {"this": ["observer.aim=frame"], "older": []}
    film_settings = {name: settings + same_film[name]
                     + [f"observer.field_of_view={scene['observer.field_of_view']!r}"]
                     for name in trees}
    for name, tree in trees.items():
        _whole_command(tree, film_settings[name][1:] + ["animation.frames=2"])  # warm-up
    # Interleaved rounds (serial, pool, serial, pool, ...): on a shared machine the load
    # changes over minutes; the best round of each mode is the least disturbed one.
    for _ in range(args.rounds):
        for name, tree in trees.items():
            print(f"{name} tree ({tree}): whole command ...", file=sys.stderr, flush=True)
            whole[name].append(_whole_command(tree, film_settings[name]))
            print(f"{name}: {whole[name][-1]}", file=sys.stderr, flush=True)
        for mode, workers in (("serial", 1), ("pool", args.workers)):
            if mode not in modes:
                continue
            with tempfile.TemporaryDirectory() as folder:
                print(f"{mode}: {args.frames} frames ...", file=sys.stderr, flush=True)
                load = os.getloadavg()[0]
                cpu = _cpu_seconds()
                started = time.perf_counter()
                render_sequence(scene, folder, workers=workers, products=False)
                seconds = time.perf_counter() - started
                cpu = _cpu_seconds() - cpu
            runs[mode].append({"seconds": round(seconds, 3), "cpu_seconds": round(cpu, 3),
                               "load_at_start": round(load, 2)})
            print(f"{mode}: {runs[mode][-1]}", file=sys.stderr, flush=True)
    results = {}
    for mode, workers in (("serial", 1), ("pool", args.workers)):
        if mode not in modes:
            continue
        best = min(runs[mode], key=lambda run: run["seconds"])
        results[mode] = {"workers": workers, "best_seconds": best["seconds"],
                         "frames_per_minute": round(60.0 * args.frames / best["seconds"], 2),
                         "frames_per_cpu_minute": round(60.0 * args.frames / best["cpu_seconds"], 2),
                         "runs": runs[mode]}
    line = {"benchmark": "sequence", "scene": "scenes/orbit-kestrel.yaml",
            "frames": args.frames, "size": [scene["image.width"], scene["image.height"]],
            "cores": os.cpu_count(), "numba_threads": numba.config.NUMBA_NUM_THREADS,
            **results, "load_average_1min": [round(load_start, 2), round(os.getloadavg()[0], 2)]}
    if len(results) == 2:
        line["faster"] = max(results, key=lambda m: results[m]["frames_per_minute"])
        line["pool_speedup"] = round(results["pool"]["frames_per_minute"]
                                     / results["serial"]["frames_per_minute"], 3)
    if trees:
        best = {name: min(whole[name], key=lambda run: run["seconds"]) for name in trees}
        line["against"] = {"older_tree": str(trees["older"]), **best,
                           "runs": whole,
                           "speedup": round(best["older"]["seconds"] / best["this"]["seconds"], 2),
                           "speedup_cpu": round(best["older"]["cpu_seconds"]
                                                / best["this"]["cpu_seconds"], 2)}
    print(json.dumps(line))


def _whole_command(tree, settings):
    """Run ``python -m render sequence`` of ``tree`` on its own orbit-kestrel scene, timed."""
    import subprocess

    command = [sys.executable, "-m", "render", "sequence", "--quiet",
               str(tree / "scenes" / "orbit-kestrel.yaml"), "--output-dir", ""]
    for setting in settings:
        command += ["--set", setting]
    with tempfile.TemporaryDirectory() as folder:
        command[command.index("--output-dir") + 1] = folder
        load = os.getloadavg()[0]
        cpu = _cpu_seconds()
        started = time.perf_counter()
        subprocess.run(command, cwd=tree, check=True,
                       env={**os.environ, "PYTHONPATH": str(tree)})
        seconds = time.perf_counter() - started
        cpu = _cpu_seconds() - cpu
    return {"seconds": round(seconds, 3), "cpu_seconds": round(cpu, 3),
            "load_at_start": round(load, 2)}


if __name__ == "__main__":
    main()
