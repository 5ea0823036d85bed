"""Video and image-sheet writers for frame sequences: MP4, GIF, contact sheet, light-curve plot.

Each writer takes frames (8-bit grey or RGB arrays) or numbers and writes one
file atomically; which files a sequence gets is :mod:`render.film.products`.
"""

import io
from pathlib import Path

import numpy as np

from .files import atomic_path, atomic_write

__all__ = ["write_video", "write_gif", "contact_sheet", "write_light_curve_png",
           "FRAME_PATTERN"]

# File name of frame k of a sequence.
FRAME_PATTERN = "frame_{:05d}.png"


def _rgb(pixels):
    pixels = np.asarray(pixels)
    if pixels.ndim == 2:
        pixels = np.repeat(pixels[..., None], 3, axis=2)
    return pixels


def _even(pixels):
    """Pad odd sizes by repeating the last row/column (H.264 in yuv420p needs even sizes)."""
    h, w = pixels.shape[:2]
    return np.pad(pixels, ((0, h % 2), (0, w % 2), (0, 0)), mode="edge")


VIDEO_EXTRA_MISSING = ("the MP4 needs imageio with its ffmpeg, the optional 'video' extra: pip "
                       "install 'nullray[video]'; the frames, GIF, contact sheet and light "
                       "curve are written without it")


def video_writer_available():
    """Whether the MP4 writer's packages (imageio, imageio-ffmpeg: the 'video' extra) import."""
    try:
        import imageio.v3  # noqa: F401
        import imageio_ffmpeg  # noqa: F401
    except ImportError:
        return False
    return True


def write_video(path, frames, fps):
    """Write RGB frames as H.264 MP4 (imageio with imageio-ffmpeg's ffmpeg), atomically.

    ffmpeg writes to the temporary of :func:`render.output.files.atomic_path`,
    whose ``.part`` name says nothing of the container, so both imageio and
    ffmpeg are told it is MP4.
    """
    import imageio.v3 as iio

    with atomic_path(path, overwrite=True) as tmp:
        plugin = iio.imopen(tmp, "wI", plugin="FFMPEG", extension=".mp4", legacy_mode=True)
        writer = plugin.legacy_get_writer(fps=fps, codec="libx264", macro_block_size=1,
                                          pixelformat="yuv420p", ffmpeg_log_level="error",
                                          quality=8, output_params=["-f", "mp4"])
        with writer:
            for frame in frames:
                writer.append_data(_even(_rgb(frame)))
    return Path(path)


def write_gif(path, frames, fps):
    """Write an animated GIF (Pillow, looping), atomically."""
    from PIL import Image

    images = [Image.fromarray(_rgb(f)) for f in frames]
    duration = max(20, int(round(1000.0 / fps)))

    def save(handle):
        images[0].save(handle, format="GIF", save_all=True, append_images=images[1:],
                       duration=duration, loop=0, optimize=False)

    return atomic_write(path, save, overwrite=True)


def contact_sheet(frames, columns=8, labels=None):
    """A grid of the given frames (all of one size), each labelled (by default its number)."""
    from PIL import Image, ImageDraw

    picks = range(len(frames))
    tiles = [_rgb(frame) for frame in frames]
    h, w = tiles[0].shape[:2]
    columns = min(columns, len(tiles))
    rows = -(-len(tiles) // columns)
    gap = 2
    sheet = Image.new("RGB", (columns * (w + gap) + gap, rows * (h + gap) + gap), (40, 40, 40))
    draw = ImageDraw.Draw(sheet)
    for n, (index, tile) in enumerate(zip(picks, tiles)):
        x = gap + (n % columns) * (w + gap)
        y = gap + (n // columns) * (h + gap)
        sheet.paste(Image.fromarray(tile), (x, y))
        text = labels[index] if labels else str(index)
        draw.text((x + 2, y + 1), text, fill=(255, 255, 0))
    return np.asarray(sheet)


def write_light_curve_png(path, clocks, fluxes, unit, *, seconds_per_m=None, flux_unit=None,
                          flux_scale=1.0, swept=None):
    """Plot flux against the observer's time (and a swept key) and write it as PNG, atomically.

    ``unit`` names the observer's clock on the time axis (retarded time or proper
    time).  ``seconds_per_m`` (G M / c^3) adds the time in seconds on the top axis;
    ``flux_scale`` converts the fluxes to ``flux_unit`` (default: the emission
    law's units times M^2); ``swept = (key, values)`` adds a panel of the flux
    against that keyframed key's value in each frame.  Drawn on a bare
    matplotlib Figure: no backend is chosen.
    """
    from matplotlib.figure import Figure

    fluxes = np.asarray(fluxes, dtype=float) * flux_scale
    figure = Figure(figsize=(6, 3.2 if swept is None else 6.0), dpi=100)
    axes = figure.add_subplot(2 if swept else 1, 1, 1)
    axes.plot(clocks, fluxes, marker=".", lw=1)
    axes.set_xlabel(f"observer time ({unit}) [M]")
    axes.set_ylabel(f"total flux [{flux_unit or 'law units x M^2'}]")
    axes.grid(alpha=0.3)
    if seconds_per_m:
        top = axes.secondary_xaxis("top", functions=(lambda m: m * seconds_per_m,
                                                     lambda s: s / seconds_per_m))
        top.set_xlabel(f"[s]  (1 M = {seconds_per_m:.3g} s)")
    if swept is not None:
        key, values = swept
        against = figure.add_subplot(2, 1, 2)
        against.plot(values, fluxes, marker=".", lw=1)
        against.set_xlabel(key)
        against.set_ylabel(f"total flux [{flux_unit or 'law units x M^2'}]")
        against.grid(alpha=0.3)
    figure.tight_layout()
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png")
    return atomic_write(path, lambda f: f.write(buffer.getvalue()), overwrite=True)
