"""Command line: argument parsing only; the work is done by the Python API."""

import argparse
import contextlib
import signal
import sys
import threading
import warnings

from .about import __version__
from .errors import BAD_INPUT_ERRORS, RUN_ERRORS, NullrayWarning, Terminated, UsageError

EXIT_FAILED = 1       # a failure while running: a write that failed, a worker that died
EXIT_BAD_INPUT = 2
EXIT_INTERRUPTED = 130   # 128 + SIGINT
EXIT_TERMINATED = 143    # 128 + SIGTERM


def _add_common_options(command):
    """--set, --output-dir, --overwrite and --allow-outside-files, shared by the commands
    that write files."""
    command.add_argument("--set", dest="overrides", action="append", default=[],
                         metavar="KEY=VALUE",
                         help="override a scene value, e.g. black_hole.spin=0.5")
    command.add_argument("--output-dir", default="outputs", metavar="DIR",
                         help="folder the files are written to (default: outputs)")
    command.add_argument("--overwrite", action="store_true",
                         help="replace existing output files of the same name")
    command.add_argument("--allow-outside-files", action="store_true",
                         help="let the scene file read side files (emission.profile, sky.image) "
                              "outside its own folder")


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
                               "when 8 or more frames are left, else 1; 1 when the film "
                               "is traced and shaded once)")
    sequence.add_argument("--scheduler", metavar="ADDRESS",
                          help="Dask distributed scheduler, e.g. tcp://10.0.0.5:8786")
    sequence.add_argument("--quiet", action="store_true", help="print nothing on success")
    sequence.add_argument("--preview", action="store_true",
                          help="quick look: at most 12 small one-order frames, keyframes at the "
                               "same moments, into <name>-preview/")

    figure = commands.add_parser(
        "figure", help="figures of a still's maps with colour bars and scales in M and angle")
    figure.add_argument("source", nargs="?",
                        help="a still's NPZ, or a YAML scene file rendered first "
                             "(default: the built-in default scene)")
    figure.add_argument("--map", dest="maps", action="append", default=[], metavar="NAME",
                        help="picture, intensity, g, r, delay, order or fate (repeatable; "
                             "default: intensity)")
    _add_common_options(figure)

    table = commands.add_parser(
        "table", help="a line or spectrum on a grid of parameters, as a FITS table model")
    table.add_argument("scene", help="YAML scene file (observing.mode line or spectrum)")
    table.add_argument("--vary", dest="varies", action="append", default=[],
                       metavar="KEY=LOW:HIGH:COUNT",
                       help="a numeric key's grid, e.g. black_hole.spin=0:0.998:8 (repeatable)")
    _add_common_options(table)
    table.add_argument("--workers", type=int, default=None, metavar="N",
                       help="local processes computing grid points (default: one per core)")
    table.add_argument("--scheduler", metavar="ADDRESS",
                       help="Dask distributed scheduler, e.g. tcp://10.0.0.5:8786")
    table.add_argument("--quiet", action="store_true", help="print nothing on success")

    measure = commands.add_parser(
        "measure", help="measure the shadow against the analytic prediction (exit 1 on a miss)")
    measure.add_argument("scene", help="YAML scene file")
    _add_common_options(measure)
    measure.add_argument("--tolerance", dest="tolerances", action="append", default=[],
                         metavar="QUANTITY=VALUE",
                         help="override one tolerance, e.g. area=1e-4 (see docs/measure.md)")
    compose = commands.add_parser(
        "compose", help="a live preview of a scene in the browser, with controls (local server)")
    compose.add_argument("scene", nargs="?", help="YAML scene file (default: built-in default scene)")
    compose.add_argument("--output-dir", default="outputs", metavar="DIR",
                         help="folder saved scenes and stills are written to (default: outputs)")
    compose.add_argument("--address", default="127.0.0.1", metavar="HOST",
                         help="address to listen on (default: 127.0.0.1, this machine only)")
    compose.add_argument("--port", type=int, default=0, metavar="N",
                         help="port to listen on (default: a free one)")
    return parser


