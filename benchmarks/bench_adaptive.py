"""Adaptive image-plane sampling (tracing.sampling: adaptive) against tracing every pixel.

Prints ONE line of JSON on stdout (progress goes to stderr)::

    python benchmarks/bench_adaptive.py [--repeat 2] [--no-4k] [--no-camera]

What is measured
----------------
For each case, :func:`render.imaging.still.render_still` of the same scene with
``tracing.sampling: every_pixel`` and ``adaptive`` (tolerance 1e-6), alternated in
one run (every_pixel, adaptive, every_pixel, ... ``--repeat`` times each, after a
small warm-up), so that both see the same load.  No file is written; both compute
the phi and delay maps (as a still writing its NPZ does).

* ``rays``: rays traced (every pixel: the pixel count; adaptive: nodes, test pixels
  and refined pixels, the virtual nodes beyond the edges included).
* ``wall_s``, ``cpu_s``: medians of the whole still (tracing, shading, picture) in
  wall-clock and process CPU seconds; ``trace_wall_s``: the tracing part
  (``metadata["trace_seconds"]``: sampling and interpolation included).
* per core: pixels per wall second divided by the threads; per CPU-second: pixels
  per process CPU second (a rate per core cannot exceed it).
* ``max_error``: the largest error over all pixels against the every-pixel still:
  relative in r and g, absolute in phi (rad), and in the delay absolute below 1 M,
  relative above (the key's definition).
* ``single_thread``: the 1024 x 1024 case once more with one numba thread.

Cases: a distant observer at 1024 x 1024 and 3840 x 2160 (closed form; spin 0.9,
inclination 60 deg, field of view 40 M, 2 orders, transparent disk out to 20 M),
and a camera at 1000 M at 512 x 512 (integrator, tolerance 1e-9).

Targets (issue 14, item 2): at 1024 x 1024, at least 3x less time and 4x fewer rays
at a maximum error of 1e-6 in r and g.
"""

import argparse
import json
import os
import statistics
import sys
import time

import numpy as np

TARGET_TIME_RATIO = 3.0
TARGET_RAY_RATIO = 4.0
TOLERANCE = 1e-6
BASE = {"black_hole.spin": 0.9, "observer.inclination": 60.0, "observer.placement": "distant",
        "observer.field_of_view": 40.0, "disk.outer_radius": 20.0, "disk.orders": 2,
        "disk.surface": "transparent", "tracing.sampling_tolerance": TOLERANCE}


def _errors(exact, sampled):
    """Largest errors of ``sampled`` against ``exact`` over all pixels, by map."""
    out = {}
    for name in ("r", "g", "phi", "delay"):
        a, b = np.asarray(getattr(exact, name)), np.asarray(getattr(sampled, name))
        finite = np.isfinite(a) & np.isfinite(b)
        a, b = a[finite], b[finite]
        if name == "phi":
            error = np.abs(np.mod(b - a + np.pi, 2 * np.pi) - np.pi)
        elif name == "delay":
            error = np.abs(b - a) / np.maximum(1.0, np.abs(a))
        else:
            error = np.abs(b - a) / np.abs(a)
        out[name] = float(error.max()) if error.size else 0.0
    out["nan_pattern_differs"] = int(sum(
        np.count_nonzero(np.isnan(np.asarray(getattr(exact, n)))
                         != np.isnan(np.asarray(getattr(sampled, n)))) for n in ("r", "g")))
    out["fate_differs"] = int(np.count_nonzero(np.asarray(exact.fate)
                                               != np.asarray(sampled.fate)))
    return out


