"""Rendering a still in row tiles under a memory budget.

A still whose arrays fit in ``tracing.memory_budget`` is rendered in one
piece.  A larger one is rendered in bands of rows ("tiles"): each band is
traced and shaded on its own, and its maps are written straight into
``.npy`` files in a temporary folder (inside the output folder when the command
line renders), by plain file writes on a thread of their own while the next
band is rendered, so that no more than one band's working arrays and the
previous band's finished maps are ever held in memory.  The result's arrays
are then read-only memory maps of those files;
:func:`render.output.files.write_npz` streams them into the NPZ by plain
reads, so writing does not pull them into memory either.  Call
:meth:`render.imaging.result.StillResult.release` (the command line does) to delete the
temporary folder.

A still with a sky or supersampling traces each band with a halo of up to
five neighbouring rows (:func:`render.imaging.sensor.halo_rows`), so that its
adaptive refinement and star images equal the untiled ones; the tile's memory
counts them.  Shading that needs the whole image at once (the automatic
exposure of ``true_colour``, the disk-integrated ``spectrum`` and the ``line``
profile) cannot be tiled: such a still must fit in the budget untiled, or it is
refused before any work.  So is an image whose smallest tile (one row), or
whose 8-bit picture for the PNG, does not fit.

Memory model (bytes per pixel, 8-byte floats; a deliberate over-estimate that
covers the shading temporaries and the previous band's maps waiting to be
written): ``BYTES_PER_PIXEL + BYTES_PER_ORDER * orders`` (+ ``BYTES_TRUE_COLOUR``
in true colour).  A tile may use a quarter of the budget; the rest is left to
the interpreter, the libraries and the PNG step.
"""

import shutil
import tempfile
import time
from concurrent import futures
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import OutputWriteError
from ..errors import SceneError
from ..light.observing import PER_ORDER_PRODUCTS
from ..guards.runs import run_tag
from .adaptive import merge_sampling_info
from .result import StillResult

__all__ = ["TilePlan", "plan_still", "check_memory", "render_in_tiles",
           "TileStore"]

BYTES_PER_PIXEL = 400
BYTES_PER_ORDER = 240
BYTES_TRUE_COLOUR = 200
# Adaptive sampling's traced store and interpolants (render.imaging.adaptive): lam, E,
# fate, counts, masks per pixel; r, phi, delay twice and the direction per order.
BYTES_ADAPTIVE = 64
BYTES_ADAPTIVE_ORDER = 56
# Share of the budget one tile may take (the interpreter and its libraries, ~0.3 GB,
# and the 8-bit picture of the PNG step need the rest).
TILE_SHARE = 0.25
# Rows traced above and below a band with a sky or supersampling (render.imaging.sensor.halo_rows).
HALO_ROWS = 2


def _scene_error(message):

    return SceneError(message)


def is_tileable(values):
    """Whether a scene's shading is per pixel (so that its bands can be shaded alone)."""
    mode = values["observing.mode"]
    if values["display.glare"]:   # the eye's glare spreads light over the whole picture
        return False
    if mode in ("bolometric", "monochromatic"):
        return True
    return mode == "true_colour" and values["observing.colour_exposure"] == "fixed"


def bytes_per_pixel(values):
    """Working bytes per pixel of a still (see the module docstring)."""
    per = BYTES_PER_PIXEL + BYTES_PER_ORDER * values["disk.orders"]
    if values["observing.mode"] == "true_colour":
        per += BYTES_TRUE_COLOUR
    if values["tracing.sampling"] == "adaptive":
        per += BYTES_ADAPTIVE + BYTES_ADAPTIVE_ORDER * values["disk.orders"]
    return per


