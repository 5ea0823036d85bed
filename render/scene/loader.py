"""Reading and validating scene files (YAML) into plain typed objects.

Every key, its unit, default and allowed values live in ``KEYS``
(:mod:`render.scene.keys`); this module reads YAML safely, checks every value
and the consistency between keys, and translates a validated :class:`Scene` into
the parameters of the rooms below (:meth:`Scene.viewpoint`,
:meth:`Scene.trace_settings`).  Validation errors are raised as
:class:`SceneError` with one line naming the key, the value and what is allowed.
"""

import difflib
import math
import os
import re
from dataclasses import dataclass, field
from pathlib import Path

import yaml

from ..errors import SceneError
from ..guards.reading import InputFileError, read_bounded
from ..camera.observers import Viewpoint, check_observer_position
from .keys import (INTERPOLATIONS, KEYFRAME_PLACEMENTS, KEYFRAME_SECTIONS, KEYS, MAX_KEYFRAMES,
                   SECTIONS, SYNONYMS)
from ..geodesics.tracing import TraceSettings, resolve_method
from ..spacetime.kerr import horizon_radii, isco_radius
from ..imaging.adaptive import SamplingSettings, check_sampling
from ..imaging.sensor import check_sensor, check_untiled
from ..imaging.tiling import check_memory
from ..light.observing import check_observing

__all__ = [
    "SceneError",
    "Scene",
    "KEYS",
    "load_scene",
    "scene_from_dict",
    "apply_overrides",
    "default_scene",
    "preview_scene",
    "preview_film",
    "keyframe_position",
    "frame_count",
]

MAX_SCENE_BYTES = 256 * 1024
MAX_NESTING = 8


