"""Scene files: validation of bad input, defaults, overrides and round trips.

The bad-input table runs each scene through the command line in-process
(``render.cli.main``) so that it also checks what a user sees: exit status 2,
one line on stderr naming the key and the value, no traceback, and no file in
the output folder.  A few cases go through a real ``python -m render``
subprocess in ``tests/test_cli.py``.
"""

import math
from pathlib import Path

import pytest
import yaml

from render.cli import EXIT_BAD_INPUT
from render.scene.keys import KEYS
from render.scene.loader import MAX_SCENE_BYTES, default_scene, load_scene, scene_from_dict
from render.errors import SceneError

from conftest import run_cli  # noqa: E402  (shared test helpers)

REPO = Path(__file__).resolve().parents[1]




def assert_one_line_error(status, out, err, fragments):
    assert status == EXIT_BAD_INPUT
    assert out == ""
    assert err.startswith("nullray: error: ")
    assert err.endswith("\n") and err.count("\n") == 1, err
    assert "Traceback" not in err
    for fragment in fragments:
        assert fragment in err, (fragment, err)


# (id, scene file text, fragments the one-line message must contain).
# Physical boundaries used below, all textbook values:
#   spin 0: horizon r_+ = 2 M, ISCO 6 M (Bardeen, Press & Teukolsky 1972, eq. 2.21 at a = 0);
#   spin 0.9: r_+ = 1 + sqrt(1 - 0.81) = 1.436 M (Boyer-Lindquist horizon, MTW 1973 eq. 33.2);
#   ergoregion boundary in the equatorial plane r = 1 + sqrt(1 - a^2 cos^2 theta) = 2 M for
#   every spin (MTW 1973, sec. 33.8).
BAD_SCENES = [
    ("polarisation-model", "polarisation:\n  model: radial\n",
     ["polarisation.model", "'radial'", "electron_scattering"]),
    ("polarisation-degree-above-one", "polarisation:\n  degree: 1.5\n",
     ["polarisation.degree", "1.5", "0 <= degree <= 1"]),
    ("polarisation-degree-negative", "polarisation:\n  degree: -0.1\n",
     ["polarisation.degree", "-0.1"]),
    ("polarisation-angle", "polarisation:\n  angle: 200\n", ["polarisation.angle", "200"]),
    ("polarisation-ticks-number", "polarisation:\n  ticks: 1\n",
     ["polarisation.ticks", "1", "true or false"]),
    ("visibilities-padding-zero", "visibilities:\n  padding: 0\n",
     ["visibilities.padding", "0", "1 <= padding <= 16"]),
    ("visibilities-compute-word", "visibilities:\n  compute: yes please\n",
     ["visibilities.compute", "'yes please'"]),
    ("polarisation-camera-on-axis", "observer:\n  placement: camera\n  inclination: 0\n"
     "polarisation:\n  model: constant\n", ["polarisation.model", "'constant'", "axis"]),
    ("unknown-key", "black_hole:\n  spn: 0.5\n",
     ["black_hole.spn", "0.5", "did you mean 'black_hole.spin'"]),
    ("unknown-section", "blackhole:\n  spin: 0.5\n",
     ["blackhole", "did you mean 'black_hole'"]),
    ("unknown-leaf", "observer:\n  inclinaton: 30\n",
     ["observer.inclinaton", "30", "observer.inclination"]),
    ("section-given-a-value", "black_hole: 0.5\n", ["black_hole", "0.5", "black_hole.spin"]),
    ("string-for-number", "black_hole:\n  spin: fast\n", ["black_hole.spin", "'fast'"]),
    ("list-for-number", "observer:\n  inclination: [30, 40]\n",
     ["observer.inclination", "[30, 40]"]),
    ("bool-for-number", "black_hole:\n  spin: true\n", ["black_hole.spin", "True"]),
    ("bool-for-int", "image:\n  width: true\n", ["image.width", "True"]),
    ("fraction-for-int", "image:\n  width: 16.5\n", ["image.width", "16.5", "whole number"]),
    ("number-for-bool", "output:\n  png: 1\n", ["output.png", "1", "true or false"]),
    ("bad-choice", "observer:\n  frame: rotating\n", ["observer.frame", "'rotating'", "zamo"]),
    ("nan", "black_hole:\n  spin: .nan\n", ["black_hole.spin", "nan", "finite"]),
    ("inf", "disk:\n  outer_radius: .inf\n", ["disk.outer_radius", "inf", "finite"]),
    ("minus-inf-radius", "disk:\n  inner_radius: -.inf\n", ["disk.inner_radius", "-inf"]),
    ("integer-beyond-float-range", "black_hole:\n  spin: 1" + "0" * 400 + "\n",
     ["black_hole.spin", "finite"]),
    ("spin-one", "black_hole:\n  spin: 1\n", ["black_hole.spin", "1", "-1 < spin < 1"]),
    ("spin-minus-one", "black_hole:\n  spin: -1.0\n", ["black_hole.spin", "-1.0"]),
    ("spin-above-one", "black_hole:\n  spin: 1.5\n", ["black_hole.spin", "1.5"]),
    ("inclination-negative", "observer:\n  inclination: -0.5\n",
     ["observer.inclination", "-0.5", "0 <= inclination <= 180"]),
    ("inclination-above-180", "observer:\n  inclination: 180.5\n",
     ["observer.inclination", "180.5"]),
    ("outer-equals-inner", "black_hole:\n  spin: 0.0\ndisk:\n  inner_radius: 8\n"
     "  outer_radius: 8\n", ["disk.outer_radius", "8"]),
    ("outer-below-isco", "black_hole:\n  spin: 0.0\ndisk:\n  outer_radius: 5\n",
     ["disk.outer_radius", "5"]),
    ("inner-inside-horizon", "black_hole:\n  spin: 0.9\ndisk:\n  inner_radius: 1.2\n",
     ["disk.inner_radius", "1.2", "horizon"]),
    ("inner-below-isco", "black_hole:\n  spin: 0.0\ndisk:\n  inner_radius: 5.5\n",
     ["disk.inner_radius", "5.5", "ISCO"]),
    ("inner-negative", "disk:\n  inner_radius: -3\n", ["disk.inner_radius", "-3"]),
    ("inner-word", "disk:\n  inner_radius: edge\n", ["disk.inner_radius", "'edge'"]),
    ("static-inside-ergoregion", "black_hole:\n  spin: 0.9\nobserver:\n  frame: static\n"
     "  inclination: 90\n  distance: 1.9\n", ["observer.distance", "1.9", "ergoregion"]),
    ("zamo-inside-horizon", "black_hole:\n  spin: 0.9\nobserver:\n  frame: zamo\n"
     "  distance: 1.2\n", ["observer.distance", "1.2", "r_+"]),
    ("width-zero", "image:\n  width: 0\n", ["image.width", "0"]),
    ("height-negative", "image:\n  height: -16\n", ["image.height", "-16"]),
    ("too-large-for-memory", "image:\n  width: 60000\n  height: 60000\n",
     ["image.width", "60000", "tracing.memory_budget"]),
    ("tolerance-zero", "tracing:\n  tolerance: 0\n", ["tracing.tolerance", "0"]),
    ("tolerance-negative", "tracing:\n  tolerance: -1.0e-9\n", ["tracing.tolerance", "-1e-09"]),
    ("field-of-view-zero", "observer:\n  field_of_view: 0\n", ["observer.field_of_view", "0"]),
    ("sampling-unknown", "tracing:\n  sampling: sparse\n", ["tracing.sampling", "'sparse'"]),
    ("sampling-tolerance-zero", "tracing:\n  sampling_tolerance: 0\n",
     ["tracing.sampling_tolerance", "0"]),
    ("adaptive-with-supersampling", "tracing:\n  sampling: adaptive\nimage:\n  supersampling: 2\n",
     ["tracing.sampling", "'adaptive'", "image.supersampling"]),
    ("anchor-and-alias", "black_hole:\n  spin: &s 0.5\ndisk:\n  index: *s\n",
     ["anchor", "line 2"]),
    ("merge-key", "base: &b {spin: 0.5}\nblack_hole:\n  <<: *b\n", ["anchor", "line 1"]),
    ("python-object-tag", "black_hole: !!python/object:os.system\n  spin: 0.5\n",
     ["python/object", "line 1"]),
    ("python-apply-tag", "black_hole:\n  spin: !!python/object/apply:os.system ['true']\n",
     ["python/object/apply", "line 2"]),
    ("invalid-yaml-bracket", "black_hole:\n  spin: [0.5\n", ["not valid scene YAML"]),
    ("invalid-yaml-indent", "black_hole:\n spin: 0.5\n  depth: 2\n",
     ["not valid scene YAML", "line 3"]),
    ("invalid-yaml-tab", "black_hole:\n\tspin: 0.5\n", ["not valid scene YAML", "line 2"]),
    ("repeated-key", "black_hole:\n  spin: 0.5\n  spin: 0.7\n", ["spin", "twice", "line 3"]),
    ("non-text-key", "7: 0.5\n", ["7", "keys are text"]),
    # Renamed keys and common synonyms point at the key meant.
    ("renamed-selector", "observer:\n  kind: distant\n", ["observer.kind", "'observer.placement'"]),
    ("synonym-fov", "observer:\n  fov: 30\n", ["observer.fov", "'observer.field_of_view'"]),
    # A misspelt value is answered like a misspelt key.
    ("misspelt-method", "tracing:\n  method: closed-form\n", ["tracing.method", "'closed_form'?"]),
    ("misspelt-mode", "observing:\n  mode: truecolour\n", ["observing.mode", "'true_colour'?"]),
    # One key in both spellings (issue: accepted silently before).
    ("dotted-and-nested-key", "black_hole:\n  spin: 0.5\nblack_hole.spin: -0.5\n",
     ["black_hole.spin", "twice"]),
    # YAML 1.1 reads 1:30 as sexagesimal 90; the YAML 1.2 core schema keeps it text.
    ("sexagesimal-number", "observer:\n  inclination: 1:30\n",
     ["observer.inclination", "'1:30'"]),
    ("underscore-number", "image:\n  width: 1_024\n", ["image.width", "'1_024'"]),
    ("yaml-1.1-boolean", "output:\n  png: yes\n", ["output.png", "'yes'"]),
    # Deep enough to exhaust the parser's recursion under the default limit of 1000 frames.
    ("deep-nesting", "black_hole: " + "[" * 500 + "]" * 500 + "\n", ["nested"]),
    ("too-many-digits", "image:\n  width: 1" + "0" * 5000 + "\n", ["not valid scene YAML"]),
    ("empty-document", "", ["scene.yaml", "empty"]),
    ("only-comments", "# a scene with nothing in it\n", ["scene.yaml", "empty"]),
    ("explicit-null", "~\n", ["scene.yaml", "empty"]),
    ("list-document", "- black_hole\n- disk\n", ["scene.yaml", "mapping", "list"]),
    ("scalar-document", "spin 0.5\n", ["scene.yaml", "mapping", "str"]),
    ("name-dotdot", "name: ..\n", ["name", "'..'"]),
    ("name-parent-path", "name: ../escaped\n", ["name", "'../escaped'"]),
    ("name-slash", "name: runs/first\n", ["name", "'runs/first'"]),
    ("name-backslash", "name: 'runs\\first'\n", ["name", "runs"]),
    ("name-absolute", "name: /tmp/first\n", ["name", "'/tmp/first'"]),
    ("name-empty", "name: ''\n", ["name", "''"]),
    ("name-number", "name: 5\n", ["name", "5"]),
    # A still that would write nothing is refused, not rendered (common practice: fail early).
    ("every-output-off", "output:\n  png: false\n  npz: false\n  fits: false\n",
     ["output.png", "output.npz", "output.fits", "write nothing"]),
]


