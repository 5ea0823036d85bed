"""Working from Python and notebooks: short reprs, the picture as PNG, no backend switch,
warnings as NullrayWarning."""

import io
import warnings

import numpy as np
import pytest
from PIL import Image

import render
from render.errors import NullrayWarning


@pytest.fixture(scope="module")
def tiny_result():
    scene = render.default_scene(**{"image.width": 16, "image.height": 16,
                                    "observer.placement": "distant", "observer.inclination": 60.0,
                                    "tracing.method": "auto", "disk.orders": 1})
    return scene, render.render_still(scene)


def test_scene_repr_is_a_short_summary(tiny_result):
    scene, _ = tiny_result
    text = repr(scene)
    # common practice: a repr fits on a line or two and names what identifies the object.
    assert len(text) < 300 and "\n" not in text
    assert "16x16" in text and "spin 0.9" in text and "inclination 60 deg" in text
    assert "distant" in text and "bolometric" in text


def test_still_result_repr_summarises_without_arrays(tiny_result):
    _, result = tiny_result
    text = repr(result)
    # common practice: a repr is a summary; the arrays' repr alone was over 50,000 characters.
    assert len(text) < 1000
    assert "16x16" in text and "closed_form" in text and "bolometric" in text
    counts = result.metadata["fate_counts"]
    assert f"disk {counts['disk']}" in text and f"escaped {counts['escaped']}" in text
    assert "array(" not in text


def test_repr_png_is_the_picture(tiny_result):
    _, result = tiny_result
    data = result._repr_png_()
    # The PNG signature (ISO/IEC 15948 sec. 5.2), read back by Pillow.
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    decoded = np.asarray(Image.open(io.BytesIO(data)))
    np.testing.assert_array_equal(decoded, result.pixels)


def test_library_never_switches_the_matplotlib_backend(tmp_path, small_scene):
    import matplotlib

    before = matplotlib.get_backend()
    # A backend other than Agg as the user's choice, so that a switch to Agg would show.
    matplotlib.use("svg")
    request_restore = before
    # A line-mode still writes a plot through the library (render/output/products.py).
    scene = small_scene(**{"observing.mode": "line", "image.width": 16, "image.height": 16,
                           "observer.field_of_view": 60.0, "tracing.method": "auto",
                           "output.npz": False})
    result, paths = render.make_still(scene, tmp_path)
    assert paths["line_png"].read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    # matplotlib's own report of the backend is unchanged (matplotlib API).
    chosen = matplotlib.get_backend()
    matplotlib.use(request_restore)
    assert chosen == "svg"


def test_library_source_never_calls_matplotlib_use():
    from pathlib import Path

    root = Path(render.__file__).parent
    offenders = [str(p) for p in root.rglob("*.py") if "matplotlib.use(" in p.read_text()]
    # common practice: a library leaves the choice of backend to its user.
    assert offenders == []


def test_cropped_disk_warns_python_callers(small_scene):
    # A camera's line sums its pixels, so a field of view that crops the disk must say so
    # (a distant observer's line samples the disk on a grid of its own and is never cropped).
    scene = small_scene(**{"observing.mode": "line", "observer.field_of_view": 12.0,
                           "observer.placement": "camera", "observer.distance": 1000.0,
                           "image.width": 16, "image.height": 16, "tracing.method": "auto"})
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        render.render_still(scene)
    # Python's warnings machinery carries the message the command line prints.
    messages = [str(w.message) for w in caught if issubclass(w.category, NullrayWarning)]
    assert any("image border" in m for m in messages)


def test_metadata_records_the_software_versions(tiny_result):
    import platform
    import sys

    import numba

    _, result = tiny_result
    versions = result.metadata["versions"]
    # Each package's own report of its version (numpy, numba, the sys and platform modules).
    assert versions["numpy"] == np.__version__
    assert versions["numba"] == numba.__version__
    assert versions["python"] == sys.version.split()[0]
    assert versions["platform"] == platform.platform()
    assert versions["nullray"] == render.__version__


def test_failed_flash_check_warns_python_callers(tmp_path, monkeypatch):
    import render.film.products

    # A flash report that fails, in the form flash_report returns (render/film/flash.py), so
    # that the warning path is reached without rendering a flashing film.
    failing = {"passes": False, "worst_flashes": 5, "worst_start_s": 0.0,
               "worst_start_frame": 0}
    monkeypatch.setattr(render.film.products, "flash_report", lambda *a, **k: dict(failing))
    scene = render.default_scene(name="blink", **{
        "image.width": 8, "image.height": 8, "observer.placement": "distant",
        "tracing.method": "auto", "animation.frames": 2, "output.npz": False})
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        render.render_sequence(scene, tmp_path, workers=1)
    messages = [str(w.message) for w in caught if issubclass(w.category, NullrayWarning)]
    # WCAG 2.2 SC 2.3.1 is the rule the message names.
    assert any("5 flashes" in m and "WCAG 2.2 SC 2.3.1" in m for m in messages)
