"""Closed-form transfer (render.geodesics.closed_form) against the integrator: throughput and a 4K still.

Prints ONE line of JSON on stdout (progress goes to stderr)::

    python benchmarks/bench_closed_form.py [--size 512] [--repeat 3] [--no-4k]

What is measured
----------------
pixel-orders per second
    The core benchmark's scene (spin a = 0.9, inclination 60 deg, distant
    observer, field of view 30 M, transparent disk) at ``--size``^2 pixels, with
    the orders n = 0, 1, 2 recorded (every crossing counted, the escape direction
    not computed, as a still render does).  A "pixel-order" is one (pixel, n)
    pair computed, whether or not the ray has an n-th crossing (pixels x 3).
    Medians of ``--repeat`` runs after a warm-up; process CPU time is reported
    beside wall time (on a shared machine CPU-seconds vary much less).
ratio to the integrator
    :func:`render.geodesics.tracing.trace_bundle` on the same rays and orders at the
    default tolerance 1e-9, timed the same way.  Like for like, both fill the
    same arrays (r, phi, delay, fates); g is added afterwards by the same
    function for both and is not timed.
image only
    The closed form without the phi and delay maps (``want_maps=False``): what
    an image needs (r, hence g, and the fates), and what a still computes when
    it writes no data maps.  The integrator cannot skip them (they are two of
    its six equations, and cheap), so its time is the same.
4K true-colour still
    :func:`render.imaging.still.render_still` of a 3840 x 2160 Novikov–Thorne disk in
    true colour (spin 0.9, inclination 60 deg, 3 orders, transparent disk, fixed
    colour exposure, so that it renders in row tiles within the default 2 GB
    memory budget) with ``tracing.method: closed_form``: wall time of the whole
    render (tracing, shading, tone mapping, the tiles' temporary files; no output
    files) and its process CPU time, one run after a
    small warm-up; once as an image only (``maps=False``: the phi and delay maps
    skipped, as with ``output.npz: false``) and once with the maps.

threads
    Every closed-form figure is measured at 1 thread and at 2 threads
    (``numba.set_num_threads``), the two alternating within each repeat so that
    both see the same load: ``*_single_thread_*`` (1 thread, per CPU-second: robust
    to other work on the machine), ``*_per_core`` (2 threads: pixel-orders / wall /
    threads) and ``*_per_cpu_second`` (2 threads: pixel-orders / process CPU time).  The integrator and the 4K stills run at the
    process's thread count.
maps on the disk only
    ``want_maps="disk"``: phi and the delay only for crossings between the ISCO and
    18 M (the default disk), as a moving pattern needs them.

Targets (issue 14): >= 5,000,000 pixel-orders per CPU-second, image only; the 4K
true-colour still WITH the maps in < 5 s on 2 cores.  ``within_targets`` takes both;
issue 6's ratio target (>= 20x the integrator) is reported beside them.
"""

import argparse
import json
import os
import statistics
import sys
import time

import numpy as np

# Measure this checkout's render, not an installed copy.
sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))

TARGET_PIXEL_ORDERS_PER_CPU_SECOND = 5_000_000.0
TARGET_4K_WITH_MAPS_SECONDS = 5.0
TARGET_RATIO = 20.0
SPIN = 0.9
INCLINATION_DEG = 60.0
FIELD_OF_VIEW = 30.0
ORDERS = 3
THREAD_COUNTS = (1, 2)


def _timed(function, repeat):
    walls, cpus = [], []
    for _ in range(repeat):
        wall, cpu = time.perf_counter(), time.process_time()
        function()
        walls.append(time.perf_counter() - wall)
        cpus.append(time.process_time() - cpu)
    return statistics.median(walls), min(walls), statistics.median(cpus)


def _interleaved(functions, repeat, numba):
    """{(name, threads): (median wall, median CPU)}, each repeat running every pair once."""
    times = {}
    for _ in range(repeat):
        for name, function in functions.items():
            for threads in THREAD_COUNTS:
                numba.set_num_threads(threads)
                wall, cpu = time.perf_counter(), time.process_time()
                function()
                times.setdefault((name, threads), []).append(
                    (time.perf_counter() - wall, time.process_time() - cpu))
    numba.set_num_threads(max(THREAD_COUNTS))
    return {key: (statistics.median(w for w, _ in runs), statistics.median(c for _, c in runs))
            for key, runs in times.items()}


def _rates(label, times, pixel_orders):
    """One variant's figures: 1 thread per CPU-second; 2 threads per core and per CPU-second."""
    single_wall, single_cpu = times[(label, 1)]
    wall, cpu = times[(label, max(THREAD_COUNTS))]
    return {f"{label}_single_thread_seconds": round(single_wall, 4),
            f"{label}_single_thread_pixel_orders_per_cpu_second": round(pixel_orders / single_cpu),
            f"{label}_seconds": round(wall, 4), f"{label}_cpu_seconds": round(cpu, 4),
            f"{label}_pixel_orders_per_second_per_core":
                round(pixel_orders / wall / max(THREAD_COUNTS)),
            f"{label}_pixel_orders_per_cpu_second": round(pixel_orders / cpu)}


