"""Cost of the sky and of anti-aliasing against the plain still, measured in one run.

Prints ONE line of JSON on stdout (progress on stderr)::

    python benchmarks/bench_sky.py [--size 256] [--repeat 3]

The scene is the default camera (1000 M, spin 0.9, inclination 60 deg, opaque
disk to 20 M, 2 orders) with a wider field of view (120 M) so that plenty of
sky shows, at ``--size`` x ``--size`` pixels.  Each variant is rendered
``--repeat`` times in interleaved rounds (so that machine load drifts affect
them alike) after one warm-up, and the median wall-clock time of
``render.render_still`` is taken:

* ``plain``: no sky, one ray per pixel;
* ``stars``: the procedural star field (5 stars per square degree, ~206,000 stars);
* ``panorama``: a generated 1024 x 512 equirectangular panorama;
* ``antialias_adaptive``: 3 x 3 tent-filtered rays where neighbours differ;
* ``antialias_full``: 3 x 3 rays in every pixel;
* ``preview``: ``image.preview`` of the plain scene (160 pixels wide, one order);
  ``preview_command_seconds`` is the whole ``nullray still --preview`` command with
  stars (the default scene), in a fresh process with a warm numba cache.

``*_cost_ratio`` is a variant's time over ``plain``; the adaptive variant's
sample counts are reported too.  No target is set by the issue; the figures
are for the README.
"""

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=256)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()

    import numba
    from PIL import Image

    from render import default_scene, render_still
    from render.scene.loader import preview_scene
    from render.imaging.sky import sample_panorama_image

    folder = tempfile.mkdtemp(prefix="bench-sky-")
    panorama = os.path.join(folder, "panorama.png")
    Image.fromarray(sample_panorama_image(512, seed=5)).save(panorama)
    base = {"image.width": args.size, "image.height": args.size,
            "observer.field_of_view": 120.0, "name": "bench-sky"}
    variants = {
        "plain": default_scene(**base),
        "stars": default_scene(**base, **{"sky.backdrop": "stars"}),
        "panorama": default_scene(**base, **{"sky.backdrop": "image", "sky.image": panorama}),
        "antialias_adaptive": default_scene(**base, **{"image.supersampling": 3}),
        "antialias_full": default_scene(**base, **{"image.supersampling": 3,
                                                   "image.adaptive": False}),
    }
    variants["preview"] = preview_scene(variants["plain"])
    small = {**base, "image.width": 16, "image.height": 16}
    for extra in ({}, {"sky.backdrop": "stars"}, {"sky.backdrop": "image", "sky.image": panorama},
                  {"image.supersampling": 2}):
        render_still(default_scene(**small, **extra))   # compile and cache
    times = {name: [] for name in variants}
    info = {}
    load_start = os.getloadavg()[0]
    for round_number in range(args.repeat):
        for name, scene in variants.items():
            started = time.perf_counter()
            result = render_still(scene)
            times[name].append(time.perf_counter() - started)
            info[name] = result.metadata["observing"]
            print(f"round {round_number + 1}: {name} {times[name][-1]:.2f} s", file=sys.stderr)
    median = {name: statistics.median(t) for name, t in times.items()}
    # The whole preview command as a user runs it (a fresh process, warm numba cache).
    command = [sys.executable, "-m", "render", "still", "--preview", "--quiet", "--overwrite",
               "--set", "sky.backdrop=stars", "--output-dir", folder]
    subprocess.run(command, check=True)        # warm the cache of a fresh process
    command_times = []
    for _ in range(args.repeat):
        started = time.perf_counter()
        subprocess.run(command, check=True)
        command_times.append(time.perf_counter() - started)
    adaptive = info["antialias_adaptive"]["antialias"]
    line = {
        "benchmark": "bench_sky", "size": args.size, "repeat": args.repeat,
        "seconds": {name: round(value, 4) for name, value in median.items()},
        "stars_cost_ratio": round(median["stars"] / median["plain"], 3),
        "panorama_cost_ratio": round(median["panorama"] / median["plain"], 3),
        "antialias_adaptive_cost_ratio": round(median["antialias_adaptive"] / median["plain"], 3),
        "antialias_full_cost_ratio": round(median["antialias_full"] / median["plain"], 3),
        "preview_seconds": round(median["preview"], 3),
        "preview_command_seconds": round(statistics.median(command_times), 3),
        "adaptive_pixels_refined": adaptive["pixels_refined"],
        "adaptive_samples_per_pixel": round(adaptive["samples_per_pixel_mean"], 3),
        "stars": info["stars"]["sky"]["stars"],
        "star_images": info["stars"]["sky"]["star_images"],
        "load_average_1min": [round(load_start, 2), round(os.getloadavg()[0], 2)],
        "cores": int(numba.get_num_threads()),
    }
    print(json.dumps(line))


if __name__ == "__main__":
    main()
