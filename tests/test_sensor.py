"""Whole stills with a sky and anti-aliasing: compositing, supersampling, preview, counts.

The camera is static at D = 1e4 M around a Schwarzschild hole (a = 0), so its
shadow is exactly the disk of image-plane radius D tan(psi_s),
sin(psi_s) = sqrt(27) sqrt(1 - 2/D) / D (Synge 1966), and sky light reaches it
with g = 1/sqrt(1 - 2/D) (the static observer's blueshift, textbook).  The disk
is put beyond the camera (r >= 2e4 M), where no traced ray meets it, so the
picture is the sky alone.
"""

import json
import math

import numpy as np
import pytest
from PIL import Image
from scipy.integrate import quad

from render import default_scene, render_still
from render.imaging.sensor import refine_mask, subpixel_offsets

from conftest import run_cli  # noqa: E402

DISTANCE = 1e4
FOV = 16.0
SIDE = 32
R_INNER = 2e4
SKY_LEVEL = 0.5


@pytest.fixture
def white_sky(tmp_path):
    path = tmp_path / "white.png"
    Image.fromarray(np.full((8, 16, 3), 255, dtype=np.uint8)).save(path)
    return path


def sky_scene(sky_path, **values):
    base = {"image.width": SIDE, "image.height": SIDE, "black_hole.spin": 0.0,
            "observer.distance": DISTANCE, "observer.frame": "static",
            "observer.inclination": 60.0, "observer.field_of_view": FOV,
            "disk.inner_radius": R_INNER, "disk.outer_radius": 3e4,
            "sky.backdrop": "image", "sky.image": str(sky_path), "sky.brightness": SKY_LEVEL}
    base.update(values)
    return default_scene(**base)


def unobstructed_level():
    # README exposure rule: the power law's white is I_em(r_in) = r_in^-3; a white
    # panorama pixel shows at sky.brightness x white, times g^4 (I_nu/nu^3 invariant).
    g = 1.0 / math.sqrt(1.0 - 2.0 / DISTANCE)
    return SKY_LEVEL * R_INNER ** -3.0 * g ** 4


def shadow_radius():
    psi = math.asin(math.sqrt(27.0) * math.sqrt(1.0 - 2.0 / DISTANCE) / DISTANCE)
    return DISTANCE * math.tan(psi)


def _tent_cdf(t):
    t = min(max(t, -1.0), 1.0)
    return 0.5 * (1.0 + t) ** 2 if t < 0.0 else 1.0 - 0.5 * (1.0 - t) ** 2


def exact_escaped_fraction(xc, yc, h, radius, kind):
    """Filter-weighted fraction of a pixel's footprint outside the shadow (scipy quad)."""
    if kind == "box":
        def chord(x):
            c = math.sqrt(max(radius * radius - x * x, 0.0))
            return max(0.0, min(yc + h / 2, c) - max(yc - h / 2, -c)) / h

        lo, hi = max(xc - h / 2, -radius), min(xc + h / 2, radius)
        inside = quad(chord, lo, hi, epsabs=1e-12)[0] / h if hi > lo else 0.0
    else:
        def chord(x):
            c = math.sqrt(max(radius * radius - x * x, 0.0))
            a, b = max(yc - h, -c), min(yc + h, c)
            weight_y = _tent_cdf((b - yc) / h) - _tent_cdf((a - yc) / h) if b > a else 0.0
            return max(0.0, 1.0 - abs(x - xc) / h) / h * weight_y

        lo, hi = max(xc - h, -radius), min(xc + h, radius)
        points = [xc] if lo < xc < hi else None
        inside = quad(chord, lo, hi, points=points, epsabs=1e-12)[0] if hi > lo else 0.0
    return 1.0 - inside


def test_uniform_sky_is_uniform_and_the_shadow_black(white_sky):
    # Liouville / Etherington (1933): a uniform sky stays uniform, at g^4 times its level.
    still = render_still(sky_scene(white_sky))
    composite = still.products["composite"]
    escaped = still.fate == 0
    assert escaped.sum() > 500 and (still.fate == 1).sum() > 100
    # 1e-12: rounding only (the lookup of a constant texture is exact).
    assert np.allclose(composite[escaped], unobstructed_level(), rtol=1e-12, atol=0)
    assert np.all(composite[~escaped] == 0.0)          # captured rays are black
    # Pixel centres classified as the analytic shadow (Synge 1966), except within 1e-6 M.
    rho = np.hypot(still.alpha, still.beta)
    clear = np.abs(rho - shadow_radius()) > 1e-6
    assert np.array_equal(escaped[clear], rho[clear] > shadow_radius())