@dataclass(frozen=True, repr=False)
class Scene:
    """A validated scene: ``values`` maps every dotted key to its value.

    Attributes are reached as ``scene["black_hole.spin"]`` or via the helpers
    below; ``document`` is the full nested mapping (defaults filled in), which
    is what outputs echo as metadata.  ``disk.inner_radius`` is resolved to a
    number (the ISCO when 'isco' was given).
    """

    values: dict
    source: str = "<defaults>"
    document: dict = field(default_factory=dict)
    # Path keys the user named on the command line (--set): read from the current folder.
    user_paths: frozenset = frozenset()
    # Whether the scene file's side files may lie outside its folder (--allow-outside-files).
    allow_outside_files: bool = False

    def __getitem__(self, key):
        return self.values[key]

    def __repr__(self):
        """A one-line summary: name, source, size, spin, inclination, observer, method, mode."""
        v = self.values
        return (f"<Scene {v['name']!r} from {self.source}: {v['image.width']}x{v['image.height']}, "
                f"spin {v['black_hole.spin']:g}, inclination {v['observer.inclination']:g} deg, "
                f"{v['observer.placement']} observer, method {v['tracing.method']}, "
                f"mode {v['observing.mode']}>")

    @property
    def spin(self):
        return self.values["black_hole.spin"]

    @property
    def inner_radius(self):
        value = self.values["disk.inner_radius"]
        return isco_radius(self.spin) if value == "isco" else float(value)

    def side_file(self, key):
        """The file a path-valued key names, resolved and checked; None when the key is unset.

        The one place that decides where a side file is and whether it may be
        read.  A path written in a scene file is taken from the scene file's
        folder, so a scene and its side files (an emission profile, a sky
        panorama) move together, and it must stay inside that folder (after
        following symbolic links): a scene someone else wrote cannot make
        nullray read ``/etc/passwd`` or ``~/.ssh``.  The user lifts that rule
        with ``--allow-outside-files`` (``allow_outside_files=True`` of
        :func:`load_scene`).  A path the user gave with ``--set``, or in a scene
        not read from a file, is the user's own: it is taken from the current
        folder and may be anywhere.  The path returned is absolute, so that a
        message about it says where it was looked for.

        Parameters
        ----------
        key : str
            A dotted key of kind path, e.g. ``"emission.profile"`` or ``"sky.image"``.

        Returns
        -------
        pathlib.Path or None

        Raises
        ------
        SceneError
            A scene file's side file outside its folder, not allowed.

        Examples
        --------
        >>> scene = scene_from_dict({"sky": {"image": "pano.png"}}, source="scenes/night.yaml")
        >>> scene.side_file("sky.image") == Path.cwd() / "scenes" / "pano.png"
        True
        >>> scene.side_file("emission.profile") is None
        True
        >>> typed = scene_from_dict({"sky": {"image": "pano.png"}}, source="scenes/night.yaml",
        ...                         user_paths={"sky.image"})
        >>> typed.side_file("sky.image") == Path.cwd() / "pano.png"
        True
        """
        name = self.values[key]
        if name is None:
            return None
        path = Path(name)
        if self.source in ("<defaults>", "<dict>") or key in self.user_paths:
            return path.absolute()
        folder = Path(self.source).parent
        if not path.is_absolute():
            path = folder / path
        if not self.allow_outside_files and not _is_inside(path, folder):
            raise SceneError(
                f"{key} = {_describe(name)} is outside the scene file's folder "
                f"{_describe(str(folder))}; a scene reads side files from its own folder only. "
                f"Pass --allow-outside-files to read it, or name it yourself with --set {key}=...")
        return path.absolute()

    def viewpoint(self):
        """The observer set-up of this scene (:class:`render.camera.observers.Viewpoint`)."""
        v = self.values
        return Viewpoint(placement=v["observer.placement"], spin=self.spin, distance=v["observer.distance"],
                         inclination_deg=v["observer.inclination"],
                         azimuth_deg=v["observer.azimuth"], frame=v["observer.frame"],
                         field_of_view=v["observer.field_of_view"], roll_deg=v["observer.roll"],
                         width=v["image.width"], height=v["image.height"], aim=v["observer.aim"])

    def trace_settings(self):
        """How this scene's rays are traced (:class:`render.geodesics.tracing.TraceSettings`).

        ``tracing.method: auto`` resolves here, once, for stills, frames and
        measurements alike: the closed form for a distant observer.
        """
        v = self.values
        return TraceSettings(
            spin=self.spin, method=resolve_method(v["tracing.method"], v["observer.placement"]),
            inclination_deg=v["observer.inclination"], orders=v["disk.orders"],
            tolerance=v["tracing.tolerance"], max_steps=v["tracing.max_steps"],
            max_crossings=v["tracing.max_crossings"],
            stop_on_disk=v["disk.surface"] == "opaque", r_in=self.inner_radius,
            r_out=v["disk.outer_radius"], want_escape=v["sky.backdrop"] != "none")

    def sampling_settings(self):
        """How this scene's still samples its image plane (:class:`render.imaging.adaptive.SamplingSettings`)."""
        v = self.values
        return SamplingSettings(method=v["tracing.sampling"],
                                tolerance=v["tracing.sampling_tolerance"],
                                inner_radius=self.inner_radius,
                                outer_radius=v["disk.outer_radius"], isco=isco_radius(self.spin))


def _is_inside(path, folder):
    """Whether ``path`` lies inside ``folder`` once symbolic links and '..' are resolved."""
    real, base = os.path.realpath(path), os.path.realpath(folder)
    return os.path.commonpath([real, base]) == base


def _describe(value):
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _fail(key, value, allowed):
    raise SceneError(f"{key} = {_describe(value)} is not allowed; expected {allowed}")