def _compose(args):
    from .composer.session import ComposerSession
    from .composer.server import serve

    if not 0 <= args.port <= 65535:
        raise UsageError(f"--port {args.port} is not allowed; expected 0 to 65535")
    session = ComposerSession(args.scene, args.output_dir)
    try:
        serve(session, args.address, args.port, announce=lambda url: print(
            f"composer at {url} (open it in a browser; Ctrl-C stops)", flush=True))
    except OSError as exc:
        raise UsageError(f"cannot listen on {args.address}:{args.port}: "
                         f"{exc.strerror or exc}") from None
    return 0


def _measure(args):
    from .api import make_measurement
    from .measure.shadow_measurement import format_table, parse_tolerances

    tolerances = parse_tolerances(args.tolerances)
    scene = _load(args)
    measurement, paths = make_measurement(
        scene, args.output_dir, tolerances=tolerances, overwrite=args.overwrite,
        on_measured=lambda measured: print(format_table(measured)))
    for path in paths.values():
        print(f"wrote {path}")
    return 0 if measurement.passed else 1


def _figure(args):
    from .api import make_figures

    paths = make_figures(args.source, args.maps or ["intensity"], args.output_dir,
                         overrides=args.overrides, overwrite=args.overwrite)
    for path in paths.values():
        print(f"wrote {path}")
    return 0


def _table(args):
    from .api import make_table_model
    from .progress import GridProgress

    if not args.varies:
        raise UsageError("nullray table needs at least one --vary KEY=LOW:HIGH:COUNT")
    scene = _load(args)
    bar = GridProgress(quiet=args.quiet)
    try:
        paths, summary = make_table_model(scene, args.varies, args.output_dir,
                                          workers=args.workers, scheduler=args.scheduler,
                                          overwrite=args.overwrite, progress=bar)
    finally:
        bar.close()
    if not args.quiet:
        print(f"{summary['points']} grid points over {', '.join(summary['parameters'])}; "
              f"wrote {paths['table']} (finished points kept in {paths['points']}/)")
    return 0


def _load(args):
    from .api import open_scene

    return open_scene(args.scene, args.overrides, allow_outside_files=args.allow_outside_files)


def _still(args, shown=()):
    from .api import make_still
    from .progress import RayProgress

    if args.preview:
        args.overrides = list(args.overrides) + ["image.preview=true"]
    scene = _load(args)
    bar = RayProgress(quiet=args.quiet)
    try:
        result, paths = make_still(scene, args.output_dir, overwrite=args.overwrite,
                                   progress=bar, scheduler=args.scheduler)
    finally:
        bar.close()
    if not args.quiet:
        _print_still_summary(scene, result, paths, shown)
    return 0


def _print_still_summary(scene, result, paths, shown=()):
    meta = result.metadata
    height, width = result.pixels.shape[:2]
    counts = ", ".join(f"{k} {v}" for k, v in meta["fate_counts"].items())
    print(f"rendered {width}x{height} in {meta['total_seconds']:.2f} s (spin {scene.spin:g}, "
          f"inclination {scene['observer.inclination']:g} deg, ISCO {meta['isco']:.4f} M); "
          f"pixels: {counts}")
    observed = meta.get("observing", {})
    antialias = observed.get("antialias")
    if antialias:
        print(f"anti-aliasing: {antialias['samples_total']} samples "
              f"({antialias['samples_per_pixel_mean']:.2f} per pixel; "
              f"{antialias['pixels_refined']} of {antialias['pixels']} pixels refined "
              f"with {antialias['supersampling']}x{antialias['supersampling']} "
              f"{antialias['filter']}-filtered rays)")
    if observed.get("sky", {}).get("backdrop") == "stars":
        stars = observed["sky"]
        print(f"sky: {stars['stars']} stars, {stars['star_images']:.0f} star images in view")
    for warning in observed.get("warnings", ()):
        if warning not in shown:   # those warned while rendering are printed already
            print(f"nullray: warning: {warning}", file=sys.stderr)
    if "total_flux_jy" in observed:
        print(f"total flux density {observed['total_flux_jy']:.4g} Jy at "
              f"{observed['frequency_hz']:.4g} Hz; pixel {observed['pixel_scale']:.4g} "
              f"{observed['pixel_scale_unit']}")
    for path in paths.values():
        print(f"wrote {path}")


