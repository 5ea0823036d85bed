"""Writers of the physical products of a still: FITS maps, 16-bit PNG, linear float, CSV + plots.

Which files a still gets, besides the PNG and NPZ of :mod:`render.output`:

* ``<name>.fits`` (``output.fits: true``): the physical maps as FITS images,
  written with astropy.io.fits (FITS Standard 4.0);
* true_colour: ``<name>_16bit.png`` (16-bit sRGB) and ``<name>_linear.npy``
  (float32 linear sRGB, scene-referred, before exposure, (H, W, 3), row 0 at the top);
* spectrum: ``<name>_spectrum.csv`` and ``<name>_spectrum.png``;
* line: ``<name>_line.csv`` and ``<name>_line.png``.

All files are written atomically and never replace an existing file unless
asked (:func:`render.output.atomic_write`).

FITS layout
-----------
The primary HDU holds the mode's main map (monochromatic: I_nu; bolometric
and true colour: bolometric intensity; line: line intensity); image
extensions hold the others (``FLUXPIX``, Jy per pixel; ``REDSHIFT``, g of the
first crossing).  FITS rows run upwards, so the arrays are flipped
vertically.  The sky axes are ``RA---TAN`` / ``DEC--TAN`` with CRVAL = 0,
CRPIX at the image centre and CDELT1 = -pixel scale (east to the left, the
FITS habit), CDELT2 = +pixel scale, in degrees; +x of the image is the
Bardeen alpha axis.  Header cards: BUNIT, OBSFREQ (Hz), BHMASS (M_sun),
DISTPC (pc), BHSPIN, INCLIN (deg), plus the mode and emission law.
"""

import csv
import io
import struct
import zlib
from pathlib import Path

import numpy as np

from .output import atomic_write, check_free

__all__ = ["product_paths", "write_products", "write_fits", "write_png16", "write_table_csv",
           "fits_hdus"]


def product_paths(scene_document, folder):
    """Final paths of the extra files of a still: {kind: Path}."""
    folder = Path(folder)
    name = scene_document["name"]
    mode = scene_document["observing"]["mode"]
    paths = {}
    if scene_document["output"].get("fits"):
        paths["fits"] = folder / f"{name}.fits"
    if mode == "true_colour":
        paths["png16"] = folder / f"{name}_16bit.png"
        paths["linear"] = folder / f"{name}_linear.npy"
    if mode == "spectrum":
        paths["spectrum_csv"] = folder / f"{name}_spectrum.csv"
        paths["spectrum_png"] = folder / f"{name}_spectrum.png"
    if mode == "line":
        paths["line_csv"] = folder / f"{name}_line.csv"
        paths["line_png"] = folder / f"{name}_line.png"
    return paths


def write_products(result, folder="outputs", overwrite=False):
    """Write the extra files of a :class:`~render.still.StillResult`; returns {kind: Path}."""
    paths = product_paths(result.metadata["scene"], folder)
    check_free(paths.values(), overwrite)
    if "fits" in paths:
        write_fits(paths["fits"], result, overwrite)
    if "png16" in paths:
        write_png16(paths["png16"], result.products["pixels16"], overwrite)
        atomic_write(paths["linear"],
                     lambda f: np.save(f, np.ascontiguousarray(result.products["rgb_linear"])),
                     overwrite)
    if "spectrum_csv" in paths:
        table = result.tables["spectrum"]
        write_table_csv(paths["spectrum_csv"], table, overwrite,
                        header="# disk-integrated F_nu in Jy; relativistic: ray-traced image; "
                               "flat: same local emission without relativistic effects")
        _plot(paths["spectrum_png"], overwrite, _spectrum_figure, table, result.metadata)
    if "line_csv" in paths:
        table = result.tables["line"]
        write_table_csv(paths["line_csv"], table, overwrite,
                        header="# line profile: counts = photon counts per bin normalised to "
                               "sum 1; energy_flux in the image's units")
        _plot(paths["line_png"], overwrite, _line_figure, table, result.metadata)
    return paths


def write_table_csv(path, table, overwrite=False, header=None):
    """Write a dict of equal-length 1-D arrays as CSV (header comment line, then names)."""
    names = list(table)
    text = io.StringIO()
    if header:
        text.write(header + "\n")
    writer = csv.writer(text, lineterminator="\n")
    writer.writerow(names)
    for row in zip(*(np.asarray(table[n]) for n in names)):
        writer.writerow([f"{float(v):.10g}" for v in row])
    data = text.getvalue().encode("utf-8")
    return atomic_write(path, lambda f: f.write(data), overwrite)


def write_png16(path, rgb16, overwrite=False):
    """Write an (H, W, 3) uint16 array as a 16-bit RGB PNG (colour type 2, bit depth 16).

    References
    ----------
    ISO/IEC 15948:2004 (PNG), sec. 11.2.2 (IHDR) and 11.3.4.5 (sRGB chunk).
    """
    rgb16 = np.ascontiguousarray(rgb16, dtype=">u2")
    height, width, _ = rgb16.shape
    raw = b"".join(b"\x00" + rgb16[row].tobytes() for row in range(height))

    def chunk(kind, payload):
        body = kind + payload
        return struct.pack(">I", len(payload)) + body + struct.pack(">I", zlib.crc32(body))

    data = (b"\x89PNG\r\n\x1a\n"
            + chunk(b"IHDR", struct.pack(">IIBBBBB", width, height, 16, 2, 0, 0, 0))
            + chunk(b"sRGB", b"\x00")
            + chunk(b"IDAT", zlib.compress(raw, 6))
            + chunk(b"IEND", b""))
    return atomic_write(path, lambda f: f.write(data), overwrite)


