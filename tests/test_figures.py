"""Figures with scales (render/output/figures.py), `nullray figure`, light-curve scales."""

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from matplotlib.figure import Figure
from PIL import Image

from render import default_scene, render_still
from render.output.figures import MAP_NAMES, map_values, plot, read_still
from render.output.files import write_still

from conftest import run_cli

TINY = {"image.width": 40, "image.height": 24, "observer.placement": "distant"}


@pytest.fixture(scope="module")
def still():
    return render_still(default_scene(**TINY))


def test_angle_axes_follow_mass_and_distance(still):
    # astropy computation: theta_g = G M / (c^2 D) in microarcseconds (EHT 2019, L6, sec. 2).
    doc = still.metadata["scene"]["black_hole"]
    theta_g = ((const.G * doc["mass"] * const.M_sun / const.c ** 2)
               / (doc["distance"] * u.pc)).decompose().value * u.rad
    uas_per_m = theta_g.to(u.uas).value
    ax = plot(still, "g", Figure().add_subplot())
    top = [child for child in ax.child_axes if child.xaxis.get_label_text().startswith("[µas]")]
    assert len(top) == 1
    # The secondary axis maps 10 M to 10 theta_g (relative 1e-9: float round-off only).
    forward = top[0]._functions[0]
    assert forward(10.0) == pytest.approx(10.0 * uas_per_m, rel=1e-9)
    # The image extent covers the field of view (observer.field_of_view, in M).
    left, right = ax.get_xlim()
    assert right - left == pytest.approx(default_scene()["observer.field_of_view"], rel=1e-9)


def test_every_map_draws_with_a_colour_bar_and_title(still):
    for name in MAP_NAMES:
        fig = Figure()
        ax = plot(still, name, fig.add_subplot())
        assert still.metadata["scene"]["name"] in ax.get_title()
        # common practice: a quantitative map has a colour bar (the picture has none).
        assert len(fig.axes) == (1 if name == "picture" else 2)


def test_first_shining_order_is_the_direct_image(still):
    # By definition of the opaque disk (README): the crossing that shines is the one
    # that ended the ray; where order 0 shines, the map shows order 0's value.
    g, _ = map_values(still, "g")
    direct = still.on_disk[0]
    np.testing.assert_array_equal(g[direct], still.g[0][direct])
    assert np.isnan(g[~still.on_disk.any(axis=0)]).all()


def test_npz_round_trip_and_cli(tmp_path, capsys, still):
    paths = write_still(still, tmp_path)
    again = read_still(paths["npz"])
    for name in ("intensity", "g", "r", "delay", "fate", "on_disk", "pixels"):
        np.testing.assert_array_equal(getattr(again, name), getattr(still, name))
    status, out, err = run_cli(["figure", paths["npz"], "--map", "r", "--map", "fate",
                                "--output-dir", tmp_path], capsys)
    assert status == 0, err
    for name in ("r", "fate"):
        with Image.open(tmp_path / f"scene_{name}.png") as image:
            assert image.size[0] > 300   # a figure, not the tiny still itself


def test_figure_refuses_an_unknown_map_before_tracing(tmp_path, capsys, no_tracing):
    status, out, err = run_cli(["figure", "--map", "brightness", "--output-dir", tmp_path],
                               capsys)
    assert status == 2 and err.count("\n") == 1 and "'brightness'" in err
    assert list(tmp_path.iterdir()) == []


def test_swept_key_of_a_sweep(tmp_path):
    from render.film.products import swept_key
    from render.film.sequence import plan_sequence

    scene = default_scene(**TINY, **{
        "animation.frames": 3,
        "animation.keyframes": [{"frame": 0, "observer.inclination": 10.0},
                                {"frame": 2, "observer.inclination": 70.0}]})
    key, values = swept_key(plan_sequence(scene))
    # Keyframes fix the end values (README, Animations).
    assert key == "observer.inclination [deg]" and values[0] == 10.0 and values[-1] == 70.0
