"""Writers of the physical products of a still: FITS maps, 16-bit PNG, linear float, CSV + plots.

Which files a still gets, besides the PNG and NPZ of :mod:`render.output.files`:

* ``<name>.fits`` (``output.fits: true``): the physical maps as FITS images,
  written with astropy.io.fits (FITS Standard 4.0);
* true_colour: ``<name>_16bit.png`` (16-bit sRGB) and ``<name>_linear.npy``
  (float32 linear sRGB, scene-referred, before exposure, (H, W, 3), row 0 at the top);
* spectrum: ``<name>_spectrum.csv`` (one header row), ``<name>_spectrum.json`` (columns,
  units, metadata) and ``<name>_spectrum.png``;
* line: ``<name>_line.csv``, ``<name>_line.json`` and ``<name>_line.png``.

All files are written atomically and never replace an existing file unless
asked (:func:`render.output.files.atomic_write`).

Bounded memory
--------------
The FITS maps and the 16-bit PNG are written in blocks of rows: of at most one
tile's rows for a still rendered in tiles (``metadata["tiles"]["rows_per_tile"]``,
:mod:`render.imaging.tiling`), and at most ``STREAM_CHUNK_BYTES`` per block in any case.
A map of a tiled still is a memory map of a temporary ``.npy`` file; its blocks
are read from the file by plain reads, so the pages of the whole map are never
resident at once.  The linear ``.npy`` of a tiled still is copied from its
temporary file in chunks.  Memory while writing therefore grows with the tile,
not with the image, and stays within ``tracing.memory_budget`` whatever
products are asked for.

FITS layout
-----------
The primary HDU holds the mode's main map (monochromatic: I_nu; bolometric
and true colour: bolometric intensity; line: line intensity); image
extensions hold the others (``FLUXPIX``, Jy per pixel; ``REDSHIFT``, g of the
first crossing), and a binary table ``SCENE`` holds the scene as YAML, one
row per line; the spectrum and line modes add their table as a binary table
``SPECTRUM`` or ``LINE`` (one row per bin, the CSV's columns with their units;
a polarised spectrum's Stokes Q, U, degree and IAU angle among them).  FITS
rows run upwards, so the arrays are flipped vertically.  The sky axes are
``RA---TAN`` / ``DEC--TAN`` with CRVAL = 0,
CRPIX at the image centre and CDELT1 = -pixel scale (east to the left, the
FITS habit), CDELT2 = +pixel scale, in degrees; +x of the image is the
Bardeen alpha axis.  Header cards: BUNIT (a FITS unit string astropy reads,
empty for the arbitrary units of ``power_law`` and ``profile`` and for g),
DATE (UTC, when the still was rendered), OBSFREQ (Hz), BHMASS (M_sun),
DISTPC (pc), BHSPIN, INCLIN (deg), plus the mode and emission law.
"""

import csv
import io
import json
import struct
import zlib
from pathlib import Path

import numpy as np

from .files import (STREAM_CHUNK_BYTES, _npy_file, atomic_path, atomic_write, check_free,
                    jsonable)
from ..light.observing import pixel_angle_rad
from ..scene.loader import scene_from_dict

__all__ = ["product_paths", "write_products", "write_fits", "write_png16", "write_npy",
           "write_table_csv", "write_table_sidecar", "TABLE_COLUMNS", "fits_hdus",
           "scene_table_hdu", "table_hdus", "COLUMN_UNITS", "read_rows"]


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
        paths["spectrum_json"] = folder / f"{name}_spectrum.json"
        paths["spectrum_png"] = folder / f"{name}_spectrum.png"
    if mode == "line":
        paths["line_csv"] = folder / f"{name}_line.csv"
        paths["line_json"] = folder / f"{name}_line.json"
        paths["line_png"] = folder / f"{name}_line.png"
    return paths


