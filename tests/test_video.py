"""Sequence products: video decodes back, GIF, contact sheet, light curve files, flash check."""

import csv
import json

import imageio.v2 as imageio
import numpy as np
import pytest
from PIL import Image

from render import default_scene
from render.api import render_sequence
from render.film.flash import FLASH_AREA_FRACTION, flash_check, relative_luminance
from render.output.video import contact_sheet, write_video


@pytest.fixture(scope="module")
def orbit_sequence(tmp_path_factory):
    # A camera on a Keplerian orbit at 30 M: 6 frames of 32x18, with a spot so that frames
    # differ (an axisymmetric disk alone looks the same from every point of the orbit).
    scene = default_scene(name="orbit", **{
        "image.width": 32, "image.height": 18, "animation.frames": 6, "output.npz": False,
        "animation.camera_path": "orbit", "observer.distance": 30.0,
        "observer.inclination": 75.0, "observer.field_of_view": 30.0,
        "animation.time_step": 15.0, "animation.fps": 12.0, "pattern.shape": "spot",
        "pattern.size": 2.0, "pattern.contrast": 20.0})
    return render_sequence(scene, tmp_path_factory.mktemp("video"))


def test_video_decodes_back_with_every_frame(orbit_sequence):
    # imageio's own ffmpeg reader (independent of the writer's options) sees 6 frames of 32x18.
    reader = imageio.get_reader(orbit_sequence.paths["mp4"], format="FFMPEG")
    frames = [frame for frame in reader]
    meta = reader.get_meta_data()
    reader.close()
    assert len(frames) == 6
    assert frames[0].shape == (18, 32, 3)
    assert meta["fps"] == pytest.approx(12.0)
    # Lossy H.264: the first decoded frame is close to the PNG (mean error < 8 of 255).
    png = np.asarray(Image.open(orbit_sequence.folder / "frame_00000.png"), dtype=float)
    assert np.mean(np.abs(frames[0].mean(axis=2) - png)) < 8.0


def test_gif_and_contact_sheet(orbit_sequence):
    gif = Image.open(orbit_sequence.paths["gif"])
    assert gif.n_frames == 6 and gif.size == (32, 18)
    sheet = Image.open(orbit_sequence.paths["sheet"])
    # 6 tiles in one row with 2-pixel gaps.
    assert sheet.size == (6 * 34 + 2, 18 + 4)


def test_light_curve_csv_lists_every_frame(orbit_sequence):
    with open(orbit_sequence.paths["lightcurve_csv"], newline="") as handle:
        rows = list(csv.DictReader(handle))
    assert [int(r["frame"]) for r in rows] == list(range(6))
    assert [float(r["observer_time_M"]) for r in rows] == [15.0 * k for k in range(6)]
    assert np.allclose([float(r["flux"]) for r in rows], orbit_sequence.fluxes)
    # GM_sun/c^3 = 4.925491e-6 s (IAU 2015 nominal solar mass parameter; from memory), times
    # the scene's mass; 1e-6 relative covers the constants' digits.
    mass = json.loads((orbit_sequence.paths["lightcurve_csv"].with_suffix(".json")).read_text())[
        "mass_msun"]
    for row in rows:
        assert float(row["observer_time_s"]) == pytest.approx(
            float(row["observer_time_M"]) * 4.925491e-6 * mass, rel=1e-6)
    assert Image.open(orbit_sequence.paths["lightcurve_png"]).format == "PNG"
    assert orbit_sequence.flash["passes"]


def _frames(levels, size=(16, 16)):
    return [np.full(size, level) for level in levels]