@pytest.mark.parametrize("text,fragments", [case[1:] for case in BAD_SCENES],
                         ids=[case[0] for case in BAD_SCENES])
def test_bad_scene_is_refused_with_one_line(tmp_path, capsys, no_tracing, text, fragments):
    scene = tmp_path / "scene.yaml"
    scene.write_text(text, encoding="utf-8")
    out_dir = tmp_path / "out"
    status, out, err = run_cli(["still", str(scene), "--output-dir", str(out_dir)], capsys)
    assert_one_line_error(status, out, err, fragments)
    assert not out_dir.exists() or not any(out_dir.iterdir())


def test_non_utf8_bytes_are_refused(tmp_path, capsys, no_tracing):
    scene = tmp_path / "scene.yaml"
    scene.write_bytes(b"black_hole:\n  spin: 0.5\n# caf\xe9 in Latin-1\n")
    out_dir = tmp_path / "out"
    status, out, err = run_cli(["still", str(scene), "--output-dir", str(out_dir)], capsys)
    # Zero-based offset of \xe9 counted by hand: 12 + 12 bytes of the first two lines
    # and 5 of "# caf".
    assert_one_line_error(status, out, err, ["scene.yaml", "UTF-8", "byte 29"])
    assert not out_dir.exists()


def test_oversized_file_is_refused_before_reading(tmp_path, capsys, no_tracing):
    scene = tmp_path / "scene.yaml"
    scene.write_text("#" * MAX_SCENE_BYTES + "\n", encoding="utf-8")
    out_dir = tmp_path / "out"
    status, out, err = run_cli(["still", str(scene), "--output-dir", str(out_dir)], capsys)
    assert_one_line_error(status, out, err, [str(MAX_SCENE_BYTES + 1), "bytes"])
    assert not out_dir.exists()


