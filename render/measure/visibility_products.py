"""A still's visibilities as files: the (u, v) grid, the radial profile, sampled baselines.

Files (``visibilities.compute: true``), beside the still's own:

* ``<name>_visibilities.npz``: ``u_glambda``, ``v_glambda`` (1-D axes), ``vis`` (complex,
  [v, u]), the radial profile and the metadata (conventions, ring diameters);
* ``<name>_visibility_profile.csv``: baseline length (G-lambda), mean |V|, cells;
* ``<name>_baselines.csv`` (with ``visibilities.baselines``): u, v (G-lambda), Re, Im,
  |V| and phase (deg) at each listed baseline.

The flux unit is Jy in the monochromatic mode (the image's flux per pixel);
otherwise it is the mode's intensity times steradians.  Conventions are those of
:mod:`render.measure.visibilities` (u east, v north, phase centre at the image
centre, V = sum F exp(-2 pi i (u l + v m))).
"""

import csv
import warnings
from pathlib import Path

import numpy as np

from ..errors import NullrayWarning, SceneError
from ..light.observing import observing_frequency_hz, pixel_angle_rad
from ..light.thermal import cgs
from ..output.files import write_npz
from ..output.products import write_table_csv
from .visibilities import (first_null_diameter, radial_profile, sample_visibilities,
                           thin_ring_fit, visibility_grid)

__all__ = ["visibility_paths", "read_baselines", "measure_visibilities", "write_visibilities"]

GIGA = 1e9
UAS_PER_RAD = 180.0 / np.pi * 3600.0 * 1e6
# Above this rms residual (relative to the fitted flux) a thin ring does not describe a
# visibility profile and its ring diameters are reported with a warning.
RING_LIKE_RMS = 0.1


def visibility_paths(scene):
    """{kind: file name} of the visibility files a scene asks for (relative names)."""
    if not scene["visibilities.compute"]:
        return {}
    name = scene["name"]
    paths = {"visibilities_npz": f"{name}_visibilities.npz",
             "visibility_profile_csv": f"{name}_visibility_profile.csv"}
    if scene["visibilities.baselines"] is not None:
        paths["baselines_csv"] = f"{name}_baselines.csv"
    return paths


def read_baselines(scene):
    """(u, v) in wavelengths of the baselines CSV, or None; a bad file raises SceneError.

    Columns ``u_glambda, v_glambda`` (G-lambda) or ``u_m, v_m`` (metres, divided by
    the observing wavelength c / nu, so a monochromatic mode is needed).
    """
    if not scene["visibilities.compute"] or scene["visibilities.baselines"] is None:
        return None
    path = scene.side_file("visibilities.baselines")
    key = f"visibilities.baselines = {str(path)!r}"
    try:
        with open(path, newline="", encoding="utf-8") as handle:
            rows = [row for row in csv.reader(handle) if row and not row[0].startswith("#")]
    except OSError as exc:
        raise SceneError(f"{key} cannot be read ({exc.strerror})") from None
    except UnicodeDecodeError:
        raise SceneError(f"{key} cannot be read (not UTF-8 text)") from None
    if len(rows) < 2:
        raise SceneError(f"{key} has no baselines; expected a header and rows of u, v")
    header = [name.strip() for name in rows[0]]
    try:
        columns = np.array([[float(x) for x in row] for row in rows[1:]], dtype=float)
    except ValueError:
        raise SceneError(f"{key} has a value that is not a number") from None
    if set(header) >= {"u_glambda", "v_glambda"}:
        scale = GIGA
        u, v = columns[:, header.index("u_glambda")], columns[:, header.index("v_glambda")]
    elif set(header) >= {"u_m", "v_m"}:
        frequency = observing_frequency_hz(scene) if scene["observing.mode"] == "monochromatic" \
            else None
        if frequency is None:
            raise SceneError(f"{key} gives metres (u_m, v_m): needs observing.mode "
                             "monochromatic for the wavelength")
        scale = frequency / cgs()["c"] * 100.0   # wavelengths per metre
        u, v = columns[:, header.index("u_m")], columns[:, header.index("v_m")]
    else:
        raise SceneError(f"{key} needs columns u_glambda, v_glambda or u_m, v_m; got "
                         f"{', '.join(header)}")
    if not np.all(np.isfinite(columns)):
        raise SceneError(f"{key} has a value that is not finite")
    return u * scale, v * scale


