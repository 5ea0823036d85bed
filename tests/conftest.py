"""Shared fixtures: small scenes so the suite stays fast."""

import pytest

import render.points
from render import default_scene
from render.cli import main


@pytest.fixture
def small_scene():
    """A 64x64 distant-observer scene factory: small_scene(**{"dotted.key": value})."""

    def make(**values):
        base = {"image.width": 64, "image.height": 64, "observer.kind": "distant"}
        base.update(values)
        return default_scene(**base)

    return make


@pytest.fixture
def no_tracing(monkeypatch):
    """Make any call of the numba kernel fail the test: errors must come first."""

    def refuse(*args, **kwargs):
        raise AssertionError("the ray-tracing kernel ran although the input was bad")

    monkeypatch.setattr(render.points, "trace_rays", refuse)


def run_cli(args, capsys):
    """Run ``nullray`` in-process; return (exit status, stdout, stderr)."""
    status = main([str(a) for a in args])
    captured = capsys.readouterr()
    return status, captured.out, captured.err
