"""Bounded memory: stills rendered in row tiles, and requests that cannot fit refused.

The tiling is exact bookkeeping (each band traces the same rays the whole
image would), so a tiled still must equal the untiled one bit for bit; a tiny
budget forces many tiles on a small image.  The 8192 x 8192 check runs the
memory benchmark in a subprocess (slow).  The extra products (FITS, 16-bit
PNG, linear .npy) of a tiled still are streamed in blocks of a tile's rows: the
files equal the untiled ones byte for byte, and the memory traced while writing
them does not grow with the image.
"""

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from render import default_scene
from render.camera.observers import image_plane_grid
from render.cli import EXIT_BAD_INPUT
from render.output.files import write_still
from render.errors import SceneError
from render.imaging.still import render_still
from render.imaging.tiling import check_memory

from conftest import run_cli  # noqa: E402  (shared test helpers)

REPO = Path(__file__).resolve().parents[1]

MODES = {
    "bolometric": {},
    "monochromatic": {"observing.mode": "monochromatic", "emission.law": "novikov_thorne",
                      "observing.frequency": 1e15},
    "true-colour-fixed": {"observing.mode": "true_colour", "emission.law": "novikov_thorne",
                          "observing.colour_exposure": "fixed",
                          "observing.colour_reference": 1e10,
                          "emission.limb_darkening": "electron_scattering"},
    "camera-rolled": {"observer.placement": "camera", "observer.distance": 60.0,
                      "observer.roll": 30.0, "disk.surface": "opaque"},
}


def small(**values):
    base = {"image.width": 24, "image.height": 19, "observer.placement": "distant",
            "disk.orders": 3, "disk.surface": "transparent", "black_hole.spin": 0.8}
    base.update(values)
    return default_scene(**base)


def assert_same_maps(tiled, whole):
    assert set(tiled.maps()) == set(whole.maps())
    for name, expected in whole.maps().items():
        got = np.asarray(tiled.maps()[name])
        assert got.shape == expected.shape and got.dtype == expected.dtype, name
        assert np.array_equal(got, expected, equal_nan=expected.dtype.kind == "f"), name


@pytest.mark.parametrize("mode", list(MODES))
def test_tiled_still_equals_the_untiled_one(mode, tmp_path):
    scene = small(**MODES[mode])
    whole = render_still(scene)
    # 24 pixels a row need ~24 x 1120 bytes with 3 orders: a 0.3 MB budget allows 2-3
    # rows per tile, so the 19 rows make 7-10 bands (the last one shorter).
    tiled = render_still(scene, memory_budget=3e5, workdir=tmp_path)
    try:
        assert tiled.metadata["tiles"]["count"] >= 7
        assert_same_maps(tiled, whole)
        assert tiled.metadata["fate_counts"] == whole.metadata["fate_counts"]
        assert tiled.metadata["steps_mean"] == pytest.approx(whole.metadata["steps_mean"],
                                                             rel=1e-12)
        flux = whole.metadata["observing"].get("total_flux_jy")
        if flux is not None:  # a sum over pixels: the same up to summation order
            assert tiled.metadata["observing"]["total_flux_jy"] == pytest.approx(flux, rel=1e-12)
        # The NPZ streamed from the tile files holds the same arrays.
        out = tmp_path / "out"
        paths = write_still(tiled, out)
        with np.load(paths["npz"]) as npz:
            for name, expected in whole.maps().items():
                assert np.array_equal(npz[name], expected,
                                      equal_nan=expected.dtype.kind == "f"), name
            assert json.loads(str(npz["metadata"]))["tiles"]["count"] >= 7
    finally:
        tiled.release()
    # Only the outputs are left: the temporary tile folder is gone.
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]


@pytest.mark.parametrize("roll", [0.0, 30.0, -123.0])
def test_band_grid_is_the_full_grid_bit_for_bit(roll):
    alpha, beta = image_plane_grid(13, 11, 17.5, roll)
    for rows in [(0, 11), (0, 1), (3, 7), (10, 11)]:
        a, b = image_plane_grid(13, 11, 17.5, roll, rows=rows)
        assert np.array_equal(a, alpha[rows[0]:rows[1]])
        assert np.array_equal(b, beta[rows[0]:rows[1]])


