"""Wall-clock time of every example still in scenes/ (the target: under a minute each on 2 cores).

Prints ONE line of JSON on stdout, {scene file: seconds}; progress on stderr::

    python benchmarks/bench_examples.py [scene names...]

Each scene is rendered as ``nullray still`` renders it (nothing written), after one
tiny warm-up render that loads the numba cache, so the times are of the render
alone.  Scenes with an animation section are rendered as stills too (their
first frame's values without the keyframes); sequences are timed by
``bench_sequence.py``.  Run it on an otherwise idle machine.
"""

import json
import sys
import time
import warnings
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))


def main(names=()):
    from render import NullrayWarning, default_scene, load_scene, render_still

    warnings.simplefilter("ignore", NullrayWarning)
    render_still(default_scene(**{"image.width": 8, "image.height": 8}))   # warm-up
    times = {}
    for path in sorted((ROOT / "scenes").glob("*.yaml")):
        if names and path.stem not in names:
            continue
        scene = load_scene(path)
        started = time.perf_counter()
        result = render_still(scene)
        times[path.name] = round(time.perf_counter() - started, 2)
        result.release()
        print(f"{path.name}: {times[path.name]} s", file=sys.stderr)
    print(json.dumps(times))


if __name__ == "__main__":
    main(sys.argv[1:])