@dataclass(frozen=True)
class TilePlan:
    """How a still is split: ``rows_per_tile`` rows per band, ``tiles`` bands."""

    width: int
    height: int
    rows_per_tile: int
    budget_bytes: float
    whole_bytes: float
    tile_bytes: float

    @property
    def tiles(self):
        return -(-self.height // self.rows_per_tile)

    def bands(self):
        """(first row, end row) of each band, top to bottom."""
        return [(start, min(start + self.rows_per_tile, self.height))
                for start in range(0, self.height, self.rows_per_tile)]


def check_memory(values, budget_bytes=None):
    """Plan a still from its scene values; raise SceneError if it cannot fit at all.

    Parameters
    ----------
    values : mapping
        Scene values by dotted key (a :class:`~render.scene.loader.Scene` or its ``values``).
    budget_bytes : float, optional
        Overrides ``tracing.memory_budget`` (given in GB in the scene).

    Returns
    -------
    TilePlan
    """
    width, height = values["image.width"], values["image.height"]
    budget = (values["tracing.memory_budget"] * 1e9 if budget_bytes is None
              else float(budget_bytes))
    per_pixel = bytes_per_pixel(values)
    whole = float(width) * height * per_pixel
    size = f"image.width x image.height = {width} x {height}"
    limit = f"tracing.memory_budget = {budget / 1e9:g} GB"
    if whole <= budget:
        return TilePlan(width, height, height, budget, whole, whole)
    if values["display.glare"]:
        raise _scene_error(f"{size} needs about {whole / 1e9:.3g} GB untiled, more than {limit}, "
                           "and display.glare = true spreads light over the whole picture at "
                           "once; use a smaller image, a larger budget or no glare")
    if not is_tileable(values):
        raise _scene_error(
            f"{size} needs about {whole / 1e9:.3g} GB untiled, more than {limit}, and "
            f"observing.mode = {values['observing.mode']!r} "
            + ("with observing.colour_exposure = 'auto' " if values["observing.mode"]
               == "true_colour" else "")
            + "shades the whole image at once (not in tiles); use a smaller image or "
            "a larger budget" + (", or a fixed colour exposure (a smaller auto render's white is "
                                 "observing.colour_reference_y in its metadata)"
                                 if values["observing.mode"]
                                 == "true_colour" else ""))
    channels = (3 if values["observing.mode"] == "true_colour"
                or values["display.colour_map"] != "grey" else 1)
    picture = 2.0 * width * height * channels  # the 8-bit picture and PIL's copy of it
    row = float(width) * per_pixel
    # A band with a sky or supersampling is traced with up to 2 HALO_ROWS + 1 more
    # rows (render.imaging.sensor.halo_rows): the tile's memory includes them.
    halo = 0
    if values["sky.backdrop"] != "none" or values["image.supersampling"] > 1:

        halo = 2 * HALO_ROWS + 1
    if picture > budget * (1.0 - TILE_SHARE) or (1 + halo) * row > budget * TILE_SHARE:
        needed = max(picture / (1.0 - TILE_SHARE), (1 + halo) * row / TILE_SHARE)
        raise _scene_error(
            f"{size} cannot be rendered within {limit} even in tiles of rows: it needs "
            f"at least {needed / 1e9:.3g} GB (the 8-bit picture alone is "
            f"{width * height * channels / 1e9:.3g} GB)")
    rows = max(1, min(height, int(budget * TILE_SHARE // row) - halo))
    return TilePlan(width, height, rows, budget, whole, (rows + halo) * row)


def plan_still(scene, budget_bytes=None):
    """:func:`check_memory` for a validated scene."""
    return check_memory(scene.values, budget_bytes)


class TileStore:
    """``.npy`` files in a temporary folder, filled band by band with plain file writes."""

    def __init__(self, workdir=None):
        parent = Path(workdir) if workdir is not None else None
        if parent is not None:
            parent.mkdir(parents=True, exist_ok=True)
        # The run tag lets a later run sweep the folder if this one is killed.
        self.folder = Path(tempfile.mkdtemp(prefix=f".nullray-tiles-{run_tag()}.",
                                            dir=None if parent is None else str(parent)))
        self._files = {}

    def _create(self, name, dtype, shape):
        path = self.folder / f"{name}.npy"
        header = {"descr": np.lib.format.dtype_to_descr(np.dtype(dtype)),
                  "fortran_order": False, "shape": tuple(int(n) for n in shape)}
        with open(path, "wb") as handle:
            np.lib.format.write_array_header_2_0(handle, header)
            offset = handle.tell()
            handle.truncate(offset + int(np.prod(shape)) * np.dtype(dtype).itemsize)
        self._files[name] = (path, offset, np.dtype(dtype), tuple(shape))

    def write_band(self, name, band, rows, full_height):
        """Write ``band`` (rows start..stop of an (..., H, W[, C]) array) into its file.

        A failed write (a full disk) raises :class:`render.errors.OutputWriteError`.
        """
        try:
            self._write_band(name, band, rows, full_height)
        except OSError as exc:
            raise OutputWriteError(f"writing the tiles of a large still in {self.folder} "
                                   f"failed: {exc.strerror or exc}") from exc

    def _write_band(self, name, band, rows, full_height):
        band = np.ascontiguousarray(band)
        start, stop = rows
        per_order = band.ndim == 3 and name in self.per_order
        if name not in self._files:
            if per_order:
                shape = (band.shape[0], full_height) + band.shape[2:]
            else:
                shape = (full_height,) + band.shape[1:]
            self._create(name, band.dtype, shape)
        path, offset, dtype, shape = self._files[name]
        if band.dtype != dtype:
            raise ValueError(f"{name}: band dtype {band.dtype} differs from {dtype}")
        with open(path, "r+b") as handle:
            if per_order:
                row_bytes = int(np.prod(shape[2:])) * dtype.itemsize
                for k in range(shape[0]):
                    handle.seek(offset + (k * shape[1] + start) * row_bytes)
                    handle.write(band[k].data)   # the buffer itself: no copy
            else:
                row_bytes = int(np.prod(shape[1:])) * dtype.itemsize
                handle.seek(offset + start * row_bytes)
                handle.write(band.data)

    per_order = frozenset()

    def arrays(self):
        """Read-only memory maps of every file, by name."""
        return {name: np.load(path, mmap_mode="r") for name, (path, *_) in self._files.items()}

    def release(self):
        shutil.rmtree(self.folder, ignore_errors=True)


PER_ORDER_FIELDS = ("r", "phi", "g", "delay", "on_disk")
PIXEL_FIELDS = ("intensity", "pixels", "fate", "alpha", "beta", "steps")


def _merge_info(total, part):
    if total is None:
        total = dict(part)
        for key in ("antialias", "sky"):   # counted per band: copied before they are added to
            if key in total:
                total[key] = dict(total[key])
        return total
    if "total_flux_jy" in part:
        total["total_flux_jy"] = total["total_flux_jy"] + part["total_flux_jy"]
    # Counts of a sky and supersampling: each band counts its own rows (render.imaging.sensor).
    if "antialias" in part:
        mine, theirs = total["antialias"], part["antialias"]
        for key in ("pixels_refined", "pixels", "samples_total"):
            mine[key] += theirs[key]
        mine["samples_per_pixel_mean"] = mine["samples_total"] / mine["pixels"]
    if "sky" in part and "star_images" in part["sky"]:
        for key in ("star_images", "sky_triangles_skipped"):
            total["sky"][key] += part["sky"][key]
    return total


def _check_temporary_space(store, plan):
    """Refuse a tiled still whose temporary files would not fit the store's disk."""
    free = shutil.disk_usage(store.folder).free
    if plan.whole_bytes / 2 > free:
        raise _scene_error(
            f"image.width x image.height = {plan.width} x {plan.height} needs about "
            f"{plan.whole_bytes / 2e9:.3g} GB of temporary files in {store.folder.parent}, "
            f"which has {free / 1e9:.3g} GB free")


def _store_band(store, part, rows, height, skipped):
    """Write a band's maps and products to ``store``; note all-NaN maps in ``skipped``."""
    if part.tables:
        raise ValueError("tables cannot be assembled from tiles")
    for name in PIXEL_FIELDS + PER_ORDER_FIELDS:
        array = getattr(part, name)
        if array.size and not any(array.strides):
            # An all-NaN view (a map the closed form skipped): nothing to store.
            skipped[name] = array.shape[0]
            continue
        store.write_band(name, array, rows, height)
    for name, array in part.products.items():
        store.write_band(f"product.{name}", array, rows, height)


def render_in_tiles(scene, plan, render_band, workdir=None, progress=None):
    """Render ``scene`` band by band with ``render_band(rows, progress)``; return a StillResult.

    ``render_band`` returns a :class:`~render.imaging.result.StillResult` of the rows
    ``(start, stop)``; its arrays are written to a :class:`TileStore` and the
    returned result holds memory maps of them (``result.release()`` deletes
    them).  On any exception, Ctrl-C included, the temporary folder is removed.
    """

    started = time.perf_counter()
    store = TileStore(workdir)
    store.per_order = frozenset(PER_ORDER_FIELDS) | {f"product.{n}" for n in PER_ORDER_PRODUCTS}
    total_rays = plan.width * plan.height
    # A band's files are written by a thread of their own while the next band is
    # traced and shaded (file writes release the GIL; shading is mostly one thread).
    writer = futures.ThreadPoolExecutor(max_workers=1, thread_name_prefix="nullray-tiles")
    writing = None
    try:
        _check_temporary_space(store, plan)
        metadata = None
        info = None
        sampling = None
        counts = {}
        steps_sum = 0.0
        negative = 0
        trace_seconds = 0.0
        product_names = None
        skipped = {}
        for rows in plan.bands():
            done_before = rows[0] * plan.width

            def band_progress(done, total, _offset=done_before):
                if progress is not None:
                    progress(_offset + done, total_rays)

            part = render_band(rows, band_progress)
            # The previous band's files are finished before this one's are begun: one
            # band at most waits in memory while the next is rendered.
            if writing is not None:
                writing.result()
            writing = writer.submit(_store_band, store, part, rows, plan.height, skipped)
            if product_names is None:
                product_names = list(part.products)
            meta = part.metadata
            for key, value in meta["fate_counts"].items():
                counts[key] = counts.get(key, 0) + value
            steps_sum += meta["steps_mean"] * part.fate.size
            negative += meta["negative_energy_rays"]
            trace_seconds += meta["trace_seconds"]
            info = _merge_info(info, meta["observing"])
            sampling = merge_sampling_info(sampling, meta["sampling"])
            if metadata is None:
                metadata = dict(meta)
            del part
        if writing is not None:
            writing.result()
        arrays = store.arrays()
    except BaseException:
        if writing is not None:
            futures.wait([writing])   # no file is written into a folder being removed
        store.release()
        raise
    finally:
        writer.shutdown(wait=True)
    metadata.update({
        "fate_counts": counts, "steps_mean": steps_sum / total_rays, "observing": info,
        "negative_energy_rays": negative, "sampling": sampling,
        "trace_seconds": trace_seconds, "total_seconds": time.perf_counter() - started,
        "tiles": {"count": plan.tiles, "rows_per_tile": plan.rows_per_tile,
                  "memory_budget_gb": plan.budget_bytes / 1e9,
                  "estimated_untiled_gb": plan.whole_bytes / 1e9},
    })
    result = StillResult(
        **{name: arrays[name] if name in arrays
           else np.broadcast_to(np.nan, (skipped[name], plan.height, plan.width))
           for name in PIXEL_FIELDS + PER_ORDER_FIELDS},
        metadata=metadata,
        products={name: arrays[f"product.{name}"] for name in product_names or ()})
    result.storage = store
    return result