def test_command_line_tiles_under_a_small_budget(tmp_path, capsys):
    # 128 x 128 with 2 orders needs ~14 MB untiled (render.imaging.tiling's model), more than
    # the 0.01 GB budget: the command renders in tiles and writes the same files.
    common = ["still", "--set", "observer.placement=distant", "--set", "image.width=128",
              "--set", "image.height=128", "--quiet"]
    status, _, err = run_cli(common + ["--output-dir", tmp_path / "whole"], capsys)
    assert status == 0, err
    status, _, err = run_cli(common + ["--set", "tracing.memory_budget=0.01",
                                       "--output-dir", tmp_path / "tiled"], capsys)
    assert status == 0, err
    assert sorted(p.name for p in (tmp_path / "tiled").iterdir()) == ["default.npz",
                                                                       "default.png"]
    # Same pixels (the files differ in the scene echoed as text: the budget).
    from PIL import Image

    with Image.open(tmp_path / "tiled" / "default.png") as tiled_png, \
            Image.open(tmp_path / "whole" / "default.png") as whole_png:
        assert np.array_equal(np.asarray(tiled_png), np.asarray(whole_png))
    with np.load(tmp_path / "whole" / "default.npz") as whole, \
            np.load(tmp_path / "tiled" / "default.npz") as tiled:
        assert set(whole.files) == set(tiled.files)
        for name in whole.files:
            if name != "metadata":
                assert np.array_equal(whole[name], tiled[name],
                                      equal_nan=whole[name].dtype.kind == "f"), name
        assert json.loads(str(tiled["metadata"]))["tiles"]["count"] > 1


def test_interrupted_tiled_render_leaves_no_temporary_files(tmp_path, monkeypatch):
    import render.imaging.still

    original = render.imaging.still._render_band
    calls = []

    def interrupt_third(scene, observation, rows, progress, *rest):
        calls.append(rows)
        if len(calls) == 3:
            raise KeyboardInterrupt
        return original(scene, observation, rows, progress, *rest)

    monkeypatch.setattr(render.imaging.still, "_render_band", interrupt_third)
    with pytest.raises(KeyboardInterrupt):
        render_still(small(), memory_budget=3e5, workdir=tmp_path)
    assert len(calls) == 3 and list(tmp_path.iterdir()) == []


def test_what_cannot_fit_even_in_tiles_is_refused_before_tracing(tmp_path, capsys, no_tracing):
    # 65536 x 65536 (the largest sides allowed): its 8-bit picture alone is 4.3 GB.
    status, out, err = run_cli(["still", "--set", "image.width=65536", "--set",
                                "image.height=65536", "--output-dir", tmp_path / "out"], capsys)
    assert status == EXIT_BAD_INPUT and out == "" and err.count("\n") == 1
    assert "65536 x 65536" in err and "even in tiles" in err and "tracing.memory_budget" in err
    assert not (tmp_path / "out").exists()


def test_million_pixel_sides_are_refused_in_one_line(tmp_path, capsys, no_tracing):
    status, out, err = run_cli(["still", "--set", "image.width=1000000", "--set",
                                "image.height=1000000", "--output-dir", tmp_path / "out"], capsys)
    assert status == EXIT_BAD_INPUT and err.count("\n") == 1 and "image.width" in err
    assert not (tmp_path / "out").exists()


def test_whole_image_modes_must_fit_untiled():
    # The automatic true-colour exposure takes a percentile over the whole image, the
    # spectrum and line modes sum it: they are not tiled, so a large one is refused.
    values = {"image.width": 4096, "image.height": 4096, "emission.law": "novikov_thorne",
              "tracing.memory_budget": 1.0}
    for mode in ("true_colour", "spectrum", "line"):
        with pytest.raises(SceneError, match="whole image at once"):
            default_scene(**values, **{"observing.mode": mode})
    # The same image in bolometric light is tiled instead of refused.
    plan = check_memory(default_scene(**{**values, "emission.law": "power_law"}).values)
    assert plan.tiles > 1 and plan.tile_bytes <= 0.25e9


