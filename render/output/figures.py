"""Figures with scales: any data map of a still with a colour bar, axes in M and in angle.

:func:`plot` draws one map of a :class:`~render.imaging.result.StillResult` (or of
a still read back from its NPZ, :func:`read_still`) on a matplotlib Axes: the
image plane in M on the bottom and left axes (alpha to the right, beta up), the
same in micro- or milliarcseconds (``observing.angle_unit``) on the top and right
axes, from theta_g = G M / (c^2 D) (``black_hole.mass``, ``black_hole.distance``),
a colour bar with the map's unit and a title with the scene's key parameters.
matplotlib is imported only here, inside the functions, and no backend is chosen:
:func:`figure_png` draws on a bare :class:`matplotlib.figure.Figure`.

Maps (``MAP_NAMES``): ``picture`` (the displayed still), ``intensity`` (the observed
intensity, log scale over 4 decades), ``g``, ``r`` and ``delay`` (of the first
crossing that shines: the direct image where there is one), ``order`` (that
crossing's order) and ``fate``.  Colour maps are perceptually uniform
(van der Walt & Smith 2015) except the categorical fate.
"""

import io
import json
from pathlib import Path

import numpy as np

from ..errors import UsageError
from ..imaging.result import StillResult
from ..units import angular_gravitational_radius_uas, gravitational_time_s
from .files import atomic_write

__all__ = ["MAP_NAMES", "plot", "figure_png", "write_figure", "read_still", "map_values",
           "figure_path"]

MAP_NAMES = ("picture", "intensity", "g", "r", "delay", "order", "fate")
FATE_COLOURS = ("#3b4cc0", "#000000", "#f4a582", "#d62728")   # escaped, captured, disk, unresolved
INTENSITY_DECADES = 4.0


def read_still(path):
    """A :class:`StillResult` from a still's NPZ (as :func:`render.output.files.write_still` wrote it)."""
    with np.load(path, allow_pickle=False) as data:
        arrays = {name: data[name] for name in data.files}
    metadata = json.loads(str(arrays.pop("metadata")))
    fields = ("intensity", "pixels", "fate", "alpha", "beta", "r", "phi", "g", "delay",
              "on_disk", "steps")
    missing = [name for name in fields if name not in arrays]
    if missing:
        raise UsageError(f"{str(path)!r} is not a still's NPZ (missing {', '.join(missing)})")
    # A spectrum's or line's columns were saved as 1-D '<table>_<column>' arrays.
    tables = {}
    for name in [n for n in arrays if arrays[n].ndim == 1]:
        kind, _, column = name.partition("_")
        if kind in ("spectrum", "line"):
            tables.setdefault(kind, {})[column] = arrays.pop(name)
    return StillResult(**{name: arrays.pop(name) for name in fields}, metadata=metadata,
                       products=arrays, tables=tables)


def _first_shining(values, on_disk):
    """Per pixel, the value at the first order whose crossing shines (NaN where none)."""
    shining = np.asarray(on_disk, dtype=bool)
    first = np.argmax(shining, axis=0)
    picked = np.take_along_axis(np.asarray(values, dtype=float), first[None], axis=0)[0]
    return np.where(shining.any(axis=0), picked, np.nan)


def map_values(result, name):
    """``(values (H, W), label)`` of a map by name; raises UsageError for an unknown name."""
    scene = result.metadata["scene"]
    if name == "intensity":
        units = result.metadata.get("observing", {}).get("units", "")
        unit = units.split(":", 1)[1].strip() if ":" in units else "arbitrary units"
        return np.asarray(result.intensity, dtype=float), f"observed intensity [{unit}]"
    if name == "g":
        return _first_shining(result.g, result.on_disk), "redshift factor g = nu_obs / nu_em"
    if name == "r":
        return _first_shining(result.r, result.on_disk), "emission radius r [M]"
    if name == "delay":
        seconds = gravitational_time_s(scene["black_hole"]["mass"])
        return (_first_shining(result.delay, result.on_disk),
                f"time delay [M]  (1 M = {seconds:.3g} s)")
    if name == "order":
        orders = np.arange(result.on_disk.shape[0], dtype=float)[:, None, None]
        return _first_shining(np.broadcast_to(orders, result.on_disk.shape),
                              result.on_disk), "order of the crossing seen"
    if name == "fate":
        return np.asarray(result.fate, dtype=float), "fate of the ray"
    if name == "picture":
        return np.asarray(result.pixels), "the displayed picture"
    raise UsageError(f"--map {name!r} is not allowed; expected one of {', '.join(MAP_NAMES)}")


def _extent(result):
    """imshow extent (left, right, bottom, top) in M of the pixel grid (row 0 at the top)."""
    alpha, beta = np.asarray(result.alpha), np.asarray(result.beta)
    height, width = alpha.shape
    dx = (alpha[0, -1] - alpha[0, 0]) / max(width - 1, 1) if width > 1 else 1.0
    dy = (beta[0, 0] - beta[-1, 0]) / max(height - 1, 1) if height > 1 else dx
    return (alpha[0, 0] - dx / 2, alpha[0, -1] + dx / 2, beta[-1, 0] - dy / 2,
            beta[0, 0] + dy / 2)


