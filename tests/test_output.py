"""Writers: atomic replacement, the no-silent-overwrite rule, PNG and NPZ contents."""

import json
import os

import numpy as np
import pytest
from PIL import Image

import render.output.files as output
from render.errors import OutputExists
from render.output.files import atomic_write, check_free, write_npz, write_png


def leftovers(folder):
    """Temporary files a writer could leave behind (its pattern is .NAME.*.part)."""
    return [p.name for p in folder.iterdir() if p.name.endswith(".part")]


def test_atomic_write_creates_the_file_and_no_temporary(tmp_path):
    target = tmp_path / "sub" / "data.bin"
    atomic_write(target, lambda f: f.write(b"\x00\x01payload"))
    assert target.read_bytes() == b"\x00\x01payload"
    assert leftovers(target.parent) == []


def test_failure_in_the_middle_leaves_nothing(tmp_path):
    target = tmp_path / "data.bin"

    def half_then_fail(handle):
        handle.write(b"first half")
        raise RuntimeError("disk pulled out")

    with pytest.raises(RuntimeError, match="disk pulled out"):
        atomic_write(target, half_then_fail)
    assert not target.exists()
    assert list(tmp_path.iterdir()) == []


def test_interrupt_in_the_middle_leaves_the_old_file(tmp_path):
    # Ctrl-C (KeyboardInterrupt is a BaseException) while replacing an existing file.
    target = tmp_path / "data.bin"
    target.write_bytes(b"previous result")

    def interrupted(handle):
        handle.write(b"partial")
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        atomic_write(target, interrupted, overwrite=True)
    assert target.read_bytes() == b"previous result"
    assert leftovers(tmp_path) == []


def test_npz_failure_in_the_middle_leaves_no_file(tmp_path, monkeypatch):
    target = tmp_path / "maps.npz"

    def broken_array_writer(handle, array, **options):
        handle.write(b"\x93NUMPY truncated")
        raise OSError(28, "No space left on device")

    # The NPZ's members are written by numpy's .npy writer (render.output.files._stream_npz).
    monkeypatch.setattr(output.np.lib.format, "write_array", broken_array_writer)
    with pytest.raises(OSError):
        write_npz(target, {"r": np.zeros((2, 2))}, {"scene": {}})
    assert not target.exists()
    assert leftovers(tmp_path) == []


def test_png_failure_in_the_middle_leaves_no_file(tmp_path, monkeypatch):
    from PIL import Image as PILImage

    target = tmp_path / "still.png"

    def broken_save(self, handle, *args, **kwargs):
        handle.write(b"\x89PNG\r\n\x1a\n")
        raise OSError(5, "Input/output error")

    monkeypatch.setattr(PILImage.Image, "save", broken_save)
    with pytest.raises(OSError):
        write_png(target, np.zeros((4, 4), dtype=np.uint8))
    assert not target.exists()
    assert leftovers(tmp_path) == []


def test_existing_file_is_kept_without_overwrite(tmp_path):
    target = tmp_path / "data.bin"
    target.write_bytes(b"mine")
    called = []
    with pytest.raises(OutputExists, match="--overwrite"):
        atomic_write(target, lambda f: called.append(f))
    assert called == []  # refused before writing anything
    assert target.read_bytes() == b"mine"
    assert leftovers(tmp_path) == []


def test_existing_file_is_replaced_with_overwrite(tmp_path):
    target = tmp_path / "data.bin"
    target.write_bytes(b"mine")
    atomic_write(target, lambda f: f.write(b"new"), overwrite=True)
    assert target.read_bytes() == b"new"


def test_file_that_appears_during_the_write_is_not_replaced(tmp_path):
    # Another process creates the target while we write: it wins, our temp is removed.
    target = tmp_path / "data.bin"

    def racing(handle):
        target.write_bytes(b"other process")
        handle.write(b"ours")

    with pytest.raises(OutputExists, match="appeared"):
        atomic_write(target, racing)
    assert target.read_bytes() == b"other process"
    assert leftovers(tmp_path) == []


def test_output_exists_is_a_file_exists_error():
    assert issubclass(OutputExists, FileExistsError)