def _still_4k(result, render_still, default_scene):
    values = {"image.width": 3840, "image.height": 2160, "black_hole.spin": SPIN,
              "observer.inclination": INCLINATION_DEG, "observer.placement": "distant",
              "observer.field_of_view": 40.0, "disk.surface": "transparent",
              "disk.orders": ORDERS, "emission.law": "novikov_thorne",
              "black_hole.mass": 10.0, "observing.mode": "true_colour",
              "observing.colour_exposure": "fixed", "observing.colour_reference": 1e18,
              "tracing.method": "closed_form"}
    render_still(default_scene(**{**values, "image.width": 16, "image.height": 9}))
    for label, maps in (("still_4k", False), ("still_4k_with_maps", True)):
        started, cpu = time.perf_counter(), time.process_time()
        still = render_still(default_scene(**values), maps=maps)
        seconds = time.perf_counter() - started
        result.update({
            f"{label}_seconds": round(seconds, 3),
            f"{label}_cpu_seconds": round(time.process_time() - cpu, 3),
            # trace_seconds covers tracing AND shading of every band (still.py's timer).
            f"{label}_trace_and_shade_seconds": round(
                still.metadata.get("trace_seconds", float("nan")), 3),
        })
        result["still_4k_method"] = still.metadata.get("tracing_method")
        release = getattr(still, "release", None)
        if release is not None:
            release()


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=512)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--no-4k", action="store_true", help="skip the 3840x2160 still")
    args = parser.parse_args()
    load_at_start = os.getloadavg()[0]

    import numba

    from render import default_scene
    from render.camera.observers import distant_observer_rays, image_plane_grid
    from render.geodesics.closed_form import closed_form_bundle
    from render.geodesics.tracing import DEFAULT_TOLERANCE, trace_bundle
    from render.imaging.still import render_still
    from render.spacetime.kerr import isco_radius

    threads = numba.get_num_threads()
    alpha, beta = image_plane_grid(args.size, args.size, FIELD_OF_VIEW)
    alpha, beta = alpha.ravel(), beta.ravel()
    bundle = distant_observer_rays(alpha, beta, SPIN, INCLINATION_DEG)
    pixel_orders = alpha.size * ORDERS

    def closed(maps):
        return lambda: closed_form_bundle(alpha, beta, bundle, SPIN, INCLINATION_DEG,
                                          n_record=ORDERS, want_end=False, want_maps=maps,
                                          r_in=isco_radius(SPIN), r_out=18.0)

    def integrated():
        return trace_bundle(bundle, SPIN, n_record=ORDERS, tolerance=DEFAULT_TOLERANCE)

    print("warming up (compiling on the first run)...", file=sys.stderr)
    closed_form_bundle(alpha[:64], beta[:64], distant_observer_rays(alpha[:64], beta[:64], SPIN,
                       INCLINATION_DEG), SPIN, INCLINATION_DEG, n_record=ORDERS, want_end=False)
    trace_bundle(distant_observer_rays(alpha[:64], beta[:64], SPIN, INCLINATION_DEG), SPIN,
                 n_record=ORDERS)
    print("timing the closed form at 1 and 2 threads...", file=sys.stderr)
    times = _interleaved({"image_only": closed(False), "closed_form": closed(True),
                          "maps_on_disk": closed("disk")}, args.repeat, numba)
    print("timing the integrator...", file=sys.stderr)
    int_wall, _, int_cpu = _timed(integrated, max(1, args.repeat - 1))
    raw_cf, raw_int = closed(True)(), integrated()
    with np.errstate(invalid="ignore", divide="ignore"):
        rel = np.abs(raw_cf["r"] / raw_int["r"] - 1.0)
    result = {
        "benchmark": "closed_form_transfer", "size": args.size, "orders": ORDERS,
        "spin": SPIN, "inclination_deg": INCLINATION_DEG, "threads": threads,
        "cpu_count": os.cpu_count(), "load_average_at_start": load_at_start,
        "integrator_seconds": round(int_wall, 4), "integrator_cpu_seconds": round(int_cpu, 4),
    }
    for label in ("image_only", "closed_form", "maps_on_disk"):
        result.update(_rates(label, times, pixel_orders))
    cf_wall, cf_cpu = times[("closed_form", max(THREAD_COUNTS))]
    image_wall, image_cpu = times[("image_only", max(THREAD_COUNTS))]
    result.update({
        "target_pixel_orders_per_cpu_second": TARGET_PIXEL_ORDERS_PER_CPU_SECOND,
        "ratio_to_integrator": round(int_wall / cf_wall, 2),
        "ratio_to_integrator_cpu": round(int_cpu / cf_cpu, 2),
        "image_only_ratio_to_integrator": round(int_wall / image_wall, 2),
        "image_only_ratio_to_integrator_cpu": round(int_cpu / image_cpu, 2),
        "target_ratio": TARGET_RATIO,
        "crossings_recorded": int(np.isfinite(raw_cf["r"]).sum()),
        "median_relative_r_difference_vs_integrator": float(np.nanmedian(rel)),
    })
    if not args.no_4k:
        print("rendering the 3840x2160 true-colour stills...", file=sys.stderr)
        _still_4k(result, render_still, default_scene)
        result["target_still_4k_with_maps_seconds"] = TARGET_4K_WITH_MAPS_SECONDS
    result["within_targets"] = bool(
        result["image_only_pixel_orders_per_cpu_second"] >= TARGET_PIXEL_ORDERS_PER_CPU_SECOND
        and result.get("still_4k_with_maps_seconds", 0.0) < TARGET_4K_WITH_MAPS_SECONDS)
    result["load_average_at_end"] = os.getloadavg()[0]
    print(json.dumps(result))


if __name__ == "__main__":
    main()
