"""Command line: argument parsing only; the work is done by the Python API."""

import argparse
import os
import sys
from pathlib import Path

from . import __version__

EXIT_BAD_INPUT = 2
EXIT_INTERRUPTED = 130


class OutputFolderError(Exception):
    """The --output-dir cannot be created or written; the message is one line."""


def _add_common_options(command):
    """--set, --output-dir and --overwrite, shared by the commands that write files."""
    command.add_argument("--set", dest="overrides", action="append", default=[],
                         metavar="KEY=VALUE",
                         help="override a scene value, e.g. black_hole.spin=0.5")
    command.add_argument("--output-dir", default="outputs", metavar="DIR",
                         help="folder the files are written to (default: outputs)")
    command.add_argument("--overwrite", action="store_true",
                         help="replace existing output files of the same name")


def _parser():
    parser = argparse.ArgumentParser(
        prog="nullray",
        description="Ray-trace thin accretion disks around Kerr black holes.")
    parser.add_argument("--version", action="version", version=f"nullray {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND")
    commands.required = True

    still = commands.add_parser("still", help="render one image and its data maps")
    still.add_argument("scene", nargs="?", help="YAML scene file (default: built-in default scene)")
    _add_common_options(still)
    still.add_argument("--quiet", action="store_true", help="print nothing on success")
    still.add_argument("--preview", action="store_true",
                       help="quick look: small, one order, loose tolerance (image.preview)")
    still.add_argument("--scheduler", metavar="ADDRESS",
                       help="render bands of rows on a Dask distributed scheduler")

    commands.add_parser("keys", help="print the scene-key reference (Markdown)")

    sequence = commands.add_parser(
        "sequence", help="render (or resume) a scene's animation: frames, video, light curve")
    sequence.add_argument("scene", help="YAML scene file with an animation section")
    _add_common_options(sequence)
    sequence.add_argument("--workers", type=int, default=None, metavar="N",
                          help="local processes rendering frames (default: one per core "
                               "when 8 or more frames are left, else 1)")
    sequence.add_argument("--scheduler", metavar="ADDRESS",
                          help="Dask distributed scheduler, e.g. tcp://10.0.0.5:8786")
    sequence.add_argument("--quiet", action="store_true", help="print nothing on success")

    measure = commands.add_parser(
        "measure", help="measure the shadow against the analytic prediction (exit 1 on a miss)")
    measure.add_argument("scene", help="YAML scene file")
    _add_common_options(measure)
    measure.add_argument("--tolerance", dest="tolerances", action="append", default=[],
                         metavar="QUANTITY=VALUE",
                         help="override one tolerance, e.g. area=1e-4 (see docs/measure.md)")
    return parser


def _measure(args):
    from .measure import (format_table, measure_paths, measure_scene, parse_tolerances,
                          write_measurement)
    from .output import check_free

    tolerances = parse_tolerances(args.tolerances)
    scene = _load(args)
    check_free(measure_paths(scene, args.output_dir).values(), args.overwrite)
    measurement = measure_scene(scene, tolerances)
    print(format_table(measurement))
    for path in write_measurement(measurement, scene, args.output_dir, args.overwrite).values():
        print(f"wrote {path}")
    return 0 if measurement.passed else 1


def _load(args):
    from .scene import default_scene, load_scene

    if args.scene:
        return load_scene(args.scene, args.overrides)
    return default_scene(args.overrides, name="default")