@pytest.mark.parametrize("kind", ["box", "tent"])
def test_antialiasing_converges_to_the_exact_covered_fraction(white_sky, kind):
    # Supersampled shadow-edge pixels approach the exact filter-weighted fraction of
    # their footprint outside the shadow, computed here by quadrature of the analytic disk.
    h = FOV / SIDE
    level = unobstructed_level()
    radius = shadow_radius()
    errors = {}
    for n in (1, 2, 4, 8):
        still = render_still(sky_scene(white_sky, **{"image.supersampling": n,
                                                     "image.filter": kind,
                                                     "image.adaptive": False}))
        value = still.products["composite"] / level
        if n == 1:
            exact = np.vectorize(lambda x, y: exact_escaped_fraction(x, y, h, radius, kind))(
                still.alpha, still.beta)
            edge = (exact > 1e-6) & (exact < 1 - 1e-6)
            assert edge.sum() > 40
        errors[n] = np.abs(value - exact)[edge]
        assert np.all(still.products["samples"] == n * n)
    means = [errors[n].mean() for n in (1, 2, 4, 8)]
    assert means == sorted(means, reverse=True), means
    # Stratified samples at the strata centres: an edge crossing the footprint misjudges at
    # most the ~2n strata it cuts, of n^2, so the error is below 2/n per pixel; on average
    # it is far smaller (mean 0.18 -> 0.057 -> 0.018 -> 0.0061 for the box, 0.13 -> 0.0061
    # for the tent, over n = 1, 2, 4, 8, when this test was written: about 1/n^1.6).
    assert errors[8].max() < 2.0 / 8
    assert means[-1] < 0.01
    assert means[-1] < means[0] / 10


def test_adaptive_refinement_matches_full_supersampling_with_fewer_rays(white_sky):
    full = render_still(sky_scene(white_sky, **{"image.supersampling": 4,
                                                "image.adaptive": False}))
    adaptive = render_still(sky_scene(white_sky, **{"image.supersampling": 4}))
    level = unobstructed_level()
    info = adaptive.metadata["observing"]["antialias"]
    assert info["samples_total"] == int(adaptive.products["samples"].sum())
    assert info["pixels_refined"] == int((adaptive.products["samples"] == 16).sum())
    assert info["samples_total"] < 0.5 * full.metadata["observing"]["antialias"]["samples_total"]
    # The refined set is the pixels next to a change of fate; a tent footprint reaching
    # across the edge from a pixel not so marked is missed by at most its corner weight,
    # (1/2)(1/2)... < 0.02 of the level here.
    difference = np.abs(adaptive.products["composite"] - full.products["composite"]) / level
    assert difference.max() < 0.02
    # Data maps stay those of the pixel centres.
    assert np.array_equal(adaptive.fate, full.fate)
    plain = render_still(sky_scene(white_sky))
    assert np.array_equal(plain.r, adaptive.r, equal_nan=True)


def test_refine_mask_marks_both_sides_of_a_change():
    fate = np.zeros((4, 4), int)
    fate[:, 2:] = 1
    mask = refine_mask(fate, np.zeros_like(fate), np.zeros((4, 4)), 0.1)
    assert mask[:, 1:3].all() and not mask[:, [0, 3]].any()
    bright = np.zeros((4, 4))
    bright[0, 0] = 0.05
    assert not refine_mask(np.zeros_like(fate), np.zeros_like(fate), bright, 0.1).any()


def test_tent_offsets_have_the_tent_distribution():
    # The tent 1 - |x| on [-1, 1]: mean 0, variance 1/6 (textbook).  Strata-centre samples
    # miss part of the tails (the inverse CDF has a square-root end), about 1/(4n)
    # relative in the variance: 1% at n = 64 is safe and still tells a box (variance 1/3).
    x = subpixel_offsets(64, "tent")[:, 0]
    assert abs(x.mean()) < 1e-12
    assert x.var() == pytest.approx(1.0 / 6.0, rel=1e-2)
    assert np.abs(x).max() < 1.0


