"""render/output/products.py: which extra files a still gets and that other readers read them.

Each file is read back by an independent reader: numpy.genfromtxt and the csv module
for CSV, numpy.load for .npy, Pillow plus a decoder written here from the PNG
specification for the 16-bit PNG, and astropy.io.fits for FITS.
"""

import csv
import json
import struct
import zlib

import numpy as np
import pandas
import pytest
from astropy.io import fits
from PIL import Image

from render import default_scene, render_still
from render.errors import OutputExists
from render.output.products import (product_paths, read_rows, write_fits, write_npy,
                                    write_png16, write_table_csv)


def document(mode, fits_wanted=False, name="shot"):
    return {"name": name, "observing": {"mode": mode}, "output": {"fits": fits_wanted}}


@pytest.mark.parametrize("mode,fits_wanted,expected", [
    ("bolometric", False, {}),
    ("bolometric", True, {"fits": "shot.fits"}),
    ("monochromatic", True, {"fits": "shot.fits"}),
    ("true_colour", False, {"png16": "shot_16bit.png", "linear": "shot_linear.npy"}),
    ("spectrum", True, {"fits": "shot.fits", "spectrum_csv": "shot_spectrum.csv",
                        "spectrum_json": "shot_spectrum.json",
                        "spectrum_png": "shot_spectrum.png"}),
    ("line", False, {"line_csv": "shot_line.csv", "line_json": "shot_line.json",
                     "line_png": "shot_line.png"}),
])
def test_product_paths_per_mode(tmp_path, mode, fits_wanted, expected):
    paths = product_paths(document(mode, fits_wanted), tmp_path)
    assert {kind: path.name for kind, path in paths.items()} == expected
    assert all(path.parent == tmp_path for path in paths.values())


TABLE = {"frequency_hz": np.geomspace(1e14, 1e19, 7),
         "flux_relativistic_jy": np.array([0.0, 1.5e-3, 2.25, 3.125e2, 4e-7, 1.0, 7.0]),
         "flux_flat_jy": np.linspace(-1.0, 1.0, 7)}


def test_table_csv_is_read_by_numpy_pandas_and_the_csv_module(tmp_path):
    path = tmp_path / "t.csv"
    write_table_csv(path, TABLE)
    # Default options of each reader (common practice: one header row, no comment line).
    data = np.genfromtxt(path, delimiter=",", names=True)
    assert list(data.dtype.names) == list(TABLE)
    frame = pandas.read_csv(path)
    assert list(frame.columns) == list(TABLE)
    for name, column in TABLE.items():
        # The module writes 10 significant digits ("%.10g"): rounding to them moves a
        # value by at most half a unit in the 10th digit, 5e-10 relative.
        np.testing.assert_allclose(data[name], column, rtol=5e-10, atol=0)
        np.testing.assert_allclose(frame[name].to_numpy(), column, rtol=5e-10, atol=0)
    with open(path, newline="", encoding="utf-8") as handle:
        rows = list(csv.reader(handle))
    assert rows[0] == list(TABLE)
    assert len(rows) == 1 + 7 and all(len(row) == 3 for row in rows)


def test_line_still_writes_csv_and_sidecar_that_describe_the_same_columns(tmp_path):
    from render.api import make_still

    scene = default_scene(**{"name": "shot", "image.width": 16, "image.height": 16,
                             "observer.placement": "distant", "observing.mode": "line",
                             "observing.line_bins": 50, "output.npz": False})
    _, paths = make_still(scene, tmp_path)
    frame = pandas.read_csv(paths["line_csv"])
    sidecar = json.loads(paths["line_json"].read_text())
    assert list(frame.columns) == list(sidecar["columns"]) and len(frame) == sidecar["rows"] == 50
    assert all(sidecar["columns"].values())   # every column is explained
    assert "pixel_scale" in sidecar["observing"] and sidecar["scene"]["name"] == "shot"


