"""A finished sequence's products: video, GIF, contact sheet, light curve and flash report.

Everything here reads the finished frames from disk, so the products of a
resumed run are the same as those of an uninterrupted one.  The file writers
themselves are :mod:`render.output.video` and :mod:`render.output.files`.
"""

import csv
import io
import json
import warnings
from pathlib import Path

import numpy as np

from ..errors import NullrayWarning
from ..output.files import atomic_write, write_png
from ..output.video import (FRAME_PATTERN, VIDEO_EXTRA_MISSING, contact_sheet,
                            video_writer_available, write_gif, write_light_curve_png,
                            write_video)
from ..scene.keys import KEYFRAME_PLACEMENTS, KEYS
from ..light.observing import solid_angle_per_area_sr
from ..units import gravitational_time_s
from .flash import flash_report, flash_transition, relative_luminance

__all__ = ["write_sequence_products"]


def write_sequence_products(folder, plan, manifest):
    """Write sequence.mp4, sequence.gif, sequence_sheet.png, lightcurve.csv/png, flash_check.json.

    The MP4 needs the optional 'video' extra; without it a NullrayWarning says so
    and the other products are written.  A film that fails the flash check is
    also reported as a NullrayWarning.

    Parameters
    ----------
    folder : str or Path
        The sequence folder holding every frame (``FRAME_PATTERN``).
    plan : SequencePlan
        Its jobs give each frame's clocks, its ``fps`` the screen time.
    manifest : dict
        The sequence manifest, with each frame's flux.

    Returns
    -------
    paths : dict
    flash : dict
        The :func:`render.film.flash.flash_check` report.
    """
    folder = Path(folder)
    count = len(plan.jobs)
    picks = sheet_picks(count)
    previews, tiles, events = [], [], []
    frames = _frames_from_disk(folder, count, previews, tiles, picks, events)
    paths = {}
    if video_writer_available():
        paths["mp4"] = write_video(folder / "sequence.mp4", frames, plan.fps)
    else:
        warnings.warn(VIDEO_EXTRA_MISSING, NullrayWarning, stacklevel=2)
        for _ in frames:
            pass
    paths["gif"] = write_gif(folder / "sequence.gif", previews, plan.fps)
    clocks = [job.clock for job in plan.jobs]
    labels = [f"{k}  t={clocks[k]:.4g}M" for k in picks]
    paths["sheet"] = write_png(folder / "sequence_sheet.png",
                               contact_sheet(tiles, labels=labels), overwrite=True)
    fluxes = [manifest["frames"][f"{k:05d}"]["flux"] for k in range(count)]
    distant = plan.scene["observer.placement"] == "distant"
    unit = "retarded time u" if distant else "camera proper time"
    paths["lightcurve_csv"] = _write_light_curve_csv(folder / "lightcurve.csv", plan.jobs, fluxes,
                                                     plan.scene)
    paths["lightcurve_png"] = write_light_curve_png(folder / "lightcurve.png", clocks, fluxes,
                                                    unit, **_light_curve_scales(plan))
    flash = flash_report(events, plan.fps)
    if not flash["passes"]:
        warnings.warn(flash_warning(flash), NullrayWarning, stacklevel=2)
    report = json.dumps(flash, indent=1, sort_keys=True).encode()
    paths["flash"] = atomic_write(folder / "flash_check.json", lambda f: f.write(report),
                                  overwrite=True)
    return paths, flash


# The GIF is a preview for web pages and chat (the MP4 and the frames are the film): at most
# this many pixels across.  At full size a 240-frame 1080p GIF took a minute and 28 MB.
GIF_MAX_WIDTH = 480
# Each tile of the contact sheet is at most this many pixels across.
SHEET_TILE_MAX_WIDTH = 320


def sheet_picks(count, max_tiles=64):
    """The frame numbers shown on the contact sheet: at most ``max_tiles``, evenly spread.

    Examples
    --------
    >>> sheet_picks(5, max_tiles=3).tolist()
    [0, 2, 4]
    """
    return np.unique(np.linspace(0, count - 1, min(count, max_tiles)).round().astype(int))


def shrunk(frame, width):
    """A frame resized to at most ``width`` pixels across, its aspect kept (Pillow's box filter).

    Examples
    --------
    >>> shrunk(np.zeros((90, 160), np.uint8), 80).shape
    (45, 80)
    """
    from PIL import Image

    height, across = frame.shape[:2]
    if across <= width:
        return frame
    size = (width, max(1, int(round(height * width / across))))
    return np.asarray(Image.fromarray(frame).resize(size, Image.Resampling.BOX))


