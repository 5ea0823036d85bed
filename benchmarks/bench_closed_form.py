"""Closed-form transfer (render.geodesics.closed_form) against the integrator: throughput and a 4K still.

Prints ONE line of JSON on stdout (progress goes to stderr)::

    /tmp/venv/bin/python benchmarks/bench_closed_form.py [--size 512] [--repeat 3] [--no-4k]

What is measured
----------------
pixel-orders per second
    The core benchmark's scene (spin a = 0.9, inclination 60 deg, distant
    observer, field of view 30 M, transparent disk) at ``--size``^2 pixels, with
    the orders n = 0, 1, 2 recorded (every crossing counted, the escape direction
    not computed, as a still render does).  A "pixel-order" is one (pixel, n)
    pair computed, whether or not the ray has an n-th crossing (pixels x 3).
    Per core: divided by ``numba.get_num_threads()``.  Medians of ``--repeat`` runs
    after a warm-up; process CPU time is reported beside wall time (on a shared
    machine CPU-seconds vary much less).
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
    render (tracing, shading, tone mapping; no file writing), one run after a
    small warm-up; once as an image only (``maps=False``: the phi and delay maps
    skipped, as with ``output.npz: false``) and once with the maps.

Targets (issue 6): >= 1,000,000 pixel-orders/s/core, >= 20x the integrator, the
4K still in < 10 s on 2 cores.  ``within_targets`` takes the ratio and the 4K
time of the image only.
"""

import argparse
import json
import os
import statistics
import sys
import time

import numpy as np

TARGET_PIXEL_ORDERS_PER_SECOND_PER_CORE = 1_000_000.0
TARGET_RATIO = 20.0
TARGET_4K_SECONDS = 10.0
SPIN = 0.9
INCLINATION_DEG = 60.0
FIELD_OF_VIEW = 30.0
ORDERS = 3