def test_missing_file_is_refused(tmp_path, capsys, no_tracing):
    status, out, err = run_cli(["still", str(tmp_path / "absent.yaml"), "--output-dir",
                                str(tmp_path / "out")], capsys)
    assert_one_line_error(status, out, err, ["absent.yaml", "No such file"])


BAD_OVERRIDES = [
    ("unknown-key", ["bogus.key=1"], ["bogus.key", "'1'"]),
    ("misspelt-key", ["black_hole.spn=0.5"], ["black_hole.spn", "black_hole.spin"]),
    ("section-as-key", ["observer=3"], ["observer", "observer.placement"]),
    ("no-equals", ["black_hole.spin"], ["black_hole.spin", "dotted.key=value"]),
    ("bad-value", ["black_hole.spin=fast"], ["black_hole.spin", "'fast'"]),
    ("empty-value", ["black_hole.spin="], ["black_hole.spin", "''"]),
    ("nan-value", ["observer.inclination=.nan"], ["observer.inclination", "nan"]),
    ("yaml-error-in-value", ["black_hole.spin=[0.5"], ["black_hole.spin", "not valid"]),
    ("anchor-in-value", ["black_hole.spin=&a 0.5"], ["anchor"]),
    ("name-path", ["name=../up"], ["name", "'../up'"]),
    ("newline-in-key", ["bo\ngus=1"], ["bo\\ngus"]),
]


