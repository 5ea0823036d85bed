"""Optional extras (pyproject.toml): each missing one is named in one line, and the
xarray view of a still."""

import sys
import warnings

import numpy as np
import pytest

import render
from conftest import run_cli
from render.errors import NullrayWarning

TINY = {"image.width": 12, "image.height": 8, "observer.placement": "distant",
        "tracing.method": "auto", "disk.orders": 2, "observer.field_of_view": 30.0}


def test_missing_cluster_extra_is_one_line_before_tracing(tmp_path, capsys, no_tracing,
                                                          monkeypatch):
    # A None entry in sys.modules makes the import fail (Python's import system docs).
    monkeypatch.setitem(sys.modules, "dask.distributed", None)
    status, out, err = run_cli(["still", "--set", "image.width=8", "--set", "image.height=8",
                                "--scheduler", "tcp://127.0.0.1:9", "--output-dir",
                                tmp_path / "out"], capsys)
    assert status == 2
    assert err.count("\n") == 1 and "Traceback" not in err
    assert "pip install 'nullray[cluster]'" in err
    assert not (tmp_path / "out").exists()


def test_missing_video_extra_skips_only_the_mp4_with_a_warning(tmp_path, monkeypatch):
    monkeypatch.setitem(sys.modules, "imageio_ffmpeg", None)
    scene = render.default_scene(name="film", **TINY, **{"animation.frames": 2,
                                                         "output.npz": False})
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = render.render_sequence(scene, tmp_path, workers=1)
    messages = [str(w.message) for w in caught if issubclass(w.category, NullrayWarning)]
    assert any("pip install 'nullray[video]'" in m for m in messages)
    folder = tmp_path / "film"
    assert not (folder / "sequence.mp4").exists() and "mp4" not in result.paths
    assert (folder / "sequence.gif").exists()


def test_missing_xarray_extra_is_named(monkeypatch):
    result = render.render_still(render.default_scene(**TINY))
    monkeypatch.setitem(sys.modules, "xarray", None)
    with pytest.raises(ImportError, match=r"pip install 'nullray\[xarray\]'"):
        result.to_xarray()


def test_to_xarray_has_named_dimensions_coordinates_and_attributes():
    xarray = pytest.importorskip("xarray")
    scene = render.default_scene(**TINY)
    result = render.render_still(scene)
    data = result.to_xarray()
    assert isinstance(data, xarray.Dataset)
    # Dimensions by name, as xarray reports them.
    assert data["r"].dims == ("order", "y", "x")
    assert data["intensity"].dims == ("y", "x")
    assert dict(data.sizes) == {"order": 2, "y": 8, "x": 12}
    # Coordinates in M: the image-plane alpha along x, beta along y (row 0 on top).
    np.testing.assert_array_equal(data["x"].values, result.alpha[4, :])
    np.testing.assert_array_equal(data["y"].values, result.beta[:, 6])
    assert data["x"].attrs["units"] == "M" and data["y"].values[0] > data["y"].values[-1]
    np.testing.assert_array_equal(data["g"].sel(order=0).values, result.g[0])
    assert data.attrs["tracing_method"] == "closed_form"
    assert "spin: 0.9" in data.attrs["scene"]
