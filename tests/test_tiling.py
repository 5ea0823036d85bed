"""render/imaging/tiling.py: which stills tile, the memory model, band plans, the tile store.

The rendering of tiled stills against untiled ones is in tests/test_memory.py; these
are the planning rules and the store, without tracing a ray.
"""

import numpy as np
import pytest

from render import default_scene
from render.errors import SceneError
from render.imaging.tiling import (TileStore, bytes_per_pixel, check_memory, is_tileable,
                                   plan_still)


def values(**changes):
    base = dict(default_scene().values)
    base.update(changes)
    return base


@pytest.mark.parametrize("mode,exposure,tileable", [
    ("bolometric", "auto", True),
    ("monochromatic", "auto", True),
    ("true_colour", "fixed", True),
    ("true_colour", "auto", False),   # the automatic white needs every pixel
    ("spectrum", "auto", False),      # disk-integrated
    ("line", "auto", False),          # disk-integrated
])
def test_is_tileable(mode, exposure, tileable):
    assert is_tileable(values(**{"observing.mode": mode,
                                 "observing.colour_exposure": exposure})) is tileable


@pytest.mark.parametrize("mode", ["bolometric", "true_colour"])
def test_bytes_per_pixel_grows_with_orders(mode):
    per = [bytes_per_pixel(values(**{"disk.orders": n, "observing.mode": mode}))
           for n in range(1, 9)]
    assert all(b > a for a, b in zip(per, per[1:]))


def test_true_colour_costs_more_per_pixel():
    assert (bytes_per_pixel(values(**{"observing.mode": "true_colour"}))
            > bytes_per_pixel(values(**{"observing.mode": "bolometric"})))


@pytest.mark.parametrize("height,width,budget", [
    (512, 512, 2e9),      # fits whole
    (512, 512, 2e7),      # tiles
    (1000, 333, 5e6),     # tiles, a short last band
    (97, 4096, 3e7),      # prime height
    (7, 64, 3e5),         # one row per band (a row is 64 x 880 B; a quarter of 3e5 holds one)
])
def test_bands_cover_every_row_exactly_once(height, width, budget):
    plan = plan_still(default_scene(**{"image.height": height, "image.width": width}),
                      budget_bytes=budget)
    covered = np.zeros(height, dtype=int)
    bands = plan.bands()
    for start, stop in bands:
        assert 0 <= start < stop <= height
        covered[start:stop] += 1
    assert np.all(covered == 1)
    assert len(bands) == plan.tiles
    # Bands run top to bottom with no gaps.
    assert [b[0] for b in bands] == [0] + [b[1] for b in bands[:-1]]
    assert all(stop - start <= plan.rows_per_tile for start, stop in bands)
    assert (plan.tiles == 1) is (budget == 2e9)   # the cases tile as their comments say


def test_tile_fits_its_share_of_the_budget():
    plan = check_memory(values(**{"image.width": 2000, "image.height": 2000}), budget_bytes=1e8)
    assert plan.tiles > 1
    # The module's rule: a tile may take a quarter of the budget (TILE_SHARE, docstring).
    assert plan.tile_bytes <= 0.25 * plan.budget_bytes


def test_memory_budget_key_is_in_gigabytes():
    # tracing.memory_budget is given in GB (1e9 bytes), and a budget argument overrides it.
    whole = check_memory(values(**{"tracing.memory_budget": 2.0}))
    assert whole.budget_bytes == 2e9 and whole.tiles == 1
    assert check_memory(values(), budget_bytes=3e9).budget_bytes == 3e9


@pytest.mark.parametrize("changes,budget,fragments", [
    # Whole-image shading larger than the budget.
    ({"observing.mode": "spectrum", "emission.law": "novikov_thorne"}, 1e6,
     ["image.width x image.height = 640 x 360", "tracing.memory_budget = 0.001 GB",
      "'spectrum'"]),
    ({"observing.mode": "true_colour", "emission.law": "novikov_thorne"}, 1e6,
     ["observing.colour_exposure = 'auto'", "observing.colour_reference_y"]),
    # Even one row does not fit in a quarter of the budget.
    ({"image.width": 100000, "image.height": 10}, 1e6, ["even in tiles of rows"]),
    # The 8-bit picture alone does not fit in the rest of the budget.
    ({"image.width": 40000, "image.height": 40000}, 2e9, ["even in tiles", "picture"]),
])
def test_check_memory_refuses_in_one_line(changes, budget, fragments):
    with pytest.raises(SceneError) as info:
        check_memory(values(**changes), budget_bytes=budget)
    message = str(info.value)
    assert "\n" not in message
    for fragment in fragments:
        assert fragment in message


def test_a_sky_makes_the_tile_count_its_halo_rows():
    # With a sky each band is traced with halo rows around it; with a budget that leaves
    # room for few rows, the plan with a sky holds fewer rows per band.
    plain = check_memory(values(**{"image.width": 1000, "image.height": 1000}), budget_bytes=4e7)
    sky = check_memory(values(**{"image.width": 1000, "image.height": 1000, "sky.backdrop": "stars"}),
                       budget_bytes=4e7)
    assert sky.rows_per_tile < plain.rows_per_tile
    assert sky.tile_bytes <= 0.25 * sky.budget_bytes


def test_tile_store_round_trip(tmp_path):
    rng = np.random.default_rng(12)
    height, width, orders = 11, 7, 3
    image = rng.random((height, width))
    rgb = rng.integers(0, 255, (height, width, 3), dtype=np.uint8)
    per_order = rng.random((orders, height, width))
    store = TileStore(tmp_path / "work")
    store.per_order = frozenset({"r"})
    try:
        for start, stop in [(0, 4), (4, 8), (8, 11)]:
            store.write_band("intensity", image[start:stop], (start, stop), height)
            store.write_band("pixels", rgb[start:stop], (start, stop), height)
            store.write_band("r", per_order[:, start:stop], (start, stop), height)
        arrays = store.arrays()
        np.testing.assert_array_equal(arrays["intensity"], image)
        np.testing.assert_array_equal(arrays["pixels"], rgb)
        np.testing.assert_array_equal(arrays["r"], per_order)
        # The files are ordinary .npy files (numpy's own reader, not the store's).
        np.testing.assert_array_equal(np.load(store.folder / "r.npy"), per_order)
        assert not arrays["intensity"].flags.writeable
        with pytest.raises(ValueError, match="dtype"):
            store.write_band("intensity", image[:2].astype(np.float32), (0, 2), height)
        del arrays
    finally:
        store.release()
    assert not store.folder.exists()
    assert (tmp_path / "work").is_dir()