def _coerce(spec, value):
    """Check one value against its spec; return it in its canonical type."""
    key = spec.path
    if spec.kind == "bool":
        if not isinstance(value, bool):
            _fail(key, value, "true or false")
        return value
    if spec.kind == "str":
        if not isinstance(value, str) or not value or len(value) > 100:
            _fail(key, value, spec.allowed)
        if any(c in value for c in "/\\\0") or value in (".", "..") or not all(
                c.isalnum() or c in "-_." for c in value):
            _fail(key, value, spec.allowed)
        return value
    if spec.kind == "choice":
        if value not in spec.choices:
            _fail(key, value, f"one of: {', '.join(spec.choices)}{_suggest_value(value, spec)}")
        return value
    if spec.kind == "path":
        if value is None:
            return None
        if not isinstance(value, str) or not value.strip() or len(value) > 4096 or "\0" in value:
            _fail(key, value, spec.allowed)
        return value
    if spec.kind == "keyframes":
        return _coerce_keyframes(key, value)
    if spec.kind in ("float_or_none", "int_or_none"):
        if value is None:
            return None
    if spec.kind == "radius_or_isco":
        if value == "isco":
            return value
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            _fail(key, value, spec.allowed)
        if not _is_finite(value):
            _fail(key, value, "a finite number")
        return float(value)
    # Numbers.  YAML booleans are ints in Python: refuse them explicitly.
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        _fail(key, value, f"a number ({spec.allowed})")
    given = value  # as written: int(1e300) would print 301 digits
    if spec.kind in ("int", "int_or_none"):
        if isinstance(value, float):
            if not value.is_integer():
                _fail(key, value, f"a whole number ({spec.allowed})")
            value = int(value)
    else:
        if not _is_finite(value):
            _fail(key, value, f"a finite number ({spec.allowed})")
        value = float(value)
    too_low = value < spec.low or (spec.low_open and value == spec.low)
    too_high = value > spec.high or (spec.high_open and value == spec.high)
    if too_low or too_high:
        _fail(key, given, spec.allowed)
    return value


def _coerce_keyframes(key, value):
    """A list of {frame: n | time: s | at: fraction, dotted.key: number, interpolation: ...}.

    Each entry is placed by exactly one of ``frame`` (a whole number >= 0),
    ``time`` (seconds of screen time >= 0) or ``at`` (a fraction of the film,
    0 to 1); entries placed the same way must increase.  The order across
    placements and the film's end are checked with the frame count
    (:func:`_check_keyframe_order`).
    """
    if value is None:
        return ()
    if not isinstance(value, (list, tuple)):
        _fail(key, value, "a list of {frame: n, dotted.key: number} entries")
    if len(value) > MAX_KEYFRAMES:
        raise SceneError(f"{key} has {len(value)} entries; at most {MAX_KEYFRAMES} are allowed")
    entries = []
    previous = {}
    for index, entry in enumerate(value):
        where = f"{key}[{index}]"
        placement = _keyframe_placement(where, entry)
        place = entry[placement]
        if placement in previous and place <= previous[placement]:
            raise SceneError(f"{where}.{placement} = {place} is out of order; keyframes must "
                             f"increase (previous entry: {placement} {previous[placement]})")
        previous[placement] = place
        clean = {placement: place}
        for name, number in entry.items():
            if name == placement:
                continue
            if name == "interpolation":
                if number not in INTERPOLATIONS:
                    _fail(f"{where}.interpolation", number, f"one of: {', '.join(INTERPOLATIONS)}")
                clean[name] = number
                continue
            clean[name] = _keyframed_number(where, name, number)
        if len(clean) == 1 + ("interpolation" in clean):
            raise SceneError(f"{where} ({placement} {place}) sets no key")
        entries.append(clean)
    return tuple(entries)


def _keyframe_placement(where, entry):
    """Which of frame, time or at places a keyframe entry (exactly one), its value checked."""
    wanted = "a mapping with one of 'frame', 'time' or 'at' and dotted numeric keys"
    if not isinstance(entry, dict):
        _fail(where, entry, wanted)
    given = [name for name in KEYFRAME_PLACEMENTS if name in entry]
    if len(given) != 1:
        if given:
            raise SceneError(f"{where} is placed by {' and '.join(given)}; give one of "
                             "'frame', 'time' or 'at'")
        _fail(where, entry, wanted)
    placement = given[0]
    place = entry[placement]
    if placement == "frame":
        if isinstance(place, bool) or not isinstance(place, int) or place < 0:
            _fail(f"{where}.frame", place, "a whole number >= 0")
    elif isinstance(place, bool) or not isinstance(place, (int, float)) or not _is_finite(place):
        _fail(f"{where}.{placement}", place, "a number (seconds >= 0)" if placement == "time"
              else "a fraction of the film, 0 <= at <= 1")
    elif placement == "time" and not 0 <= place <= 3600:
        _fail(f"{where}.time", place, "seconds of screen time, 0 <= time <= 3600")
    elif placement == "at" and not 0 <= place <= 1:
        _fail(f"{where}.at", place, "a fraction of the film, 0 <= at <= 1")
    return placement


