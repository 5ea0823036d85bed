"""The public front door: whole tasks (a still, a film, a measurement) from a validated Scene.

The rooms below do one thing each; this module strings them together the way a
user means it, so that the command line (:mod:`render.cli`) only parses
arguments and prints.  Every function takes a :class:`render.scene.loader.Scene`.

Examples
--------
>>> import render
>>> scene = render.default_scene(**{"image.width": 8, "image.height": 8})
>>> render.render_still(scene).pixels.shape
(8, 8)
"""

import os
import warnings
from pathlib import Path

from .errors import NullrayWarning, OutputFolderError, SceneError, UsageError
from .film.frame import shades_once
from .film.sequence import render_sequence as _render_sequence_here
from .imaging.sensor import needs_sensor, prepare_sky
from .imaging.still import render_still as _render_still_here
from .light.observing import prepare_observation
from .measure.shadow_measurement import measure_paths, measure_scene, write_measurement
from .measure.visibility_products import read_baselines, visibility_paths, write_visibilities
from .output.figures import MAP_NAMES, figure_path, map_values, read_still, write_figure
from .output.figures import plot  # noqa: F401  (the public Python API: plot(result, map, ax))
from .output.files import (check_free, published_together, still_paths, sweep_dead_temporaries,
                           write_still)
from .output.products import product_paths, write_products
from .parallel import (auto_workers, capped_workers, check_scheduler, connect, frame_results,
                       render_still_on_cluster, task_results)
from .tables.grid import build_table, compute_point, parse_vary, plan_table, table_paths
from .scene.keys import keys_reference
from .scene.loader import default_scene, load_scene, preview_film, preview_scene

__all__ = ["open_scene", "keys_reference", "render_still", "make_still", "render_sequence",
           "make_measurement", "plot", "make_figures", "make_table_model"]


def open_scene(path=None, overrides=(), *, allow_outside_files=False):
    """The validated scene of a YAML file, or the built-in default scene when ``path`` is None.

    ``overrides`` are ``key=value`` strings applied on top (as given to ``--set``);
    the default scene is named ``default``.  A scene file's side files must lie
    in its folder unless ``allow_outside_files`` (``--allow-outside-files``);
    side files named in ``overrides`` are the caller's own, read from the
    current folder (:meth:`render.scene.loader.Scene.side_file`).
    """
    if path:
        return load_scene(path, overrides, allow_outside_files=allow_outside_files)
    return default_scene(overrides, name="default")


def render_still(scene, progress=None, *, memory_budget=None, workdir=None, maps=None,
                 scheduler=None):
    """Render a scene's still and return its :class:`~render.imaging.result.StillResult`.

    ``image.preview`` renders the quick look (:func:`render.scene.loader.preview_scene`);
    ``scheduler`` (a Dask address) renders bands of rows on a cluster.  The other
    arguments are those of :func:`render.imaging.still.render_still`.  Nothing is
    written; see :func:`make_still` for the files.
    """
    if scene["image.preview"]:
        scene = preview_scene(scene)
    if scheduler:
        if needs_sensor(scene):
            raise UsageError("--scheduler renders bands of rows, but a sky or "
                             "image.supersampling needs the whole image at once")
        result = render_still_on_cluster(scene, scheduler, workdir=workdir, progress=progress)
    else:
        result = _render_still_here(scene, progress, memory_budget=memory_budget,
                                    workdir=workdir, maps=maps)
    if scene["animation.keyframes"]:
        _warn(result, KEYFRAMES_IGNORED)
    return result


# A still shows the scene's own values; keyframes belong to a film.
KEYFRAMES_IGNORED = ("animation.keyframes are ignored by a still, which shows the scene's own "
                     "values; render one frame of the film with `nullray sequence "
                     "--set animation.frames=1` instead")


def still_only_keys(scene):
    """One line naming the keys of ``scene`` that a film ignores, or None.

    Frames are unpolarised, carry no visibilities and trace every pixel
    (docs/animation.md): a film given these keys says so rather than drop them silently.
    """
    ignored = []
    if scene["polarisation.model"] != "none":
        ignored.append(f"polarisation.model = {scene['polarisation.model']!r}")
    if scene["visibilities.compute"]:
        ignored.append("visibilities.compute = true")
    if scene["tracing.sampling"] != "every_pixel":
        ignored.append(f"tracing.sampling = {scene['tracing.sampling']!r}")
    if not ignored:
        return None
    return (f"a film ignores {', '.join(ignored)}: its frames are unpolarised, carry no "
            "visibilities and trace every pixel; render a still (`nullray still`) for them")


