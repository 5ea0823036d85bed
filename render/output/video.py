"""Sequence products: MP4 and GIF, a contact sheet, the light curve, and a flash check.

Everything here reads the finished frames from disk, so the products of a
resumed run are the same as those of an uninterrupted one.

Flash check (photosensitive epilepsy)
-------------------------------------
WCAG 2.2 success criterion 2.3.1 (general flash threshold; ITU-R BT.1702 gives
similar guidance for television): content must not have more than three
general flashes in any one-second period.  A *flash* is a pair of opposing
changes in relative luminance of at least 10 % of the maximum, where the
darker image is below 0.80, over an area of at least 25 % of a 10-degree
visual field: 0.25 x (341 x 256) pixels of a 1024 x 768 screen, i.e. 2.8 % of a
full-screen frame (WCAG 2.2, definition of "general flash and red flash
thresholds" and its Understanding document).  This check is a whole-frame
proxy: a frame-to-frame transition counts when at least that fraction of the
pixels brightens (or darkens) by that much; a flash is a brightening followed
by a darkening or vice versa.  It does not look for contiguous areas or for
red flashes, so it can only over-count general flashes, never miss one.
"""

import csv
import io
import json
import os
from pathlib import Path

import numpy as np

from ..light.color import SRGB_LUMINANCE

__all__ = ["relative_luminance", "flash_check", "write_video", "write_gif",
           "contact_sheet", "write_sequence_products", "FLASH_AREA_FRACTION", "FRAME_PATTERN"]

# File name of frame k of a sequence.
FRAME_PATTERN = "frame_{:05d}.png"

FLASH_DELTA = 0.10
FLASH_DARK = 0.80
FLASH_AREA_FRACTION = 0.25 * 341 * 256 / (1024 * 768)
FLASHES_ALLOWED = 3


def relative_luminance(pixels):
    """Relative luminance (0..1) of 8-bit sRGB or grey pixels (IEC 61966-2-1; WCAG 2.2 def.).

    Examples
    --------
    >>> float(relative_luminance(np.array([255], dtype=np.uint8))[0])
    1.0
    """
    v = np.asarray(pixels, dtype=float) / 255.0
    linear = np.where(v <= 0.04045, v / 12.92, ((v + 0.055) / 1.055) ** 2.4)
    if linear.ndim >= 3 and linear.shape[-1] == 3:
        return linear @ np.array(SRGB_LUMINANCE)
    return linear


def _transitions(luminances):
    """+1, -1 or 0 per consecutive frame pair (see the module docstring)."""
    events = []
    for before, after in zip(luminances[:-1], luminances[1:]):
        change = after - before
        darker = np.minimum(before, after) < FLASH_DARK
        up = np.mean((change >= FLASH_DELTA) & darker)
        down = np.mean((change <= -FLASH_DELTA) & darker)
        if max(up, down) < FLASH_AREA_FRACTION:
            events.append(0)
        else:
            events.append(1 if up >= down else -1)
    return events


def flash_check(luminances, fps):
    """Count general flashes per one-second window of a frame sequence.

    Parameters
    ----------
    luminances : sequence of ndarray
        Relative luminance of each frame (:func:`relative_luminance`).
    fps : float
        Frames per second of screen time.

    Returns
    -------
    dict
        ``worst_flashes`` (most flashes in any one-second window),
        ``worst_start_s`` (where that window starts), ``passes`` (at most three),
        ``criterion``.

    References
    ----------
    WCAG 2.2, success criterion 2.3.1 "Three Flashes or Below Threshold";
    ITU-R BT.1702.

    Examples
    --------
    >>> frames = [np.full((4, 4), float(k % 2)) for k in range(25)]   # black/white at 24 fps
    >>> report = flash_check(frames, 24.0)
    >>> report["worst_flashes"], report["passes"]
    (12, False)
    """
    events = _transitions(list(luminances))
    window = max(1, int(round(fps)))  # transitions within one second of screen time
    worst, start = 0, 0
    for first in range(max(1, len(events) - window + 1)):
        chunk = [e for e in events[first:first + window] if e != 0]
        # Count the opposing changes: a run of same-sign changes is one change.
        changes = sum(1 for i, e in enumerate(chunk) if i == 0 or e != chunk[i - 1])
        flashes = changes // 2
        if flashes > worst:
            worst, start = flashes, first
    return {"worst_flashes": int(worst), "worst_start_s": start / fps,
            "worst_start_frame": int(start), "passes": worst <= FLASHES_ALLOWED,
            "criterion": "WCAG 2.2 SC 2.3.1 general flash (whole-frame proxy; see docs)",
            "area_fraction": FLASH_AREA_FRACTION, "fps": fps}