@pytest.mark.parametrize("overrides,fragments", [case[1:] for case in BAD_OVERRIDES],
                         ids=[case[0] for case in BAD_OVERRIDES])
def test_bad_override_is_refused_with_one_line(tmp_path, capsys, no_tracing, overrides,
                                               fragments):
    out_dir = tmp_path / "out"
    args = ["still", "--output-dir", str(out_dir)]
    for item in overrides:
        args += ["--set", item]
    status, out, err = run_cli(args, capsys)
    assert_one_line_error(status, out, err, fragments)
    assert not out_dir.exists()


def test_override_applies_to_a_scene_file_too(tmp_path, capsys, no_tracing):
    scene = tmp_path / "scene.yaml"
    scene.write_text("black_hole:\n  spin: 0.5\n", encoding="utf-8")
    status, out, err = run_cli(["still", str(scene), "--set", "black_hole.spin=1.0",
                                "--output-dir", str(tmp_path / "out")], capsys)
    assert_one_line_error(status, out, err, ["black_hole.spin", "1.0"])


# --- the Python API behind the command --------------------------------------------------


def test_scene_error_is_a_value_error_with_one_line():
    with pytest.raises(SceneError) as info:
        default_scene(**{"black_hole.spin": 2.0})
    assert isinstance(info.value, ValueError)
    assert "\n" not in str(info.value) and "black_hole.spin" in str(info.value)


def test_default_scene_file_equals_built_in_defaults():
    from_file = load_scene(REPO / "scenes" / "default.yaml")
    built_in = default_scene(name="default")
    assert from_file.values == built_in.values


def test_default_scene_file_shows_every_key():
    # The shipped example is documentation: it must list every key (scene.py's KEYS).
    document = yaml.safe_load((REPO / "scenes" / "default.yaml").read_text(encoding="utf-8"))
    shown = {f"{section}.{key}" for section, keys in document.items() if isinstance(keys, dict)
             for key in keys} | {key for key in document if not isinstance(document[key], dict)}
    assert shown == set(KEYS)


def test_defaults_satisfy_their_own_ranges():
    scene = default_scene()
    for path, spec in KEYS.items():
        value = scene[path]
        if spec.kind in ("float", "int"):
            assert spec.low <= value <= spec.high, path
        if spec.kind == "choice":
            assert value in spec.choices, path


def test_file_name_is_the_default_output_name(tmp_path):
    scene = tmp_path / "vesper-close.yaml"
    scene.write_text("black_hole:\n  spin: 0.3\n", encoding="utf-8")
    assert load_scene(scene)["name"] == "vesper-close"
    assert load_scene(scene, ["name=other"])["name"] == "other"