def _warn(result, message):
    """Record a warning in the still's metadata (the command line prints it) and warn API users."""
    result.metadata.setdefault("observing", {}).setdefault("warnings", []).append(message)
    warnings.warn(message, NullrayWarning, stacklevel=3)


def make_still(scene, output_dir="outputs", *, overwrite=False, progress=None, scheduler=None):
    """Render a still and publish its files; return ``(result, paths)``.

    Everything that can be refused is refused before any tracing and before the
    folder is made: a scene that would write no file at all, the emission table and sky image are read, the targets are
    checked free (unless ``overwrite``), the scheduler is reached, and the folder
    is checked writable.  Temporaries that killed runs left in the folder are
    swept (:func:`render.output.files.sweep_dead_temporaries`).  A still larger
    than ``tracing.memory_budget`` keeps its maps in temporary files inside the
    output folder until they are written (:mod:`render.imaging.tiling`); they
    are removed afterwards.  All of the still's files are published together
    at the end (:func:`render.output.files.published_together`): an interrupted
    or failed write, or a concurrent run of the same name, never leaves a PNG
    without its NPZ or a set mixed from two scenes.
    """
    if scene["image.preview"]:
        scene = preview_scene(scene)
    prepare_observation(scene)   # reads an emission profile table
    prepare_sky(scene)           # reads a sky panorama
    baselines = read_baselines(scene)   # reads the baselines table of the visibilities
    folder = Path(output_dir)
    targets = (list(still_paths(scene.document, folder).values())
               + list(product_paths(scene.document, folder).values())
               + [folder / name for name in visibility_paths(scene).values()])
    if not targets:
        raise SceneError("output.png, output.npz and output.fits are all false, so the still "
                         "would write nothing; turn one on (e.g. --set output.png=true), or "
                         "call render.render_still for the arrays alone")
    check_free(targets, overwrite)
    if scheduler:
        if needs_sensor(scene):
            raise UsageError("--scheduler renders bands of rows, but a sky or "
                             "image.supersampling needs the whole image at once")
        check_scheduler(scheduler)
    _check_writable_folder(folder)
    sweep_dead_temporaries(folder)   # what runs killed with SIGKILL left behind
    result = render_still(scene, progress, workdir=folder, scheduler=scheduler)
    try:
        # The PNG, the NPZ and the products appear together, from this run, or not at all.
        with published_together(folder):
            paths = write_still(result, folder, overwrite=overwrite)
            paths.update(write_products(result, folder, overwrite=overwrite))
            paths.update(write_visibilities(result, scene, folder, overwrite, baselines))
    finally:
        result.release()
    return result, paths


def make_figures(source, map_names, output_dir="outputs", *, overrides=(), overwrite=False,
                 progress=None):
    """Figures with scales of a still's maps; return ``{map name: path}``.

    ``source`` is a still's NPZ (read back, nothing traced) or a scene file (or
    None: the default scene), rendered without writing its still.  Each map's
    figure is ``<name>_<map>.png`` (:func:`render.output.figures.plot`).
    Unknown map names and taken targets are refused before any tracing.
    """
    for name in map_names:
        if name not in MAP_NAMES:
            raise UsageError(f"--map {name!r} is not allowed; expected one of "
                             f"{', '.join(MAP_NAMES)}")
    if source is not None and str(source).endswith(".npz"):
        if overrides:
            raise UsageError("--set changes a scene; a still's NPZ is already rendered")
        try:
            result = read_still(source)
        except (OSError, ValueError) as exc:
            if isinstance(exc, UsageError):
                raise
            raise UsageError(f"{str(source)!r} cannot be read as a still's NPZ: {exc}") from None
    else:
        scene = open_scene(source, overrides)
        check_free([figure_path(scene.document, name, output_dir) for name in map_names],
                   overwrite)
        result = render_still(scene, progress)
    check_free([figure_path(result.metadata["scene"], name, output_dir) for name in map_names],
               overwrite)
    _check_writable_folder(Path(output_dir))
    try:
        for name in map_names:
            map_values(result, name)   # every map exists before any file is written
        return {name: write_figure(result, name, output_dir, overwrite) for name in map_names}
    finally:
        result.release()


def make_measurement(scene, output_dir="outputs", *, tolerances=None, overwrite=False,
                     on_measured=None):
    """Measure a scene's shadow and write the report and overlay; return ``(measurement, paths)``.

    The targets are checked free (unless ``overwrite``) before any tracing.
    ``tolerances`` ({quantity: tolerance}) override the scene's ``measure.*`` keys;
    ``on_measured(measurement)`` is called once it is measured, before its files
    are written (the command line prints the check table there).
    """
    check_free(measure_paths(scene, output_dir).values(), overwrite)
    measurement = measure_scene(scene, tolerances)
    if on_measured is not None:
        on_measured(measurement)
    folder = Path(output_dir)
    _check_writable_folder(folder)
    with published_together(folder):   # the report and its overlay, both or neither
        paths = write_measurement(measurement, scene, output_dir, overwrite)
    return measurement, paths