def _timed(function, repeat):
    walls, cpus = [], []
    for _ in range(repeat):
        wall, cpu = time.perf_counter(), time.process_time()
        function()
        walls.append(time.perf_counter() - wall)
        cpus.append(time.process_time() - cpu)
    return statistics.median(walls), min(walls), statistics.median(cpus)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=512)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--no-4k", action="store_true", help="skip the 3840x2160 still")
    args = parser.parse_args()

    import numba

    from render import default_scene
    from render.camera.observers import distant_observer_rays, image_plane_grid
    from render.geodesics.closed_form import closed_form_bundle
    from render.geodesics.tracing import DEFAULT_TOLERANCE, trace_bundle
    from render.imaging.still import render_still

    threads = numba.get_num_threads()
    alpha, beta = image_plane_grid(args.size, args.size, FIELD_OF_VIEW)
    alpha, beta = alpha.ravel(), beta.ravel()
    bundle = distant_observer_rays(alpha, beta, SPIN, INCLINATION_DEG)
    pixel_orders = alpha.size * ORDERS

    def closed():
        return closed_form_bundle(alpha, beta, bundle, SPIN, INCLINATION_DEG, n_record=ORDERS,
                                  want_end=False)

    def closed_image():
        return closed_form_bundle(alpha, beta, bundle, SPIN, INCLINATION_DEG, n_record=ORDERS,
                                  want_end=False, want_maps=False)

    def integrated():
        return trace_bundle(bundle, SPIN, n_record=ORDERS, tolerance=DEFAULT_TOLERANCE)

    print("warming up (compiling on the first run)...", file=sys.stderr)
    closed_form_bundle(alpha[:64], beta[:64], distant_observer_rays(alpha[:64], beta[:64], SPIN,
                       INCLINATION_DEG), SPIN, INCLINATION_DEG, n_record=ORDERS, want_end=False)
    trace_bundle(distant_observer_rays(alpha[:64], beta[:64], SPIN, INCLINATION_DEG), SPIN,
                 n_record=ORDERS)
    print("timing the closed form...", file=sys.stderr)
    cf_wall, cf_best, cf_cpu = _timed(closed, args.repeat)
    image_wall, _, image_cpu = _timed(closed_image, args.repeat)
    print("timing the integrator...", file=sys.stderr)
    int_wall, int_best, int_cpu = _timed(integrated, max(1, args.repeat - 1))
    raw_cf, raw_int = closed(), integrated()
    with np.errstate(invalid="ignore", divide="ignore"):
        rel = np.abs(raw_cf["r"] / raw_int["r"] - 1.0)
    rate = pixel_orders / cf_wall / threads
    image_rate = pixel_orders / image_wall / threads
    result = {
        "benchmark": "closed_form_transfer", "size": args.size, "orders": ORDERS,
        "spin": SPIN, "inclination_deg": INCLINATION_DEG, "threads": threads,
        "cpu_count": os.cpu_count(), "load_average_at_start": os.getloadavg()[0],
        "closed_form_seconds": round(cf_wall, 4), "closed_form_best_seconds": round(cf_best, 4),
        "closed_form_cpu_seconds": round(cf_cpu, 4),
        "integrator_seconds": round(int_wall, 4), "integrator_cpu_seconds": round(int_cpu, 4),
        "pixel_orders_per_second_per_core": round(rate),
        "pixel_orders_per_cpu_second": round(pixel_orders / cf_cpu),
        "target_pixel_orders_per_second_per_core": TARGET_PIXEL_ORDERS_PER_SECOND_PER_CORE,
        "ratio_to_integrator": round(int_wall / cf_wall, 2),
        "ratio_to_integrator_cpu": round(int_cpu / cf_cpu, 2),
        "image_only_seconds": round(image_wall, 4),
        "image_only_pixel_orders_per_second_per_core": round(image_rate),
        "image_only_ratio_to_integrator": round(int_wall / image_wall, 2),
        "image_only_ratio_to_integrator_cpu": round(int_cpu / image_cpu, 2),
        "target_ratio": TARGET_RATIO,
        "crossings_recorded": int(np.isfinite(raw_cf["r"]).sum()),
        "median_relative_r_difference_vs_integrator": float(np.nanmedian(rel)),
    }
    if not args.no_4k:
        print("rendering the 3840x2160 true-colour still...", file=sys.stderr)
        values = {"image.width": 3840, "image.height": 2160, "black_hole.spin": SPIN,
                  "observer.inclination": INCLINATION_DEG, "observer.placement": "distant",
                  "observer.field_of_view": 40.0, "disk.surface": "transparent",
                  "disk.orders": ORDERS, "emission.law": "novikov_thorne",
                  "black_hole.mass": 10.0, "observing.mode": "true_colour",
                  "observing.colour_exposure": "fixed", "observing.colour_reference": 1e18,
                  "tracing.method": "closed_form"}
        render_still(default_scene(**{**values, "image.width": 16, "image.height": 9}))
        for label, maps in (("still_4k", False), ("still_4k_with_maps", True)):
            started = time.perf_counter()
            still = render_still(default_scene(**values), maps=maps)
            seconds = time.perf_counter() - started
            result.update({
                f"{label}_seconds": round(seconds, 3),
                f"{label}_trace_seconds": round(
                    still.metadata.get("trace_seconds", float("nan")), 3),
            })
            result["still_4k_method"] = still.metadata.get("tracing_method")
            release = getattr(still, "release", None)
            if release is not None:
                release()
        result["target_still_4k_seconds"] = TARGET_4K_SECONDS
    result["within_targets"] = bool(
        rate >= TARGET_PIXEL_ORDERS_PER_SECOND_PER_CORE
        and result["image_only_ratio_to_integrator"] >= TARGET_RATIO
        and result.get("still_4k_seconds", 0.0) < TARGET_4K_SECONDS)
    print(json.dumps(result))


if __name__ == "__main__":
    main()
