"""Reading and validating scene files (YAML) into plain typed objects.

Every key, its unit, default and allowed values live in ``KEYS`` below; the
README's scene reference is written from the same table
(``python -m render keys`` prints it).  Validation errors are raised as
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
from ..camera.observers import FRAMES, Viewpoint, check_observer_position
from ..geodesics.tracing import TraceSettings, resolve_method
from ..spacetime.kerr import horizon_radii, isco_radius

__all__ = [
    "SceneError",
    "Scene",
    "KEYS",
    "load_scene",
    "scene_from_dict",
    "apply_overrides",
    "default_scene",
    "keys_reference",
]

MAX_SCENE_BYTES = 256 * 1024
MAX_NESTING = 8
MAX_PIXELS_SIDE = 65536
CAMERA_PATHS = ("still", "orbit", "plunge", "keyframed")
INTERPOLATIONS = ("linear", "smooth", "cubic")
# Keyframes may drive these sections' plain numeric keys.
KEYFRAME_SECTIONS = ("observer", "black_hole", "disk", "emission", "pattern")
MAX_KEYFRAMES = 10000


@dataclass(frozen=True)
class KeySpec:
    path: str
    kind: str  # "float", "int", "bool", "str", "choice", "radius_or_isco"
    default: object
    unit: str
    allowed: str
    doc: str
    low: float = -math.inf
    high: float = math.inf
    low_open: bool = False
    high_open: bool = False
    choices: tuple = ()


def _k(path, kind, default, unit, allowed, doc, **limits):
    return KeySpec(path, kind, default, unit, allowed, doc, **limits)


KEYS = {spec.path: spec for spec in [
    _k("name", "str", "scene", "-", "letters, digits, '-', '_', '.' (no path separators)",
       "Base name of the output files (default: the scene file's name)."),
    _k("black_hole.spin", "float", 0.9, "a/M", "-1 < spin < 1",
       "Dimensionless spin; negative means the disk counter-rotates with respect to the hole.",
       low=-1.0, high=1.0, low_open=True, high_open=True),
    _k("black_hole.mass", "float", 6.2e6, "M_sun", "0 < mass <= 1e11",
       "Mass in solar masses; sets physical units (uas, s, Jy) at the output stage only.",
       low=0.0, high=1e11, low_open=True),
    _k("black_hole.distance", "float", 1.15e4, "pc", "0 < distance <= 1e10",
       "Distance from the observer to the hole in parsecs (for angular sizes and fluxes).",
       low=0.0, high=1e10, low_open=True),
    _k("observer.kind", "choice", "camera", "-", "camera, distant",
       "camera: a physical observer at finite distance; distant: the exact observer at infinity.",
       choices=("camera", "distant")),
    _k("observer.distance", "float", 1000.0, "M", "outside the horizon (zamo) or the ergoregion "
       "(static), at most 1e9", "Boyer–Lindquist radius of the camera (camera only).",
       low=0.0, high=1e9, low_open=True),
    _k("observer.inclination", "float", 60.0, "deg", "0 <= inclination <= 180",
       "Polar angle of the observer from the spin axis.", low=0.0, high=180.0),
    _k("observer.azimuth", "float", 0.0, "deg", "-360 <= azimuth <= 360",
       "Boyer–Lindquist azimuth of the observer.", low=-360.0, high=360.0),
    _k("observer.frame", "choice", "zamo", "-", ", ".join(FRAMES),
       "Local frame of the camera: zamo (zero angular momentum) or static.", choices=FRAMES),
    _k("observer.field_of_view", "float", 40.0, "M", "0 < field_of_view <= 10000",
       "Full width of the image in M at the hole's distance.", low=0.0, high=1e4, low_open=True),
    _k("observer.roll", "float", 0.0, "deg", "-360 <= roll <= 360",
       "Counter-clockwise rotation of the image about the line of sight.",
       low=-360.0, high=360.0),
    _k("image.width", "int", 512, "pixels", f"1 <= width <= {MAX_PIXELS_SIDE}",
       "Pixels across.", low=1, high=MAX_PIXELS_SIDE),
    _k("image.height", "int", 512, "pixels", f"1 <= height <= {MAX_PIXELS_SIDE}",
       "Pixels down.", low=1, high=MAX_PIXELS_SIDE),
    _k("image.supersampling", "int", 1, "-", "1 <= supersampling <= 8",
       "Anti-aliasing: n x n sub-pixel rays per refined pixel (1: one ray per pixel centre).",
       low=1, high=8),
    _k("image.filter", "choice", "tent", "-", "box, tent",
       "Reconstruction filter the sub-pixel rays sample: the pixel's square, or the tent of "
       "radius one pixel.", choices=("box", "tent")),
    _k("image.adaptive", "bool", True, "-", "true, false",
       "Supersample only pixels whose neighbours differ in fate, crossings or brightness."),
    _k("image.refine_threshold", "float", 0.02, "display", "0 < refine_threshold <= 1",
       "Displayed-brightness difference (0..1) between neighbours that triggers refinement.",
       low=0.0, high=1.0, low_open=True),
    _k("image.preview", "bool", False, "-", "true, false",
       "Quick look: 160 pixels wide, one order, tolerance 1e-6, no NPZ, name + '-preview'."),
    _k("disk.inner_radius", "radius_or_isco", "isco", "M", "'isco' or a radius >= the ISCO",
       "Inner edge of the disk; emission inside the ISCO (plunging gas) is not modelled yet."),
    _k("disk.outer_radius", "float", 20.0, "M", "inner_radius < outer_radius <= 1e6",
       "Outer edge of the disk.", low=0.0, high=1e6, low_open=True),
    _k("disk.surface", "choice", "opaque", "-", "opaque, transparent",
       "opaque: a ray ends at its first disk crossing; transparent: orders 0..orders-1 add up.",
       choices=("opaque", "transparent")),
    _k("disk.orders", "int", 2, "-", "1 <= orders <= 16",
       "Equatorial crossings recorded per ray (order n counts all earlier crossings).",
       low=1, high=16),
    _k("emission.law", "choice", "power_law", "-", "power_law, novikov_thorne, profile",
       "Rest-frame emission law: power_law (r^-index), novikov_thorne (Page–Thorne flux, "
       "blackbody), profile (CSV table of r, emissivity).",
       choices=("power_law", "novikov_thorne", "profile")),
    _k("emission.index", "float", 3.0, "-", "-10 <= index <= 20",
       "Power-law index q of I_em = r^-q.", low=-10.0, high=20.0),
    _k("emission.accretion_rate", "float", 0.1, "see accretion_unit", "0 < accretion_rate <= 1e40",
       "Accretion rate of the novikov_thorne disk, in emission.accretion_unit.",
       low=0.0, high=1e40, low_open=True),
    _k("emission.accretion_unit", "choice", "eddington", "-", "eddington, g_per_s, msun_per_yr",
       "eddington: accretion_rate is L/L_Edd with L = (1 - E_isco) Mdot c^2 and "
       "L_Edd = 4 pi G M c / opacity.", choices=("eddington", "g_per_s", "msun_per_yr")),
    _k("emission.opacity", "float_or_none", None, "cm^2/g", "null (sigma_T/m_p) or > 0",
       "Opacity of the Eddington luminosity; null: electron scattering in hydrogen, 0.398.",
       low=0.0, high=1e6, low_open=True),
    _k("emission.colour_correction", "float", 1.0, "-", "1 <= colour_correction <= 3",
       "f_col: the disk emits B_nu(f_col T)/f_col^4 (about 1.7: Shimura & Takahara 1995).",
       low=1.0, high=3.0),
    _k("emission.limb_darkening", "choice", "none", "-", "none, electron_scattering",
       "Angular law in the emitter's frame: none (isotropic) or electron_scattering "
       "(Chandrasekhar 1960, 1 + 2.06 mu).", choices=("none", "electron_scattering")),
    _k("emission.profile", "path", None, "-", "a CSV file (relative to the scene file)",
       "Table 'r, emissivity' (r in M) of the profile law, linearly interpolated."),
    _k("observing.mode", "choice", "bolometric", "-",
       "bolometric, monochromatic, true_colour, spectrum, line",
       "What the still measures (docs/thermal.md).",
       choices=("bolometric", "monochromatic", "true_colour", "spectrum", "line")),
    _k("observing.frequency", "float_or_none", None, "Hz", "null or > 0",
       "Observed frequency of the monochromatic mode.", low=0.0, high=1e30, low_open=True),
    _k("observing.wavelength", "float_or_none", None, "nm", "null or > 0",
       "Observed wavelength of the monochromatic mode.", low=0.0, high=1e30, low_open=True),
    _k("observing.photon_energy", "float_or_none", None, "keV", "null or > 0",
       "Observed photon energy of the monochromatic mode.", low=0.0, high=1e30, low_open=True),
    _k("observing.angle_unit", "choice", "uas", "-", "uas, mas",
       "Unit of the reported pixel scale.", choices=("uas", "mas")),
    _k("observing.colour_exposure", "choice", "auto", "-", "auto, fixed",
       "true_colour: auto puts white at the 99.5th percentile of Y; fixed uses "
       "observing.colour_reference (frames of an animation match).", choices=("auto", "fixed")),
    _k("observing.colour_reference", "float_or_none", None, "erg s^-1 cm^-2 sr^-1",
       "null or > 0", "CIE Y shown as white at output.exposure 1 (colour_exposure fixed).",
       low=0.0, high=1e300, low_open=True),
    _k("observing.spectrum_low", "float", 1e14, "Hz", "0 < spectrum_low <= 1e30",
       "Lowest frequency of the spectrum mode.", low=0.0, high=1e30, low_open=True),
    _k("observing.spectrum_high", "float", 1e19, "Hz", "spectrum_low < spectrum_high <= 1e30",
       "Highest frequency of the spectrum mode.", low=0.0, high=1e30, low_open=True),
    _k("observing.spectrum_points", "int", 200, "-", "2 <= spectrum_points <= 10000",
       "Log-spaced frequencies of the spectrum mode.", low=2, high=10000),
    _k("observing.line_energy", "float", 6.4, "keV", "0 < line_energy <= 1e6",
       "Rest energy of the line mode.", low=0.0, high=1e6, low_open=True),
    _k("observing.line_bins", "int", 200, "-", "1 <= line_bins <= 100000",
       "Energy bins of the line profile.", low=1, high=100000),
    _k("observing.line_low", "float", 0.2, "E/E0", "0 <= line_low < line_high",
       "Low edge of the line bins in units of the rest energy.", low=0.0, high=100.0),
    _k("observing.line_high", "float", 1.6, "E/E0", "line_low < line_high <= 100",
       "High edge of the line bins in units of the rest energy.", low=0.0, high=100.0,
       low_open=True),
    _k("sky.kind", "choice", "none", "-", "none, stars, image",
       "Background at infinity for a camera: none (black), stars (procedural point sources) or "
       "image (an equirectangular panorama).", choices=("none", "stars", "image")),
    _k("sky.image", "path", None, "-", "a 2:1 image file (relative to the scene file)",
       "Equirectangular panorama of sky.kind image (row 0 along the spin axis)."),
    _k("sky.brightness", "float", 0.05, "x white", "0 <= brightness <= 1e6",
       "Panorama level: a white panorama pixel shows at brightness x the disk's white.",
       low=0.0, high=1e6),
    _k("sky.star_brightness", "float", 2.0, "x white", "0 <= star_brightness <= 1e6",
       "A magnitude-0 star whose whole flux lands in one pixel shows at this x the disk's "
       "white.", low=0.0, high=1e6),
    _k("sky.star_density", "float", 5.0, "1/deg^2", "0 <= star_density <= 50",
       "Mean number of stars (magnitudes 0 to 8) per square degree of sky.",
       low=0.0, high=50.0),
    _k("sky.seed", "int", 1, "-", "0 <= seed <= 4294967295",
       "Seed of the star field (the same seed gives the same stars).", low=0, high=2**32 - 1),
    _k("tracing.method", "choice", "integrate", "-", "integrate, closed-form, auto",
       "integrate: Dormand–Prince integration; closed-form: elliptic-integral solution "
       "(distant observer only; docs/closed_form.md); auto: closed-form where valid.",
       choices=("integrate", "closed-form", "auto")),
    _k("tracing.tolerance", "float", 1e-9, "-", "1e-14 <= tolerance <= 1e-3",
       "Relative tolerance of the adaptive Dormand–Prince 5(4) step control.",
       low=1e-14, high=1e-3),
    _k("tracing.max_steps", "int", 100000, "-", "100 <= max_steps <= 10000000",
       "Step cap per ray; a ray that reaches it gets the fate 'unresolved'.",
       low=100, high=10_000_000),
    _k("tracing.max_crossings", "int", 64, "-", "1 <= max_crossings <= 100000",
       "Cap on equatorial crossings followed per ray (photon-sphere grazers); then 'unresolved'.",
       low=1, high=100_000),
    _k("tracing.memory_budget", "float", 2.0, "GB", "0.01 <= memory_budget <= 1024",
       "Memory one still may use; a larger one renders in row tiles, and one that cannot "
       "fit even so is refused (docs/robustness.md).", low=0.01, high=1024.0),
    _k("output.png", "bool", True, "-", "true, false", "Write the tone-mapped 8-bit PNG."),
    _k("output.npz", "bool", True, "-", "true, false", "Write the per-pixel data maps (NPZ)."),
    _k("output.fits", "bool", False, "-", "true, false",
       "Also write the physical maps as FITS (needs a novikov_thorne law or a monochromatic "
       "or line mode; docs/thermal.md)."),
    _k("output.exposure", "float", 4.0, "-", "0 < exposure <= 1e12",
       "Brightness multiplier of the fixed exposure rule (see README).",
       low=0.0, high=1e12, low_open=True),
    _k("animation.frames", "int_or_none", None, "-", "null or 1 <= frames <= 100000",
       "Frames of a sequence (`nullray sequence`); null: animation.duration x animation.fps.",
       low=1, high=100_000),
    _k("animation.duration", "float_or_none", None, "s", "null or 0 < duration <= 3600",
       "Length of the film in seconds of screen time (used when animation.frames is null).",
       low=0.0, high=3600.0, low_open=True),
    _k("animation.fps", "float", 24.0, "1/s", "1 <= fps <= 240",
       "Frames per second of screen time (video and flash check).", low=1.0, high=240.0),
    _k("animation.time_step", "float", 10.0, "M", "0 < time_step <= 1e9",
       "Observer's own clock per frame: proper time of a camera, retarded time at infinity "
       "for a distant observer (docs/animation.md).", low=0.0, high=1e9, low_open=True),
    _k("animation.camera_path", "choice", "still", "-", ", ".join(CAMERA_PATHS),
       "still: at rest in observer.frame (repositioned per frame); orbit: circular orbit at "
       "observer.distance; plunge: free fall from rest at infinity; keyframed: moves along the "
       "keyframed distance, inclination and azimuth.", choices=CAMERA_PATHS),
    _k("animation.angular_velocity", "float_or_none", None, "rad/M", "null (Keplerian) or "
       "-1 <= angular_velocity <= 1", "Orbit: dphi/dt of the camera; null: Keplerian "
       "1/(r^1.5 + a) (a geodesic in the equatorial plane).", low=-1.0, high=1.0),
    _k("animation.interpolation", "choice", "smooth", "-", ", ".join(INTERPOLATIONS),
       "Default interpolation between keyframes.", choices=INTERPOLATIONS),
    _k("animation.keyframes", "keyframes", (), "-", "a list of {frame: n, dotted.key: number, "
       "interpolation: ...}", "Values of numeric observer, black_hole, disk, emission or "
       "pattern keys at given frames, in increasing frame order."),
    _k("pattern.kind", "choice", "none", "-", "none, spot, spiral",
       "Brightness pattern moving with the gas: a Gaussian spot on a Keplerian orbit, or "
       "spiral arms turning at the local Keplerian angular velocity.",
       choices=("none", "spot", "spiral")),
    _k("pattern.radius", "float", 8.0, "M", "on the disk: inner_radius <= radius <= outer_radius",
       "Orbital radius of the spot.", low=0.0, high=1e6, low_open=True),
    _k("pattern.phase", "float", 0.0, "deg", "-360 <= phase <= 360",
       "Azimuth of the spot (or of the arms) at emission time t = 0.", low=-360.0, high=360.0),
    _k("pattern.size", "float", 1.0, "M", "0 < size <= 1000",
       "Gaussian radius (standard deviation) of the spot.", low=0.0, high=1e3, low_open=True),
    _k("pattern.contrast", "float", 4.0, "-", "0 <= contrast <= 1e6",
       "Peak extra emission: I_em -> I_em (1 + contrast x pattern).", low=0.0, high=1e6),
    _k("pattern.arms", "int", 2, "-", "1 <= arms <= 16", "Number of spiral arms.",
       low=1, high=16),
    _k("pattern.pitch", "float", 20.0, "deg", "1 <= pitch <= 89",
       "Pitch angle of the logarithmic spiral arms.", low=1.0, high=89.0),
    _k("measure.directions", "int", 512, "-", "16 <= directions <= 65536",
       "Rays from the shadow's centre along which `nullray measure` bisects its edge.",
       low=16, high=65536),
    _k("measure.area_tolerance", "float", 1e-3, "relative", "0 <= area_tolerance <= 1",
       "Allowed relative error of the shadow area, abs(measured - analytic) / analytic.", low=0.0, high=1.0),
    _k("measure.radius_tolerance", "float", 1e-3, "relative", "0 <= radius_tolerance <= 1",
       "Allowed relative error of the area-equivalent radius sqrt(A/pi).", low=0.0, high=1.0),
    _k("measure.centroid_tolerance", "float", 0.01, "M", "0 <= centroid_tolerance <= 100",
       "Allowed error of the shadow's centroid (alpha and beta).", low=0.0, high=100.0),
    _k("measure.extent_tolerance", "float", 0.01, "M", "0 <= extent_tolerance <= 100",
       "Allowed error of alpha_min, alpha_max and beta_max.", low=0.0, high=100.0),
    _k("measure.asymmetry_tolerance", "float", 0.01, "M", "0 <= asymmetry_tolerance <= 100",
       "Allowed error of the asymmetry 2 rms(R - R_bar) (Johannsen & Psaltis 2010).",
       low=0.0, high=100.0),
]}

SECTIONS = sorted({p.split(".")[0] for p in KEYS if "." in p})


@dataclass(frozen=True)
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

    def __getitem__(self, key):
        return self.values[key]

    @property
    def spin(self):
        return self.values["black_hole.spin"]

    @property
    def inner_radius(self):
        value = self.values["disk.inner_radius"]
        return isco_radius(self.spin) if value == "isco" else float(value)

    def side_file(self, key):
        """The file a path-valued key names, resolved; None when the key is unset.

        A relative path is taken from the scene file's folder, so a scene and its
        side files (an emission profile, a sky panorama) move together; a scene
        not read from a file takes it from the current folder.

        Parameters
        ----------
        key : str
            A dotted key of kind path, e.g. ``"emission.profile"`` or ``"sky.image"``.

        Returns
        -------
        pathlib.Path or None

        Examples
        --------
        >>> scene = scene_from_dict({"sky": {"image": "pano.png"}}, source="scenes/night.yaml")
        >>> scene.side_file("sky.image").as_posix(), scene.side_file("emission.profile")
        ('scenes/pano.png', None)
        """
        name = self.values[key]
        if name is None:
            return None
        path = Path(name)
        if not path.is_absolute() and self.source not in ("<defaults>", "<dict>"):
            path = Path(self.source).parent / path
        return path

    def viewpoint(self):
        """The observer set-up of this scene (:class:`render.camera.observers.Viewpoint`)."""
        v = self.values
        return Viewpoint(kind=v["observer.kind"], spin=self.spin, distance=v["observer.distance"],
                         inclination_deg=v["observer.inclination"],
                         azimuth_deg=v["observer.azimuth"], frame=v["observer.frame"],
                         field_of_view=v["observer.field_of_view"], roll_deg=v["observer.roll"],
                         width=v["image.width"], height=v["image.height"])

    def trace_settings(self):
        """How this scene's rays are traced (:class:`render.geodesics.tracing.TraceSettings`).

        ``tracing.method: auto`` resolves here, once, for stills, frames and
        measurements alike: the closed form for a distant observer.
        """
        v = self.values
        return TraceSettings(
            spin=self.spin, method=resolve_method(v["tracing.method"], v["observer.kind"]),
            inclination_deg=v["observer.inclination"], orders=v["disk.orders"],
            tolerance=v["tracing.tolerance"], max_steps=v["tracing.max_steps"],
            max_crossings=v["tracing.max_crossings"],
            stop_on_disk=v["disk.surface"] == "opaque", r_in=self.inner_radius,
            r_out=v["disk.outer_radius"], want_escape=v["sky.kind"] != "none")


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
            _fail(key, value, f"one of: {', '.join(spec.choices)}")
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
    """A list of {frame: n, dotted.key: number, interpolation: ...}, frames increasing."""
    if value is None:
        return ()
    if not isinstance(value, (list, tuple)):
        _fail(key, value, "a list of {frame: n, dotted.key: number} entries")
    if len(value) > MAX_KEYFRAMES:
        raise SceneError(f"{key} has {len(value)} entries; at most {MAX_KEYFRAMES} are allowed")
    entries = []
    previous = None
    for index, entry in enumerate(value):
        where = f"{key}[{index}]"
        if not isinstance(entry, dict) or "frame" not in entry:
            _fail(where, entry, "a mapping with 'frame' and dotted numeric keys")
        frame = entry["frame"]
        if isinstance(frame, bool) or not isinstance(frame, int) or frame < 0:
            _fail(f"{where}.frame", frame, "a whole number >= 0")
        if previous is not None and frame <= previous:
            raise SceneError(f"{where}.frame = {frame} is out of order; keyframes must have "
                             f"increasing frames (previous entry: frame {previous})")
        previous = frame
        clean = {"frame": frame}
        for name, number in entry.items():
            if name == "frame":
                continue
            if name == "interpolation":
                if number not in INTERPOLATIONS:
                    _fail(f"{where}.interpolation", number, f"one of: {', '.join(INTERPOLATIONS)}")
                clean[name] = number
                continue
            spec = KEYS.get(name) if isinstance(name, str) else None
            if (spec is None or spec.kind != "float"
                    or name.split(".")[0] not in KEYFRAME_SECTIONS):
                hint = "" if spec is not None else _suggest(str(name))
                raise SceneError(f"{where}: {_describe(name)} cannot be keyframed; allowed: "
                                 f"numeric keys of {', '.join(KEYFRAME_SECTIONS)} "
                                 f"(e.g. observer.inclination){hint}")
            if isinstance(number, bool) or not isinstance(number, (int, float)) or not (
                    _is_finite(number)):
                _fail(f"{where}.{name}", number, "a finite number")
            clean[name] = float(number)
        if len(clean) == 1 + ("interpolation" in clean):
            raise SceneError(f"{where} (frame {frame}) sets no key")
        entries.append(clean)
    return tuple(entries)


def _is_finite(value):
    # A YAML integer can be far beyond float range (math.isfinite would raise).
    try:
        return math.isfinite(value)
    except OverflowError:
        return False


def _suggest(key):
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
            flat.update(_flatten(value, path + ".", depth + 1))
        else:
            flat[path] = value
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
    if values["observer.kind"] == "camera":
        try:
            check_observer_position(spin, values["observer.distance"],
                                    values["observer.inclination"], values["observer.frame"])
        except ValueError as exc:
            raise SceneError(f"observer.distance = {values['observer.distance']!r} is not "
                             f"allowed; {exc}") from None
    if values["tracing.method"] == "closed-form" and values["observer.kind"] != "distant":
        _fail("tracing.method", "closed-form",
              "integrate or auto with observer.kind: camera (the closed form needs a distant "
              "observer)")
    from ..light.observing import check_observing

    check_observing(values)
    from ..imaging.sensor import check_sensor

    check_sensor(values)
    _check_animation(values, inner)
    # Refuse, before any work, a still that cannot fit the memory budget even in tiles.
    from ..imaging.tiling import check_memory

    plan = check_memory(values)
    from ..imaging.sensor import check_untiled

    check_untiled(values, plan)


def frame_count(values):
    """Frames of the sequence: animation.frames, else round(duration x fps); None if neither."""
    if values["animation.frames"] is not None:
        return values["animation.frames"]
    if values["animation.duration"] is not None:
        return max(1, round(values["animation.duration"] * values["animation.fps"]))
    return None


def _check_animation(values, inner):
    """Cross-key checks of the animation and pattern sections (docs/animation.md)."""
    if values["animation.frames"] is not None and values["animation.duration"] is not None:
        raise SceneError("animation.frames and animation.duration are both given; give one "
                         "(duration x fps sets the frame count)")
    frames = frame_count(values)
    keyframes = values["animation.keyframes"]
    if keyframes and frames is not None and keyframes[-1]["frame"] >= frames:
        raise SceneError(f"animation.keyframes sets frame {keyframes[-1]['frame']}, but the "
                         f"sequence has {frames} frames (0..{frames - 1})")
    if values["animation.camera_path"] != "still" and values["observer.kind"] != "camera":
        raise SceneError(f"animation.camera_path = {values['animation.camera_path']!r} needs "
                         "observer.kind = 'camera' (a distant observer cannot move)")
    if values["pattern.kind"] != "none":
        if values["observing.mode"] != "bolometric":
            raise SceneError(f"pattern.kind = {values['pattern.kind']!r} needs observing.mode = "
                             f"'bolometric' (got {values['observing.mode']!r})")
        radius = values["pattern.radius"]
        if values["pattern.kind"] == "spot" and not inner <= radius <= values["disk.outer_radius"]:
            _fail("pattern.radius", radius, f"a radius on the disk, {inner:.6g} M to "
                  f"{values['disk.outer_radius']:.6g} M")


def scene_from_dict(document, source="<dict>", default_name="scene"):
    """Validate a nested mapping (as read from YAML) and return a :class:`Scene`."""
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
    for path, spec in KEYS.items():
        values.setdefault(path, spec.default if path != "name" else default_name)
    _check_consistency(values)
    return Scene(values=values, source=source, document=nest_values(values))


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


# PyYAML follows YAML 1.1, where 1e-9 and 6.2e6 are strings (the exponent needs
# a sign and the mantissa a dot); scene files also accept the YAML 1.2 forms
# (YAML 1.2 spec, sec. 10.2.1.4, core-schema float).
_StrictLoader.add_implicit_resolver(
    "tag:yaml.org,2002:float",
    re.compile(r"^[-+]?(?:[0-9][0-9_]*(?:\.[0-9_]*)?|\.[0-9_]+)[eE][-+]?[0-9]+$"),
    list("-+0123456789."))

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
    """Read a scene file's mapping, refusing oversized, non-UTF-8 or unsafe input."""
    path = Path(path)
    try:
        size = os.path.getsize(path)
        if size > MAX_SCENE_BYTES:
            raise SceneError(f"{path} is {size} bytes; scene files are limited to "
                             f"{MAX_SCENE_BYTES} bytes")
        raw = path.read_bytes()
    except OSError as exc:
        raise SceneError(f"cannot read scene file {path}: {exc.strerror or exc}") from None
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
        node = document
        parts = key.split(".")
        for part in parts[:-1]:
            child = node.get(part)
            if not isinstance(child, dict):
                child = node[part] = {}
            node = child
        node[parts[-1]] = value
    return document


def load_scene(path, overrides=()):
    """Load and validate a scene file.

    Parameters
    ----------
    path : str or Path
        YAML scene file.
    overrides : sequence of str
        ``dotted.key=value`` items applied before validation (as ``--set``).

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
    return scene_from_dict(document, source=str(path), default_name=Path(path).stem)


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


def keys_reference():
    """The scene-key reference as a Markdown table (used for the README)."""
    lines = ["| key | unit | default | allowed | meaning |", "|---|---|---|---|---|"]
    for spec in KEYS.values():
        default = "scene file's name" if spec.path == "name" else spec.default
        if isinstance(default, bool):
            default = str(default).lower()
        elif default is None:
            default = "null"  # as it is written in YAML
        elif default == ():
            default = "[]"
        elif isinstance(default, float) and len(repr(default)) > 10:
            default = f"{default:.6g}"
        lines.append(f"| `{spec.path}` | {spec.unit} | `{default}` | {spec.allowed} | {spec.doc} |")
    return "\n".join(lines)


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
    from ..scene.loader import nest_values, scene_from_dict

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
                           default_name=values["name"])