def test_tile_plan_respects_the_budget_for_any_orders():
    for orders in (1, 4, 16):
        # Its 8-bit picture (67 MB, twice while the PNG is encoded) does not leave a
        # tile any room in 0.01 GB.
        with pytest.raises(SceneError, match="even in tiles"):
            default_scene(**{"image.width": 8192, "image.height": 8192, "disk.orders": orders,
                             "tracing.memory_budget": 0.01})
        for budget_gb in (0.5, 2.0):
            scene = default_scene(**{"image.width": 8192, "image.height": 8192,
                                     "disk.orders": orders,
                                     "tracing.memory_budget": budget_gb})
            plan = check_memory(scene.values)
            assert plan.tile_bytes <= 0.25 * budget_gb * 1e9
            assert plan.rows_per_tile >= 1
            bands = plan.bands()
            assert bands[0][0] == 0 and bands[-1][1] == 8192
            assert all(a[1] == b[0] for a, b in zip(bands, bands[1:]))


# --- the extra products of a tiled still ---------------------------------------------------

PRODUCTS = {"observing.mode": "true_colour", "emission.law": "novikov_thorne",
            "observing.colour_exposure": "fixed", "observing.colour_reference": 1e10,
            "output.fits": True, "disk.orders": 1, "tracing.tolerance": 1e-6}
WIDTH = 128
# 4 rows per tile: render.imaging.tiling's model gives 840 bytes per pixel here (true colour,
# 1 order), and a tile may take a quarter of the budget.
FOUR_ROW_BUDGET = 4 * WIDTH * 840 / 0.25 + 1


# Monochromatic light adds the FLUXPIX extension to the FITS file.
MONOCHROMATIC = {"observing.mode": "monochromatic", "emission.law": "novikov_thorne",
                 "observing.frequency": 1e15, "output.fits": True, "disk.orders": 1,
                 "tracing.tolerance": 1e-6}
PRODUCT_KINDS = {"true_colour": {"fits", "png16", "linear"}, "monochromatic": {"fits"}}


def products_scene(height, mode="true_colour"):
    values = PRODUCTS if mode == "true_colour" else MONOCHROMATIC
    return small(**values, **{"image.width": WIDTH, "image.height": height})


def png16_rows(path):
    """Decode a 16-bit RGB PNG by the specification (ISO/IEC 15948: IDAT payloads
    concatenated form one zlib stream; each row is a filter byte, 0 here, then the
    big-endian samples)."""
    import struct
    import zlib

    raw = path.read_bytes()
    assert raw[:8] == b"\x89PNG\r\n\x1a\n"
    position, stream, size = 8, b"", None
    while position < len(raw):
        length, kind = struct.unpack(">I4s", raw[position:position + 8])
        body = raw[position + 8:position + 8 + length]
        if kind == b"IHDR":
            width, height, depth, colour = struct.unpack(">IIBB", body[:10])
            assert (depth, colour) == (16, 2)
            size = (height, width)
        elif kind == b"IDAT":
            stream += body
        position += 12 + length
    rows = np.frombuffer(zlib.decompress(stream), dtype=np.uint8).reshape(size[0], -1)
    assert np.all(rows[:, 0] == 0)
    return rows[:, 1:].copy().view(">u2").reshape(size[0], size[1], 3)