def test_flash_check_counts_general_flashes():
    # WCAG 2.2 SC 2.3.1: no more than three general flashes in any one second; a flash is a
    # pair of opposing changes of >= 10 % relative luminance with the darker state < 0.80.
    fps = 24.0
    blink = [1.0 if (k // 3) % 2 else 0.0 for k in range(48)]  # 4 Hz: 4 flashes/s
    report = flash_check(_frames(blink), fps)
    assert report["worst_flashes"] == 4 and not report["passes"]
    three = [1.0 if (k // 4) % 2 else 0.0 for k in range(48)]  # 3 Hz: exactly 3 per second
    assert flash_check(_frames(three), fps)["worst_flashes"] == 3
    assert flash_check(_frames(three), fps)["passes"]
    # Both states brighter than 0.80: not a flash, however fast.
    bright = [0.85 if k % 2 else 1.0 for k in range(48)]
    assert flash_check(_frames(bright), fps)["worst_flashes"] == 0
    # Changes below 10 %: not a flash.
    faint = [0.3 if k % 2 else 0.35 for k in range(48)]
    assert flash_check(_frames(faint), fps)["worst_flashes"] == 0


def test_flash_check_reports_the_worst_second_and_the_area_rule():
    fps = 10.0
    levels = [0.0] * 30 + [1.0 if k % 2 else 0.0 for k in range(10)] + [0.0] * 10
    report = flash_check(_frames(levels), fps)
    assert report["worst_flashes"] == 5 and 2.9 <= report["worst_start_s"] <= 3.0
    # A blinking patch smaller than 25 % of a 10-degree field (WCAG's 341 x 256 of 1024 x 768,
    # i.e. FLASH_AREA_FRACTION of the frame) is not a general flash.
    assert FLASH_AREA_FRACTION == pytest.approx(0.25 * 341 * 256 / (1024 * 768))
    small_patch = []
    for k in range(24):
        frame = np.zeros((100, 100))
        frame[:5, :5] = k % 2  # 0.25 % of the frame
        small_patch.append(frame)
    assert flash_check(small_patch, 24.0)["worst_flashes"] == 0


def test_relative_luminance_matches_the_srgb_definition():
    # WCAG 2.2 definition of relative luminance (IEC 61966-2-1 linearisation, Rec. 709 weights).
    pixel = np.array([[[255, 0, 0], [0, 255, 0], [10, 10, 10]]], dtype=np.uint8)
    values = relative_luminance(pixel)[0]
    assert values[0] == pytest.approx(0.2126) and values[1] == pytest.approx(0.7152)
    assert values[2] == pytest.approx(10 / 255 / 12.92)


def test_contact_sheet_picks_evenly_spaced_frames():
    from render.film.products import sheet_picks

    picks = sheet_picks(100, max_tiles=8)
    assert picks[0] == 0 and picks[-1] == 99 and len(picks) == 8
    assert np.ptp(np.diff(picks)) <= 1
    frames = [np.full((4, 6), k, dtype=np.uint8) for k in picks]
    sheet = contact_sheet(frames, columns=4)
    assert sheet.shape == (2 * 6 + 2, 4 * 8 + 2, 3)


def test_large_frames_are_shrunk_for_the_gif_and_the_sheet_keeping_their_light():
    from render.film.products import GIF_MAX_WIDTH, SHEET_TILE_MAX_WIDTH, shrunk

    rng = np.random.default_rng(3)
    frame = rng.integers(0, 256, (1080, 1920, 3), dtype=np.uint8)
    small = shrunk(frame, GIF_MAX_WIDTH)
    assert small.shape == (270, 480, 3) and GIF_MAX_WIDTH == 480
    # A box filter averages 4 x 4 blocks: the mean level is kept to rounding.
    assert abs(small.mean() - frame.mean()) < 0.6
    assert shrunk(frame, SHEET_TILE_MAX_WIDTH).shape == (180, 320, 3)
    assert shrunk(frame[:, :300], 480) is not None and shrunk(frame[:, :300], 480).shape[1] == 300


@pytest.mark.parametrize("previous", [None, b"the previous video"])
@pytest.mark.parametrize("failure", [RuntimeError("the frame source broke"), KeyboardInterrupt()])
def test_a_failed_video_write_leaves_no_new_file_and_no_temporary(tmp_path, failure, previous):
    # common practice (atomic replacement): ffmpeg writes a hidden .NAME.*.part beside the
    # target, which a failure removes; the final name is neither created nor touched.
    target = tmp_path / "clip.mp4"
    if previous is not None:
        target.write_bytes(previous)
    seen_while_writing = []

    def frames():
        yield np.zeros((8, 8, 3), dtype=np.uint8)
        seen_while_writing.extend(p.name for p in tmp_path.iterdir() if p != target)
        raise failure

    with pytest.raises(type(failure)):
        write_video(target, frames(), 12.0)
    if previous is None:
        assert list(tmp_path.iterdir()) == []
    else:
        assert list(tmp_path.iterdir()) == [target] and target.read_bytes() == previous
    # While writing, the temporary had the name an interrupted sequence's folder is
    # cleaned of (render.film.sequence.prepare_folder removes .*.part).
    assert len(seen_while_writing) == 1
    assert seen_while_writing[0].startswith(".clip.mp4.") and seen_while_writing[0].endswith(".part")