def test_stars_only_behind_escaped_rays_and_counted():
    still = render_still(default_scene(**{
        "image.width": 48, "image.height": 48, "observer.field_of_view": 300.0,
        "sky.backdrop": "stars", "sky.star_density": 20.0, "sky.seed": 3}))
    composite = still.products["composite"]
    blocked = still.fate != 0
    assert blocked.sum() > 4
    # Opaque disk and shadow: exactly the disk's own light, no star (nothing shines through).
    assert np.array_equal(composite[blocked], still.intensity[blocked])
    sky = still.metadata["observing"]["sky"]
    assert sky["stars"] > 0 and sky["star_images"] > 10
    assert (composite > still.intensity).sum() > 10
    again = render_still(default_scene(**{
        "image.width": 48, "image.height": 48, "observer.field_of_view": 300.0,
        "sky.backdrop": "stars", "sky.star_density": 20.0, "sky.seed": 3}))
    assert np.array_equal(again.pixels, still.pixels)


def test_transparent_disk_adds_its_orders_over_the_sky(white_sky):
    # Transparent disk (core rule): the orders' light adds, and what lies behind still shows.
    still = render_still(sky_scene(white_sky, **{
        "disk.inner_radius": "isco", "disk.outer_radius": 12.0, "disk.surface": "transparent",
        "observer.field_of_view": 30.0}))
    escaped = still.fate == 0
    lit = escaped & (still.intensity > 0)
    assert lit.sum() > 50
    # 1e-12 relative: the same sum, rounding only.
    extra = still.products["composite"] - still.intensity
    scale = SKY_LEVEL * still.metadata["inner_radius"] ** -3.0 / (1.0 - 2.0 / DISTANCE) ** 2
    assert np.allclose(extra[escaped], scale, rtol=1e-9, atol=0)


def test_preview_is_small_low_order_and_writes_only_a_png(tmp_path, capsys):
    status, out, err = run_cli(["still", "--preview", "--output-dir", tmp_path,
                                "--set", "sky.backdrop=stars"], capsys)
    assert status == 0, err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["default-preview.png"]
    with Image.open(tmp_path / "default-preview.png") as image:
        assert image.size == (160, 90)
        scene = json.loads(image.text["nullray-scene"])
    assert scene["disk"]["orders"] == 1 and scene["tracing"]["tolerance"] == 1e-6
    # The same through the scene key; the full render's name is never used.
    status, out, err = run_cli(["still", "--set", "image.preview=true", "--output-dir", tmp_path,
                                "--overwrite"], capsys)
    assert status == 0 and sorted(p.name for p in tmp_path.iterdir()) == ["default-preview.png"]


def test_command_line_reports_the_sample_counts(tmp_path, capsys):
    status, out, err = run_cli(["still", "--output-dir", tmp_path, "--set", "image.width=40",
                                "--set", "image.height=40", "--set", "image.supersampling=3"],
                               capsys)
    assert status == 0, err
    npz = np.load(tmp_path / "default.npz")
    info = json.loads(str(npz["metadata"]))["observing"]["antialias"]
    assert f"anti-aliasing: {info['samples_total']} samples" in out
    assert int(npz["samples"].sum()) == info["samples_total"]
    assert npz["composite"].shape == (40, 40)


def test_example_outreach_scenes_are_valid_and_the_preview_renders(tmp_path, capsys):
    from pathlib import Path

    from render import load_scene

    scenes = Path(__file__).resolve().parents[1] / "scenes"
    full = load_scene(scenes / "outreach-corvid.yaml")
    assert full["sky.backdrop"] == "stars" and full["image.supersampling"] == 2
    status, out, err = run_cli(["still", scenes / "preview-corvid.yaml", "--output-dir",
                                tmp_path], capsys)
    assert status == 0, err
    with Image.open(tmp_path / "preview-corvid-preview.png") as image:
        assert image.size == (160, 90)


def test_a_sky_is_not_sent_to_a_cluster_in_bands(tmp_path, capsys, no_tracing):
    status, out, err = run_cli(["still", "--set", "sky.backdrop=stars", "--scheduler",
                                "tcp://127.0.0.1:9", "--output-dir", tmp_path / "out"], capsys)
    assert status == 2 and err.count("\n") == 1 and "--scheduler" in err and "sky" in err
    assert not (tmp_path / "out").exists()


def test_python_api_refuses_a_bad_panorama_before_tracing(tmp_path, no_tracing):
    from render import SceneError

    (tmp_path / "wide.png").write_bytes(b"")
    Image.new("RGB", (30, 10)).save(tmp_path / "wide.png")
    with pytest.raises(SceneError, match="sky.image .* 30 x 10 pixels"):
        render_still(sky_scene(tmp_path / "wide.png"))