def _still(args):
    from .output import check_free, still_paths, write_still
    from .still import render_still

    from .observing import prepare_observation
    from .products import product_paths, write_products

    from .sensor import prepare_sky, preview_scene

    if getattr(args, "preview", False):
        args.overrides = list(args.overrides) + ["image.preview=true"]
    scene = _load(args)
    if scene["image.preview"]:
        scene = preview_scene(scene)
    prepare_observation(scene)  # reads an emission profile table: fail before any file is made
    prepare_sky(scene)  # reads a sky panorama: likewise
    folder = Path(args.output_dir)
    # Refuse before any work if a target exists (nothing the user made is
    # overwritten silently).
    check_free(list(still_paths(scene.document, folder).values())
               + list(product_paths(scene.document, folder).values()), args.overwrite)
    scheduler = getattr(args, "scheduler", None)
    if scheduler and (scene["sky.kind"] != "none" or scene["image.supersampling"] > 1):
        raise OutputFolderError("--scheduler renders bands of rows, but a sky or "
                                "image.supersampling needs the whole image at once")
    if scheduler:
        from .distributed import check_scheduler

        check_scheduler(scheduler)  # unreachable: one line before the folder is made
    # Likewise make sure the folder can be written before the (long) render.
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputFolderError(f"--output-dir {str(folder)!r} cannot be used: "
                                f"{exc.strerror or exc}") from None
    if not os.access(folder, os.W_OK | os.X_OK):
        raise OutputFolderError(f"--output-dir {str(folder)!r} is not writable")
    from .progress import RayProgress

    bar = RayProgress(quiet=args.quiet)
    try:
        # A still larger than tracing.memory_budget keeps its maps in temporary files
        # inside the output folder until they are written (render.tiling).
        if scheduler:
            from .distributed import render_still_on_cluster

            result = render_still_on_cluster(scene, scheduler, workdir=folder, progress=bar)
        else:
            result = render_still(scene, progress=bar, workdir=folder)
    finally:
        bar.close()
    try:
        paths = write_still(result, folder, overwrite=args.overwrite)
        paths.update(write_products(result, folder, overwrite=args.overwrite))
    finally:
        result.release()
    if not args.quiet:
        meta = result.metadata
        counts = ", ".join(f"{k} {v}" for k, v in meta["fate_counts"].items())
        print(f"rendered {scene['image.width']}x{scene['image.height']} in "
              f"{meta['total_seconds']:.2f} s (spin {scene.spin:g}, inclination "
              f"{scene['observer.inclination']:g} deg, ISCO {meta['isco']:.4f} M); pixels: {counts}")
        observed = meta.get("observing", {})
        antialias = observed.get("antialias")
        if antialias:
            print(f"anti-aliasing: {antialias['samples_total']} samples "
                  f"({antialias['samples_per_pixel_mean']:.2f} per pixel; "
                  f"{antialias['pixels_refined']} of {antialias['pixels']} pixels refined "
                  f"with {antialias['supersampling']}x{antialias['supersampling']} "
                  f"{antialias['filter']}-filtered rays)")
        if observed.get("sky", {}).get("kind") == "stars":
            stars = observed["sky"]
            print(f"sky: {stars['stars']} stars, {stars['star_images']:.0f} star images in view")
        for warning in observed.get("warnings", ()):
            print(f"nullray: warning: {warning}", file=sys.stderr)
        if "total_flux_jy" in observed:
            print(f"total flux density {observed['total_flux_jy']:.4g} Jy at "
                  f"{observed['frequency_hz']:.4g} Hz; pixel {observed['pixel_scale']:.4g} "
                  f"{observed['pixel_scale_unit']}")
        for path in paths.values():
            print(f"wrote {path}")
    return 0


def _sequence(args):
    from .animation import render_sequence
    from .progress import FrameProgress

    if args.workers is not None and args.workers < 1:
        raise OutputFolderError(f"--workers {args.workers} is not allowed; expected N >= 1")
    scene = _load(args)
    bar = FrameProgress(quiet=args.quiet)
    try:
        result = render_sequence(scene, args.output_dir, workers=args.workers,
                                 scheduler=args.scheduler, overwrite=args.overwrite,
                                 progress=bar)
    finally:
        bar.close()
    flash = result.flash
    if flash and not flash["passes"]:
        print(f"nullray: warning: {flash['worst_flashes']} flashes in the second starting at "
              f"{flash['worst_start_s']:.2f} s (frame {flash['worst_start_frame']}): more than "
              "3 per second fails WCAG 2.2 SC 2.3.1 (photosensitive epilepsy); do not screen "
              "it publicly as is", file=sys.stderr)
    if not args.quiet:
        print(f"{len(result.rendered)} frames rendered, {len(result.reused)} already finished, "
              f"in {result.folder}/")
        if flash:
            print(f"flash check: worst second has {flash['worst_flashes']} flashes (starting "
                  f"{flash['worst_start_s']:.2f} s); {'passes' if flash['passes'] else 'FAILS'} "
                  "WCAG 2.2 SC 2.3.1")
        for path in result.paths.values():
            print(f"wrote {path}")
    return 0


def main(argv=None):
    """Entry point of the ``nullray`` command; returns the exit status."""
    from .animation import SequenceFolderError
    from .distributed import SchedulerError
    from .output import OutputExists
    from .scene import SceneError

    args = _parser().parse_args(argv)
    try:
        if args.command == "keys":
            from .scene import keys_reference

            print(keys_reference())
            return 0
        if args.command == "measure":
            return _measure(args)
        if args.command == "sequence":
            return _sequence(args)
        return _still(args)
    except (SceneError, OutputExists, OutputFolderError, SequenceFolderError,
            SchedulerError) as exc:
        # One line, whatever the key or file name contained.
        message = str(exc).replace("\r", "\\r").replace("\n", "\\n")
        print(f"nullray: error: {message}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print(f"nullray: interrupted; finished outputs (if any) are in {args.output_dir}/",
              file=sys.stderr)
        return EXIT_INTERRUPTED


if __name__ == "__main__":
    sys.exit(main())