def test_overrides_are_parsed_as_yaml(tmp_path):
    scene = default_scene(["black_hole.spin=-0.5", "image.width=0x10", "output.png=false",
                           "disk.inner_radius=isco", "observer.placement=distant"])
    assert scene.spin == -0.5
    assert scene["image.width"] == 16 and isinstance(scene["image.width"], int)  # YAML 1.1 hex
    assert scene["output.png"] is False
    assert scene["observer.placement"] == "distant"


def test_integral_float_is_accepted_for_an_int_key():
    scene = default_scene(**{"image.width": 32.0})
    assert scene["image.width"] == 32 and isinstance(scene["image.width"], int)


def test_open_and_closed_bounds():
    # Closed bounds accept their end points, open ones refuse them (the KEYS table's allowed text).
    assert default_scene(**{"observer.inclination": 0.0})["observer.inclination"] == 0.0
    assert default_scene(**{"observer.inclination": 180})["observer.inclination"] == 180.0
    assert default_scene(**{"black_hole.spin": -0.999999}).spin == -0.999999
    with pytest.raises(SceneError):
        default_scene(**{"black_hole.spin": -1.0})


def test_inner_radius_at_the_isco_number_is_accepted():
    # Schwarzschild ISCO = 6 M (Bardeen, Press & Teukolsky 1972, eq. 2.21 at a = 0).
    scene = default_scene(**{"black_hole.spin": 0.0, "disk.inner_radius": 6.0})
    assert scene.inner_radius == 6.0
    assert default_scene(**{"black_hole.spin": 0.0}).inner_radius == pytest.approx(6.0, rel=1e-12)


def test_zamo_may_sit_inside_the_ergoregion_where_static_may_not():
    # Equatorial ergoregion boundary r = 2 M for any spin (MTW 1973, sec. 33.8); a ZAMO
    # exists down to the horizon, r_+ = 1.436 M at a = 0.9 (Bardeen, Press & Teukolsky 1972).
    values = {"black_hole.spin": 0.9, "observer.inclination": 90.0, "observer.distance": 1.9}
    assert default_scene(**values, **{"observer.frame": "zamo"})["observer.distance"] == 1.9
    with pytest.raises(SceneError):
        default_scene(**values, **{"observer.frame": "static"})
    assert default_scene(**{**values, "observer.distance": 2.1},
                         **{"observer.frame": "static"})["observer.distance"] == 2.1


def test_observer_distance_is_not_checked_for_a_distant_observer():
    scene = default_scene(**{"observer.placement": "distant", "observer.distance": 1.2})
    assert scene["observer.placement"] == "distant"


def test_document_round_trips_through_scene_from_dict():
    scene = default_scene(**{"black_hole.spin": -0.3, "disk.outer_radius": 35.0,
                             "observer.frame": "static", "name": "echo"})
    again = scene_from_dict(scene.document)
    assert again.values == scene.values
    assert all(not (isinstance(v, float) and math.isnan(v)) for v in again.values.values())


def test_scene_values_are_not_shared_with_the_input_mapping():
    document = {"black_hole": {"spin": 0.4}}
    scene = scene_from_dict(document)
    document["black_hole"]["spin"] = 0.8
    assert scene.spin == 0.4


@pytest.mark.parametrize("key,text,value", [
    ("tracing.tolerance", "1e-9", 1e-9), ("tracing.max_steps", "6.2e6", 6_200_000),
    ("disk.outer_radius", "2E3", 2000.0), ("tracing.tolerance", "1.0e-9", 1e-9),
    ("observer.azimuth", "-4e1", -40.0)])
def test_exponent_numbers_are_numbers(tmp_path, key, text, value):
    # YAML 1.2 core-schema floats (YAML 1.2 spec, sec. 10.2.1.4): PyYAML's YAML 1.1 rules
    # alone would read 1e-9 as the string '1e-9' and refuse it as "not a number".
    section, leaf = key.split(".")
    scene = tmp_path / "scene.yaml"
    scene.write_text(f"{section}:\n  {leaf}: {text}\n", encoding="utf-8")
    assert load_scene(scene)[key] == value
    assert default_scene([f"{key}={text}"])[key] == value


def test_exponent_rule_does_not_change_plain_pyyaml():
    # The extra rule lives on the scene loader only; yaml.safe_load keeps YAML 1.1 behaviour.
    assert yaml.safe_load("x: 1e6") == {"x": "1e6"}


def _png_bytes(width, height):
    import io

    from PIL import Image

    buffer = io.BytesIO()
    Image.new("RGB", (width, height)).save(buffer, format="PNG")
    return buffer.getvalue()