def _frames_from_disk(folder, count, previews, tiles, picks, events):
    """Yield the finished frames one at a time, read once from disk.

    On the way it keeps what the other products need, so that no more than two
    full-size frames are in memory: the GIF's shrunk copies (``previews``), the
    contact sheet's tiles (frames ``picks``) and the flash check's frame-to-frame
    changes (``events``, :func:`render.film.flash.flash_transition`).
    """
    from PIL import Image

    before, wanted = None, set(int(k) for k in picks)
    for k in range(count):
        with Image.open(folder / FRAME_PATTERN.format(k)) as image:
            frame = np.asarray(image)
        previews.append(shrunk(frame, GIF_MAX_WIDTH))
        if k in wanted:
            tiles.append(shrunk(frame, SHEET_TILE_MAX_WIDTH))
        luminance = relative_luminance(frame)
        if before is not None:
            events.append(flash_transition(before, luminance))
        before = luminance
        yield frame


def flash_warning(flash):
    """The one-line warning of a flash check that fails (:func:`render.film.flash.flash_check`)."""
    return (f"{flash['worst_flashes']} flashes in the second starting at "
            f"{flash['worst_start_s']:.2f} s (frame {flash['worst_start_frame']}): more than "
            "3 per second fails WCAG 2.2 SC 2.3.1 (photosensitive epilepsy); do not screen "
            "it publicly as is")


def swept_key(plan):
    """``(key and unit, values per frame)`` of the first keyframed key whose value changes, or None."""
    keys = []
    for keyframe in plan.scene["animation.keyframes"]:
        keys += [k for k in keyframe
                 if k not in KEYFRAME_PLACEMENTS and k != "interpolation" and k not in keys]
    for key in keys:
        values = [float(job.scene[key]) for job in plan.jobs]
        if len(set(values)) > 1:
            unit = KEYS[key].unit if key in KEYS else "-"
            return (key if unit == "-" else f"{key} [{unit}]"), values
    return None


def _light_curve_scales(plan):
    """Seconds per M, the flux's physical unit (a thermal law's cgs) and the swept key.

    A frame's flux is sum(I) (pixel side in M)^2; times theta_g^2 (rad^2, theta_g =
    G M / (c^2 D)) it is the flux at the observer, erg s^-1 cm^-2 when I is in cgs.
    """
    scene = plan.scene
    scales = {"seconds_per_m": gravitational_time_s(scene["black_hole.mass"]),
              "swept": swept_key(plan)}
    if scene["emission.law"] == "novikov_thorne" and scene["observing.mode"] == "bolometric":
        scales.update(flux_scale=solid_angle_per_area_sr(scene), flux_unit="erg s^-1 cm^-2")
    return scales


def _write_light_curve_csv(path, jobs, fluxes, scene):
    """One row per frame: its number, times in M and in seconds, and its flux (exact reprs).

    ``flux`` is the sum of the pixels' intensities times a pixel's area in M^2;
    ``flux_physical`` multiplies it by the solid angle of 1 M^2 at the hole's
    distance, (GM/(c^2 D))^2 sr, giving the emission law's intensity unit times sr
    (erg s^-1 cm^-2 for novikov_thorne, arbitrary for the others).  A sidecar
    ``lightcurve.json`` names each column's unit.
    """
    seconds = gravitational_time_s(scene["black_hole.mass"])
    steradians = solid_angle_per_area_sr(scene)
    text = io.StringIO()
    writer = csv.writer(text, lineterminator="\n")
    writer.writerow(["frame", "observer_time_M", "coordinate_time_M", "flux",
                     "observer_time_s", "coordinate_time_s", "flux_physical"])
    for job, flux in zip(jobs, fluxes):
        writer.writerow([job.index, repr(job.clock), repr(job.coordinate_time), repr(flux),
                         repr(job.clock * seconds), repr(job.coordinate_time * seconds),
                         repr(flux * steradians)])
    data = text.getvalue().encode()
    law_unit = ("erg s^-1 cm^-2" if scene["emission.law"] == "novikov_thorne"
                else "the emission law's (arbitrary) intensity unit x sr")
    columns = {"frame": "frame number", "observer_time_M": "observer's clock, M (GM/c^3)",
               "coordinate_time_M": "coordinate time, M", "flux": "sum of intensity x pixel "
               "area, law units x M^2", "observer_time_s": "observer's clock, s",
               "coordinate_time_s": "coordinate time, s", "flux_physical": law_unit}
    sidecar = (json.dumps({"columns": columns, "mass_msun": scene["black_hole.mass"],
                           "distance_pc": scene["black_hole.distance"]}, indent=1) + "\n")
    atomic_write(Path(path).with_suffix(".json"), lambda f: f.write(sidecar.encode()),
                 overwrite=True)
    return atomic_write(path, lambda f: f.write(data), overwrite=True)
