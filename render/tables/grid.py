"""A scene's spectrum or line on a grid of parameter values, resumable, as a FITS table model.

``nullray table SCENE --vary black_hole.spin=0:0.998:8 --vary observer.inclination=5:85:9``
computes the disk-integrated product of the scene (``observing.mode`` line or
spectrum, a distant observer) at every combination of the varied keys'
values, each on its own image-plane grid (:mod:`render.light.disk_integral`),
and writes an additive table model in the OGIP layout
(:mod:`render.output.table_model`): photons cm^-2 s^-1 per energy bin.

Every finished grid point is kept as a small file in the side folder
``<name>_table_points/`` (atomic writes), so an interrupted run resumes where
it stopped; the points carry a fingerprint of the base scene and the grid, and
points of another grid are refused rather than mixed in.
"""

import hashlib
import io
import json
import time
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import NullrayWarning, SceneError, TableIncomplete, UsageError
from ..light.observing import disk_integrated_tables, prepare_observation, samples_own_grid
from ..light.thermal import cgs
from ..output.files import atomic_write, check_free
from ..output.table_model import grid_points, table_model_hdus, write_table_model
from ..scene.keys import KEYS
from ..scene.loader import scene_from_dict

__all__ = ["Vary", "parse_vary", "GridJob", "compute_point", "table_paths", "plan_table",
           "build_table", "VARIABLE_SECTIONS", "TableIncomplete"]

# Sections whose numeric keys may vary across a table (not the energy grid itself).
VARIABLE_SECTIONS = ("black_hole", "observer", "disk", "emission")
MAX_POINTS = 100000


@dataclass(frozen=True)
class Vary:
    """One varied key: ``count`` values evenly spaced from ``low`` to ``high``."""

    key: str
    low: float
    high: float
    count: int

    @property
    def values(self):
        return np.linspace(self.low, self.high, self.count)


def parse_vary(text):
    """``key=low:high:count`` -> :class:`Vary`; anything else raises UsageError (one line).

    Examples
    --------
    >>> parse_vary("black_hole.spin=0:0.9:4")
    Vary(key='black_hole.spin', low=0.0, high=0.9, count=4)
    """
    key, _, spec = str(text).partition("=")
    key = key.strip()
    parts = spec.split(":")
    try:
        if len(parts) != 3:
            raise ValueError
        low, high, count = float(parts[0]), float(parts[1]), int(parts[2])
    except ValueError:
        raise UsageError(f"--vary {text!r} is not allowed; expected KEY=LOW:HIGH:COUNT, e.g. "
                         "black_hole.spin=0:0.998:8") from None
    spec_row = KEYS.get(key)
    if (spec_row is None or spec_row.kind not in ("float", "int")
            or key.split(".")[0] not in VARIABLE_SECTIONS):
        raise UsageError(f"--vary {text!r} is not allowed; expected a numeric key of "
                         f"{', '.join(VARIABLE_SECTIONS)} (see `nullray keys`)")
    if not (np.isfinite(low) and np.isfinite(high) and low < high and 2 <= count <= 1000):
        raise UsageError(f"--vary {text!r} is not allowed; expected finite LOW < HIGH and "
                         "2 <= COUNT <= 1000")
    if spec_row.kind == "int" and (low != int(low) or high != int(high)
                                   or (high - low) % (count - 1)):
        raise UsageError(f"--vary {text!r} is not allowed; {key} is an integer, so the values "
                         "must be whole numbers")
    return Vary(key, low, high, count)


@dataclass(frozen=True)
class GridJob:
    """One grid point: its index, the varied keys' values and the scene document to use."""

    index: int
    values: tuple
    document: dict
    source: str


def _with_values(document, keys, values):
    changed = json.loads(json.dumps(document))
    for key, value in zip(keys, values):
        section, name = key.split(".", 1)
        changed[section][name] = int(round(value)) if KEYS[key].kind == "int" else float(value)
    return changed


def plan_table(scene, varies):
    """Check the grid before any tracing; return ``(jobs, values, fingerprint)``.

    Every grid point's scene is validated (a value out of a key's range, or a
    spin whose ISCO passes a fixed inner radius, is refused here in one line).
    """
    if scene["observing.mode"] not in ("line", "spectrum"):
        raise UsageError(f"nullray table needs observing.mode line or spectrum, got "
                         f"{scene['observing.mode']!r}")
    if not samples_own_grid(scene):
        raise UsageError("nullray table needs observer.placement: distant (the disk is "
                         "sampled on a grid of its own only for a distant observer)")
    keys = [v.key for v in varies]
    if len(set(keys)) != len(keys) or not keys:
        raise UsageError("nullray table needs at least one --vary, each key once")
    values = [v.values for v in varies]
    points = grid_points(values)
    if len(points) > MAX_POINTS:
        raise UsageError(f"the grid has {len(points)} points; at most {MAX_POINTS} are allowed")
    jobs = []
    for index, point in enumerate(points):
        document = _with_values(scene.document, keys, point)
        try:
            point_scene = scene_from_dict(document, source=scene.source)
            prepare_observation(point_scene)
        except SceneError as exc:
            raise SceneError(f"grid point {dict(zip(keys, point.tolist()))}: {exc}") from None
        jobs.append(GridJob(index, tuple(point.tolist()), document, str(scene.source)))
    text = json.dumps({"scene": scene.document, "vary": [v.__dict__ for v in varies]},
                      sort_keys=True, default=str)
    return jobs, values, hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]