@pytest.mark.parametrize("mode", list(PRODUCT_KINDS))
def test_extra_products_of_a_tiled_still_equal_the_untiled_ones(mode, tmp_path):
    from astropy.io import fits

    from render.output.products import fits_hdus, write_products

    scene = products_scene(96, mode)
    whole = render_still(scene)
    tiled = render_still(scene, memory_budget=FOUR_ROW_BUDGET, workdir=tmp_path / "work")
    try:
        # (monochromatic needs fewer bytes per pixel: more rows per tile)
        assert tiled.metadata["tiles"]["count"] > 1
        whole_paths = write_products(whole, tmp_path / "whole")
        tiled_paths = write_products(tiled, tmp_path / "tiled")
    finally:
        tiled.release()
    assert set(whole_paths) == PRODUCT_KINDS[mode] == set(tiled_paths)
    # Streamed from the tile files in blocks of rows, the files are byte for byte those
    # of the untiled still ...
    for kind, path in whole_paths.items():
        assert tiled_paths[kind].read_bytes() == path.read_bytes(), kind
    # ... and those astropy's own FITS writer and np.save make from whole arrays.
    import io

    reference = io.BytesIO()
    fits_hdus(whole).writeto(reference)
    assert whole_paths["fits"].read_bytes() == reference.getvalue()
    # Read back by an independent reader, astropy (FITS rows run upwards, FITS
    # Standard 4.0), and the PNG by its specification.
    main = (whole.intensity if mode == "true_colour"
            else whole.products["specific_intensity"])
    with fits.open(whole_paths["fits"]) as hdus:
        assert np.array_equal(hdus[0].data, np.flipud(main), equal_nan=True)
        assert np.array_equal(hdus["REDSHIFT"].data, np.flipud(whole.g[0]), equal_nan=True)
        if mode == "monochromatic":
            assert len(hdus) == 4   # with the SCENE table
            assert np.array_equal(hdus["FLUXPIX"].data,
                                  np.flipud(whole.products["flux_density_jy"]), equal_nan=True)
        else:
            assert len(hdus) == 3   # with the SCENE table
    if mode == "true_colour":
        reference = io.BytesIO()
        np.save(reference, whole.products["rgb_linear"])
        assert whole_paths["linear"].read_bytes() == reference.getvalue()
        assert np.array_equal(png16_rows(whole_paths["png16"]), whole.products["pixels16"])
        assert whole.products["pixels16"].max() > 0


def traced_peak_of_writing(scene, folder):
    """Peak of the memory numpy and Python allocate (tracemalloc) while the products of a
    tiled still are written, above what was allocated when writing started."""
    import tracemalloc

    from render.output.products import write_products

    still = render_still(scene, memory_budget=FOUR_ROW_BUDGET, workdir=folder / "work")
    try:
        assert still.metadata["tiles"]["rows_per_tile"] == 4
        tracemalloc.start()
        try:
            write_products(still, folder / "out")
            return tracemalloc.get_traced_memory()[1]
        finally:
            tracemalloc.stop()
    finally:
        still.release()


def test_memory_for_extra_products_grows_with_the_tile_not_the_image(tmp_path):
    # numpy reports its array allocations to tracemalloc (common practice), so the
    # traced peak covers every block read, flipped, converted or filtered.  Four times
    # the rows with the same tile must not raise it by even a quarter of one float64
    # map (writing from whole arrays would add at least one such map per FITS
    # extension: measured ~1.5 maps of growth with the old writers, ~0.002 now).
    from astropy.io import fits  # noqa: F401  (imported before measuring)

    short = traced_peak_of_writing(products_scene(96), tmp_path / "short")
    tall = traced_peak_of_writing(products_scene(384), tmp_path / "tall")
    one_map_growth = WIDTH * (384 - 96) * 8
    assert tall - short < 0.25 * one_map_growth, (short, tall)
    # And each peak is a small multiple of a tile's rows of all products, far below
    # one whole map of the tall image (393 kB): the ~0.3 MB measured is the fixed cost
    # of astropy's header machinery, so the bound is an absolute 1 MB.
    assert tall < 1e6


def test_interrupted_product_writing_leaves_no_partial_file(tmp_path, monkeypatch):
    import render.output.products

    scene = products_scene(48)
    still = render_still(scene, memory_budget=FOUR_ROW_BUDGET, workdir=tmp_path / "work")
    original = render.output.products.read_rows
    calls = []

    def interrupt(*args, **kwargs):
        calls.append(args[1:3])
        # 48 rows in blocks of 4: the FITS file's 2 maps take calls 1-24, the 16-bit
        # PNG calls 25-36; stop half-way through the PNG.
        if len(calls) == 30:
            raise KeyboardInterrupt
        return original(*args, **kwargs)

    monkeypatch.setattr(render.output.products, "read_rows", interrupt)
    out = tmp_path / "out"
    try:
        with pytest.raises(KeyboardInterrupt):
            render.output.products.write_products(still, out)
    finally:
        still.release()
    # The FITS file was finished (it is published only whole); the 16-bit PNG was being
    # written: neither it nor any temporary part is left.
    assert len(calls) == 30
    assert sorted(p.name for p in out.iterdir()) == [f"{scene['name']}.fits"]