def _keyframed_number(where, name, number):
    """A keyframed key's value: a finite number of a numeric key in a keyframable section."""
    spec = KEYS.get(name) if isinstance(name, str) else None
    if spec is None or spec.kind != "float" or name.split(".")[0] not in KEYFRAME_SECTIONS:
        hint = "" if spec is not None else _suggest(str(name))
        raise SceneError(f"{where}: {_describe(name)} cannot be keyframed; allowed: "
                         f"numeric keys of {', '.join(KEYFRAME_SECTIONS)} "
                         f"(e.g. observer.inclination){hint}")
    if isinstance(number, bool) or not isinstance(number, (int, float)) or not _is_finite(number):
        _fail(f"{where}.{name}", number, "a finite number")
    return float(number)


def _is_finite(value):
    # A YAML integer can be far beyond float range (math.isfinite would raise).
    try:
        return math.isfinite(value)
    except OverflowError:
        return False


def _suggest(key):
    if key in SYNONYMS:
        return f" (did you mean '{SYNONYMS[key]}'?)"
    if key in SECTIONS:
        first = next(p for p in KEYS if p.startswith(key + "."))
        return f" ('{key}' is a section; give its keys, e.g. '{first}')"
    close = difflib.get_close_matches(key, list(KEYS) + SECTIONS, n=1, cutoff=0.5)
    if not close:
        leaf = key.rsplit(".", 1)[-1]
        leaves = {p.rsplit(".", 1)[-1]: p for p in KEYS}
        near = difflib.get_close_matches(leaf, list(leaves), n=1, cutoff=0.6)
        close = [leaves[near[0]]] if near else []
    return f" (did you mean '{close[0]}'?)" if close else ""


def _suggest_value(value, spec):
    """`` (did you mean 'x'?)`` for a misspelt choice: by spelling, '-' read as '_', any case."""
    if not isinstance(value, str):
        return ""
    canonical = {choice.replace("-", "_").lower(): choice for choice in spec.choices}
    wanted = value.strip().replace("-", "_").replace(" ", "_").lower()
    close = ([canonical[wanted]] if wanted in canonical else
             [canonical[c] for c in difflib.get_close_matches(wanted, list(canonical), n=1,
                                                              cutoff=0.6)])
    return f" (did you mean '{close[0]}'?)" if close else ""


def _flatten(document, prefix="", depth=0):
    if depth > MAX_NESTING:
        raise SceneError(f"{prefix.rstrip('.') or 'scene'} is nested more than {MAX_NESTING} deep")
    flat = {}
    for key, value in document.items():
        if not isinstance(key, str):
            raise SceneError(f"{prefix}{_describe(key)} is not a valid key; keys are text")
        path = prefix + key
        if isinstance(value, dict) and path not in KEYS:
            if path not in SECTIONS:
                raise SceneError(f"unknown section {_describe(path)}{_suggest(path)}")
            entries = _flatten(value, path + ".", depth + 1)
        else:
            entries = {path: value}
        for entry, entry_value in entries.items():
            # `black_hole: {spin: 0.5}` and `black_hole.spin: -0.5` name one key twice.
            if entry in flat:
                raise SceneError(f"{entry} is given twice (once nested under its section and "
                                 f"once as the dotted key {entry!r}); give it once")
            flat[entry] = entry_value
    return flat


def nest_values(values):
    """A nested scene document from dotted keys: {'a.b': 1} -> {'a': {'b': 1}}."""
    document = {}
    for path, value in values.items():
        node = document
        parts = path.split(".")
        for part in parts[:-1]:
            node = node.setdefault(part, {})
        node[parts[-1]] = value
    return document