def title_of(metadata, what):
    """A figure title: the map and the scene's key parameters."""
    doc = metadata["scene"]
    hole, observer = doc["black_hole"], doc["observer"]
    return (f"{doc['name']}: {what}\n"
            f"a = {hole['spin']:g}, i = {observer['inclination']:g} deg, "
            f"M = {hole['mass']:.3g} M_sun, D = {hole['distance']:.3g} pc, "
            f"{doc['observing']['mode']}, {doc['emission']['law']}")


def _draw(ax, result, name, values, label):
    """Draw the map on ``ax``; return the mappable (None for the picture)."""
    from matplotlib import colors

    extent = _extent(result)
    common = {"extent": extent, "origin": "upper", "interpolation": "nearest"}
    if name == "picture":
        ax.imshow(values, cmap="gray" if values.ndim == 2 else None, vmin=0, vmax=255, **common)
        return None
    if name == "fate":
        cmap = colors.ListedColormap(FATE_COLOURS)
        return ax.imshow(values, cmap=cmap, norm=colors.BoundaryNorm(np.arange(-0.5, 4.5), 4),
                         **common)
    if name == "order":
        count = result.on_disk.shape[0]
        cmap = colors.ListedColormap([f"C{k}" for k in range(count)])
        return ax.imshow(values, cmap=cmap,
                         norm=colors.BoundaryNorm(np.arange(-0.5, count + 0.5), count), **common)
    if name == "intensity":
        top = np.nanmax(values) if np.any(values > 0) else 1.0
        norm = colors.LogNorm(vmin=top * 10.0 ** -INTENSITY_DECADES, vmax=top)
        shown = np.where(values > 0, values, np.nan)
        return ax.imshow(shown, cmap="inferno", norm=norm, **common)
    cmap = {"g": "viridis", "r": "magma", "delay": "cividis"}[name]
    return ax.imshow(values, cmap=cmap, **common)


def _colour_bar(ax, mappable, name, label, result):
    bar = ax.figure.colorbar(mappable, ax=ax, pad=0.16, shrink=0.9)
    bar.set_label(label)
    if name == "fate":
        bar.set_ticks(range(4))
        bar.set_ticklabels(["escaped", "captured", "disk", "unresolved"])
    elif name == "order":
        bar.set_ticks(range(result.on_disk.shape[0]))
    return bar


def _angle_axes(ax, metadata):
    """Top and right axes in uas or mas (observing.angle_unit) from mass and distance."""
    doc = metadata["scene"]
    unit = doc["observing"]["angle_unit"]
    per_m = angular_gravitational_radius_uas(doc["black_hole"]["mass"],
                                             doc["black_hole"]["distance"])
    if unit == "mas":
        per_m /= 1000.0
    symbol = "µas" if unit == "uas" else "mas"
    top = ax.secondary_xaxis("top", functions=(lambda m: m * per_m, lambda a: a / per_m))
    top.set_xlabel(f"[{symbol}]  (1 M = {per_m:.3g} {symbol})")
    right = ax.secondary_yaxis("right", functions=(lambda m: m * per_m, lambda a: a / per_m))
    right.set_ylabel(f"[{symbol}]")


def plot(result, map_name, ax=None):
    """Draw one map of a still on a matplotlib Axes, with colour bar, scales and title.

    Parameters
    ----------
    result : StillResult
        A rendered still, or one read back with :func:`read_still`.
    map_name : str
        One of ``MAP_NAMES``.
    ax : matplotlib.axes.Axes, optional
        Where to draw (default: the current Axes of pyplot).

    Returns
    -------
    matplotlib.axes.Axes

    References
    ----------
    Event Horizon Telescope Collaboration (2019), ApJL 875, L6, sec. 2 (theta_g = GM/(c^2 D)).
    """
    values, label = map_values(result, map_name)
    if ax is None:
        import matplotlib.pyplot as plt

        ax = plt.gca()
    mappable = _draw(ax, result, map_name, values, label)
    if mappable is not None:
        _colour_bar(ax, mappable, map_name, label, result)
    ax.set_xlabel("alpha [M]")
    ax.set_ylabel("beta [M]")
    ax.set_aspect("equal")
    _angle_axes(ax, result.metadata)
    ax.set_title(title_of(result.metadata, label.split(" [")[0]), fontsize=8)
    return ax


def figure_png(result, map_name, width_inches=6.4, dpi=110):
    """PNG bytes of :func:`plot` on a bare Figure (no pyplot, no backend chosen)."""
    from matplotlib.figure import Figure

    height, width = np.asarray(result.alpha).shape
    fig = Figure(figsize=(width_inches, max(3.0, width_inches * height / width * 0.85 + 1.4)))
    plot(result, map_name, fig.add_subplot())
    fig.tight_layout()
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=dpi)
    return buffer.getvalue()


def figure_path(scene_document, map_name, folder):
    """``folder/<name>_<map>.png``."""
    return Path(folder) / f"{scene_document['name']}_{map_name}.png"


def write_figure(result, map_name, folder="outputs", overwrite=False):
    """Write the figure of one map as ``<name>_<map>.png``; return its path."""
    path = figure_path(result.metadata["scene"], map_name, folder)
    data = figure_png(result, map_name)
    return atomic_write(path, lambda f: f.write(data), overwrite)