def _rgb(pixels):
    pixels = np.asarray(pixels)
    if pixels.ndim == 2:
        pixels = np.repeat(pixels[..., None], 3, axis=2)
    return pixels


def _even(pixels):
    """Pad odd sizes by repeating the last row/column (H.264 in yuv420p needs even sizes)."""
    h, w = pixels.shape[:2]
    return np.pad(pixels, ((0, h % 2), (0, w % 2), (0, 0)), mode="edge")


def _temporary(path):
    return path.with_name(f".{path.stem}.{os.getpid()}.part{path.suffix}")


def write_video(path, frames, fps):
    """Write RGB frames as H.264 MP4 (imageio with imageio-ffmpeg's ffmpeg), atomically."""
    import imageio.v2 as imageio

    path = Path(path)
    tmp = _temporary(path)
    try:
        writer = imageio.get_writer(tmp, format="FFMPEG", mode="I", fps=fps, codec="libx264",
                                    macro_block_size=1, pixelformat="yuv420p",
                                    ffmpeg_log_level="error", quality=8)
        with writer:
            for frame in frames:
                writer.append_data(_even(_rgb(frame)))
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()
    return path


def write_gif(path, frames, fps):
    """Write an animated GIF (Pillow, looping), atomically."""
    from PIL import Image

    from .files import atomic_write

    images = [Image.fromarray(_rgb(f)) for f in frames]
    duration = max(20, int(round(1000.0 / fps)))

    def save(handle):
        images[0].save(handle, format="GIF", save_all=True, append_images=images[1:],
                       duration=duration, loop=0, optimize=False)

    return atomic_write(path, save, overwrite=True)


def contact_sheet(frames, columns=8, labels=None, max_tiles=64):
    """A grid of (up to ``max_tiles``, evenly chosen) frames with their numbers."""
    from PIL import Image, ImageDraw

    count = len(frames)
    picks = np.unique(np.linspace(0, count - 1, min(count, max_tiles)).round().astype(int))
    tiles = [_rgb(frames[i]) for i in picks]
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


def _light_curve_png(path, clocks, fluxes, unit):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from .files import atomic_write

    figure, axes = plt.subplots(figsize=(6, 3.2), dpi=100)
    axes.plot(clocks, fluxes, marker=".", lw=1)
    axes.set_xlabel(f"observer time ({unit}) [M]")
    axes.set_ylabel("total flux [law units x M^2]")
    axes.grid(alpha=0.3)
    figure.tight_layout()
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png")
    plt.close(figure)
    return atomic_write(path, lambda f: f.write(buffer.getvalue()), overwrite=True)


def write_sequence_products(folder, plan, manifest):
    """Write sequence.mp4, sequence.gif, sequence_sheet.png, lightcurve.csv/png, flash_check.json.

    Returns
    -------
    paths : dict
    flash : dict
        The :func:`flash_check` report.
    """
    from PIL import Image

    from .video import FRAME_PATTERN
    from .files import atomic_write, write_png

    folder = Path(folder)
    count = len(plan.jobs)
    frames = [np.asarray(Image.open(folder / FRAME_PATTERN.format(k))) for k in range(count)]
    paths = {"mp4": write_video(folder / "sequence.mp4", frames, plan.fps),
             "gif": write_gif(folder / "sequence.gif", frames, plan.fps)}
    clocks = [job.clock for job in plan.jobs]
    labels = [f"{k}  t={c:.4g}M" for k, c in enumerate(clocks)]
    paths["sheet"] = write_png(folder / "sequence_sheet.png",
                               contact_sheet(frames, labels=labels), overwrite=True)
    fluxes = [manifest["frames"][f"{k:05d}"]["flux"] for k in range(count)]
    distant = plan.scene["observer.kind"] == "distant"
    unit = "retarded time u" if distant else "camera proper time"
    text = io.StringIO()
    writer = csv.writer(text, lineterminator="\n")
    writer.writerow(["frame", "observer_time_M", "coordinate_time_M", "flux"])
    for job, flux in zip(plan.jobs, fluxes):
        writer.writerow([job.index, repr(job.clock), repr(job.coordinate_time), repr(flux)])
    data = text.getvalue().encode()
    paths["lightcurve_csv"] = atomic_write(folder / "lightcurve.csv", lambda f: f.write(data),
                                           overwrite=True)
    paths["lightcurve_png"] = _light_curve_png(folder / "lightcurve.png", clocks, fluxes, unit)
    flash = flash_check([relative_luminance(f) for f in frames], plan.fps)
    report = json.dumps(flash, indent=1, sort_keys=True).encode()
    paths["flash"] = atomic_write(folder / "flash_check.json", lambda f: f.write(report),
                                  overwrite=True)
    return paths, flash