def _check_consistency(values):
    """Checks that involve more than one key."""
    spin = values["black_hole.spin"]
    r_plus, _ = horizon_radii(spin)
    r_isco = isco_radius(spin)
    r_in = values["disk.inner_radius"]
    if r_in != "isco":
        if r_in <= r_plus:
            _fail("disk.inner_radius", r_in, f"a radius outside the horizon r_+ = {r_plus:.6g} M")
        if r_in < r_isco * (1.0 - 1e-12):
            _fail("disk.inner_radius", r_in,
                  f"'isco' or a radius >= the ISCO ({r_isco:.6g} M for spin {spin:g}); "
                  "emission from plunging gas inside the ISCO is not modelled")
    inner = r_isco if r_in == "isco" else r_in
    if not values["disk.outer_radius"] > inner:
        _fail("disk.outer_radius", values["disk.outer_radius"],
              f"a radius larger than the inner edge ({inner:.6g} M)")
    if values["observer.placement"] == "camera":
        try:
            check_observer_position(spin, values["observer.distance"],
                                    values["observer.inclination"], values["observer.frame"])
        except ValueError as exc:
            raise SceneError(f"observer.distance = {values['observer.distance']!r} is not "
                             f"allowed; {exc}") from None
    if values["tracing.method"] == "closed_form" and values["observer.placement"] != "distant":
        _fail("tracing.method", "closed_form",
              "integrate or auto with observer.placement: camera (the closed form needs a distant "
              "observer)")

    check_observing(values)

    check_sensor(values)
    check_sampling(values)
    _check_animation(values, inner)
    # Refuse, before any work, a still that cannot fit the memory budget even in tiles.

    plan = check_memory(values)

    check_untiled(values, plan)


def frame_count(values):
    """Frames of the sequence: animation.frames, else round(duration x fps); None if neither."""
    if values["animation.frames"] is not None:
        return values["animation.frames"]
    if values["animation.duration"] is not None:
        return max(1, round(values["animation.duration"] * values["animation.fps"]))
    return None


def keyframe_position(entry, frames, fps):
    """The frame position (possibly fractional) of a keyframe entry in a film of ``frames``.

    ``frame: n`` is frame n; ``time: t`` is screen time t seconds, frame t x fps;
    ``at: s`` is the fraction s of the film, frame s x (frames - 1), so it lands at the
    same moment whatever the frame count.

    Examples
    --------
    >>> keyframe_position({"at": 0.5}, 13, 24.0), keyframe_position({"time": 0.25}, 13, 24.0)
    (6.0, 6.0)
    """
    if "frame" in entry:
        return entry["frame"]
    if "time" in entry:
        return entry["time"] * fps
    return entry["at"] * (max(frames, 1) - 1)


def _check_keyframe_order(keyframes, frames, fps):
    """Keyframes placed in increasing order across placements, none after the film's end."""
    previous = None
    for index, entry in enumerate(keyframes):
        position = keyframe_position(entry, frames, fps)
        placement = next(name for name in KEYFRAME_PLACEMENTS if name in entry)
        where = f"animation.keyframes[{index}].{placement} = {entry[placement]}"
        if position > frames - 1 + 1e-9:
            raise SceneError(f"{where} is frame {position:g}, but the sequence has {frames} "
                             f"frames (0..{frames - 1}); place it with 'at' (a fraction of the "
                             "film) to keep it whatever the frame count")
        if previous is not None and position <= previous + 1e-9:
            raise SceneError(f"{where} (frame {position:g}) is out of order; keyframes must "
                             f"increase (previous entry: frame {previous:g})")
        previous = position


def _check_animation(values, inner):
    """Cross-key checks of the animation and pattern sections (docs/animation.md)."""
    if values["animation.frames"] is not None and values["animation.duration"] is not None:
        raise SceneError("animation.frames and animation.duration are both given; give one "
                         "(duration x fps sets the frame count)")
    frames = frame_count(values)
    keyframes = values["animation.keyframes"]
    if keyframes and frames is not None:
        _check_keyframe_order(keyframes, frames, values["animation.fps"])
    if values["animation.camera_path"] != "still" and values["observer.placement"] != "camera":
        raise SceneError(f"animation.camera_path = {values['animation.camera_path']!r} needs "
                         "observer.placement = 'camera' (a distant observer cannot move)")
    if values["pattern.shape"] != "none":
        if values["observing.mode"] != "bolometric":
            raise SceneError(f"pattern.shape = {values['pattern.shape']!r} needs observing.mode = "
                             f"'bolometric' (got {values['observing.mode']!r})")
        radius = values["pattern.radius"]
        if values["pattern.shape"] == "spot" and not inner <= radius <= values["disk.outer_radius"]:
            _fail("pattern.radius", radius, f"a radius on the disk, {inner:.6g} M to "
                  f"{values['disk.outer_radius']:.6g} M")