@pytest.mark.slow
def test_8192_square_still_stays_under_the_default_budget(tmp_path):
    # Runs the memory benchmark (minutes): peak RSS of the rendering process, which
    # also writes the PNG, the NPZ and every extra product a tiled still can have
    # (FITS, 16-bit PNG, linear .npy), must stay below the 2 GB default budget.
    run = subprocess.run([sys.executable, str(REPO / "benchmarks" / "bench_memory.py"),
                          "--size", "8192", "--output-dir", str(tmp_path)],
                         capture_output=True, text=True, check=True)
    line = json.loads(run.stdout.strip().splitlines()[-1])
    assert line["width"] == 8192 and line["tiles"] > 1
    assert line["peak_rss_mb"] * 1e6 < line["memory_budget_gb"] * 1e9
    assert line["files_written"] == ["bench-memory.fits", "bench-memory.npz",
                                     "bench-memory.png", "bench-memory_16bit.png",
                                     "bench-memory_linear.npy"]


def test_tiled_still_without_maps_stores_no_nan_maps(tmp_path):
    # maps=False with the closed form: phi and delay are NaN views, also when tiled, and
    # the rest equals the untiled render (tiling is bookkeeping, common practice).
    scene = small(**{"tracing.method": "closed_form"})
    whole = render_still(scene, maps=False)
    tiled = render_still(scene, maps=False, memory_budget=3e5, workdir=tmp_path)
    try:
        assert tiled.metadata["tiles"]["count"] > 1
        folder = next(tmp_path.iterdir())
        assert (folder / "r.npy").exists() and not (folder / "phi.npy").exists()
        for result in (whole, tiled):
            assert np.isnan(result.phi).all() and np.isnan(result.delay).all()
            assert result.phi.shape == result.r.shape
            assert not result.metadata["phi_delay_maps"]
        assert np.array_equal(whole.r, tiled.r, equal_nan=True)
        assert np.array_equal(whole.pixels, tiled.pixels)
    finally:
        tiled.release()


def test_a_full_disk_while_writing_tiles_is_one_output_write_error(tmp_path, monkeypatch):
    # A full disk (ENOSPC) while a band is written must become the one-line run error
    # (exit status 1 on the command line), not an OSError traceback.
    import builtins
    import errno

    from render.errors import OutputWriteError
    from render.imaging.tiling import TileStore

    store = TileStore(tmp_path)
    real_open = builtins.open

    def full_disk_open(path, mode="r", *args, **kwargs):
        if "+" in mode and str(store.folder) in str(path):
            raise OSError(errno.ENOSPC, "No space left on device")
        return real_open(path, mode, *args, **kwargs)

    monkeypatch.setattr(builtins, "open", full_disk_open)
    with pytest.raises(OutputWriteError, match="No space left on device") as caught:
        store.write_band("intensity", np.zeros((2, 4)), (0, 2), 4)
    assert "\n" not in str(caught.value)
    store.release()


def test_a_band_write_failing_while_the_next_renders_stops_the_render(tmp_path, monkeypatch):
    # Bands are written on a thread of their own while the next band is rendered: a
    # write that fails there (a full disk) must still stop the render with the one-line
    # run error, and leave no temporary files behind.
    import errno

    from render.errors import OutputWriteError
    from render.imaging.tiling import TileStore

    real_write = TileStore._write_band
    written = []

    def full_disk_on_second_band(store, name, band, rows, full_height):
        if rows[0] > 0:
            raise OSError(errno.ENOSPC, "No space left on device")
        written.append(rows)
        return real_write(store, name, band, rows, full_height)

    monkeypatch.setattr(TileStore, "_write_band", full_disk_on_second_band)
    with pytest.raises(OutputWriteError, match="No space left on device"):
        render_still(small(), memory_budget=3e5, workdir=tmp_path)
    assert written and list(tmp_path.iterdir()) == []