def test_a_sequence_frame_of_a_resting_camera_matches_the_still():
    # Sequences use the same sensor (sky, supersampling), seen from the camera's frame at the
    # frame's time: for a camera at rest the frame must be the still, pixel for pixel.
    from render.film.frame import render_frame
    from render.film.sequence import plan_sequence

    scene = default_scene(**{"image.width": 40, "image.height": 24, "animation.frames": 1,
                             "observer.field_of_view": 200.0, "sky.backdrop": "stars",
                             "sky.star_density": 20.0, "image.supersampling": 2})
    frame = render_frame(plan_sequence(scene).jobs[0])
    still = render_still(scene)
    assert np.array_equal(frame.pixels, still.pixels)
    assert (still.pixels != render_still(default_scene(**{
        **{k: scene[k] for k in ("image.width", "image.height", "observer.field_of_view")},
        "sky.backdrop": "none"})).pixels).any()


def test_preview_keeps_a_looser_tolerance_and_the_api_honours_the_flag():
    from render.scene.loader import preview_scene

    loose = preview_scene(default_scene(**{"tracing.tolerance": 1e-4, "output.png": False}))
    assert loose["tracing.tolerance"] == 1e-4 and loose["output.png"]
    tight = preview_scene(default_scene(**{"tracing.tolerance": 1e-10}))
    assert tight["tracing.tolerance"] == 1e-6
    # render_still applies image.preview itself (as the command line does).
    still = render_still(default_scene(**{"image.preview": True}))
    assert still.intensity.shape == (90, 160) and still.r.shape[0] == 1


def test_supersampled_still_with_an_automatic_exposure_is_refused_in_tiles(no_tracing):
    # The automatic colour exposure takes its white from the whole image, so a band
    # cannot be shaded alone: under a budget (given to render_still, not the scene's)
    # that needs tiles, a sky and supersampling with it are refused with the one-line
    # SceneError before the kernel runs.
    from render.errors import SceneError

    scene = default_scene(**{"image.width": 64, "image.height": 48, "image.supersampling": 2,
                             "sky.backdrop": "stars", "observing.mode": "true_colour",
                             "emission.law": "novikov_thorne",
                             "observing.colour_exposure": "auto"})
    with pytest.raises(SceneError, match="whole image at once") as refused:
        render_still(scene, memory_budget=6e5)
    assert "\n" not in str(refused.value)


TILED_SENSOR = {
    # Stars in true colour with a fixed white: the outreach case.  Distant camera, wide
    # view: many star images, refinement at the disk's edges and the shadow.
    "true-colour-stars": {"observing.mode": "true_colour", "emission.law": "novikov_thorne",
                          "observing.colour_exposure": "fixed",
                          "observing.colour_reference": 1e10,
                          "observer.field_of_view": 200.0, "sky.star_density": 20.0},
    # Bolometric, camera at 20 M: strong lensing near the critical curve, where some sky
    # triangles are skipped (their count must add up over the bands too).
    "bolometric-close-camera": {"observer.distance": 20.0, "observer.field_of_view": 90.0,
                                "sky.star_density": 5.0},
}


def _tiled_sensor_scene(case):
    return default_scene(**{"image.width": 40, "image.height": 40, "sky.backdrop": "stars",
                            "image.supersampling": 2, "image.adaptive": True,
                            **TILED_SENSOR[case]})


def _three_row_budget(scene):
    # A budget whose tiles hold 3 rows plus the halo (render.imaging.tiling's memory model), so
    # that the 40 rows make 14 bands, half of them starting on an odd row.
    from render.imaging.tiling import HALO_ROWS
    from render.imaging.tiling import TILE_SHARE, bytes_per_pixel

    row = scene["image.width"] * bytes_per_pixel(scene.values)
    return (3.5 + 2 * HALO_ROWS + 1) * row / TILE_SHARE