def test_check_free(tmp_path):
    free, taken = tmp_path / "a.png", tmp_path / "b.npz"
    taken.write_bytes(b"")
    check_free([free])
    check_free([free, taken], overwrite=True)
    with pytest.raises(OutputExists, match="b.npz"):
        check_free([free, taken])


def test_written_files_follow_the_umask(tmp_path):
    old = os.umask(0o027)
    try:
        path = atomic_write(tmp_path / "data.bin", lambda f: f.write(b"x"))
    finally:
        os.umask(old)
    assert path.stat().st_mode & 0o777 == 0o640


@pytest.mark.parametrize("shape,mode", [((5, 7), "L"), ((5, 7, 3), "RGB")])
def test_png_round_trips_8_bit_pixels(tmp_path, shape, mode):
    pixels = np.random.default_rng(7).integers(0, 256, size=shape, dtype=np.uint8)
    path = write_png(tmp_path / "p.png", pixels, metadata={"note": "vesper"})
    with Image.open(path) as image:
        assert image.mode == mode and image.size == (shape[1], shape[0])
        assert image.text["note"] == "vesper"
        assert np.array_equal(np.asarray(image), pixels)  # PNG is lossless (PNG spec, ISO 15948)


def test_npz_round_trips_arrays_and_json_metadata(tmp_path):
    arrays = {"r": np.array([[1.5, np.nan]]), "fate": np.array([[0, 2]], dtype=np.int8)}
    metadata = {"scene": {"black_hole": {"spin": 0.25}}, "count": np.int64(3),
                "isco": np.float64(5.0), "list": np.arange(3)}
    path = write_npz(tmp_path / "m.npz", arrays, metadata)
    with np.load(path) as data:
        np.testing.assert_array_equal(data["r"], arrays["r"])  # NaN compares equal here
        assert data["fate"].dtype == np.int8
        echoed = json.loads(str(data["metadata"]))
    assert echoed == {"scene": {"black_hole": {"spin": 0.25}}, "count": 3, "isco": 5.0,
                      "list": [0, 1, 2]}


def test_file_systems_without_hard_links_still_work(tmp_path, monkeypatch):
    # Some mounts refuse link(); the writer then falls back to check-and-rename.
    def no_links(src, dst, *args, **kwargs):
        raise PermissionError(1, "Operation not permitted")

    monkeypatch.setattr(output.os, "link", no_links)
    target = tmp_path / "data.bin"
    atomic_write(target, lambda f: f.write(b"fallback"))
    assert target.read_bytes() == b"fallback"
    with pytest.raises(OutputExists):
        atomic_write(tmp_path / "late.bin",
                     lambda f: (tmp_path / "late.bin").write_bytes(b"first") or f.write(b"x"))
    assert (tmp_path / "late.bin").read_bytes() == b"first"
    assert leftovers(tmp_path) == []


@pytest.mark.parametrize("compression", ["fast", "small", "none"])
def test_every_npz_compression_reads_back_with_numpy(tmp_path, compression):
    # np.load reads deflated and stored members alike (common practice: the NPZ format
    # is a zip of .npy files); "none" stores them, the others deflate.
    import zipfile

    arrays = {"r": np.linspace(0.0, 1.0, 64).reshape(8, 8), "fate": np.arange(64, dtype=np.int8)}
    path = write_npz(tmp_path / f"{compression}.npz", arrays, {"a": 1}, compression=compression)
    with np.load(path) as loaded:
        assert np.array_equal(loaded["r"], arrays["r"])
        assert np.array_equal(loaded["fate"], arrays["fate"])
    with zipfile.ZipFile(path) as archive:
        kinds = {info.compress_type for info in archive.infolist()}
    assert kinds == ({zipfile.ZIP_STORED} if compression == "none" else {zipfile.ZIP_DEFLATED})


def test_the_npz_compression_key_offers_exactly_the_writer_s_levels():
    from render.output.files import NPZ_COMPRESSION
    from render.scene.keys import KEYS

    assert set(KEYS["output.npz_compression"].choices) == set(NPZ_COMPRESSION)