def _case(values, repeat, threads):
    """Interleaved every_pixel / adaptive stills of one scene; a dict of figures."""
    from render import default_scene
    from render.imaging.still import render_still

    scenes = {mode: default_scene(**{**values, "tracing.sampling": mode})
              for mode in ("every_pixel", "adaptive")}
    figures = {mode: {"wall": [], "cpu": [], "trace": []} for mode in scenes}
    kept = {}
    for _ in range(repeat):
        for mode, scene in scenes.items():
            print(f"  {mode}...", file=sys.stderr)
            wall, cpu = time.perf_counter(), time.process_time()
            result = render_still(scene, maps=True)
            figures[mode]["cpu"].append(time.process_time() - cpu)
            figures[mode]["wall"].append(time.perf_counter() - wall)
            figures[mode]["trace"].append(result.metadata["trace_seconds"])
            if mode in kept and kept[mode].storage is not None:
                kept[mode].release()
            kept[mode] = result
    pixels = values["image.width"] * values["image.height"]
    out = {"size": [values["image.width"], values["image.height"]],
           "placement": values["observer.placement"]}
    for mode, f in figures.items():
        wall, cpu = statistics.median(f["wall"]), statistics.median(f["cpu"])
        rays = pixels if mode == "every_pixel" else kept[mode].metadata["sampling"]["traced_rays"]
        out[mode] = {"rays": rays, "wall_s": round(wall, 3), "cpu_s": round(cpu, 3),
                     "trace_wall_s": round(statistics.median(f["trace"]), 3),
                     "pixels_per_s_per_core": round(pixels / wall / threads),
                     "pixels_per_cpu_s": round(pixels / cpu)}
    meta = kept["adaptive"].metadata["sampling"]
    out["interpolated_fraction"] = round(meta["interpolated_pixels"] / pixels, 4)
    out["ray_ratio"] = round(pixels / meta["traced_rays"], 2)
    out["wall_ratio"] = round(out["every_pixel"]["wall_s"] / out["adaptive"]["wall_s"], 2)
    out["cpu_ratio"] = round(out["every_pixel"]["cpu_s"] / out["adaptive"]["cpu_s"], 2)
    out["trace_wall_ratio"] = round(out["every_pixel"]["trace_wall_s"]
                                    / out["adaptive"]["trace_wall_s"], 2)
    out["max_error"] = _errors(kept["every_pixel"], kept["adaptive"])
    for result in kept.values():
        if result.storage is not None:
            result.release()
    return out


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=2)
    parser.add_argument("--no-4k", action="store_true", help="skip the 3840x2160 still")
    parser.add_argument("--no-camera", action="store_true", help="skip the camera case")
    args = parser.parse_args()

    import numba

    from render import default_scene
    from render.imaging.still import render_still

    load_start = os.getloadavg()
    threads = numba.get_num_threads()
    print("warming up (compiling on the first run)...", file=sys.stderr)
    for mode in ("every_pixel", "adaptive"):
        render_still(default_scene(**{**BASE, "image.width": 64, "image.height": 64,
                                      "tracing.sampling": mode}))
    result = {"benchmark": "adaptive_sampling", "threads": threads,
              "cpu_count": os.cpu_count(), "load_average_at_start": list(load_start),
              "tolerance": TOLERANCE, "repeat": args.repeat,
              "target_time_ratio": TARGET_TIME_RATIO, "target_ray_ratio": TARGET_RAY_RATIO}
    cases = [("distant_1024", {**BASE, "image.width": 1024, "image.height": 1024})]
    if not args.no_4k:
        cases.append(("distant_3840x2160", {**BASE, "image.width": 3840, "image.height": 2160}))
    if not args.no_camera:
        cases.append(("camera_512", {**BASE, "image.width": 512, "image.height": 512,
                                     "observer.placement": "camera",
                                     "observer.distance": 1000.0}))
    for name, values in cases:
        print(f"{name}:", file=sys.stderr)
        result[name] = _case(values, args.repeat, threads)
    print("distant_1024 on one thread:", file=sys.stderr)
    numba.set_num_threads(1)
    single = _case(cases[0][1], 1, 1)
    numba.set_num_threads(threads)
    result["single_thread_distant_1024"] = {
        key: single[key] for key in ("every_pixel", "adaptive", "wall_ratio", "cpu_ratio")}
    first = result["distant_1024"]
    result["within_targets"] = bool(
        first["wall_ratio"] >= TARGET_TIME_RATIO and first["ray_ratio"] >= TARGET_RAY_RATIO
        and first["max_error"]["r"] <= TOLERANCE and first["max_error"]["g"] <= TOLERANCE)
    result["load_average_at_end"] = list(os.getloadavg())
    print(json.dumps(result))


if __name__ == "__main__":
    main()
