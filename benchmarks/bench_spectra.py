"""The disk-integrated line of issue 15: time to a converged profile, and its accuracy.

Prints ONE line of JSON on stdout (progress goes to stderr)::

    PYTHONPATH=. python benchmarks/bench_spectra.py [--repeat 3] [--reference]

What is measured
----------------
seconds
    :func:`render.light.observing.disk_integrated_tables` for a = 0.998,
    i = 30 deg, emissivity r^-3 from the ISCO to 400 M, 200 bins from 0.2 to 1.6
    E0, direct image only (``disk.orders: 1``), default sampling tolerance
    (0.2% L1 between doublings), closed form: wall and process CPU time, medians
    of ``--repeat`` runs after a warm-up (numba cache loaded), on however many
    threads numba has (``numba_threads``).  No picture is rendered.
grid
    The lattice the doubling stopped at, the rays traced and the last L1 change.
l1_vs_reference (with ``--reference``)
    L1 distance of the normalised counts to the nested Cartesian reference of
    ``tests/test_disk_integral.py`` (about a minute).

Target (issue 15): within 0.5% L1 of a converged reference in under 2 s on 2 cores.
"""

import argparse
import json
import os
import statistics
import sys
import time

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))

import numba  # noqa: E402

from render import default_scene  # noqa: E402
from render.light.observing import disk_integrated_tables, prepare_observation  # noqa: E402

SCENE = {"image.width": 16, "image.height": 16, "observing.mode": "line",
         "black_hole.spin": 0.998, "observer.inclination": 30.0, "disk.outer_radius": 400.0,
         "observer.placement": "distant", "disk.orders": 1}


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--reference", action="store_true")
    args = parser.parse_args()
    scene = default_scene(**SCENE)
    observation = prepare_observation(scene)
    print("warm-up", file=sys.stderr)
    disk_integrated_tables(observation, scene)
    walls, cpus = [], []
    for run in range(args.repeat):
        wall, cpu = time.perf_counter(), time.process_time()
        tables, info = disk_integrated_tables(observation, scene)
        walls.append(time.perf_counter() - wall)
        cpus.append(time.process_time() - cpu)
        print(f"run {run + 1}: {walls[-1]:.2f} s", file=sys.stderr)
    grid = info["disk_grid"]
    out = {"benchmark": "disk-integrated line, a=0.998 i=30 r^-3 ISCO-400M, 200 bins",
           "numba_threads": numba.get_num_threads(), "seconds_wall": statistics.median(walls),
           "seconds_cpu": statistics.median(cpus), "cells": grid["cells"][0],
           "rays": grid["rays"], "l1_change": grid["l1_change"], "converged": grid["converged"]}
    if args.reference:
        sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..",
                                        "tests"))
        import numpy as np
        from test_disk_integral import _cartesian_reference

        print("reference (about a minute)", file=sys.stderr)
        reference = _cartesian_reference(1.0)
        out["l1_vs_reference"] = float(np.abs(tables["line"]["counts"] - reference).sum())
    out["within_target"] = out["seconds_wall"] < 2.0 and out.get("l1_vs_reference", 0) < 5e-3
    print(json.dumps(out))


if __name__ == "__main__":
    main()