def _main_map(result):
    mode = result.metadata["scene"]["observing"]["mode"]
    law = result.metadata["scene"]["emission"]["law"]
    if mode == "monochromatic":
        return result.products["specific_intensity"], "erg/(s cm2 Hz sr)"
    if mode == "line":
        return result.products["line_intensity"], "arbitrary (line intensity)"
    unit = "erg/(s cm2 sr)" if law == "novikov_thorne" else "arbitrary"
    return result.intensity, unit


def fits_hdus(result):
    """astropy HDUList of a still's physical maps (see the module doc)."""
    from astropy.io import fits

    from .observing import pixel_angle_rad
    from .scene import scene_from_dict

    meta = result.metadata
    doc = meta["scene"]
    scene = scene_from_dict(doc, source=meta.get("scene_source", "<dict>"), default_name=doc["name"])
    pixel_deg = float(np.degrees(pixel_angle_rad(scene)))
    data, unit = _main_map(result)
    height, width = data.shape

    def header(bunit, extname=None):
        h = fits.Header()
        h["BUNIT"] = (bunit, "unit of the pixel values")
        h["CTYPE1"], h["CTYPE2"] = ("RA---TAN", "sky offset, +x = Bardeen alpha"), "DEC--TAN"
        h["CUNIT1"], h["CUNIT2"] = "deg", "deg"
        h["CRPIX1"] = ((width + 1) / 2.0, "reference pixel: image centre")
        h["CRPIX2"] = (height + 1) / 2.0
        h["CRVAL1"], h["CRVAL2"] = 0.0, 0.0
        h["CDELT1"] = (-pixel_deg, "deg per pixel")
        h["CDELT2"] = (pixel_deg, "deg per pixel")
        frequency = meta.get("observing", {}).get("frequency_hz")
        if frequency is not None:
            h["OBSFREQ"] = (float(frequency), "observed frequency [Hz]")
        h["BHMASS"] = (float(doc["black_hole"]["mass"]), "black-hole mass [M_sun]")
        h["DISTPC"] = (float(doc["black_hole"]["distance"]), "distance [pc]")
        h["BHSPIN"] = (float(doc["black_hole"]["spin"]), "dimensionless spin a/M")
        h["INCLIN"] = (float(doc["observer"]["inclination"]), "inclination [deg]")
        h["OBSMODE"] = (doc["observing"]["mode"], "observing mode")
        h["EMLAW"] = (doc["emission"]["law"], "emission law")
        h["ORIGIN"] = f"nullray {meta['version']}"
        if extname:
            h["EXTNAME"] = extname
        return h

    def flipped(a):
        return np.ascontiguousarray(np.flipud(np.asarray(a, dtype=np.float64)))

    hdus = [fits.PrimaryHDU(flipped(data), header=header(unit))]
    if "flux_density_jy" in result.products:
        hdus.append(fits.ImageHDU(flipped(result.products["flux_density_jy"]),
                                  header=header("Jy/pixel", "FLUXPIX")))
    hdus.append(fits.ImageHDU(flipped(result.g[0]), header=header("", "REDSHIFT")))
    return fits.HDUList(hdus)


def write_fits(path, result, overwrite=False):
    """Write :func:`fits_hdus` of a still to ``path`` atomically."""
    hdus = fits_hdus(result)
    return atomic_write(path, lambda f: hdus.writeto(f), overwrite)


def _plot(path, overwrite, figure_maker, table, metadata):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig = figure_maker(plt, table, metadata)
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=110)
    plt.close(fig)
    data = buffer.getvalue()
    return atomic_write(path, lambda f: f.write(data), overwrite)


def _title(metadata):
    doc = metadata["scene"]
    return (f"{doc['name']}: a = {doc['black_hole']['spin']:g}, i = "
            f"{doc['observer']['inclination']:g} deg, M = {doc['black_hole']['mass']:.3g} M_sun, "
            f"D = {doc['black_hole']['distance']:.3g} pc")


def _spectrum_figure(plt, table, metadata):
    fig, ax = plt.subplots(figsize=(6.4, 4.4))
    nu = table["frequency_hz"]
    for key, label in (("flux_relativistic_jy", "ray-traced (relativistic)"),
                       ("flux_flat_jy", "flat space (no relativistic effects)")):
        values = np.where(table[key] > 0, nu * table[key], np.nan)
        ax.loglog(nu, values, label=label)
    ax.set_xlabel("frequency nu [Hz]")
    ax.set_ylabel("nu F_nu [Hz Jy]")
    ax.set_title(_title(metadata), fontsize=8)
    ax.legend(fontsize=8)
    fig.tight_layout()
    return fig


def _line_figure(plt, table, metadata):
    fig, ax = plt.subplots(figsize=(6.4, 4.4))
    ax.step(table["energy_kev"], table["counts"], where="mid")
    rest = metadata["observing"]["line_energy_kev"]
    ax.axvline(rest, color="grey", linestyle=":", label=f"rest energy {rest:g} keV")
    ax.set_xlabel("observed photon energy [keV]")
    ax.set_ylabel("counts per bin (normalised)")
    ax.set_title(_title(metadata), fontsize=8)
    ax.legend(fontsize=8)
    fig.tight_layout()
    return fig
