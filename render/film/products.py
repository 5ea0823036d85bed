"""A finished sequence's products: video, GIF, contact sheet, light curve and flash report.

Everything here reads the finished frames from disk, so the products of a
resumed run are the same as those of an uninterrupted one.  The file writers
themselves are :mod:`render.output.video` and :mod:`render.output.files`.
"""

import csv
import io
import json
from pathlib import Path

import numpy as np

from ..output.files import atomic_write, write_png
from ..output.video import (FRAME_PATTERN, contact_sheet, write_gif, write_light_curve_png,
                            write_video)
from .flash import flash_check, relative_luminance

from ..light.observing import solid_angle_per_area_sr
from ..units import gravitational_time_s

__all__ = ["write_sequence_products"]


def write_sequence_products(folder, plan, manifest):
    """Write sequence.mp4, sequence.gif, sequence_sheet.png, lightcurve.csv/png, flash_check.json.

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
    from PIL import Image

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
    distant = plan.scene["observer.placement"] == "distant"
    unit = "retarded time u" if distant else "camera proper time"
    paths["lightcurve_csv"] = _write_light_curve_csv(folder / "lightcurve.csv", plan.jobs, fluxes,
                                                     plan.scene)
    paths["lightcurve_png"] = write_light_curve_png(folder / "lightcurve.png", clocks, fluxes,
                                                    unit)
    flash = flash_check([relative_luminance(f) for f in frames], plan.fps)
    report = json.dumps(flash, indent=1, sort_keys=True).encode()
    paths["flash"] = atomic_write(folder / "flash_check.json", lambda f: f.write(report),
                                  overwrite=True)
    return paths, flash


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