# Cases that need a second file beside the scene: (id, scene text, {file name: bytes}, fragments).
BAD_SCENES_WITH_FILES = [
    ("sky-image-not-2-to-1", "sky:\n  backdrop: image\n  image: sky.png\n",
     {"sky.png": _png_bytes(30, 20)}, ["sky.image", "'sky.png'", "30 x 20", "2:1"]),
    ("sky-image-not-an-image", "sky:\n  backdrop: image\n  image: sky.png\n",
     {"sky.png": b"certainly not a picture"}, ["sky.image", "'sky.png'", "cannot be read"]),
    ("sky-image-missing", "sky:\n  backdrop: image\n  image: absent.png\n", {},
     ["sky.image", "'absent.png'", "No such file"]),
    ("sky-image-is-a-folder", "sky:\n  backdrop: image\n  image: sub\n", {"sub/keep": b""},
     ["sky.image", "'sub'"]),
    ("sky-image-not-given", "sky:\n  backdrop: image\n", {}, ["sky.backdrop", "'image'", "sky.image"]),
    ("sky-negative-star-density", "sky:\n  backdrop: stars\n  star_density: -1\n", {},
     ["sky.star_density", "-1", "0 <= star_density <= 50"]),
    ("sky-negative-seed", "sky:\n  backdrop: stars\n  seed: -3\n", {},
     ["sky.seed", "-3", "0 <= seed"]),
    ("sky-fractional-seed", "sky:\n  seed: 1.5\n", {}, ["sky.seed", "1.5", "whole number"]),
    ("sky-unknown-kind", "sky:\n  backdrop: nebula\n", {}, ["sky.backdrop", "'nebula'", "stars"]),
    ("sky-for-a-distant-observer", "observer:\n  placement: distant\nsky:\n  backdrop: stars\n", {},
     ["sky.backdrop", "'stars'", "observer.placement", "'camera'"]),
    ("sky-in-line-mode", "sky:\n  backdrop: stars\nobserving:\n  mode: line\n", {},
     ["sky.backdrop", "observing.mode", "'line'"]),
    ("supersampling-zero", "image:\n  supersampling: 0\n", {},
     ["image.supersampling", "0", "1 <= supersampling <= 8"]),
    ("supersampling-too-large", "image:\n  supersampling: 9\n", {},
     ["image.supersampling", "9", "1 <= supersampling <= 8"]),
    ("supersampling-not-a-number", "image:\n  supersampling: lots\n", {},
     ["image.supersampling", "'lots'"]),
    ("supersampling-in-spectrum-mode", "image:\n  supersampling: 2\nobserving:\n"
     "  mode: spectrum\nemission:\n  law: novikov_thorne\n", {},
     ["image.supersampling", "observing.mode", "'spectrum'"]),
    ("unknown-filter", "image:\n  filter: lanczos\n", {}, ["image.filter", "'lanczos'", "tent"]),
    ("refine-threshold-zero", "image:\n  refine_threshold: 0\n", {},
     ["image.refine_threshold", "0", "0 < refine_threshold <= 1"]),
    ("preview-not-a-bool", "image:\n  preview: maybe\n", {}, ["image.preview", "'maybe'"]),
    # A sky is tiled when the white is fixed, not with the automatic colour exposure.
    ("sky-in-a-tiled-still-with-auto-exposure", "sky:\n  backdrop: stars\nobserving:\n"
     "  mode: true_colour\nemission:\n  law: novikov_thorne\ntracing:\n  memory_budget: 0.01\n",
     {}, ["640 x 360", "tracing.memory_budget = 0.01 GB", "colour_exposure = 'auto'",
          "whole image"]),
    ("colour-rule-unknown", "display:\n  colour_rule: clip\n", {},
     ["display.colour_rule", "'clip'", "soft_shoulder"]),
    ("scaling-unknown", "display:\n  scaling: sqrt\n", {}, ["display.scaling", "'sqrt'", "asinh"]),
    ("decades-too-small", "display:\n  decades: 0.1\n", {}, ["display.decades", "0.1"]),
    ("colour-map-unknown", "display:\n  colour_map: jet\n", {},
     ["display.colour_map", "'jet'", "viridis"]),
    ("glare-not-a-bool", "display:\n  glare: lots\n", {}, ["display.glare", "'lots'"]),
    ("viewing-angle-zero", "display:\n  viewing_angle: 0\n", {}, ["display.viewing_angle", "0"]),
    ("profile-law-without-table", "emission:\n  law: profile\n", {},
     ["emission.law", "'profile'", "emission.profile"]),
    ("profile-table-missing", "emission:\n  law: profile\n  profile: absent.csv\n", {},
     ["absent.csv", "No such file"]),
    ("profile-table-not-numbers", "emission:\n  law: profile\n  profile: table.csv\n",
     {"table.csv": b"r,emissivity\nsix,1.0\n"}, ["table.csv", "line 2", "two numbers"]),
    ("profile-table-not-utf8", "emission:\n  law: profile\n  profile: table.csv\n",
     {"table.csv": b"r,emissivity\n6,\xff\n"}, ["table.csv"]),
    ("profile-table-is-a-folder", "emission:\n  law: profile\n  profile: sub\n",
     {"sub/keep": b""}, ["sub"]),
    ("profile-not-a-name", "emission:\n  law: profile\n  profile: [1, 2]\n", {},
     ["emission.profile", "[1, 2]"]),
    ("monochromatic-without-band", "observing:\n  mode: monochromatic\n", {},
     ["observing.mode", "'monochromatic'", "got 0"]),
    ("monochromatic-two-bands", "observing:\n  mode: monochromatic\n  frequency: 1.0e15\n"
     "  wavelength: 500\n", {}, ["observing.mode", "got 2"]),
    ("line-bins-reversed", "observing:\n  mode: line\n  line_low: 2.0\n", {},
     ["observing.line_high", "1.6", "observing.line_low"]),
    ("spectrum-band-reversed", "observing:\n  spectrum_low: 1e20\n", {},
     ["observing.spectrum_high", "observing.spectrum_low"]),
    ("negative-opacity", "emission:\n  law: novikov_thorne\n  opacity: -1\n", {},
     ["emission.opacity", "-1"]),
    ("baselines-missing", "visibilities:\n  compute: true\n  baselines: absent.csv\n", {},
     ["visibilities.baselines", "absent.csv", "cannot be read"]),
    ("baselines-wrong-columns", "visibilities:\n  compute: true\n  baselines: b.csv\n",
     {"b.csv": b"x,y\n1,2\n"}, ["b.csv", "u_glambda", "u_m"]),
    ("baselines-metres-without-frequency", "visibilities:\n  compute: true\n  baselines: b.csv\n",
     {"b.csv": b"u_m,v_m\n1e6,0\n"}, ["b.csv", "monochromatic"]),
    ("baselines-not-numbers", "visibilities:\n  compute: true\n  baselines: b.csv\n",
     {"b.csv": b"u_glambda,v_glambda\nfar,1\n"}, ["b.csv", "not a number"]),
    ("baselines-empty", "visibilities:\n  compute: true\n  baselines: b.csv\n",
     {"b.csv": b"u_glambda,v_glambda\n"}, ["b.csv", "no baselines"]),
    ("inner-index-too-steep", "emission:\n  law: broken_power_law\n  inner_index: 25\n", {},
     ["emission.inner_index", "25"]),
    ("outer-index-not-a-number", "emission:\n  outer_index: steep\n", {},
     ["emission.outer_index", "'steep'"]),
    ("break-radius-zero", "emission:\n  break_radius: 0\n", {}, ["emission.break_radius", "0"]),
    ("break-radius-negative", "emission:\n  break_radius: -6\n", {},
     ["emission.break_radius", "-6"]),
    ("sampling-tolerance-zero", "observing:\n  sampling_tolerance: 0\n", {},
     ["observing.sampling_tolerance", "0"]),
    ("sampling-tolerance-too-loose", "observing:\n  sampling_tolerance: 0.5\n", {},
     ["observing.sampling_tolerance", "0.5"]),
]


