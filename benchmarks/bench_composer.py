"""Benchmark of the composer's previews: server time per preview, warm numba cache.

Prints ONE line of JSON on stdout (progress goes to stderr)::

    python benchmarks/bench_composer.py > bench_composer.json

What is measured
----------------
A :class:`render.composer.session.ComposerSession` of the built-in default scene
(spin 0.9, inclination 60 deg, ``tracing.method: auto``), warmed up as the
server does at start, then for each case the wall time of
``session.preview(settings, side)`` -- validation, render, critical curve, all
that the server does for a preview except encoding the PNG -- and, separately,
the PNG encoding of the same image (``png_seconds``).  Each case is run
``REPEATS`` times with the inclination nudged each time (so nothing is reused);
the median and the fastest are reported, with the median process CPU time
(all threads; on a machine shared with other work it varies much less than the
wall time, and CPU time / threads is what an idle machine would take).  The
1-minute load average is printed too: above the core count, the wall times
include waiting for other work.

Cases and targets (issue 18; on 2 cores):

* ``distant_256``: distant observer, 256x256, closed form; target <= 0.3 s.
* ``camera_256``: camera at 1000 M, 256x256, integrated; target <= 2 s.
* ``camera_drag_128``: the same camera while dragging (128x128).
"""

import io
import json
import os
import statistics
import sys
import time
from pathlib import Path

from PIL import Image

# This checkout's render, not an installed one.
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from render.composer.controls import DRAG_SIDE, PREVIEW_SIDE
from render.composer.session import ComposerSession

REPEATS = 5
TARGETS = {"distant_256": 0.3, "camera_256": 2.0}
CASES = {
    "distant_256": ({"observer.placement": "distant"}, PREVIEW_SIDE),
    "camera_256": ({"observer.placement": "camera"}, PREVIEW_SIDE),
    "camera_drag_128": ({"observer.placement": "camera"}, DRAG_SIDE),
}


def time_case(session, settings, side):
    """Median and fastest server time of REPEATS previews, and the PNG encoding time."""
    seconds, cpu_seconds, png_seconds = [], [], []
    for repeat in range(REPEATS):
        nudged = dict(settings, **{"observer.inclination": str(60 + repeat * 0.5)})
        started, cpu_started = time.perf_counter(), time.process_time()
        shown = session.preview(nudged, side)
        seconds.append(time.perf_counter() - started)
        cpu_seconds.append(time.process_time() - cpu_started)
        started = time.perf_counter()
        Image.fromarray(session.png(shown["id"])).save(io.BytesIO(), format="PNG")
        png_seconds.append(time.perf_counter() - started)
    return {"median_s": round(statistics.median(seconds), 4), "fastest_s": round(min(seconds), 4),
            "cpu_median_s": round(statistics.median(cpu_seconds), 4),
            "png_median_s": round(statistics.median(png_seconds), 4)}


def main():
    import numba

    session = ComposerSession(None, "outputs")
    print("warming up", file=sys.stderr)
    session.warm_up()
    results = {}
    for name, (settings, side) in CASES.items():
        print(f"timing {name}", file=sys.stderr)
        results[name] = time_case(session, settings, side)
        if name in TARGETS:
            results[name]["target_s"] = TARGETS[name]
            results[name]["meets_target"] = results[name]["median_s"] <= TARGETS[name]
    print(json.dumps({"benchmark": "composer_preview", "repeats": REPEATS,
                      "cores": os.cpu_count(), "numba_threads": numba.get_num_threads(),
                      "load_average_1min": round(os.getloadavg()[0], 2), "cases": results}))


if __name__ == "__main__":
    main()
