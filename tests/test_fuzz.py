"""Fuzzing the scene loader: it returns a Scene or raises SceneError, never anything else.

Documents are drawn by hypothesis: nested mappings and lists of scalars,
strings and keys, biased toward the real section and key names (so that deep
validation paths are reached), given to the loader both as Python mappings
(:func:`render.scene.loader.scene_from_dict`) and as YAML files
(:func:`render.scene.loader.load_scene`), plus raw text and bytes.

The default run draws a short series; the long one is outside it::

    /tmp/venv/bin/pytest -m slow tests/test_fuzz.py
"""

import tempfile
from pathlib import Path

import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from render.scene.keys import KEYS, SECTIONS
from render.scene.loader import Scene, load_scene, scene_from_dict
from render.errors import SceneError

SHORT = settings(max_examples=40, deadline=None, derandomize=True,
                 suppress_health_check=[HealthCheck.too_slow])
LONG = settings(max_examples=3000, deadline=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])

LEAVES = sorted({path.rsplit(".", 1)[-1] for path in KEYS})
CHOICES = sorted({c for spec in KEYS.values() for c in spec.choices})

keys = st.one_of(st.sampled_from(SECTIONS), st.sampled_from(LEAVES), st.sampled_from(list(KEYS)),
                 st.text(max_size=12), st.integers(), st.booleans(), st.none(), st.floats())
scalars = st.one_of(
    st.none(), st.booleans(), st.integers(), st.integers(min_value=-10 ** 400, max_value=10 ** 400),
    st.floats(), st.floats(-2.0, 2.0), st.floats(0.0, 1e4), st.text(max_size=20),
    st.sampled_from(CHOICES + ["isco", "", "..", "/tmp/x", "a/b", "1e-9", ".nan"]))
values = st.recursive(scalars, lambda inner: st.one_of(
    st.lists(inner, max_size=4),
    st.dictionaries(keys, inner, max_size=4)), max_leaves=12)


@st.composite
def documents(draw):
    """A mapping of sections (some real) to mappings of keys (some real) to values."""
    document = {}
    for _ in range(draw(st.integers(0, 4))):
        section = draw(st.one_of(st.sampled_from(SECTIONS), keys))
        if draw(st.booleans()):
            prefix = f"{section}." if isinstance(section, str) else ""
            entries = {}
            for _ in range(draw(st.integers(0, 4))):
                leaf = draw(st.one_of(
                    st.sampled_from([p[len(prefix):] for p in KEYS if p.startswith(prefix)]
                                    or LEAVES), keys))
                entries[leaf] = draw(values)
            document[section] = entries
        else:
            document[section] = draw(values)
    return draw(st.one_of(st.just(document), values))


def load_or_refuse(call):
    """Run a loader call: a Scene or a one-line SceneError pass; anything else fails."""
    try:
        result = call()
    except SceneError as exc:
        assert "\n" not in str(exc)
        return None
    assert isinstance(result, Scene)
    return result


def check_document(document):
    load_or_refuse(lambda: scene_from_dict(document))
    try:
        text = yaml.safe_dump(document, allow_unicode=True)
    except (yaml.YAMLError, RecursionError, ValueError):
        return  # not representable as YAML: nothing to load
    check_text(text.encode("utf-8"))


def check_text(data):
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "fuzz.yaml"
        path.write_bytes(data)
        load_or_refuse(lambda: load_scene(path))
        load_or_refuse(lambda: load_scene(path, ["image.width=8"]))


yaml_like = st.lists(st.sampled_from(
    list("abcdefgh_.:-[]{}&*!|>'\"#%@`,?~ \n\t01e+\xe9")
    + ["black_hole", "spin", "image", "width", "\n  ", "!!python/object:os.system"]),
    max_size=80).map("".join)


@SHORT
@given(documents())
def test_generated_documents_load_or_are_refused(document):
    check_document(document)


@SHORT
@given(st.one_of(yaml_like.map(lambda t: t.encode("utf-8")), st.binary(max_size=200)))
def test_generated_text_and_bytes_load_or_are_refused(data):
    check_text(data)


@pytest.mark.slow
@LONG
@given(documents())
def test_generated_documents_long(document):
    check_document(document)


@pytest.mark.slow
@LONG
@given(st.one_of(yaml_like.map(lambda t: t.encode("utf-8")), st.binary(max_size=400)))
def test_generated_text_and_bytes_long(data):
    check_text(data)


# --- hand-written hostile documents -------------------------------------------------------

HOSTILE = [
    ("deep-flow-mappings", "black_hole: " + "{a: " * 30000 + "1" + "}" * 30000 + "\n",
     ["nested too deeply"]),
    ("deep-flow-lists", "[" * 60000 + "]" * 60000 + "\n", ["nested too deeply"]),
    ("nested-value-in-a-number", "black_hole: " + "{spin: " * 300 + "1" + "}" * 300 + "\n",
     ["black_hole.spin", "expected a number"]),
    ("largest-float", "black_hole:\n  spin: 1.0e308\n", ["black_hole.spin", "1e+308"]),
    ("float-overflowing-to-inf", "observer:\n  distance: 1e400\n",
     ["observer.distance", "inf", "finite"]),
    ("integral-float-far-too-large", "image:\n  width: 1.0e300\n",
     ["image.width = 1e+300", "1 <= width <= 65536"]),
    ("three-hundred-digit-int", "image:\n  height: " + "9" * 300 + "\n", ["image.height"]),
    ("binary-tag", "black_hole:\n  spin: !!binary aGVsbG8=\n", ["black_hole.spin", "b'hello'"]),
    ("set-tag", "black_hole: !!set {a, b}\n", ["black_hole"]),
    # The YAML 1.2 core schema has no timestamps: a date stays text, refused as a number.
    ("timestamp", "black_hole:\n  spin: 2001-12-14\n", ["black_hole.spin", "'2001-12-14'"]),
    ("unhashable-key", "? [a, b]\n: 1\n", ["not valid scene YAML", "unhashable"]),
    ("nul-character", "black_hole:\n  spin: 0.5\x00\n", ["not valid scene YAML"]),
    ("over-long-name", "name: " + "a" * 200000 + "\n", ["name"]),
]


@pytest.mark.parametrize("text,fragments", [c[1:] for c in HOSTILE], ids=[c[0] for c in HOSTILE])
def test_hostile_scene_is_refused_in_one_line(tmp_path, capsys, no_tracing, text, fragments):
    from conftest import run_cli

    scene = tmp_path / "scene.yaml"
    scene.write_text(text, encoding="utf-8")
    status, out, err = run_cli(["still", scene, "--output-dir", tmp_path / "out"], capsys)
    assert status == 2 and out == "" and err.count("\n") == 1 and "Traceback" not in err
    for fragment in fragments:
        assert fragment in err, (fragment, err)
    assert not (tmp_path / "out").exists()


def test_deeply_nested_override_is_refused_in_one_line(tmp_path, capsys, no_tracing):
    from conftest import run_cli

    status, out, err = run_cli(["still", "--set", "black_hole.spin=" + "[" * 50000 + "]" * 50000,
                                "--output-dir", tmp_path / "out"], capsys)
    assert status == 2 and err.count("\n") == 1 and "nested too deeply" in err
