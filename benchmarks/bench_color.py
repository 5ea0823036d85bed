"""True-colour shading cost against the core benchmark scene's render time.

Prints ONE line of JSON on stdout::

    /tmp/venv/bin/python benchmarks/bench_color.py [--size 512] [--repeat 3]

The scene is the core benchmark's (512 x 512, spin 0.9, inclination 60 deg,
distant observer, transparent disk, 2 orders) with a Novikov–Thorne disk.
The rays are traced once; then the bolometric shading and the true-colour
shading (CIE XYZ from the precomputed blackbody table, sRGB, exposure, 16-bit
encoding) are timed on the same crossings.  ``overhead_fraction`` is the extra
time of true-colour over bolometric shading divided by the whole bolometric
render (trace + shading); the target is at most 0.30.  Medians of ``--repeat`` runs.
"""

import argparse
import json
import statistics
import time

import numpy as np


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=512)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    print(json.dumps(measure_colour_overhead(args.size, args.repeat)))


def measure_colour_overhead(size=512, repeat=3):
    """The figures of this benchmark as a dict (also used by bench_core.py)."""
    args = argparse.Namespace(size=size, repeat=repeat)

    from render import default_scene
    from render.light.cie import blackbody_xyz_table
    from render.light.disk import on_disk, redshift_factor
    from render.light.observing import prepare_observation, shade
    from render.geodesics.tracing import trace_bundle
    from render.imaging.still import render_still

    values = {"image.width": args.size, "image.height": args.size, "black_hole.spin": 0.9,
              "observer.inclination": 60.0, "observer.placement": "distant",
              "disk.surface": "transparent", "disk.orders": 2,
              "emission.law": "novikov_thorne", "black_hole.mass": 10.0}
    bolometric = default_scene(**values)
    colour = default_scene(**values, **{"observing.mode": "true_colour"})
    render_still(default_scene(**{**values, "image.width": 8, "image.height": 8}))  # warm-up
    started = time.perf_counter()
    blackbody_xyz_table()
    table_seconds = time.perf_counter() - started

    renders = []
    for _ in range(args.repeat):
        started = time.perf_counter()
        render_still(bolometric)
        renders.append(time.perf_counter() - started)

    alpha, beta, bundle = bolometric.viewpoint().rays()
    raw = trace_bundle(bundle, bolometric.spin, n_record=2, tolerance=bolometric["tracing.tolerance"],
                       max_steps=bolometric["tracing.max_steps"],
                       max_crossings=bolometric["tracing.max_crossings"])
    g = redshift_factor(raw["r"], bundle.lam[:, None], bolometric.spin,
                        bundle.energy_ratio[:, None])
    hits = on_disk(raw["r"], bolometric.inner_radius, bolometric["disk.outer_radius"])

    def timed(scene):
        obs = prepare_observation(scene)
        times = []
        for _ in range(args.repeat):
            started = time.perf_counter()
            shade(obs, scene, raw, g, hits, bundle)
            times.append(time.perf_counter() - started)
        return statistics.median(times)

    shade_bolometric = timed(bolometric)
    shade_colour = timed(colour)
    render_median = statistics.median(renders)
    overhead = (shade_colour - shade_bolometric) / render_median
    return {
        "benchmark": "true_colour_shading", "size": args.size, "repeat": args.repeat,
        "render_bolometric_seconds": round(render_median, 4),
        "shade_bolometric_seconds": round(shade_bolometric, 4),
        "shade_true_colour_seconds": round(shade_colour, 4),
        "colour_table_build_seconds": round(table_seconds, 4),
        "overhead_fraction": round(overhead, 4), "target_overhead_fraction": 0.30,
        "within_target": bool(overhead <= 0.30),
        "disk_crossings": int(np.count_nonzero(hits)),
    }


if __name__ == "__main__":
    main()
