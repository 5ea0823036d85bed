"""Shared fixtures: small scenes so the suite stays fast."""

import numpy as np
import pytest

import render.geodesics.closed_form
import render.geodesics.tracing
from render import default_scene
from render.cli import main


@pytest.fixture
def small_scene():
    """A 64x64 distant-observer scene factory: small_scene(**{"dotted.key": value})."""

    def make(**values):
        # The geometry the tests were written for, fixed here rather than taken from the
        # default scene (whose framing is chosen for pictures and may change).
        base = {"image.width": 64, "image.height": 64, "observer.placement": "distant",
                "observer.inclination": 60.0, "observer.field_of_view": 40.0,
                "disk.outer_radius": 20.0}
        base.update(values)
        return default_scene(**base)

    return make


@pytest.fixture
def no_tracing(monkeypatch):
    """Make any call of a tracing kernel fail the test: errors must come first.

    Every kernel that traces rays is covered where the front door calls it: the
    integrator, the continuation to infinity (the sky) and the closed form.
    """

    def refuse(*args, **kwargs):
        raise AssertionError("a ray-tracing kernel ran although the input was bad")

    for module, name in ((render.geodesics.tracing, "trace_rays"),
                         (render.geodesics.tracing, "trace_to_infinity"),
                         (render.geodesics.closed_form, "closed_form_crossings")):
        monkeypatch.setattr(module, name, refuse)


def run_cli(args, capsys):
    """Run ``nullray`` in-process; return (exit status, stdout, stderr)."""
    status = main([str(a) for a in args])
    captured = capsys.readouterr()
    return status, captured.out, captured.err


def kerr_metric(r, theta, a):
    """Boyer–Lindquist Kerr metric g_ab at (r, theta), coordinates (t, r, theta, phi).

    Written out here from Boyer & Lindquist (1967) (Bardeen, Press & Teukolsky 1972,
    eq. 2.1), independently of the package's own metric, for the tests to check it with.
    """
    sigma = r * r + a * a * np.cos(theta) ** 2
    delta = r * r - 2 * r + a * a
    s2 = np.sin(theta) ** 2
    g = np.zeros((4, 4))
    g[0, 0] = -(1 - 2 * r / sigma)
    g[0, 3] = g[3, 0] = -2 * a * r * s2 / sigma
    g[1, 1] = sigma / delta
    g[2, 2] = sigma
    g[3, 3] = (r * r + a * a + 2 * a * a * r * s2 / sigma) * s2
    return g