def scene_from_dict(document, source="<dict>", default_name="scene", *, user_paths=(),
                    allow_outside_files=False):
    """Validate a nested mapping (as read from YAML) and return a :class:`Scene`.

    ``user_paths`` and ``allow_outside_files`` say where its side files may be
    (:meth:`Scene.side_file`).
    """
    if document is None:
        raise SceneError(f"{source} is empty; a scene is a mapping of sections "
                         f"({', '.join(SECTIONS)})")
    if not isinstance(document, dict):
        raise SceneError(f"{source} must be a mapping of sections ({', '.join(SECTIONS)}), "
                         f"got {type(document).__name__}")
    flat = _flatten(document)
    values = {}
    for path, value in flat.items():
        if path not in KEYS:
            raise SceneError(f"unknown key {_describe(path)} (given {_describe(value)}){_suggest(path)}")
        values[path] = _coerce(KEYS[path], value)
    if "name" not in values:
        # The scene file's name names the outputs: it must pass the same check as `name`.
        try:
            values["name"] = _coerce(KEYS["name"], default_name)
        except SceneError:
            raise SceneError(f"the scene file's name {_describe(default_name)} cannot name the "
                             f"output files ({KEYS['name'].allowed}); set name in the scene or "
                             "--set name=...") from None
    for path, spec in KEYS.items():
        values.setdefault(path, spec.default)
    _check_consistency(values)
    return Scene(values=values, source=source, document=nest_values(values),
                 user_paths=frozenset(user_paths), allow_outside_files=bool(allow_outside_files))


class _StrictLoader(yaml.SafeLoader):
    """Safe loader that also refuses anchors/aliases (no alias bombs)."""

    def compose_node(self, parent, index):
        if self.check_event(yaml.AliasEvent):
            event = self.peek_event()
            raise SceneError(f"YAML aliases are not allowed in scene files "
                             f"(line {event.start_mark.line + 1})")
        event = self.peek_event()
        anchor = getattr(event, "anchor", None)
        if anchor is not None:
            raise SceneError(f"YAML anchors are not allowed in scene files "
                             f"(line {event.start_mark.line + 1})")
        return super().compose_node(parent, index)

    def construct_mapping(self, node, deep=False):
        # PyYAML silently keeps the last of repeated keys; a scene must not.
        seen = set()
        for key_node, _ in node.value:
            key = self.construct_object(key_node, deep=deep)
            try:
                repeated = key in seen
            except TypeError:  # unhashable key: the base class reports it
                continue
            if repeated:
                raise SceneError(f"key '{key}' appears twice in one section "
                                 f"(line {key_node.start_mark.line + 1})")
            seen.add(key)
        return super().construct_mapping(node, deep)


# PyYAML follows YAML 1.1, where 1e-9 and 6.2e6 are strings, 020 is octal 16, 1:30 is
# sexagesimal 90 and yes/on are true.  Scene files are read with the YAML 1.2 core schema
# instead (YAML 1.2.2 spec, sec. 10.3.2): plain scalars resolve as below and nothing else
# is a number, a boolean, null or a date, so 1:30 stays text (and is refused where a number is
# expected) and 020 is twenty.
_CORE_SCHEMA = (
    ("tag:yaml.org,2002:null", r"^(?:~|null|Null|NULL|)$", ["~", "n", "N", ""]),
    ("tag:yaml.org,2002:bool", r"^(?:true|True|TRUE|false|False|FALSE)$", list("tTfF")),
    ("tag:yaml.org,2002:int", r"^(?:[-+]?[0-9]+|0o[0-7]+|0x[0-9a-fA-F]+)$",
     list("-+0123456789")),
    ("tag:yaml.org,2002:float",
     r"^(?:[-+]?(?:\.[0-9]+|[0-9]+(?:\.[0-9]*)?)(?:[eE][-+]?[0-9]+)?"
     r"|[-+]?\.(?:inf|Inf|INF)|\.(?:nan|NaN|NAN))$", list("-+0123456789.")),
)
_StrictLoader.yaml_implicit_resolvers = {
    first: [(tag, rx) for tag, rx in resolvers
            if tag not in {tag for tag, _, _ in _CORE_SCHEMA} | {"tag:yaml.org,2002:timestamp"}]
    for first, resolvers in yaml.SafeLoader.yaml_implicit_resolvers.items()}
