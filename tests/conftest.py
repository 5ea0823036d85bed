"""Shared fixtures: small scenes so the suite stays fast."""

import pytest

from render import default_scene


@pytest.fixture
def small_scene():
    """A 64x64 distant-observer scene factory: small_scene(**{"dotted.key": value})."""

    def make(**values):
        base = {"image.width": 64, "image.height": 64, "observer.kind": "distant"}
        base.update(values)
        return default_scene(**base)

    return make