def _sequence(args):
    from .api import render_sequence
    from .progress import FrameProgress

    scene = _load(args)
    bar = FrameProgress(quiet=args.quiet)
    try:
        result = render_sequence(scene, args.output_dir, workers=args.workers,
                                 scheduler=args.scheduler, overwrite=args.overwrite,
                                 progress=bar, preview=args.preview)
    finally:
        bar.close()
    flash = result.flash   # a failed flash check was warned (NullrayWarning) while writing
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


def _one_line_error(exc, status):
    # One line, whatever the key or file name contained.
    message = str(exc).replace("\r", "\\r").replace("\n", "\\n")
    print(f"nullray: error: {message}", file=sys.stderr)
    return status


def main(argv=None):
    """Entry point of the ``nullray`` command; returns the exit status."""
    received = []
    with _stop_signals(received), warnings.catch_warnings():
        shown = set()
        warnings.simplefilter("always", NullrayWarning)
        warnings.showwarning = _one_line_warnings(shown, warnings.showwarning)
        args = None
        try:
            args = _parser().parse_args(argv)
            return _run(args, shown)
        except BAD_INPUT_ERRORS as exc:
            return _one_line_error(exc, EXIT_BAD_INPUT)
        except RUN_ERRORS as exc:
            return _one_line_error(exc, EXIT_FAILED)
        except KeyboardInterrupt as exc:
            return _interrupted(isinstance(exc, Terminated), args)
        except ImportError:
            # Ctrl-C while numba initialises surfaces as an ImportError: still a stop.
            if received:
                return _interrupted(received[-1] != signal.SIGINT, args)
            raise


def _run(args, shown):
    if args.command == "keys":
        from .api import keys_reference

        print(keys_reference())
        return 0
    if not args.output_dir.strip():
        raise UsageError("--output-dir '' is not allowed; give a folder, e.g. "
                         "--output-dir outputs")
    if args.command == "measure":
        return _measure(args)
    if args.command == "compose":
        return _compose(args)
    if args.command == "figure":
        return _figure(args)
    if args.command == "sequence":
        return _sequence(args)
    if args.command == "table":
        return _table(args)
    return _still(args, shown)


def _interrupted(by_sigterm, args):
    what = "stopped by SIGTERM" if by_sigterm else "interrupted"
    folder = getattr(args, "output_dir", None)
    where = f" in {folder}/" if folder else ""
    print(f"nullray: {what}; finished outputs (if any) are{where or ' kept'}, nothing "
          "half-written", file=sys.stderr)
    return EXIT_TERMINATED if by_sigterm else EXIT_INTERRUPTED


@contextlib.contextmanager
def _stop_signals(received):
    """Ctrl-C and SIGTERM stop the work at a clean point (KeyboardInterrupt / Terminated)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def stop(number, frame):
        received.append(number)
        raise Terminated() if number == signal.SIGTERM else KeyboardInterrupt()

    previous = {number: signal.signal(number, stop) for number in (signal.SIGINT, signal.SIGTERM)}
    try:
        yield
    finally:
        for number, handler in previous.items():
            signal.signal(number, handler)


def _one_line_warnings(shown, fallback):
    """A showwarning that prints a NullrayWarning as one line, once."""
    def show(message, category, filename, lineno, file=None, line=None):
        if not issubclass(category, NullrayWarning):
            return fallback(message, category, filename, lineno, file, line)
        text = str(message).replace("\n", " ")
        if text not in shown:
            shown.add(text)
            print(f"nullray: warning: {text}", file=sys.stderr)
    return show


if __name__ == "__main__":
    sys.exit(main())
