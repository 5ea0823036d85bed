"""Display rules (render/light/display.py) and the eye's glare (render/light/glare.py)."""

import math

import matplotlib
import numpy as np
import pytest

from render import default_scene, render_still
from render.light.color import expose_linear_srgb
from render.light.display import (SHOULDER_KNEE, colour_mapped, scale_display,
                                  soft_shoulder_colour)
from render.light.glare import glare_kernel, glare_psf
from render.scene.loader import load_scene

# IEC 61966-2-1: the luminance row of the sRGB -> XYZ matrix.
LUMINANCE = np.array([0.2126, 0.7152, 0.0722])


def test_scalings_follow_their_published_forms():
    x = np.array([0.0, 1e-3, 0.25, 1.0, 3.0, 1e3])
    # Reinhard et al. 2002, eq. 3: L / (1 + L).
    np.testing.assert_allclose(scale_display(x, "reinhard"), x / (1 + x), rtol=1e-15)
    # common practice: a linear stretch clips at white.
    np.testing.assert_allclose(scale_display(x, "linear"), [0, 1e-3, 0.25, 1, 1, 1])
    # common practice: a log stretch over D decades puts 10^-D at black and 1 at white;
    # 10^-1 over 2 decades is halfway.
    np.testing.assert_allclose(scale_display([1e-3, 0.1, 1.0, 5.0], "log", 2.0),
                               [0.0, 0.5, 1.0, 1.0], atol=1e-15)
    # Lupton, Gunn & Szalay 1999, eq. 1 (asinh magnitudes), softening 10^-D.
    soft = 1e-3
    expected = [math.asinh(v / soft) / math.asinh(1 / soft) for v in (1e-3, 0.25)]
    np.testing.assert_allclose(scale_display([1e-3, 0.25], "asinh", 3.0), expected, rtol=1e-12)


@pytest.mark.parametrize("name", ["viridis", "magma", "inferno", "cividis"])
def test_colour_maps_are_matplotlibs(name):
    # matplotlib computation: the colour map looked up at the same (encoded) value.
    encoded = np.linspace(0.0, 1.0, 37)
    expected = matplotlib.colormaps[name](np.round(encoded * 255) / 255.0)[:, :3] * 255
    # One 8-bit level: matplotlib resamples its table to N = 256 entries here as well.
    np.testing.assert_allclose(colour_mapped(encoded, name), expected, atol=1.0)
    # The grey map is the encoded value itself (IEC 61966-2-1 8-bit quantisation).
    np.testing.assert_array_equal(colour_mapped(encoded, "grey"), np.round(encoded * 255))


def test_soft_shoulder_keeps_mid_tones_and_never_reaches_white():
    # By its definition (module docstring): identity below the knee, hue kept there.
    dim = np.array([[0.1, 0.4, 0.2], [0.45, 0.05, 0.3]])
    np.testing.assert_allclose(soft_shoulder_colour(dim), dim, rtol=1e-15)
    # Increasing light never darkens the picture (common practice for a tone curve),
    # and stays below 8-bit white (254.5 / 255 encoded, i.e. 0.9961 linear) up to 50 x white.
    levels = np.geomspace(0.01, 50.0, 400)
    grey = soft_shoulder_colour(np.repeat(levels[:, None], 3, axis=1))[:, 0]
    assert np.all(np.diff(grey) > 0) and grey.max() < 0.9961
    # C1 at the knee: the one-sided slopes agree (finite differences, step 1e-6).
    h = 1e-6
    below = soft_shoulder_colour(np.full((1, 3), SHOULDER_KNEE))[0, 0]
    above = soft_shoulder_colour(np.full((1, 3), SHOULDER_KNEE + h))[0, 0]
    assert abs((above - below) / h - 1.0) < 1e-4
    # A very bright saturated blue turns toward white (its channels converge), as bright
    # film highlights do (common practice); a dim one keeps its saturation.
    bright = soft_shoulder_colour(np.array([[20.0, 30.0, 200.0]]))[0]
    assert bright.min() / bright.max() > 0.95


def test_scale_down_rule_is_the_original_rule(small_scene):
    # The original rule is kept by name: the same pixels as render.light.color's
    # expose_linear_srgb (the rule before the display module existed).
    scene = small_scene(**{"emission.law": "novikov_thorne", "observing.mode": "true_colour",
                           "black_hole.mass": 4.0e7, "emission.accretion_rate": 0.02,
                           "display.colour_rule": "scale_down"})
    result = render_still(scene)
    rgb = result.products["rgb_linear"].astype(float)
    reference = result.metadata["observing"]["colour_reference_y"]
    old = expose_linear_srgb(rgb, reference, scene["output.exposure"])
    from render.light.color import srgb_encode, to_uint8
    np.testing.assert_array_equal(result.pixels, to_uint8(srgb_encode(old)))