for _tag, _pattern, _first in _CORE_SCHEMA:
    _StrictLoader.add_implicit_resolver(_tag, re.compile(_pattern), _first)


def _construct_core_int(loader, node):
    """A YAML 1.2 core-schema integer: decimal, 0o octal or 0x hexadecimal."""
    text = loader.construct_scalar(node)
    if text.startswith("0o"):
        return int(text[2:], 8)
    if text.startswith("0x"):
        return int(text[2:], 16)
    return int(text)


_StrictLoader.add_constructor("tag:yaml.org,2002:int", _construct_core_int)


def parse_yaml_text(text, source):
    """Parse YAML text with the strict safe loader; errors become one-line SceneErrors."""
    try:
        return yaml.load(text, Loader=_StrictLoader)
    except SceneError:
        raise
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        raise SceneError(f"{source} is not valid scene YAML{where}: {problem}") from None
    except RecursionError:
        raise SceneError(f"{source} is nested too deeply") from None
    except ValueError as exc:  # e.g. an integer with more digits than Python converts
        raise SceneError(f"{source} is not valid scene YAML: {str(exc).splitlines()[0]}") from None


def read_scene_document(path):
    """Read a scene file's mapping, refusing special, oversized, non-UTF-8 or unsafe input.

    Only a regular file of at most ``MAX_SCENE_BYTES`` is read
    (:func:`render.guards.reading.read_bounded`: a FIFO, a device or a folder is
    refused without being opened for a blocking read).
    """
    path = Path(path)
    try:
        raw = read_bounded(path, MAX_SCENE_BYTES)
    except InputFileError as exc:
        raise SceneError(f"scene file {path} {exc}") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise SceneError(f"{path} is not UTF-8 text (byte {exc.start})") from None
    return parse_yaml_text(text, str(path))


def apply_overrides(document, overrides):
    """Apply ``dotted.key=value`` strings (values parsed as YAML) to a nested mapping."""
    document = {} if document is None else document
    if not isinstance(document, dict):
        return document
    for item in overrides or ():
        if "=" not in item:
            raise SceneError(f"--set {item!r} is not allowed; expected dotted.key=value")
        key, text = item.split("=", 1)
        key = key.strip()
        if key not in KEYS:
            raise SceneError(f"--set: unknown key {_describe(key)} (given {_describe(text.strip())})"
                             f"{_suggest(key)}")
        value = parse_yaml_text(text, f"--set {key}") if text.strip() else ""
        document.pop(key, None)   # a dotted spelling in the file: the override replaces it
        node = document
        parts = key.split(".")
        for part in parts[:-1]:
            child = node.get(part)
            if not isinstance(child, dict):
                child = node[part] = {}
            node = child
        node[parts[-1]] = value
    return document


def load_scene(path, overrides=(), *, allow_outside_files=False):
    """Load and validate a scene file.

    Parameters
    ----------
    path : str or Path
        YAML scene file.
    overrides : sequence of str
        ``dotted.key=value`` items applied before validation (as ``--set``);
        a side file named here is the user's own, read from the current folder.
    allow_outside_files : bool
        Let the scene file's own side files lie outside its folder
        (``--allow-outside-files``; see :meth:`Scene.side_file`).

    Returns
    -------
    Scene

    Raises
    ------
    SceneError
        With one line naming the key, the value and what is allowed.
    """
    document = read_scene_document(path)
    if document is not None and not isinstance(document, dict):
        raise SceneError(f"{path} must be a mapping of sections ({', '.join(SECTIONS)}), "
                         f"got {type(document).__name__}")
    if document is None and not overrides:
        raise SceneError(f"{path} is empty; a scene is a mapping of sections "
                         f"({', '.join(SECTIONS)})")
    document = apply_overrides(document, overrides)
    named = {item.split("=", 1)[0].strip() for item in overrides or () if "=" in item}
    return scene_from_dict(document, source=str(path), default_name=Path(path).stem,
                           user_paths=named, allow_outside_files=allow_outside_files)


