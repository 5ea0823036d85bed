"""Sequence benchmark: frames per minute of an orbit, serial against the local process pool.

Prints ONE line of JSON on stdout (progress goes to stderr)::

    /tmp/venv/bin/python benchmarks/bench_sequence.py > bench_sequence.json
    /tmp/venv/bin/python benchmarks/bench_sequence.py --frames 24   # a quicker look

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
    args = parser.parse_args()

    import numba

    from render import load_scene
    from render.api import render_sequence
    from render.film.frame import render_frame
    from render.film.sequence import plan_sequence

    scene = load_scene(REPO / "scenes" / "orbit-kestrel.yaml",
                       [f"animation.frames={args.frames}"])
    render_frame(plan_sequence(scene).jobs[0])  # warm-up (numba cache load)
    runs = {"serial": [], "pool": []}
    # Interleaved rounds (serial, pool, serial, pool, ...): on a shared machine the load
    # changes over minutes; the best round of each mode is the least disturbed one.
    for _ in range(args.rounds):
        for mode, workers in (("serial", 1), ("pool", args.workers)):
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
        best = min(runs[mode], key=lambda run: run["seconds"])
        results[mode] = {"workers": workers, "best_seconds": best["seconds"],
                         "frames_per_minute": round(60.0 * args.frames / best["seconds"], 2),
                         "frames_per_cpu_minute": round(60.0 * args.frames / best["cpu_seconds"], 2),
                         "runs": runs[mode]}
    faster = max(results, key=lambda m: results[m]["frames_per_minute"])
    print(json.dumps({
        "benchmark": "sequence", "scene": "scenes/orbit-kestrel.yaml",
        "frames": args.frames, "size": [scene["image.width"], scene["image.height"]],
        "cores": os.cpu_count(), "numba_threads": numba.config.NUMBA_NUM_THREADS,
        "serial": results["serial"], "pool": results["pool"], "faster": faster,
        "pool_speedup": round(results["pool"]["frames_per_minute"]
                              / results["serial"]["frames_per_minute"], 3),
    }))


if __name__ == "__main__":
    main()