def point_spectrum(observation, point_scene):
    """(energy edges in keV, photons cm^-2 s^-1 per bin, info) of one scene."""
    tables, info = disk_integrated_tables(observation, point_scene)
    if "line" in tables:
        table = tables["line"]
        edges = np.append(table["energy_low_kev"], table["energy_high_kev"][-1])
        width = table["energy_high_kev"] - table["energy_low_kev"]
        return edges, table["photon_flux_per_kev"] * width, info
    k = cgs()
    table = tables["spectrum"]
    nu = table["frequency_hz"]
    photons_per_hz = table["flux_relativistic_jy"] * k["Jy"] / (k["h"] * nu)
    # Photons per bin between neighbouring frequencies: the trapezoid rule in nu.
    per_bin = 0.5 * (photons_per_hz[1:] + photons_per_hz[:-1]) * np.diff(nu)
    return table["energy_kev"], per_bin, info


def compute_point(job, numba_threads=None):
    """Compute one grid point; returns ``(index, edges, spectrum, info, seconds)``.

    A failure is returned, not raised (``spectrum`` None and ``info['error']``),
    so that one bad point does not lose the others.
    """
    if numba_threads:
        import numba

        numba.set_num_threads(max(1, min(int(numba_threads), numba.config.NUMBA_NUM_THREADS)))
    started = time.perf_counter()
    try:
        point_scene = scene_from_dict(job.document, source=job.source)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", NullrayWarning)
            edges, spectrum, info = point_spectrum(prepare_observation(point_scene), point_scene)
    except Exception as exc:  # noqa: BLE001 - reported per point, the others go on
        return job.index, None, None, {"error": f"{type(exc).__name__}: {exc}"}, 0.0
    return job.index, edges, spectrum, info, time.perf_counter() - started


def table_paths(scene, folder):
    """{"table": <name>_table.fits, "points": <name>_table_points/ (the side folder)}."""
    folder = Path(folder)
    return {"table": folder / f"{scene['name']}_table.fits",
            "points": folder / f"{scene['name']}_table_points"}


def _point_file(points_folder, index):
    return Path(points_folder) / f"point_{index:06d}.npz"


def _save_point(path, fingerprint, values, edges, spectrum, info):
    buffer = io.BytesIO()
    np.savez(buffer, fingerprint=fingerprint, values=np.asarray(values), edges=edges,
             spectrum=spectrum, info=json.dumps(info, default=str))
    data = buffer.getvalue()
    atomic_write(path, lambda f: f.write(data), overwrite=True)


def _load_point(path, fingerprint, values):
    """A finished point's (edges, spectrum, info), or None if it is not there."""
    if not path.exists():
        return None
    with np.load(path) as saved:
        if str(saved["fingerprint"]) != fingerprint or not np.allclose(saved["values"], values):
            raise UsageError(f"{path.parent} holds grid points of another scene or grid; "
                             "remove it or use --overwrite")
        return saved["edges"], saved["spectrum"], json.loads(str(saved["info"]))


def build_table(scene, varies, folder, *, run_points, overwrite=False, progress=None):
    """Compute (or finish) the grid and write the table model; returns its paths and a summary.

    ``run_points(jobs)`` yields the results of :func:`compute_point` (in any
    order; the local pool or Dask, :mod:`render.parallel`); ``progress(done,
    total, seconds)`` is called at the start (seconds None) and after each point.
    """
    jobs, values, fingerprint = plan_table(scene, varies)
    paths = table_paths(scene, folder)
    check_free([paths["table"]], overwrite)
    points = paths["points"]
    if overwrite and points.exists():
        for old in points.glob("point_*.npz"):
            old.unlink()
    points.mkdir(parents=True, exist_ok=True)
    results = {}
    for job in jobs:
        saved = _load_point(_point_file(points, job.index), fingerprint, job.values)
        if saved is not None:
            results[job.index] = saved
    todo = [job for job in jobs if job.index not in results]
    if progress is not None:
        progress(len(results), len(jobs), None)
    failures = []
    for index, edges, spectrum, info, seconds in run_points(todo):
        if spectrum is None:
            failures.append((jobs[index].values, info["error"]))
            continue
        _save_point(_point_file(points, index), fingerprint, jobs[index].values, edges,
                    spectrum, info)
        results[index] = (edges, spectrum, info)
        if progress is not None:
            progress(len(results), len(jobs), seconds)
    keys = [v.key for v in varies]
    if failures:
        for point_values, error in failures:
            warnings.warn(f"grid point {dict(zip(keys, point_values))} failed: {error}",
                          NullrayWarning, stacklevel=2)
        raise TableIncomplete(f"{len(failures)} of {len(jobs)} grid points failed; the "
                              f"{len(results)} finished ones are kept in {points} and a new "
                              "run computes only the rest")
    return _write(scene, varies, values, jobs, results, paths, overwrite)


def _write(scene, varies, values, jobs, results, paths, overwrite):
    edges = results[0][0]
    spectra = np.array([results[job.index][1] for job in jobs])
    warned = sorted({w for _, _, info in results.values() for w in info.get("warnings", [])})
    mode = scene["observing.mode"]
    history = [f"nullray table of scene {scene['name']!r}: observing.mode {mode}",
               "varied: " + ", ".join(f"{v.key}={v.low:g}:{v.high:g}:{v.count}" for v in varies),
               "spectra: photons cm^-2 s^-1 per bin, each point sampled on its own disk grid"]
    hdus = table_model_hdus(f"nr_{mode}"[:12], "photons/cm^2/s",
                            [v.key.split(".")[-1] for v in varies], values, edges, spectra,
                            history=history)
    write_table_model(paths["table"], hdus, overwrite)
    for message in warned:
        warnings.warn(f"some grid points: {message}", NullrayWarning, stacklevel=3)
    return paths, {"points": len(jobs), "warnings": warned,
                   "parameters": [v.key for v in varies]}