def test_table_csv_does_not_overwrite(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text("keep")
    with pytest.raises(OutputExists):
        write_table_csv(path, TABLE)
    assert path.read_text() == "keep"


def memory_map(tmp_path, array, name="source.npy"):
    source = tmp_path / name
    np.save(source, array)
    return np.load(source, mmap_mode="r")


def test_read_rows_of_arrays_and_memory_maps(tmp_path):
    rng = np.random.default_rng(3)
    plain = rng.random((9, 5, 3))
    per_order = rng.random((2, 9, 5))
    for array in (plain, memory_map(tmp_path, plain)):
        np.testing.assert_array_equal(read_rows(array, 2, 7), plain[2:7])
    mapped = memory_map(tmp_path, per_order, "orders.npy")
    for index in (0, 1):
        np.testing.assert_array_equal(read_rows(mapped, 3, 9, index), per_order[index, 3:9])
        np.testing.assert_array_equal(read_rows(per_order, 0, 4, index), per_order[index, :4])


@pytest.mark.parametrize("dtype", [np.float32, np.float64, np.uint16])
def test_write_npy_streams_the_bytes_np_save_writes(tmp_path, dtype):
    array = (np.arange(13 * 6 * 3).reshape(13, 6, 3) * 7.25).astype(dtype)
    reference = tmp_path / "reference.npy"
    np.save(reference, array)
    streamed = tmp_path / "streamed.npy"
    # 100 bytes a read: not a multiple of a row, so the chunks split rows and elements.
    write_npy(streamed, memory_map(tmp_path, array), chunk_bytes=100)
    plain = tmp_path / "plain.npy"
    write_npy(plain, array)
    assert streamed.read_bytes() == reference.read_bytes()
    assert plain.read_bytes() == reference.read_bytes()
    np.testing.assert_array_equal(np.load(streamed), array)


def decode_png16(path):
    """A 16-bit RGB PNG decoded from the specification (ISO/IEC 15948:2004): chunk CRCs
    (sec. 5.3), IHDR (11.2.2), IDAT payloads forming one zlib stream (10.1), and each row's
    filter byte (9.2; only type 0, None, and type 1, Sub, are handled here)."""
    raw = path.read_bytes()
    assert raw[:8] == b"\x89PNG\r\n\x1a\n"
    position, stream, kinds = 8, b"", []
    while position < len(raw):
        length, kind = struct.unpack(">I4s", raw[position:position + 8])
        body = raw[position + 8:position + 8 + length]
        (crc,) = struct.unpack(">I", raw[position + 8 + length:position + 12 + length])
        assert crc == zlib.crc32(kind + body), kind
        kinds.append(kind)
        if kind == b"IHDR":
            width, height, depth, colour, compression, filtering, interlace = struct.unpack(
                ">IIBBBBB", body)
            assert (depth, colour, compression, filtering, interlace) == (16, 2, 0, 0, 0)
        elif kind == b"IDAT":
            stream += body
        position += 12 + length
    assert kinds[0] == b"IHDR" and kinds[-1] == b"IEND"
    rows = np.frombuffer(zlib.decompress(stream), dtype=np.uint8).reshape(height, 1 + 6 * width)
    out = np.zeros((height, 6 * width), dtype=np.uint8)
    for y in range(height):
        kind, line = rows[y, 0], rows[y, 1:]
        if kind == 0:
            out[y] = line
        elif kind == 1:
            for x in range(out.shape[1]):
                out[y, x] = (int(line[x]) + (int(out[y, x - 6]) if x >= 6 else 0)) % 256
        else:
            raise AssertionError(f"filter type {kind} not handled by this reader")
    return out.view(">u2").reshape(height, width, 3).astype(np.uint16)


@pytest.mark.parametrize("block_rows", [None, 1, 4])
def test_png16_is_read_back_exactly(tmp_path, block_rows):
    rng = np.random.default_rng(7)
    rgb16 = rng.integers(0, 65536, (9, 11, 3)).astype(np.uint16)
    rgb16[0, 0] = (0, 65535, 256)   # extremes and a value whose bytes differ
    path = tmp_path / "p.png"
    write_png16(path, rgb16, block_rows=block_rows)
    np.testing.assert_array_equal(decode_png16(path), rgb16)
    # Pillow opens it as an image of the right size; it reads 16-bit RGB as 8-bit RGB,
    # keeping the high byte of each sample (Pillow's behaviour, checked here).
    with Image.open(path) as image:
        assert image.size == (11, 9)
        np.testing.assert_array_equal(np.asarray(image.convert("RGB")), rgb16 >> 8)


def test_png16_from_a_memory_map(tmp_path):
    rgb16 = (np.arange(5 * 4 * 3).reshape(5, 4, 3) * 4099 % 65536).astype(np.uint16)
    path = tmp_path / "m.png"
    write_png16(path, memory_map(tmp_path, rgb16), block_rows=2)
    np.testing.assert_array_equal(decode_png16(path), rgb16)


@pytest.fixture(scope="module")
def monochromatic_still():
    # 16 x 16 distant observer, one order (closed form): small and quick.
    scene = default_scene(**{"image.width": 16, "image.height": 16, "observer.placement": "distant",
                             "observing.mode": "monochromatic", "emission.law": "novikov_thorne",
                             "observing.frequency": 1e15, "output.fits": True,
                             "disk.orders": 1, "tracing.method": "auto"})
    return scene, render_still(scene)


def test_fits_verifies_and_holds_the_maps(tmp_path, monochromatic_still):
    scene, result = monochromatic_still
    path = tmp_path / "still.fits"
    write_fits(path, result)
    with fits.open(path) as hdus:
        hdus.verify("exception")   # FITS Standard 4.0 checks as astropy implements them
        assert [h.name for h in hdus] == ["PRIMARY", "FLUXPIX", "REDSHIFT", "SCENE"]
        # FITS row 1 is the bottom of the image: the arrays come back flipped.
        np.testing.assert_array_equal(hdus[0].data, np.flipud(result.products["specific_intensity"]))
        np.testing.assert_array_equal(hdus[1].data, np.flipud(result.products["flux_density_jy"]))
        np.testing.assert_array_equal(hdus[2].data, np.flipud(result.g[0]))
        header = hdus[0].header
        assert header["OBSFREQ"] == 1e15
        assert header["BUNIT"] == "erg/(s cm2 Hz sr)"
        assert header["BHSPIN"] == scene.spin
        assert header["CRPIX1"] == 8.5 and header["CRPIX2"] == 8.5
        # East to the left: CDELT1 < 0 (common practice in FITS sky images).
        assert header["CDELT1"] < 0 < header["CDELT2"]
        # The pixel scale: field of view / width gravitational radii GM/c^2 seen at D,
        # in degrees, by astropy Quantities.  1e-12 relative: a FITS card keeps about
        # 15 significant digits of a float.
        import astropy.constants as const
        import astropy.units as u
        pixel = (scene["observer.field_of_view"] / 16 * const.G * scene["black_hole.mass"]
                 * u.M_sun / const.c ** 2 / (scene["black_hole.distance"] * u.pc))
        degrees = (pixel.to(u.dimensionless_unscaled).value * u.rad).to(u.deg).value
        assert header["CDELT2"] == pytest.approx(degrees, rel=1e-12)
        assert -header["CDELT1"] == pytest.approx(degrees, rel=1e-12)
        assert hdus[1].header["BUNIT"] == "Jy/pixel"
        # Every BUNIT is a unit string astropy's FITS unit parser reads (FITS Standard 4.0,
        # sec. 4.3), and the intensity's is erg s^-1 cm^-2 Hz^-1 sr^-1 (astropy.units).
        for hdu in hdus[:3]:
            u.Unit(hdu.header["BUNIT"], format="fits")
        assert (u.Unit(header["BUNIT"], format="fits")
                == u.erg / u.s / u.cm ** 2 / u.Hz / u.sr)
        # DATE in the ISO 8601 form of FITS Standard 4.0 sec. 4.4.2.1, parsed by astropy.Time.
        from astropy.time import Time
        assert Time(header["DATE"], format="isot", scale="utc").jd > 2460000
        # The SCENE table gives back the scene (YAML read by PyYAML, then validated).
        import yaml
        from render.scene.loader import scene_from_dict
        text = "\n".join(hdus["SCENE"].data["YAML"])
        assert scene_from_dict(yaml.safe_load(text)).values == scene.values
    with pytest.raises(OutputExists):
        write_fits(path, result)


@pytest.mark.parametrize("model", ["none", "electron_scattering"])
def test_a_polarised_spectrum_plot_gains_a_degree_and_angle_panel(tmp_path, model):
    # The spectrum PNG of a polarised still adds a panel of the degree and the angle against
    # frequency under nu F_nu (issue 17: the angle's rotation with energy is the
    # observable), so its figure is taller: 6.4 x 6.6 in at 110 dpi against 6.4 x 4.4 in.
    from render.api import make_still

    scene = default_scene(**{"name": "shot", "image.width": 16, "image.height": 16,
                             "observer.placement": "distant", "observing.mode": "spectrum",
                             "emission.law": "novikov_thorne", "output.npz": False,
                             "polarisation.model": model})
    _, paths = make_still(scene, tmp_path)
    with Image.open(paths["spectrum_png"]) as picture:
        assert picture.size == ((704, 726) if model != "none" else (704, 484))