def write_products(result, folder="outputs", overwrite=False):
    """Write the extra files of a :class:`~render.imaging.result.StillResult`; returns {kind: Path}."""
    paths = product_paths(result.metadata["scene"], folder)
    check_free(paths.values(), overwrite)
    if "fits" in paths:
        write_fits(paths["fits"], result, overwrite)
    if "png16" in paths:
        pixels16 = result.products["pixels16"]
        write_png16(paths["png16"], pixels16, overwrite,
                    block_rows=_block_rows(result, pixels16[:1].nbytes))
        linear = result.products["rgb_linear"]
        write_npy(paths["linear"], linear, overwrite,
                  chunk_bytes=_block_rows(result, linear[:1].nbytes) * linear[:1].nbytes)
    for kind in ("spectrum", "line"):
        if f"{kind}_csv" in paths:
            table = result.tables[kind]
            write_table_csv(paths[f"{kind}_csv"], table, overwrite)
            write_table_sidecar(paths[f"{kind}_json"], table, TABLE_COLUMNS[kind],
                                result.metadata, overwrite)
            figure = _spectrum_figure if kind == "spectrum" else _line_figure
            _plot(paths[f"{kind}_png"], overwrite, figure, table, result.metadata)
    return paths


# What each column of the spectrum and line tables holds (the sidecar JSON says it).
TABLE_COLUMNS = {
    "spectrum": {
        "frequency_hz": "observed frequency, Hz",
        "energy_kev": "observed photon energy h nu, keV",
        "flux_relativistic_jy": "disk-integrated F_nu, ray-traced (all relativistic effects), Jy",
        "flux_flat_jy": "F_nu of the same local emission in flat space, Jy",
        "nufnu_relativistic_erg_s_cm2": "nu F_nu, ray-traced, erg s^-1 cm^-2",
        "nufnu_flat_erg_s_cm2": "nu F_nu in flat space, erg s^-1 cm^-2",
        "stokes_q_jy": "disk-integrated Stokes Q_nu, Jy (Stokes I_nu: flux_relativistic_jy)",
        "stokes_u_jy": "disk-integrated Stokes U_nu, Jy",
        "polarised_degree": "degree of linear polarisation sqrt(Q_nu^2 + U_nu^2) / F_nu",
        "polarisation_angle_deg": "IAU polarisation angle, from north through east, deg",
    },
    "line": {
        "energy_low_kev": "low edge of the energy bin, keV",
        "energy_high_kev": "high edge of the energy bin, keV",
        "energy_kev": "centre of the energy bin, keV",
        "counts": "photon counts per bin, normalised to sum 1 over the bins",
        "counts_per_kev": "counts divided by the bin width, keV^-1",
        "photon_flux_per_kev": "photon flux density, photons s^-1 cm^-2 keV^-1 (emissivity "
                               "taken in erg s^-1 cm^-2 sr^-1)",
        "energy_flux_per_kev": "energy flux density, erg s^-1 cm^-2 keV^-1 (same emissivity)",
    },
}


def write_table_sidecar(path, table, columns, metadata, overwrite=False):
    """The JSON beside a CSV table: its columns' meanings and units, and the still's metadata."""
    document = {"columns": {name: columns.get(name, "") for name in table},
                "rows": int(len(next(iter(table.values())))),
                "observing": metadata.get("observing", {}), "scene": metadata.get("scene")}
    data = (json.dumps(document, indent=1, default=jsonable) + "\n").encode("utf-8")
    return atomic_write(path, lambda f: f.write(data), overwrite)


def write_table_csv(path, table, overwrite=False):
    """Write a dict of equal-length 1-D arrays as CSV: one row of names, then the numbers.

    No comment line, so that ``pandas.read_csv`` and ``numpy.genfromtxt(names=True)``
    read it with their default options; meanings and units go in a sidecar JSON
    (:func:`write_table_sidecar`).
    """
    names = list(table)
    text = io.StringIO()
    writer = csv.writer(text, lineterminator="\n")
    writer.writerow(names)
    for row in zip(*(np.asarray(table[n]) for n in names)):
        writer.writerow([f"{float(v):.10g}" for v in row])
    data = text.getvalue().encode("utf-8")
    return atomic_write(path, lambda f: f.write(data), overwrite)