@pytest.mark.parametrize("case", list(TILED_SENSOR))
def test_tiled_still_with_stars_and_supersampling_equals_the_untiled_one(case, tmp_path):
    # Tiling is bookkeeping (common practice): each band is traced with a halo of
    # neighbouring rows, so its refinement mask and its star images (lens-map cells and
    # Jacobians across the band's edges) are those of the whole image.  Same rays, same
    # arithmetic: identical 8-bit pixels and sample counts; composite to 1e-12 relative
    # (room for a different summation order only).  Each star image must be added once.
    scene = _tiled_sensor_scene(case)
    whole = render_still(scene)
    tiled = render_still(scene, memory_budget=_three_row_budget(scene), workdir=tmp_path)
    try:
        tiles = tiled.metadata["tiles"]
        assert tiles["count"] > 1 and tiles["rows_per_tile"] == 3
        assert np.array_equal(tiled.pixels, whole.pixels)
        assert np.array_equal(tiled.products["samples"], whole.products["samples"])
        expected = whole.products["composite"]
        assert np.allclose(tiled.products["composite"], expected, rtol=1e-12, atol=0.0)
        for name, value in whole.maps().items():   # the per-ray data maps and products too
            if name == "composite":
                continue
            assert np.array_equal(np.asarray(tiled.maps()[name]), value,
                                  equal_nan=value.dtype.kind == "f"), name
        # The test means something: refined pixels and star light in the rows next to
        # band edges (where a band without its halo would differ).
        starts = np.arange(0, 40, 3)[1:]
        edges = np.concatenate([starts - 1, starts])
        stars_only = (expected - whole.intensity[..., None] if expected.ndim == 3
                      else expected - whole.intensity)
        assert (whole.products["samples"][edges] > 1).sum() >= 4
        assert (stars_only[edges] > 0).sum() >= 4
        # Counts add up over the bands to the whole image's.
        got, want = tiled.metadata["observing"], whole.metadata["observing"]
        for key in ("pixels_refined", "pixels", "samples_total"):
            assert got["antialias"][key] == want["antialias"][key], key
        assert got["sky"]["sky_triangles_skipped"] == want["sky"]["sky_triangles_skipped"]
        if case == "bolometric-close-camera":
            assert want["sky"]["sky_triangles_skipped"] > 0
        # A sum of bilinear weights over pixels: equal up to summation order.
        assert got["sky"]["star_images"] == pytest.approx(want["sky"]["star_images"],
                                                          rel=1e-12)
        assert tiled.metadata["fate_counts"] == whole.metadata["fate_counts"]
    finally:
        tiled.release()


def test_tiled_sensor_still_without_its_halo_would_differ(monkeypatch, tmp_path):
    # The control of the test above: bands rendered without neighbouring rows lose the
    # star images of the cells between bands and refine their edge rows differently, so
    # the comparison above can fail.
    import render.imaging.still

    scene = _tiled_sensor_scene("true-colour-stars")
    whole = render_still(scene)
    monkeypatch.setattr(render.imaging.still, "halo_rows", lambda rows, height: rows)
    alone = render_still(scene, memory_budget=_three_row_budget(scene), workdir=tmp_path)
    try:
        assert alone.metadata["tiles"]["count"] > 1
        assert not np.array_equal(alone.pixels, whole.pixels)
        assert (alone.metadata["observing"]["sky"]["star_images"]
                < whole.metadata["observing"]["sky"]["star_images"])
    finally:
        alone.release()


def test_tiled_still_with_a_panorama_and_full_supersampling_equals_the_untiled_one(tmp_path):
    # The other sky and the other refinement path: a panorama looked up per ray, every
    # pixel refined (image.adaptive off).  The bands' sample counts must add up to n^2 per
    # pixel of the whole image (a band counts its own rows, not its halo).  Same rays:
    # identical pixels and samples, composite to 1e-12 relative (summation order only).
    from render.imaging.sky import sample_panorama_image

    Image.fromarray(sample_panorama_image(32, seed=4)).save(tmp_path / "sky.png")
    scene = default_scene(**{"image.width": 40, "image.height": 40, "sky.backdrop": "image",
                             "sky.image": str(tmp_path / "sky.png"), "sky.brightness": 2.0,
                             "observer.distance": 40.0, "observer.field_of_view": 60.0,
                             "image.supersampling": 2, "image.adaptive": False})
    whole = render_still(scene)
    tiled = render_still(scene, memory_budget=_three_row_budget(scene), workdir=tmp_path)
    try:
        assert tiled.metadata["tiles"]["count"] > 1
        assert np.array_equal(tiled.pixels, whole.pixels)
        assert np.array_equal(tiled.products["samples"], whole.products["samples"])
        assert (whole.products["samples"] == 4).all()
        assert np.allclose(tiled.products["composite"], whole.products["composite"],
                           rtol=1e-12, atol=0.0)
        assert (tiled.metadata["observing"]["antialias"]["samples_total"]
                == 4 * 40 * 40)
    finally:
        tiled.release()
