"""What polarisation adds to a still: one line of JSON on stdout (progress on stderr).

    python benchmarks/bench_polarisation.py > bench_polarisation.json
    python benchmarks/bench_polarisation.py integrate 128   # method and image size
    python benchmarks/bench_polarisation.py closed_form 256 --baseline /tmp/main-copy

A 256 x 256 still, spin 0.9, inclination 60 deg, distant observer, transparent
disk with 2 orders, closed-form tracing (or the method given as the first
argument, the size as the second), bolometric power-law emission, rendered
with ``polarisation.model: none`` ("plain") and ``electron_scattering``
("polarised").

Each variant runs in a worker process of its own: this checkout with numba's
default threads and with ``NUMBA_NUM_THREADS=1`` (the single-thread figure),
and, with ``--baseline DIR`` (another checkout of the project, say
``git archive main | tar -x -C DIR``), the same two for that code.  After one
warm-up render of each scene per worker (numba compiled or loaded from its
cache), the workers take turns, one render at a time, ``RUNS`` rounds: an
interleaved run, so that the load of a shared machine falls on all alike.

Reported per worker: the median wall-clock and process-CPU seconds of the plain
and polarised stills; ``added_cpu_s`` (the median over rounds of the paired
difference polarised - plain), ``overhead_cpu`` (that over the plain median,
the target is at most 0.30) and ``ns_per_disk_crossing`` (it over the disk
crossings that shine); ``rays_per_cpu_s`` and ``rays_per_s_per_core`` (wall
clock times the threads) of both stills.  The load average at start and end.
"""

import json
import os
import statistics
import subprocess
import sys
import time

RUNS = 15
HERE = os.path.dirname(os.path.abspath(__file__))


def _scene(default_scene, method, size, model):
    return default_scene(**{
        "observer.placement": "distant", "image.width": size, "image.height": size,
        "black_hole.spin": 0.9, "observer.inclination": 60.0, "disk.surface": "transparent",
        "disk.orders": 2, "tracing.method": method, "output.npz": False,
        "polarisation.model": model})


def worker(root, method, size):
    """Render on request: read 'plain' or 'polarised' lines, answer one JSON line each."""
    sys.path.insert(0, root)
    from render import default_scene
    from render.imaging.still import render_still

    scenes = {"plain": _scene(default_scene, method, size, "none"),
              "polarised": _scene(default_scene, method, size, "electron_scattering")}
    crossings = int(render_still(scenes["polarised"]).on_disk.sum())
    render_still(scenes["plain"])   # warm-up: compile or load the kernels
    import numba
    print(json.dumps({"ready": True, "threads": numba.config.NUMBA_NUM_THREADS,
                      "disk_crossings": crossings}), flush=True)
    for line in sys.stdin:
        wall, cpu = time.perf_counter(), time.process_time()
        render_still(scenes[line.strip()])
        print(json.dumps({"wall": time.perf_counter() - wall,
                          "cpu": time.process_time() - cpu}), flush=True)


def _start(root, method, size, threads):
    env = dict(os.environ)
    if threads:
        env["NUMBA_NUM_THREADS"] = str(threads)
    process = subprocess.Popen(
        [sys.executable, os.path.abspath(__file__), "--worker", root, method, str(size)],
        stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True, env=env)
    return process, json.loads(process.stdout.readline())


def _ask(process, variant):
    process.stdin.write(variant + "\n")
    process.stdin.flush()
    return json.loads(process.stdout.readline())


def _summary(times, hello, rays):
    plain, polarised = times["plain"], times["polarised"]
    out = {"threads": hello["threads"], "disk_crossings": hello["disk_crossings"]}
    for name, pairs in times.items():
        wall = statistics.median(p["wall"] for p in pairs)
        cpu = statistics.median(p["cpu"] for p in pairs)
        out[f"{name}_wall_s"], out[f"{name}_cpu_s"] = wall, cpu
        out[f"{name}_rays_per_cpu_s"] = rays / cpu
        out[f"{name}_rays_per_s_per_core"] = rays / (wall * hello["threads"])
    added = statistics.median(b["cpu"] - a["cpu"] for a, b in zip(plain, polarised))
    added_wall = statistics.median(b["wall"] - a["wall"] for a, b in zip(plain, polarised))
    out["added_cpu_s"], out["added_wall_s"] = added, added_wall
    out["overhead_cpu"] = added / out["plain_cpu_s"]
    out["overhead_wall"] = added_wall / out["plain_wall_s"]
    out["ns_per_disk_crossing"] = added / hello["disk_crossings"] * 1e9
    return out


def main(argv):
    baseline = None
    if "--baseline" in argv:
        k = argv.index("--baseline")
        baseline = os.path.abspath(argv[k + 1])
        argv = argv[:k] + argv[k + 2:]
    method = argv[0] if argv else "closed_form"
    size = int(argv[1]) if len(argv) > 1 else 256
    load_start = os.getloadavg()
    trees = {"this": os.path.dirname(HERE)}
    if baseline:
        trees["baseline"] = baseline
    workers = {}
    for tree, root in trees.items():
        for threads, suffix in ((None, ""), (1, "_1thread")):
            print(f"starting {tree}{suffix}", file=sys.stderr)
            workers[tree + suffix] = _start(root, method, size, threads)
    times = {name: {"plain": [], "polarised": []} for name in workers}
    for run in range(RUNS):
        order = ("plain", "polarised") if run % 2 == 0 else ("polarised", "plain")
        for name, (process, _) in workers.items():
            for variant in order:
                times[name][variant].append(_ask(process, variant))
        print(f"round {run + 1}/{RUNS}", file=sys.stderr)
    for process, _ in workers.values():
        process.stdin.close()
        process.wait()
    report = {"image": f"{size}x{size}", "orders": 2, "runs": RUNS, "method": method,
              "baseline": baseline, "cpu_count": os.cpu_count(), "target_overhead": 0.30,
              "load_average_start": load_start, "load_average_end": os.getloadavg()}
    for name, (_, hello) in workers.items():
        report[name] = _summary(times[name], hello, size * size)
    print(json.dumps(report, sort_keys=True))


if __name__ == "__main__":
    if len(sys.argv) > 1 and sys.argv[1] == "--worker":
        worker(sys.argv[2], sys.argv[3], int(sys.argv[4]))
    else:
        main(sys.argv[1:])
