"""Writing a still's NPZ against tracing it with the closed form (issue 14, item 5).

Prints ONE line of JSON on stdout (progress goes to stderr)::

    python benchmarks/bench_output.py [--size 1024] [--repeat 3]

What is measured
----------------
trace_seconds
    :func:`render.render_still` of a distant observer's still (spin 0.9, inclination
    60 deg, transparent disk, 3 orders, ``tracing.method: closed_form``) with every
    map (phi and delay included, as a still that writes its NPZ computes them), the
    median of ``--repeat`` runs after a warm-up.
npz_seconds, npz_megabytes
    :func:`render.output.files.write_npz` of that still's maps for each
    ``output.npz_compression`` (fast: deflate level 1, the default; small: level 9;
    none: stored) into a temporary folder, and the file's size; medians of
    ``--repeat`` runs, interleaved with each other.  The target: the NPZ never takes
    longer than the closed-form trace (``npz_over_trace`` <= 1 for the default).
wall and CPU
    Every time is wall-clock; ``cpu_seconds`` beside it is this process's CPU time
    (all threads), and ``load_average`` is read before and after.
"""

import argparse
import json
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numba


def _timed(function):
    wall, cpu = time.perf_counter(), time.process_time()
    value = function()
    return time.perf_counter() - wall, time.process_time() - cpu, value


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=1024)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()

    import render
    from render.output.files import NPZ_COMPRESSION, write_npz

    load_before = os.getloadavg()
    values = {"image.width": args.size, "image.height": args.size, "black_hole.spin": 0.9,
              "observer.placement": "distant", "observer.inclination": 60.0,
              "observer.field_of_view": 30.0, "disk.surface": "transparent", "disk.orders": 3,
              "tracing.method": "closed_form"}
    render.render_still(render.default_scene(**dict(values, **{"image.width": 16,
                                                               "image.height": 16})))
    scene = render.default_scene(**values)
    traces, trace_cpu = [], []
    for _ in range(args.repeat):
        wall, cpu, result = _timed(lambda: render.render_still(scene, maps=True))
        traces.append(wall)
        trace_cpu.append(cpu)
        print(f"trace {wall:.2f} s", file=sys.stderr)
    npz = {name: {"seconds": [], "cpu_seconds": []} for name in NPZ_COMPRESSION}
    with tempfile.TemporaryDirectory() as folder:
        for round_number in range(args.repeat):
            for name in NPZ_COMPRESSION:
                path = Path(folder) / f"{name}-{round_number}.npz"
                wall, cpu, _ = _timed(lambda: write_npz(path, result.maps(), result.metadata,
                                                        compression=name))
                npz[name]["seconds"].append(wall)
                npz[name]["cpu_seconds"].append(cpu)
                npz[name]["megabytes"] = path.stat().st_size / 1e6
                path.unlink()
                print(f"npz {name} {wall:.2f} s", file=sys.stderr)
    trace = statistics.median(traces)
    summary = {name: {"seconds": statistics.median(v["seconds"]),
                      "cpu_seconds": statistics.median(v["cpu_seconds"]),
                      "megabytes": v["megabytes"]} for name, v in npz.items()}
    print(json.dumps({
        "benchmark": "bench_output", "size": args.size, "orders": 3,
        "threads": numba.get_num_threads(),
        "trace_seconds": trace, "trace_cpu_seconds": statistics.median(trace_cpu),
        "npz": summary,
        "npz_over_trace": {name: s["seconds"] / trace for name, s in summary.items()},
        "within_target": summary["fast"]["seconds"] <= trace,
        "load_average": {"before": load_before[0], "after": os.getloadavg()[0]},
    }))


if __name__ == "__main__":
    main()