def _block_rows(result, row_bytes):
    """Rows per write block: at most a tile's rows, and at most STREAM_CHUNK_BYTES."""
    height = result.fate.shape[0]
    tile_rows = result.metadata.get("tiles", {}).get("rows_per_tile", height)
    return max(1, min(int(tile_rows), height, STREAM_CHUNK_BYTES // max(int(row_bytes), 1)))


def read_rows(array, start, stop, index=None):
    """Rows ``start:stop`` of ``array`` (of ``array[index]`` if given) as an in-memory array.

    For a memory map of a whole ``.npy`` file (a map of a still rendered in
    tiles) the rows are read from the file by a plain read, so that only they,
    not the pages of the whole map, become resident.
    """
    source = _npy_file(array)
    if source is None:
        part = array if index is None else array[index]
        return np.asarray(part[start:stop])
    shape = array.shape if index is None else array.shape[1:]
    items = int(np.prod(shape[1:], dtype=np.int64))
    first = start if index is None else index * shape[0] + start
    block = np.fromfile(source, dtype=array.dtype, count=(stop - start) * items,
                        offset=array.offset + first * items * array.dtype.itemsize)
    return block.reshape((stop - start,) + tuple(shape[1:]))


def write_npy(path, array, overwrite=False, chunk_bytes=STREAM_CHUNK_BYTES):
    """Write ``array`` as ``.npy`` atomically, the bytes ``np.save`` would write.

    A memory map of a tile file gets a fresh header, then its data is copied
    from the file by plain reads of ``chunk_bytes``, so it is never loaded whole.
    """
    source = _npy_file(array)
    if source is None:
        return atomic_write(path, lambda f: np.save(f, np.ascontiguousarray(array)), overwrite)

    def copy(handle):
        header = np.lib.format.header_data_from_array_1_0(array)
        try:
            np.lib.format.write_array_header_1_0(handle, header)
        except ValueError:  # np.save's rule: version 2.0 only when 1.0 cannot hold it
            np.lib.format.write_array_header_2_0(handle, header)
        remaining = array.nbytes
        with open(source, "rb") as npy:
            npy.seek(array.offset)
            while remaining > 0:
                piece = npy.read(min(int(chunk_bytes), remaining))
                if not piece:
                    raise OSError(f"{source} is shorter than its header says")
                handle.write(piece)
                remaining -= len(piece)

    return atomic_write(path, copy, overwrite)


# IDAT chunks of about this size (PNG allows the zlib stream to be split across
# consecutive IDAT chunks, ISO/IEC 15948 sec. 10.1).
IDAT_BYTES = 1 << 20


def write_png16(path, rgb16, overwrite=False, block_rows=None):
    """Write an (H, W, 3) uint16 array as a 16-bit RGB PNG (colour type 2, bit depth 16).

    The rows are filtered (type 0) and compressed ``block_rows`` at a time (default:
    blocks of at most 16 MB), so memory does not grow with the image.

    References
    ----------
    ISO/IEC 15948:2004 (PNG), sec. 10.1 (IDAT), 11.2.2 (IHDR) and 11.3.4.5 (sRGB chunk).
    """
    height, width, _ = rgb16.shape
    row_bytes = 6 * width
    rows = block_rows or max(1, STREAM_CHUNK_BYTES // max(row_bytes, 1))

    def chunk(kind, payload):
        body = kind + payload
        return struct.pack(">I", len(payload)) + body + struct.pack(">I", zlib.crc32(body))

    def write(handle):
        handle.write(b"\x89PNG\r\n\x1a\n"
                     + chunk(b"IHDR", struct.pack(">IIBBBBB", width, height, 16, 2, 0, 0, 0))
                     + chunk(b"sRGB", b"\x00"))
        compressor = zlib.compressobj(6)
        pending = []
        size = 0
        for start in range(0, height, rows):
            stop = min(start + rows, height)
            samples = np.ascontiguousarray(read_rows(rgb16, start, stop), dtype=">u2")
            filtered = np.zeros((stop - start, 1 + row_bytes), dtype=np.uint8)
            filtered[:, 1:] = samples.view(np.uint8).reshape(stop - start, row_bytes)
            del samples
            piece = compressor.compress(filtered)
            del filtered
            if piece:
                pending.append(piece)
                size += len(piece)
            if size >= IDAT_BYTES:
                handle.write(chunk(b"IDAT", b"".join(pending)))
                pending, size = [], 0
        pending.append(compressor.flush())
        handle.write(chunk(b"IDAT", b"".join(pending)) + chunk(b"IEND", b""))

    return atomic_write(path, write, overwrite)


def _main_map(result):
    """The primary HDU's map, its BUNIT (FITS units, astropy-readable) and the card's comment."""
    mode = result.metadata["scene"]["observing"]["mode"]
    law = result.metadata["scene"]["emission"]["law"]
    if mode == "monochromatic":
        return result.products["specific_intensity"], "erg/(s cm2 Hz sr)", "specific intensity"
    if mode == "line":
        # FITS has no unit for "arbitrary": an empty BUNIT, and the comment says so.
        return result.products["line_intensity"], "", "arbitrary units (line intensity)"
    if law == "novikov_thorne":
        return result.intensity, "erg/(s cm2 sr)", "bolometric intensity"
    return result.intensity, "", "arbitrary units of the emission law"


def _fits_date(metadata):
    """The DATE card's value: when the still was rendered (UTC), to the second."""
    from datetime import datetime, timezone

    stamp = metadata.get("rendered_utc")
    when = datetime.fromisoformat(stamp) if stamp else datetime.now(timezone.utc)
    return when.astimezone(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S")


def _fits_layout(result):
    """[(header, array, index)] of a still's FITS image HDUs; the data is ``array[index]``, unflipped.

    The headers are complete (mandatory cards for (H, W) float64 data, EXTEND in
    the primary one) but no data array of the image's size is made.
    """
    from astropy.io import fits

    meta = result.metadata
    doc = meta["scene"]
    scene = scene_from_dict(doc, source=meta.get("scene_source", "<dict>"), default_name=doc["name"])
    pixel_deg = float(np.degrees(pixel_angle_rad(scene)))
    data, unit, what = _main_map(result)
    height, width = data.shape
    date = _fits_date(meta)

    def header(bunit, comment, extname=None):
        h = fits.Header()
        h["BUNIT"] = (bunit, comment)
        h["DATE"] = (date, "UTC date the still was rendered")
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

    layout = [(header(unit, what), data, None)]
    if "flux_density_jy" in result.products:
        layout.append((header("Jy/pixel", "flux density per pixel", "FLUXPIX"),
                       result.products["flux_density_jy"], None))
    layout.append((header("", "redshift factor g = nu_obs/nu_em (no unit)", "REDSHIFT"),
                   result.g, 0))
    if "stokes_q" in result.products:
        layout.extend(_polarisation_layout(result, header, unit, what))
    # A zero-strided stand-in gives astropy the data shape and type for the mandatory
    # cards (BITPIX, NAXISn, PCOUNT, GCOUNT, EXTEND) without an image-sized array.
    stand_in = np.broadcast_to(np.float64(0.0), (height, width))
    hdus = fits.HDUList([fits.PrimaryHDU(stand_in, header=layout[0][0])]
                        + [fits.ImageHDU(stand_in, header=h) for h, _, _ in layout[1:]])
    hdus.update_extend()
    return [(hdu.header, array, index) for hdu, (_, array, index) in zip(hdus, layout)]


def scene_table_hdu(metadata):
    """The ``SCENE`` extension: the full scene as YAML, one table row per line (ASCII).

    Read it back with ``"\\n".join(hdus["SCENE"].data["YAML"])``.
    """
    from astropy.io import fits
    import yaml

    text = yaml.safe_dump(metadata["scene"], sort_keys=False, allow_unicode=False, width=70)
    lines = text.splitlines() or [""]
    width = max(1, max(len(line) for line in lines))
    column = fits.Column(name="YAML", format=f"{width}A", array=np.array(lines, dtype=f"S{width}"))
    hdu = fits.BinTableHDU.from_columns([column], name="SCENE")
    hdu.header["COMMENT"] = "the scene of this still (every key, defaults filled in), as YAML"
    return hdu


# FITS units (FITS Standard 4.0, sec. 4.3) of the table columns; a missing name has none.
COLUMN_UNITS = {
    "frequency_hz": "Hz", "energy_kev": "keV", "energy_low_kev": "keV",
    "energy_high_kev": "keV", "flux_relativistic_jy": "Jy", "flux_flat_jy": "Jy",
    "nufnu_relativistic_erg_s_cm2": "erg s-1 cm-2", "nufnu_flat_erg_s_cm2": "erg s-1 cm-2",
    "stokes_q_jy": "Jy", "stokes_u_jy": "Jy", "polarisation_angle_deg": "deg",
    "counts_per_kev": "keV-1", "photon_flux_per_kev": "ph s-1 cm-2 keV-1",
    "energy_flux_per_kev": "erg s-1 cm-2 keV-1"}


def table_hdus(result):
    """Binary-table extensions ``SPECTRUM`` / ``LINE`` of a still's tables (one row per bin).

    Column names are the CSV's in capitals, with their units (:data:`COLUMN_UNITS`;
    meanings in :data:`TABLE_COLUMNS` and the CSV's JSON sidecar); a polarisation
    angle follows the IAU convention (POLCONV).
    """
    from astropy.io import fits

    hdus = []
    for kind, table in result.tables.items():
        # Big-endian, as FITS stores them, so that the bytes stream as they are.
        columns = [fits.Column(name=name.upper(), format="D", unit=COLUMN_UNITS.get(name),
                               array=np.asarray(values, dtype=">f8"))
                   for name, values in table.items()]
        hdu = fits.BinTableHDU.from_columns(columns, name=kind.upper())
        if "polarisation_angle_deg" in table:
            hdu.header["POLCONV"] = ("IAU", "angle from north (up) through east (left)")
        hdus.append(hdu)
    return hdus


def _polarisation_layout(result, header, unit, what):
    """The Stokes I, Q, U, degree and angle HDUs (IAU angle: from north through east)."""
    layout = []
    for name, bunit, comment, key in (
            ("STOKESI", unit, f"Stokes I: {what}", "stokes_i"),
            ("STOKESQ", unit, f"Stokes Q: {what}", "stokes_q"),
            ("STOKESU", unit, f"Stokes U: {what}", "stokes_u"),
            ("POLDEG", "", "degree of linear polarisation (no unit)", "polarised_degree"),
            ("POLANG", "deg", "polarisation angle, IAU", "polarisation_angle")):
        h = header(bunit, comment, name)
        h["POLCONV"] = ("IAU", "angle from north (up) through east (left)")
        h["STOKESV"] = (0.0, "circular polarisation: none")
        layout.append((h, result.products[key], None))
    return layout


def fits_hdus(result):
    """astropy HDUList of a still's physical maps and scene (see the module doc), in memory."""
    from astropy.io import fits

    hdus = []
    for k, (header, array, index) in enumerate(_fits_layout(result)):
        data = np.asarray(array if index is None else array[index], dtype=np.float64)
        kind = fits.PrimaryHDU if k == 0 else fits.ImageHDU
        hdus.append(kind(np.ascontiguousarray(np.flipud(data)), header=header))
    hdus.append(scene_table_hdu(result.metadata))
    return fits.HDUList(hdus + table_hdus(result))


def write_fits(path, result, overwrite=False):
    """Write the FITS file of a still atomically, each map streamed in blocks of rows.

    Each map goes through astropy's streaming writer (``astropy.io.fits.StreamingHDU``):
    its header, then the rows as float64, flipped so that FITS row 1 is the
    bottom of the image, a block at a time, so no whole map is held in memory.
    The small ``SCENE`` table (:func:`scene_table_hdu`) follows, streamed the same way,
    then the spectrum or line table, if any (:func:`table_hdus`).

    References
    ----------
    FITS Standard 4.0 (IAU FITS Working Group 2016), sec. 3.3.2, 4.4.1, 5.3 and 7.3.
    """
    from astropy.io import fits

    layout = _fits_layout(result)
    height, width = result.fate.shape
    rows = _block_rows(result, 8 * width)
    table = scene_table_hdu(result.metadata)

    with atomic_path(path, overwrite) as tmp:
        for header, array, index in layout:
            stream = fits.StreamingHDU(str(tmp), header)
            try:
                for stop in range(height, 0, -rows):
                    start = max(0, stop - rows)
                    block = read_rows(array, start, stop, index)[::-1]
                    stream.write(np.ascontiguousarray(block, dtype=">f8"))
                    del block
            finally:
                stream.close()
        extensions = [(table, table.data.tobytes())]   # text: no byte order
        extensions += [(hdu, _big_endian_rows(hdu.data)) for hdu in table_hdus(result)]
        for extension, data in extensions:   # small: streamed whole
            stream = fits.StreamingHDU(str(tmp), extension.header)
            try:
                stream.write(np.frombuffer(data, dtype=np.uint8))
            finally:
                stream.close()
    return Path(path)


def _big_endian_rows(data):
    """The bytes of a table of float64 columns as FITS stores them (big-endian rows)."""
    rows = np.empty(len(data), dtype=[(name, ">f8") for name in data.names])
    for name in data.names:
        rows[name] = data[name]
    return rows.tobytes()


def _plot(path, overwrite, figure_maker, table, metadata):
    # A bare Figure renders to PNG without pyplot, so no backend is chosen here.
    from matplotlib.figure import Figure

    fig = figure_maker(Figure(figsize=(6.4, 4.4)), table, metadata)
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=110)
    data = buffer.getvalue()
    return atomic_write(path, lambda f: f.write(data), overwrite)


def _title(metadata):
    doc = metadata["scene"]
    return (f"{doc['name']}: a = {doc['black_hole']['spin']:g}, i = "
            f"{doc['observer']['inclination']:g} deg, M = {doc['black_hole']['mass']:.3g} M_sun, "
            f"D = {doc['black_hole']['distance']:.3g} pc")


# nu F_nu is drawn down to this fraction of its peak: a thermal spectrum's Wien tail would
# otherwise take most of the plot's height (common practice for broad-band spectra).
SPECTRUM_PLOT_DECADES = 8


def _spectrum_figure(fig, table, metadata):
    polarised = "polarised_degree" in table and np.any(
        np.isfinite(table["polarised_degree"]))
    if polarised:
        fig.set_size_inches(6.4, 6.6)
        ax, ax_degree = fig.subplots(2, 1, sharex=True, height_ratios=(2, 1))
    else:
        ax = fig.add_subplot()
    nu = table["frequency_hz"]
    peak = 0.0
    for key, label in (("nufnu_relativistic_erg_s_cm2", "ray-traced (relativistic)"),
                       ("nufnu_flat_erg_s_cm2", "flat space (no relativistic effects)")):
        values = np.where(table[key] > 0, table[key], np.nan)
        ax.loglog(nu, values, label=label)
        peak = max(peak, float(np.nanmax(values, initial=0.0)))
    if peak > 0.0:
        ax.set_ylim(bottom=max(ax.get_ylim()[0], peak * 10.0 ** -SPECTRUM_PLOT_DECADES))
    ax.set_ylabel("nu F_nu [erg s^-1 cm^-2]")
    ax.set_title(_title(metadata), fontsize=8)
    ax.legend(fontsize=8)
    if polarised:
        _polarisation_panel(ax_degree, nu, table)
    (ax_degree if polarised else ax).set_xlabel("frequency nu [Hz]")
    fig.tight_layout()
    return fig


def _polarisation_panel(ax, nu, table):
    """Degree (%) and angle (deg, right axis) of the disk's light against frequency."""
    ax.semilogx(nu, 100.0 * table["polarised_degree"], color="C2", label="degree")
    ax.set_ylabel("degree [%]", color="C2")
    angle = np.asarray(table["polarisation_angle_deg"], dtype=float)
    finite = np.isfinite(angle)
    unwrapped = np.full(angle.shape, np.nan)
    # The angle is defined modulo 180 deg: unwrap it so its rotation shows as a curve.
    unwrapped[finite] = np.degrees(np.unwrap(np.radians(2.0 * angle[finite]))) / 2.0
    twin = ax.twinx()
    twin.semilogx(nu, unwrapped, color="C3", linestyle="--", label="angle (IAU)")
    twin.set_ylabel("angle, IAU [deg]", color="C3")
    ax.grid(alpha=0.3)


def _line_figure(fig, table, metadata):
    ax = fig.add_subplot()
    ax.step(table["energy_kev"], table["counts"], where="mid")
    rest = metadata["observing"]["line_energy_kev"]
    ax.axvline(rest, color="grey", linestyle=":", label=f"rest energy {rest:g} keV")
    ax.set_xlabel("observed photon energy [keV]")
    ax.set_ylabel("counts per bin (normalised)")
    ax.set_title(_title(metadata), fontsize=8)
    ax.legend(fontsize=8)
    fig.tight_layout()
    return fig