def default_scene(overrides=(), **values):
    """A scene with every default, optionally changed by dotted keys.

    Examples
    --------
    >>> default_scene(**{"black_hole.spin": 0.5}).spin
    0.5
    """
    document = nest_values(values)
    document = apply_overrides(document, overrides)
    return scene_from_dict(document, source="<defaults>", default_name="scene")


PREVIEW = {"image.width": 160, "disk.orders": 1, "tracing.tolerance": 1e-6,
           "image.supersampling": 1}


def preview_scene(scene):
    """The quick-look version of a scene: 160 pixels wide, one order, loose tolerance.

    The height keeps the aspect ratio; the name gets ``-preview`` so the full
    render's files are never touched; no NPZ (the picture only).

    Examples
    --------
    >>> from render import default_scene
    >>> quick = preview_scene(default_scene(**{"image.width": 1024, "image.height": 512}))
    >>> quick["image.width"], quick["image.height"], quick["disk.orders"], quick["name"]
    (160, 80, 1, 'scene-preview')
    """

    values = dict(scene.values)
    width = min(PREVIEW["image.width"], values["image.width"])
    values["image.height"] = max(1, round(values["image.height"] * width / values["image.width"]))
    looser = max(values["tracing.tolerance"], PREVIEW["tracing.tolerance"])
    orders = min(values["disk.orders"], PREVIEW["disk.orders"])
    values.update(PREVIEW)
    values["image.width"] = width
    values["disk.orders"] = orders
    values["tracing.tolerance"] = looser   # a looser tolerance of the scene's own is kept
    values["output.png"] = True
    values["image.preview"] = False
    values["output.npz"] = False
    values["output.fits"] = False
    values["name"] = f"{values['name']}-preview"[:100]
    return scene_from_dict(nest_values(values), source=scene.source,
                           default_name=values["name"], user_paths=scene.user_paths,
                           allow_outside_files=scene.allow_outside_files)



PREVIEW_FRAMES = 12


def preview_film(scene, frames=PREVIEW_FRAMES):
    """The quick-look version of a film: preview stills, at most ``frames`` frames.

    Each frame is a :func:`preview_scene` still; the film keeps its moments:
    every keyframe is re-placed by ``at`` (its fraction of the full film), the
    observer's clock per frame grows so that the frames span the same time, and
    the frame rate drops so that the film lasts as long (at least 1 per second).
    The name gets ``-preview``, so the full film's folder is never touched.

    Examples
    --------
    >>> from render import default_scene
    >>> film = default_scene(**{"animation.frames": 121, "animation.keyframes": [
    ...     {"frame": 60, "observer.inclination": 30.0}]})
    >>> quick = preview_film(film, frames=11)
    >>> quick["animation.frames"], quick["animation.keyframes"][0]["at"], quick["name"]
    (11, 0.5, 'scene-preview')
    >>> quick["animation.time_step"], round(quick["animation.fps"], 4)   # 24 x 11 / 121
    (120.0, 2.1818)
    """
    full = frame_count(scene.values)
    small = preview_scene(scene)
    if full is None:   # no film: the sequence refuses it with its own message
        return small
    count = max(1, min(frames, full))
    fps = scene["animation.fps"]
    values = dict(small.values)
    values["animation.keyframes"] = [
        {**{k: v for k, v in entry.items() if k not in KEYFRAME_PLACEMENTS},
         "at": keyframe_position(entry, full, fps) / (full - 1) if full > 1 else 0.0}
        for entry in scene["animation.keyframes"]]
    values["animation.frames"] = count
    values["animation.duration"] = None
    if count > 1:
        values["animation.time_step"] = scene["animation.time_step"] * (full - 1) / (count - 1)
    values["animation.fps"] = min(KEYS["animation.fps"].high,
                                  max(KEYS["animation.fps"].low, fps * count / full))
    return scene_from_dict(nest_values(values), source=scene.source, default_name=values["name"],
                           user_paths=scene.user_paths,
                           allow_outside_files=scene.allow_outside_files)