def _check_writable_folder(folder):
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputFolderError(f"--output-dir {str(folder)!r} cannot be used: "
                                f"{exc.strerror or exc}") from None
    if not os.access(folder, os.W_OK | os.X_OK):
        raise OutputFolderError(f"--output-dir {str(folder)!r} is not writable")


def render_sequence(scene, output_dir="outputs", *, workers=1, scheduler=None, overwrite=False,
                    progress=None, products=True, preview=False):
    """Render (or finish) a scene's frame sequence, its video, contact sheet and light curve.

    Parameters
    ----------
    scene : Scene
        With an ``animation`` section.
    output_dir : str or Path
        Frames go to ``output_dir/<scene name>/``.
    workers : int or None
        Local processes (1: render in this process; None: every core for a long
        enough film, :func:`render.parallel.auto_workers`, unless the film is traced
        and shaded once, :func:`render.film.frame.shades_once`: then 1).
    scheduler : str, optional
        Address of a Dask distributed scheduler (e.g. ``tcp://10.0.0.5:8786``);
        an unreachable one is refused before any file is made.
    overwrite, progress, products
        As for :func:`render.film.sequence.render_sequence`.
    preview : bool
        Render the quick look instead (:func:`render.scene.loader.preview_film`: small
        frames, one order, at most 12 frames with the keyframes at the same moments,
        into ``output_dir/<scene name>-preview/``); also when ``image.preview`` is true.

    Returns
    -------
    render.film.sequence.SequenceResult
    """
    if workers is not None and workers < 1:
        raise UsageError(f"--workers {workers} is not allowed; expected N >= 1")
    if preview or scene["image.preview"]:
        scene = preview_film(scene)
    ignored = still_only_keys(scene)
    if ignored:
        warnings.warn(ignored, NullrayWarning, stacklevel=2)
    for folder in (Path(output_dir), Path(output_dir) / scene["name"]):
        sweep_dead_temporaries(folder)   # what runs killed with SIGKILL left behind
    client = connect(scheduler) if scheduler is not None else None
    try:
        def run_frames(jobs):
            if workers is None:
                count = 1 if shades_once(jobs) else auto_workers(len(jobs))
            else:
                count, note = capped_workers(workers, len(jobs))
                if note and client is None:
                    warnings.warn(note, NullrayWarning, stacklevel=2)
            return frame_results(jobs, workers=count, client=client)

        return _render_sequence_here(scene, output_dir, run_frames=run_frames,
                                     overwrite=overwrite, progress=progress, products=products)
    finally:
        if client is not None:
            client.close()


def make_table_model(scene, varies, output_dir="outputs", *, workers=1, scheduler=None,
                     overwrite=False, progress=None):
    """Compute a scene's line or spectrum on a grid of parameters and write a FITS table model.

    Parameters
    ----------
    scene : Scene
        ``observing.mode`` line or spectrum, ``observer.placement: distant``.
    varies : list of str or Vary
        ``"key=low:high:count"`` (as given to ``--vary``), e.g.
        ``"black_hole.spin=0:0.998:8"``; the grid is every combination.
    output_dir : str or Path
        The table goes to ``<name>_table.fits``, finished points to the side
        folder ``<name>_table_points/`` (a new run resumes from them).
    workers : int or None
        Local processes (None: one per core when enough points are left).
    scheduler : str, optional
        A Dask distributed scheduler's address.
    overwrite : bool
    progress : callable, optional
        ``progress(done, total, seconds)``, e.g. :class:`render.progress.GridProgress`.

    Returns
    -------
    paths, summary : dict, dict

    Every point is checked before any tracing (a bad range or key: one-line error).
    """
    varies = [parse_vary(v) if isinstance(v, str) else v for v in varies]
    if workers is not None and workers < 1:
        raise UsageError(f"--workers {workers} is not allowed; expected N >= 1")
    jobs, _, _ = plan_table(scene, varies)
    check_free([table_paths(scene, output_dir)["table"]], overwrite)
    _check_writable_folder(Path(output_dir))
    client = connect(scheduler) if scheduler is not None else None
    try:
        def run_points(todo):
            if client is not None:
                return task_results(compute_point, todo, client=client)
            count = auto_workers(len(todo)) if workers is None else capped_workers(
                workers, len(todo))[0]
            return task_results(compute_point, todo, workers=count)

        return build_table(scene, varies, output_dir, run_points=run_points,
                           overwrite=overwrite, progress=progress)
    finally:
        if client is not None:
            client.close()
