"""Memory benchmark: a large still rendered in tiles, with its peak resident memory.

Prints ONE line of JSON on stdout (progress goes to stderr)::

    /tmp/venv/bin/python benchmarks/bench_memory.py                 # 8192 x 8192, minutes
    /tmp/venv/bin/python benchmarks/bench_memory.py --size 2048     # a quick run

What is measured
----------------
The still is rendered the way ``nullray still`` renders it: validated scene,
:func:`render.imaging.still.render_still` with its temporary tile files inside the
output folder, then :func:`render.output.files.write_still` (PNG and the NPZ of every
map, streamed from the tile files) and :func:`render.output.products.write_products`
(the extra products, streamed in blocks of a tile's rows), then the temporary
files are removed.  The scene: distant observer, spin 0.9, inclination 60 deg,
opaque disk out to 20 M, ``--orders`` recorded orders (default 2), tolerance
``--tolerance`` (default 1e-6, looser than the 1e-9 default so that 67 million
rays take minutes, not half an hour; memory does not depend on it).

``--products all`` (the default) asks for every product a tiled still can
have: true colour with a fixed exposure (Novikov–Thorne disk), so the 16-bit
PNG and the linear ``.npy``, and ``output.fits``.  ``--products none`` renders
the bolometric still with only its PNG and NPZ.

``peak_rss_mb`` is ``ru_maxrss`` of this process (children excluded) at the
end, which covers rendering and writing; ``baseline_rss_mb`` is the same
after importing nullray and tracing one small image (interpreter, numpy,
numba and the compiled kernel).  The still passes if the peak stays below
``tracing.memory_budget`` (``--budget``, GB; default 2).  The output files are
deleted afterwards unless ``--keep`` is given.
"""

import argparse
import json
import os
import resource
import shutil
import sys
import tempfile
import time
from pathlib import Path


def rss_mb():
    # ru_maxrss is in kilobytes on Linux.
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=8192, help="image width = height")
    parser.add_argument("--orders", type=int, default=2)
    parser.add_argument("--budget", type=float, default=2.0, help="tracing.memory_budget, GB")
    parser.add_argument("--tolerance", type=float, default=1e-6)
    parser.add_argument("--products", choices=("all", "none"), default="all",
                        help="extra products asked for (see the docstring)")
    parser.add_argument("--output-dir", default=None,
                        help="folder for the files (default: a new temporary folder)")
    parser.add_argument("--keep", action="store_true", help="keep the written files")
    args = parser.parse_args(argv)

    from render import default_scene
    from render.output.files import write_still
    from render.output.products import write_products
    from render.imaging.still import render_still

    values = {"name": "bench-memory", "observer.placement": "distant", "black_hole.spin": 0.9,
              "observer.inclination": 60.0, "disk.orders": args.orders,
              "tracing.tolerance": args.tolerance, "tracing.memory_budget": args.budget}
    if args.products == "all":
        values.update({"observing.mode": "true_colour", "emission.law": "novikov_thorne",
                       "observing.colour_exposure": "fixed", "observing.colour_reference": 1e10,
                       "output.fits": True})
    render_still(default_scene(**values, **{"image.width": 16, "image.height": 16}))
    baseline = rss_mb()
    scene = default_scene(**values, **{"image.width": args.size, "image.height": args.size})
    folder = Path(args.output_dir or tempfile.mkdtemp(prefix="nullray-bench-memory-"))
    folder.mkdir(parents=True, exist_ok=True)
    print(f"[bench_memory] rendering {args.size} x {args.size} into {folder}", file=sys.stderr)
    started = time.perf_counter()
    result = render_still(scene, workdir=folder)
    rendered = time.perf_counter()
    try:
        paths = write_still(result, folder)
        paths.update(write_products(result, folder))
    finally:
        result.release()
    written = time.perf_counter()
    tiles = result.metadata.get("tiles", {"count": 1, "rows_per_tile": args.size})
    files = sorted(p.name for p in folder.iterdir())
    sizes = {kind: os.path.getsize(path) for kind, path in paths.items()}
    peak = rss_mb()
    line = {
        "benchmark": "nullray memory", "width": args.size, "height": args.size,
        "orders": args.orders, "tolerance": args.tolerance, "memory_budget_gb": args.budget,
        "products": args.products, "observing_mode": values.get("observing.mode", "bolometric"),
        "tiles": tiles["count"], "rows_per_tile": tiles["rows_per_tile"],
        "estimated_untiled_gb": tiles.get("estimated_untiled_gb"),
        "baseline_rss_mb": round(baseline, 1), "peak_rss_mb": round(peak, 1),
        "under_budget": peak * 1e6 < args.budget * 1e9,
        "render_seconds": round(rendered - started, 2),
        "write_seconds": round(written - rendered, 2),
        "files_written": files, "file_bytes": sizes,
        "fate_counts": result.metadata["fate_counts"],
    }
    if not args.keep:
        for path in paths.values():
            os.unlink(path)
        if args.output_dir is None:
            shutil.rmtree(folder, ignore_errors=True)
    print(json.dumps(line))
    return 0 if line["under_budget"] else 1


if __name__ == "__main__":
    sys.exit(main())
