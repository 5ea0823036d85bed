"""Bounded memory: stills rendered in row tiles, and requests that cannot fit refused.

The tiling is exact bookkeeping (each band traces the same rays the whole
image would), so a tiled still must equal the untiled one bit for bit; a tiny
budget forces many tiles on a small image.  The 8192 x 8192 check runs the
memory benchmark in a subprocess (slow).
"""

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from render import default_scene
from render.camera import image_plane_grid
from render.cli import EXIT_BAD_INPUT
from render.output import write_still
from render.scene import SceneError
from render.still import render_still
from render.tiling import check_memory

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
    "camera-rolled": {"observer.kind": "camera", "observer.distance": 60.0,
                      "observer.roll": 30.0, "disk.surface": "opaque"},
}


def small(**values):
    base = {"image.width": 24, "image.height": 19, "observer.kind": "distant",
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
    # 128 x 128 with 2 orders needs ~14 MB untiled (render.tiling's model), more than
    # the 0.01 GB budget: the command renders in tiles and writes the same files.
    common = ["still", "--set", "observer.kind=distant", "--set", "image.width=128",
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
    import render.still

    original = render.still._render_band
    calls = []

    def interrupt_third(scene, observation, rows, progress, *rest):
        calls.append(rows)
        if len(calls) == 3:
            raise KeyboardInterrupt
        return original(scene, observation, rows, progress, *rest)

    monkeypatch.setattr(render.still, "_render_band", interrupt_third)
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


@pytest.mark.slow
def test_8192_square_still_stays_under_the_default_budget(tmp_path):
    # Runs the memory benchmark (minutes): peak RSS of the rendering process, which
    # also writes the PNG and the NPZ, must stay below the 2 GB default budget.
    run = subprocess.run([sys.executable, str(REPO / "benchmarks" / "bench_memory.py"),
                          "--size", "8192", "--output-dir", str(tmp_path)],
                         capture_output=True, text=True, check=True)
    line = json.loads(run.stdout.strip().splitlines()[-1])
    assert line["width"] == 8192 and line["tiles"] > 1
    assert line["peak_rss_mb"] * 1e6 < line["memory_budget_gb"] * 1e9
    assert line["files_written"] == ["bench-memory.npz", "bench-memory.png"]


def test_tiled_still_without_maps_stores_no_nan_maps(tmp_path):
    # maps=False with the closed form: phi and delay are NaN views, also when tiled, and
    # the rest equals the untiled render (tiling is bookkeeping, common practice).
    scene = small(**{"tracing.method": "closed-form"})
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
