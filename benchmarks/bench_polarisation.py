"""What polarisation adds to a still: one line of JSON on stdout (progress on stderr).

    python benchmarks/bench_polarisation.py > bench_polarisation.json
    python benchmarks/bench_polarisation.py integrate 128   # method and image size

A 256 x 256 still, spin 0.9, inclination 60 deg, distant observer, transparent
disk with 2 orders, closed-form tracing (or the method given as the first
argument, the size as the second), bolometric power-law emission, rendered
with ``polarisation.model: none`` and with ``electron_scattering``, alternately,
after one warm-up render of each (numba compiled or loaded from its cache).
Reported: the median wall-clock and process-CPU seconds of each over ``RUNS``
renders, and the overhead of polarisation as a fraction of the plain still
(the target is at most 0.30).  On a shared machine quote the CPU figures.
"""

import json
import os
import statistics
import sys
import time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))

from render import default_scene  # noqa: E402
from render.imaging.still import render_still  # noqa: E402

RUNS = 5
METHOD = sys.argv[1] if len(sys.argv) > 1 else "closed_form"
SIZE = int(sys.argv[2]) if len(sys.argv) > 2 else 256


def _scene(model):
    return default_scene(**{
        "observer.placement": "distant", "image.width": SIZE, "image.height": SIZE,
        "black_hole.spin": 0.9, "observer.inclination": 60.0, "disk.surface": "transparent",
        "disk.orders": 2, "tracing.method": METHOD, "output.npz": False,
        "polarisation.model": model})


def _timed(scene):
    wall, cpu = time.perf_counter(), time.process_time()
    render_still(scene)
    return time.perf_counter() - wall, time.process_time() - cpu


def main():
    scenes = {"plain": _scene("none"), "polarised": _scene("electron_scattering")}
    for scene in scenes.values():
        _timed(scene)   # warm-up: compile or load the kernels
    times = {name: [] for name in scenes}
    for run in range(RUNS):
        for name, scene in scenes.items():
            times[name].append(_timed(scene))
        print(f"run {run + 1}/{RUNS}", file=sys.stderr)
    report = {"image": f"{SIZE}x{SIZE}", "orders": 2, "runs": RUNS, "method": METHOD}
    for name, pairs in times.items():
        report[f"{name}_wall_s"] = statistics.median(p[0] for p in pairs)
        report[f"{name}_cpu_s"] = statistics.median(p[1] for p in pairs)
    report["overhead_wall"] = report["polarised_wall_s"] / report["plain_wall_s"] - 1.0
    report["overhead_cpu"] = report["polarised_cpu_s"] / report["plain_cpu_s"] - 1.0
    report["target_overhead"] = 0.30
    print(json.dumps(report, sort_keys=True))


if __name__ == "__main__":
    main()