@pytest.mark.parametrize("text,files,fragments", [c[1:] for c in BAD_SCENES_WITH_FILES],
                         ids=[c[0] for c in BAD_SCENES_WITH_FILES])
def test_bad_scene_with_side_files_is_refused(tmp_path, capsys, no_tracing, text, files,
                                              fragments):
    for name, content in files.items():
        (tmp_path / name).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / name).write_bytes(content)
    scene = tmp_path / "scene.yaml"
    scene.write_text(text, encoding="utf-8")
    out_dir = tmp_path / "out"
    status, out, err = run_cli(["still", str(scene), "--output-dir", str(out_dir)], capsys)
    assert_one_line_error(status, out, err, fragments)
    assert not out_dir.exists()


def test_numbers_are_read_as_yaml_1_2_says(tmp_path):
    # YAML 1.2.2 spec, sec. 10.3.2 (core schema): 020 is decimal twenty (YAML 1.1 made it
    # octal 16), 0o20 is octal, 6.2e6 a float.
    scene = tmp_path / "scene.yaml"
    scene.write_text("image:\n  width: 020\n  height: 0o20\nblack_hole:\n  mass: 6.2e6\n",
                     encoding="utf-8")
    loaded = load_scene(scene)
    assert loaded["image.width"] == 20
    assert loaded["image.height"] == 16
    assert loaded["black_hole.mass"] == 6.2e6


