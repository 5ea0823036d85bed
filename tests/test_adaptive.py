"""Adaptive image-plane sampling (render/imaging/adaptive.py) against tracing every pixel.

The reference is the brute-force still: every pixel traced by the same front door
(render.geodesics.tracing.trace).  Interpolation must reproduce its fate, crossing
count and directions exactly and its r, g, phi and delay within the stated bound
(common practice: an adaptive scheme is judged against the uniform one it replaces).
"""

import numpy as np
import pytest

from render import default_scene, render_still
from render.camera.observers import image_plane_grid
from render.imaging.adaptive import image_plane_points
from render.camera.observers import Viewpoint

TOLERANCE = 1e-6


def _scene(sampling, **values):
    base = {"image.width": 256, "image.height": 256, "observer.placement": "distant",
            "observer.inclination": 60.0, "observer.field_of_view": 40.0,
            "disk.outer_radius": 20.0, "output.png": False, "tracing.sampling": sampling}
    base.update(values)
    return default_scene(**base)


def _assert_within_bound(exact, sampled, names=("r", "g", "phi", "delay")):
    """Every pixel of ``sampled`` within TOLERANCE of ``exact`` (the key's definition)."""
    assert np.array_equal(exact.fate, sampled.fate)
    assert np.array_equal(exact.on_disk, sampled.on_disk)
    for name in names:
        a, b = np.asarray(getattr(exact, name)), np.asarray(getattr(sampled, name))
        assert np.array_equal(np.isnan(a), np.isnan(b)), name
        finite = np.isfinite(a)
        a, b = a[finite], b[finite]
        if name == "phi":
            error = np.abs(np.mod(b - a + np.pi, 2 * np.pi) - np.pi)
        elif name == "delay":
            error = np.abs(b - a) / np.maximum(1.0, np.abs(a))
        else:
            error = np.abs(b - a) / np.abs(a)
        # The bound the metadata states; the scheme checks half of it at its test pixels,
        # so a pixel beyond it means the test pixels missed an error peak.
        assert error.max() <= TOLERANCE, (name, error.max())


def test_distant_still_every_pixel_within_the_bound():
    exact = render_still(_scene("every_pixel"))
    sampled = render_still(_scene("adaptive"))
    _assert_within_bound(exact, sampled)
    flags = sampled.products["interpolated"]
    meta = sampled.metadata["sampling"]
    # At 256x256 (0.16 M per pixel) a fifth or more of the pixels are smooth enough.
    assert flags.shape == (256, 256) and flags.sum() > 0.2 * flags.size
    assert meta["interpolated_pixels"] == flags.sum()
    assert meta["traced_rays"] < flags.size
    assert meta["tolerance"] == TOLERANCE and "relative in r and g" in meta["error_bound"]
    # A traced pixel is bit for bit the pixel the uniform still traced.
    traced = ~flags
    assert np.array_equal(exact.r[:, traced], sampled.r[:, traced], equal_nan=True)
    assert np.all(sampled.steps[flags] == 0)
    assert "interpolated" in sampled.maps()


def test_tiled_adaptive_still_within_the_bound():
    # Bands of rows sample on their own (virtual nodes beyond each band's edges); an image
    # without the maps (maps=False) interpolates and checks r and g only.
    exact = render_still(_scene("every_pixel", **{"image.height": 128}), maps=False)
    tiled = render_still(_scene("adaptive", **{"image.height": 128}), memory_budget=2.5e7,
                         maps=False)
    try:
        assert tiled.metadata["tiles"]["count"] > 1
        assert np.isnan(tiled.phi).all() and not tiled.metadata["phi_delay_maps"]
        _assert_within_bound(exact, tiled, ("r", "g"))
        assert tiled.metadata["sampling"]["pixels"] == 256 * 128
        assert tiled.metadata["sampling"]["interpolated_pixels"] > 0
    finally:
        tiled.release()


@pytest.mark.slow
def test_camera_at_finite_distance_within_the_bound():
    # The integrator's rays (tolerance 1e-9) are smooth enough to interpolate at 1e-6.
    values = {"observer.placement": "camera", "observer.distance": 1000.0}
    exact = render_still(_scene("every_pixel", **values))
    sampled = render_still(_scene("adaptive", **values))
    _assert_within_bound(exact, sampled)
    assert sampled.products["interpolated"].sum() > 0


@pytest.mark.parametrize("roll", [0.0, 30.0])
def test_image_plane_points_are_the_grid_bit_for_bit(roll):
    view = Viewpoint("distant", 0.0, 0.0, 60.0, field_of_view=7.0, roll_deg=roll,
                     width=5, height=3)
    alpha, beta = image_plane_grid(5, 3, 7.0, roll)
    rows, cols = np.meshgrid(np.arange(3), np.arange(5), indexing="ij")
    x, y = image_plane_points(view, rows, cols)
    assert np.array_equal(x, alpha) and np.array_equal(y, beta)


def test_image_too_small_for_a_stencil_is_traced_pixel_by_pixel():
    # 4 strides must fit in the band, else no level runs: no virtual nodes, every pixel traced,
    # the result bit for bit the every-pixel still.
    values = {"image.width": 5, "image.height": 3}
    exact = render_still(_scene("every_pixel", **values))
    sampled = render_still(_scene("adaptive", **values))
    assert sampled.metadata["sampling"]["traced_rays"] == 15
    assert not sampled.products["interpolated"].any()
    assert np.array_equal(exact.r, sampled.r, equal_nan=True)
    assert np.array_equal(exact.pixels, sampled.pixels)