def test_true_colour_example_does_not_clip_and_shows_beaming():
    # The example scene at a tenth of its size (same framing), default exposure.
    scene = load_scene("scenes/thermal-true-colour.yaml",
                       ["image.width=128", "image.height=72"])
    result = render_still(scene)
    disk = result.on_disk.any(axis=0)
    clipped = (result.pixels == 255).any(axis=2) & disk
    assert clipped.sum() <= 0.02 * disk.sum()     # the limit: at most 2 %
    # Doppler beaming (Cunningham & Bardeen 1973): of two rings of equal radius, the
    # side whose direct image has the larger g is the brighter; the picture shows it.
    shown = result.pixels.astype(float) @ LUMINANCE
    g = result.g[0]
    ring = disk & (result.r[0] > 6.0) & (result.r[0] < 9.0)
    approaching = ring & (g > np.nanpercentile(g[ring], 80))
    receding = ring & (g < np.nanpercentile(g[ring], 20))
    # Eight 8-bit levels: well above quantisation, far below the real contrast.
    assert shown[approaching].mean() > shown[receding].mean() + 8


def test_colour_map_pixels_are_rgb_and_grey_is_one_channel(small_scene):
    grey = render_still(small_scene())
    mapped = render_still(small_scene(**{"display.colour_map": "inferno"}))
    assert grey.pixels.ndim == 2 and mapped.pixels.shape == (64, 64, 3)
    # The data maps do not depend on the picture's colour map (common practice).
    np.testing.assert_array_equal(grey.intensity, mapped.intensity)


def test_glare_psf_is_cie_135():
    # Vos & van den Berg 1999 (CIE 135/1), eq. 6, written out at theta = 2 deg, A = 25,
    # p = 0.5: 10/8 + (5/4 + 0.05/2)(1 + 0.4^4) + 0.00125.
    expected = 10 / 8 + (5 / 4 + 0.05 / 2) * (1 + 0.4 ** 4) + 0.00125
    assert glare_psf(2.0) == pytest.approx(expected, rel=1e-12)
    kernel = glare_kernel(21, 31, 0.05)
    # Core excluded (theta < 0.1 deg: the centre and its nearest neighbours).
    assert kernel[20, 30] == 0.0 and kernel[20, 31] == 0.0 and kernel[20, 32] > 0.0
    # Symmetric about the centre (an isotropic PSF).
    np.testing.assert_array_equal(kernel, kernel[::-1, ::-1])


def test_glare_changes_the_picture_only(tmp_path):
    from render.api import make_still

    base = {"image.width": 48, "image.height": 32, "observer.placement": "distant"}
    plain, _ = make_still(default_scene(name="plain", **base), tmp_path)
    glared, _ = make_still(default_scene(name="glared", **base, **{"display.glare": True}),
                           tmp_path)
    a, b = np.load(tmp_path / "plain.npz"), np.load(tmp_path / "glared.npz")
    for name in a.files:
        if name in ("pixels", "metadata"):
            continue
        np.testing.assert_array_equal(a[name], b[name], err_msg=name)   # bit-identical
    # The eye scatters light into the dark shadow and sky: the picture changes there.
    dark = plain.pixels == 0
    assert (glared.pixels[dark] > 0).any()


def test_default_scene_frames_the_disk_and_shows_the_order_1_image():
    # The default scene at a quarter of its size (same framing in M). Luminet 1979, Fig. 2:
    # a thin disk seen at high inclination shows its order-1 (secondary) image below the
    # shadow; here it must be in view and the whole disk must lie inside the frame.
    from render.light.observing import disk_reaches_border

    scene = default_scene(**{"image.width": 160, "image.height": 90})
    result = render_still(scene)
    shining = result.on_disk.reshape(scene["disk.orders"], -1).T
    assert not disk_reaches_border(shining, 90, 160)
    # At least 2 % of the disk's pixels (the old default had 29 of ~130 000: 0.02 %).
    assert result.on_disk[1].sum() >= 0.02 * result.on_disk.any(axis=0).sum()
    # The picture never clips at the default exposure (Reinhard et al. 2002: x/(1+x) < 1).
    assert result.pixels.max() < 255


def test_colour_map_in_tiles_equals_untiled(tmp_path):
    # A fixed per-pixel rule (common practice for films): bands of rows give the same picture.
    scene = default_scene(**{"image.width": 64, "image.height": 36,
                             "display.colour_map": "inferno"})
    from render.imaging.tiling import plan_still

    assert plan_still(scene, 400_000).tiles > 1
    tiled = render_still(scene, memory_budget=400_000, workdir=tmp_path)
    try:
        np.testing.assert_array_equal(np.asarray(tiled.pixels), render_still(scene).pixels)
    finally:
        tiled.release()


def test_glare_is_never_split_into_tiles(tmp_path):
    from render import SceneError

    scene = default_scene(**{"image.width": 64, "image.height": 36, "display.glare": True})
    with pytest.raises(SceneError, match="display.glare"):
        render_still(scene, memory_budget=400_000, workdir=tmp_path)