def test_a_set_override_replaces_a_dotted_key_of_the_file(tmp_path):
    # --set wins over the file, whichever spelling the file used for the key.
    scene = tmp_path / "scene.yaml"
    scene.write_text("black_hole.spin: -0.5\n", encoding="utf-8")
    assert load_scene(scene, ["black_hole.spin=0.25"]).spin == 0.25



def test_side_files_resolve_from_the_scene_files_folder(tmp_path):
    # common practice: a relative path inside a file is relative to that file's folder.
    folder = tmp_path / "scenes"
    folder.mkdir()
    scene_file = folder / "night.yaml"
    scene_file.write_text("sky:\n  image: pano.png\nemission:\n  profile: tables/disk.csv\n")
    scene = load_scene(scene_file)
    assert scene.side_file("sky.image") == folder / "pano.png"
    assert scene.side_file("emission.profile") == folder / "tables" / "disk.csv"
    absolute = str(tmp_path / "elsewhere" / "pano.png")
    assert load_scene(scene_file, [f"sky.image={absolute}"]).side_file("sky.image") == Path(
        absolute)


def test_side_files_of_a_scene_not_read_from_a_file():
    # common practice: without a file to be relative to, a path is relative to the current folder.
    scene = default_scene(**{"sky.image": "pano.png"})
    assert scene.side_file("sky.image") == Path.cwd() / "pano.png"
    assert scene.side_file("emission.profile") is None


# --- side files: a path in a scene file is the scene's, a path given with --set the user's ----

PROFILE_CSV = "r,emissivity\n2,1.0\n40,0.01\n"


def _scene_in_subfolder(tmp_path, text):
    folder = tmp_path / "scenes"
    folder.mkdir()
    scene = folder / "shot.yaml"
    scene.write_text(text, encoding="utf-8")
    return folder, scene


def test_side_file_given_with_set_resolves_from_the_current_folder(tmp_path, monkeypatch):
    _, scene = _scene_in_subfolder(tmp_path, "emission:\n  law: profile\n")
    monkeypatch.chdir(tmp_path)
    loaded = load_scene(scene, ["emission.profile=table.csv"])
    # common practice: a path typed on the command line is relative to the current folder.
    assert loaded.side_file("emission.profile") == tmp_path / "table.csv"
    assert "emission.profile" in loaded.user_paths


def test_still_with_a_profile_given_on_the_command_line_renders(tmp_path, capsys, monkeypatch):
    _, scene = _scene_in_subfolder(tmp_path, "emission:\n  law: profile\n"
                                             "observer:\n  placement: distant\n"
                                             "image:\n  width: 8\n  height: 8\n"
                                             "tracing:\n  method: auto\n")
    (tmp_path / "table.csv").write_text(PROFILE_CSV, encoding="utf-8")
    monkeypatch.chdir(tmp_path)
    status, out, err = run_cli(["still", scene, "--set", "emission.profile=table.csv",
                                "--output-dir", tmp_path / "out", "--quiet"], capsys)
    assert status == 0, err
    assert (tmp_path / "out" / "shot.png").exists()


@pytest.mark.parametrize("key, extra", [
    ("emission.profile", ["--set", "emission.law=profile"]),
    ("sky.image", ["--set", "sky.backdrop=image"]),
])
def test_missing_side_file_message_says_where_it_looked(tmp_path, capsys, monkeypatch,
                                                        no_tracing, key, extra):
    _, scene = _scene_in_subfolder(tmp_path, "image:\n  width: 8\n  height: 8\n")
    monkeypatch.chdir(tmp_path)
    status, out, err = run_cli(["still", scene, *extra, "--set", f"{key}=absent.file",
                                "--output-dir", tmp_path / "out"], capsys)
    # The absolute path tried: the current folder's, since the value came from --set.
    assert_one_line_error(status, out, err, [key, str(tmp_path / "absent.file"),
                                             "No such file"])
    assert not (tmp_path / "out").exists()