def _sky_image(result, scene):
    """(flux per pixel, unit) of a still."""
    if "flux_density_jy" in result.products:
        return np.asarray(result.products["flux_density_jy"]), "Jy"
    return np.asarray(result.intensity) * pixel_angle_rad(scene) ** 2, "intensity x sr"


def measure_visibilities(result, scene, baselines=None):
    """The visibilities of a still: grid, radial profile, ring diameters, sampled baselines."""
    image, unit = _sky_image(result, scene)
    pixel = pixel_angle_rad(scene)
    grid = visibility_grid(image, pixel, scene["visibilities.padding"])
    rho, amplitude, count = radial_profile(grid)
    null_d, _ = first_null_diameter(rho, amplitude)
    fit_d, fit_error, _, fit_rms = thin_ring_fit(rho, amplitude)
    if not fit_rms <= RING_LIKE_RMS:   # NaN too: no null, or no convergence
        how = ("the thin-ring fit did not converge" if np.isnan(fit_rms) else
               f"a thin ring fits it with an rms residual of {fit_rms:.0%} of its flux")
        warnings.warn(f"visibilities: the image's radial visibility profile is not a thin "
                      f"ring's ({how}); its ring diameters are not meaningful "
                      "(docs/polarisation.md)", NullrayWarning, stacklevel=2)
    info = {
        "flux_unit": unit, "total_flux": float(np.nansum(image)),
        "conventions": "u east, v north (wavelengths); phase centre at the image centre; "
                       "V = sum F exp(-2 pi i (u l + v m)), l east, m north; pixel box "
                       "window divided out",
        "pixel_rad": pixel,
        "ring_diameter_first_null_uas": float(null_d * UAS_PER_RAD),
        "ring_diameter_fit_uas": float(fit_d * UAS_PER_RAD),
        "ring_diameter_fit_error_uas": float(fit_error * UAS_PER_RAD),
        "ring_fit_rms_relative": fit_rms,
    }
    out = {"grid": grid, "profile": (rho, amplitude, count), "info": info}
    if baselines is not None:
        out["baselines"] = (baselines[0], baselines[1],
                            sample_visibilities(image, pixel, baselines[0], baselines[1]))
    return out


def write_visibilities(result, scene, folder, overwrite=False, baselines=None):
    """Write the visibility files of a still into ``folder``; returns {kind: Path}."""
    folder = Path(folder)
    names = visibility_paths(scene)
    if not names:
        return {}
    measured = measure_visibilities(result, scene, baselines)
    grid, (rho, amplitude, count) = measured["grid"], measured["profile"]
    paths = {kind: folder / name for kind, name in names.items()}
    write_npz(paths["visibilities_npz"],
              {"u_glambda": grid.u / GIGA, "v_glambda": grid.v / GIGA, "vis": grid.vis,
               "profile_rho_glambda": rho / GIGA, "profile_amplitude": amplitude},
              {"visibilities": measured["info"], "scene": scene.document}, overwrite)
    write_table_csv(paths["visibility_profile_csv"],
                    {"rho_glambda": rho / GIGA, "amplitude": amplitude, "cells": count},
                    overwrite)
    if "baselines" in measured:
        u, v, vis = measured["baselines"]
        write_table_csv(paths["baselines_csv"],
                        {"u_glambda": u / GIGA, "v_glambda": v / GIGA, "re": vis.real,
                         "im": vis.imag, "amplitude": np.abs(vis),
                         "phase_deg": np.degrees(np.angle(vis))},
                        overwrite)
    result.metadata["visibilities"] = measured["info"]
    return paths
