"""The scene-key table: every key's kind, default, unit, allowed values and meaning.

The README's scene reference is written from this table (``python -m render keys``
prints it).  The vocabularies of choice keys are imported from the rooms that own
them (observing modes, emission laws, frames, filters, tracing methods...), so a
name added there is accepted here without a second list to keep in step.
"""

import math
from dataclasses import dataclass

from ..camera.observers import AIMS, FRAMES, PLACEMENTS
from ..geodesics.tracing import METHODS
from ..imaging.adaptive import SAMPLINGS
from ..imaging.sensor import FILTERS
from ..imaging.sky import BACKDROPS
from ..light.disk import SURFACES
from ..light.emission import EMISSION_LAWS, LIMB_DARKENING_LAWS
from ..light.display import COLOUR_MAPS, COLOUR_RULES, SCALINGS
from ..light.observing import COLOUR_EXPOSURES, MODES
from ..light.pattern import PATTERNS
from ..light.polarisation import POLARISATION_MODELS
from ..light.thermal import ACCRETION_UNITS
from ..units import ANGLE_UNITS

__all__ = ["KeySpec", "KEYS", "SECTIONS", "SYNONYMS", "keys_reference", "CAMERA_PATHS", "INTERPOLATIONS",
           "KEYFRAME_SECTIONS", "MAX_KEYFRAMES", "MAX_PIXELS_SIDE"]

MAX_PIXELS_SIDE = 65536
CAMERA_PATHS = ("still", "orbit", "plunge", "keyframed")
INTERPOLATIONS = ("linear", "smooth", "cubic")
# Keyframes may drive these sections' plain numeric keys.
KEYFRAME_SECTIONS = ("observer", "black_hole", "disk", "emission", "pattern")
MAX_KEYFRAMES = 10000
# Where a keyframe sits: a frame number, a screen time in seconds, or a fraction of the film
# (0 the first frame, 1 the last), so that a film with fewer frames keeps its moments.
KEYFRAME_PLACEMENTS = ("frame", "time", "at")


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
    _k("observer.placement", "choice", "camera", "-", "camera, distant",
       "camera: a physical observer at finite distance; distant: the exact observer at infinity.",
       choices=PLACEMENTS),
    _k("observer.distance", "float", 1000.0, "M", "outside the horizon (zamo) or the ergoregion "
       "(static), at most 1e9", "Boyer–Lindquist radius of the camera (camera only).",
       low=0.0, high=1e9, low_open=True),
    _k("observer.inclination", "float", 76.0, "deg", "0 <= inclination <= 180",
       "Polar angle of the observer from the spin axis.", low=0.0, high=180.0),
    _k("observer.azimuth", "float", 0.0, "deg", "-360 <= azimuth <= 360",
       "Boyer–Lindquist azimuth of the observer.", low=-360.0, high=360.0),
    _k("observer.frame", "choice", "zamo", "-", ", ".join(FRAMES),
       "Local frame of the camera: zamo (zero angular momentum) or static.", choices=FRAMES),
    _k("observer.aim", "choice", "hole", "-", ", ".join(AIMS),
       "Where a moving camera (animation.camera_path orbit, plunge, keyframed) points: hole "
       "keeps the hole in the middle of the picture against aberration; frame points along "
       "its boosted frame's radial axis, so the hole drifts towards the direction of motion.",
       choices=AIMS),
    _k("observer.field_of_view", "float", 46.0, "M", "0 < field_of_view <= 10000",
       "Full width of the image in M at the hole's distance.", low=0.0, high=1e4, low_open=True),
    _k("observer.roll", "float", 0.0, "deg", "-360 <= roll <= 360",
       "Counter-clockwise rotation of the image about the line of sight.",
       low=-360.0, high=360.0),
    _k("image.width", "int", 640, "pixels", f"1 <= width <= {MAX_PIXELS_SIDE}",
       "Pixels across.", low=1, high=MAX_PIXELS_SIDE),
    _k("image.height", "int", 360, "pixels", f"1 <= height <= {MAX_PIXELS_SIDE}",
       "Pixels down.", low=1, high=MAX_PIXELS_SIDE),
    _k("image.supersampling", "int", 1, "-", "1 <= supersampling <= 8",
       "Anti-aliasing: n x n sub-pixel rays per refined pixel (1: one ray per pixel centre).",
       low=1, high=8),
    _k("image.filter", "choice", "tent", "-", "box, tent",
       "Reconstruction filter the sub-pixel rays sample: the pixel's square, or the tent of "
       "radius one pixel.", choices=FILTERS),
    _k("image.adaptive", "bool", True, "-", "true, false",
       "Supersample only pixels whose neighbours differ in fate, crossings or brightness."),
    _k("image.refine_threshold", "float", 0.02, "display", "0 < refine_threshold <= 1",
       "Displayed-brightness difference (0..1) between neighbours that triggers refinement.",
       low=0.0, high=1.0, low_open=True),
    _k("image.preview", "bool", False, "-", "true, false",
       "Quick look: 160 pixels wide, one order, tolerance 1e-6, no NPZ, name + '-preview'."),
    _k("disk.inner_radius", "radius_or_isco", "isco", "M", "'isco' or a radius >= the ISCO",
       "Inner edge of the disk; emission inside the ISCO (plunging gas) is not modelled yet."),
    _k("disk.outer_radius", "float", 18.0, "M", "inner_radius < outer_radius <= 1e6",
       "Outer edge of the disk.", low=0.0, high=1e6, low_open=True),
    _k("disk.surface", "choice", "opaque", "-", "opaque, transparent",
       "opaque: a ray ends at its first disk crossing; transparent: orders 0..orders-1 add up.",
       choices=SURFACES),
    _k("disk.orders", "int", 2, "-", "1 <= orders <= 16",
       "Equatorial crossings recorded per ray (order n counts all earlier crossings).",
       low=1, high=16),
    _k("emission.law", "choice", "power_law", "-",
       "power_law, broken_power_law, novikov_thorne, profile",
       "Rest-frame emission law: power_law (r^-index), broken_power_law (r^-inner_index "
       "inside break_radius, r^-outer_index outside), novikov_thorne (Page–Thorne flux, "
       "blackbody), profile (CSV table of r, emissivity).",
       choices=tuple(EMISSION_LAWS)),
    _k("emission.index", "float", 3.0, "-", "-10 <= index <= 20",
       "Power-law index q of I_em = r^-q.", low=-10.0, high=20.0),
    _k("emission.inner_index", "float", 3.0, "-", "-10 <= inner_index <= 20",
       "broken_power_law: index of I_em = r^-inner_index inside emission.break_radius.",
       low=-10.0, high=20.0),
    _k("emission.outer_index", "float", 3.0, "-", "-10 <= outer_index <= 20",
       "broken_power_law: index outside emission.break_radius (I_em continuous there).",
       low=-10.0, high=20.0),
    _k("emission.break_radius", "float", 6.0, "M", "0 < break_radius <= 1e6",
       "broken_power_law: radius where the index changes.", low=0.0, high=1e6, low_open=True),
    _k("emission.accretion_rate", "float", 0.1, "see accretion_unit", "0 < accretion_rate <= 1e40",
       "Accretion rate of the novikov_thorne disk, in emission.accretion_unit.",
       low=0.0, high=1e40, low_open=True),
    _k("emission.accretion_unit", "choice", "eddington", "-", "eddington, g_per_s, msun_per_yr",
       "eddington: accretion_rate is L/L_Edd with L = (1 - E_isco) Mdot c^2 and "
       "L_Edd = 4 pi G M c / opacity.", choices=ACCRETION_UNITS),
    _k("emission.opacity", "float_or_none", None, "cm^2/g", "null (sigma_T/m_p) or > 0",
       "Opacity of the Eddington luminosity; null: electron scattering in hydrogen, 0.398.",
       low=0.0, high=1e6, low_open=True),
    _k("emission.colour_correction", "float", 1.0, "-", "1 <= colour_correction <= 3",
       "f_col: the disk emits B_nu(f_col T)/f_col^4 (about 1.7: Shimura & Takahara 1995).",
       low=1.0, high=3.0),
    _k("emission.limb_darkening", "choice", "none", "-", "none, electron_scattering",
       "Angular law in the emitter's frame: none (isotropic) or electron_scattering "
       "(Chandrasekhar 1960, 1 + 2.06 mu).", choices=LIMB_DARKENING_LAWS),
    _k("emission.profile", "path", None, "-", "a CSV file (relative to the scene file)",
       "Table 'r, emissivity' (r in M) of the profile law, linearly interpolated."),
    _k("observing.mode", "choice", "bolometric", "-",
       "bolometric, monochromatic, true_colour, spectrum, line",
       "What the still measures (docs/thermal.md).",
       choices=MODES),
    _k("observing.frequency", "float_or_none", None, "Hz", "null or > 0",
       "Observed frequency of the monochromatic mode.", low=0.0, high=1e30, low_open=True),
    _k("observing.wavelength", "float_or_none", None, "nm", "null or > 0",
       "Observed wavelength of the monochromatic mode.", low=0.0, high=1e30, low_open=True),
    _k("observing.photon_energy", "float_or_none", None, "keV", "null or > 0",
       "Observed photon energy of the monochromatic mode.", low=0.0, high=1e30, low_open=True),
    _k("observing.angle_unit", "choice", "uas", "-", "uas, mas",
       "Unit of the reported pixel scale.", choices=ANGLE_UNITS),
    _k("observing.colour_exposure", "choice", "auto", "-", "auto, fixed",
       "true_colour: auto puts white at the 99.5th percentile of Y; fixed uses "
       "observing.colour_reference (frames of an animation match).", choices=COLOUR_EXPOSURES),
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
    _k("observing.sampling_tolerance", "float", 0.002, "relative", "1e-5 <= sampling_tolerance <= 0.1",
       "spectrum and line (distant observer): the image-plane sampling is doubled until the "
       "product changes by less than this (relative L1); docs/spectra.md.",
       low=1e-5, high=0.1),
    _k("sky.backdrop", "choice", "none", "-", "none, stars, image",
       "Background at infinity for a camera: none (black), stars (procedural point sources) or "
       "image (an equirectangular panorama).", choices=BACKDROPS),
    _k("sky.image", "path", None, "-", "a 2:1 image file (relative to the scene file)",
       "Equirectangular panorama of sky.backdrop image (row 0 along the spin axis)."),
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
    _k("tracing.method", "choice", "auto", "-", "auto, integrate, closed_form",
       "auto: the closed form where valid (a distant observer), else integrate; integrate: "
       "Dormand–Prince integration; closed_form: the elliptic-integral solution (distant "
       "observer only; docs/closed_form.md).",
       choices=METHODS),
    _k("tracing.tolerance", "float", 1e-9, "-", "1e-14 <= tolerance <= 1e-3",
       "Relative tolerance of the adaptive Dormand–Prince 8(5,3) step control.",
       low=1e-14, high=1e-3),
    _k("tracing.max_steps", "int", 100000, "-", "100 <= max_steps <= 10000000",
       "Step cap per ray; a ray that reaches it gets the fate 'unresolved'.",
       low=100, high=10_000_000),
    _k("tracing.max_crossings", "int", 64, "-", "1 <= max_crossings <= 100000",
       "Cap on equatorial crossings followed per ray (photon-sphere grazers); then 'unresolved'.",
       low=1, high=100_000),
    _k("tracing.sampling", "choice", "every_pixel", "-", "every_pixel, adaptive",
       "every_pixel: trace every pixel; adaptive: trace a coarse grid, refine at edges and "
       "photon rings, interpolate the smooth rest within tracing.sampling_tolerance "
       "(README, Adaptive sampling; no sky or supersampling).", choices=SAMPLINGS),
    _k("tracing.sampling_tolerance", "float", 1e-6, "-", "1e-12 <= sampling_tolerance <= 1e-2",
       "Error bound of adaptively interpolated pixels: relative in r and g, absolute in "
       "phi (rad) and in the delay below 1 M (relative above).", low=1e-12, high=1e-2),
    _k("tracing.memory_budget", "float", 2.0, "GB", "0.01 <= memory_budget <= 1024",
       "Memory one still may use; a larger one renders in row tiles, and one that cannot "
       "fit even so is refused (docs/robustness.md).", low=0.01, high=1024.0),
    _k("output.png", "bool", True, "-", "true, false", "Write the tone-mapped 8-bit PNG."),
    _k("output.npz", "bool", True, "-", "true, false", "Write the per-pixel data maps (NPZ)."),
    _k("output.npz_compression", "choice", "fast", "-", "fast, small, none",
       "Deflate the NPZ quickly (level 1), as small as zlib can (level 9), or not at all.",
       choices=("fast", "small", "none")),   # the levels: render.output.files.NPZ_COMPRESSION
    _k("output.fits", "bool", False, "-", "true, false",
       "Also write the physical maps as FITS (needs a novikov_thorne law or a monochromatic "
       "or line mode; docs/thermal.md)."),
    _k("output.exposure", "float", 4.0, "-", "0 < exposure <= 1e12",
       "Brightness multiplier of the fixed exposure rule (see README).",
       low=0.0, high=1e12, low_open=True),
    _k("display.colour_rule", "choice", "soft_shoulder", "-", ", ".join(COLOUR_RULES),
       "true_colour picture: soft_shoulder rolls highlights off toward white (nothing clips); "
       "scale_down scales a too-bright pixel down to its brightest colour (README, Exposure).",
       choices=COLOUR_RULES),
    _k("display.scaling", "choice", "reinhard", "-", ", ".join(SCALINGS),
       "Scalar pictures: x/(1+x) (reinhard), min(x, 1), log over display.decades, or asinh "
       "(x = exposure * I / I_white).", choices=SCALINGS),
    _k("display.decades", "float", 4.0, "dex", "0.5 <= decades <= 12",
       "Range of the log and asinh scalings (asinh is linear below 10^-decades).",
       low=0.5, high=12.0),
    _k("display.colour_map", "choice", "grey", "-", ", ".join(COLOUR_MAPS),
       "Colour map of scalar pictures (perceptually uniform; grey keeps one channel).",
       choices=COLOUR_MAPS),
    _k("display.glare", "bool", False, "-", "true, false",
       "Add the glare of a viewer's eye (CIE 135/1 disability-glare PSF) to the picture only; "
       "the data maps are unchanged."),
    _k("display.viewing_angle", "float", 40.0, "deg", "1 <= viewing_angle <= 120",
       "Angle the picture's width subtends at the viewer's eye (sets the glare's size).",
       low=1.0, high=120.0),
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
    _k("animation.keyframes", "keyframes", (), "-", "a list of {frame: n, time: s or at: fraction; "
       "dotted.key: number, interpolation: ...}", "Values of numeric observer, "
       "black_hole, disk, emission or pattern keys at given frames, screen times (s) or "
       "fractions of the film (0 first frame, 1 last), in increasing order."),
    _k("pattern.shape", "choice", "none", "-", "none, spot, spiral",
       "Brightness pattern moving with the gas: a Gaussian spot on a Keplerian orbit, or "
       "spiral arms turning at the local Keplerian angular velocity.",
       choices=PATTERNS),
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
    _k("polarisation.model", "choice", "none", "-", ", ".join(POLARISATION_MODELS),
       "Linear polarisation of the disk light: none, electron_scattering (Chandrasekhar 1960: "
       "degree from the emission angle, E-vector along the disk) or constant "
       "(docs/polarisation.md).", choices=POLARISATION_MODELS),
    _k("polarisation.degree", "float", 0.1, "-", "0 <= degree <= 1",
       "Emitted degree of linear polarisation of the constant model.", low=0.0, high=1.0),
    _k("polarisation.angle", "float", 0.0, "deg", "-180 <= angle <= 180",
       "Constant model: emitted E-vector angle in the gas's frame, from the direction "
       "parallel to the disk, counter-clockwise as the receiver sees it.",
       low=-180.0, high=180.0),
    _k("polarisation.ticks", "bool", False, "-", "true, false",
       "Draw polarisation ticks (length ~ degree, along the E-vector) over the PNG."),
    _k("visibilities.compute", "bool", False, "-", "true, false",
       "Also write the still's complex visibilities, radial profile and ring diameter "
       "(pixel scale from mass and distance; Jy in the monochromatic mode; "
       "docs/polarisation.md)."),
    _k("visibilities.padding", "int", 4, "-", "1 <= padding <= 16",
       "Zero padding of the FFT: the transform grid is padding x the image size.",
       low=1, high=16),
    _k("visibilities.baselines", "path", None, "-", "null or a CSV file (relative to the "
       "scene file)", "Baselines to sample: columns u_glambda, v_glambda or u_m, v_m "
       "(metres, at the observing frequency)."),
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

# Names people reach for, and names of earlier versions, with the key they mean: an
# unknown key is matched here before by spelling ("did you mean ...?").
SYNONYMS = {
    "observer.kind": "observer.placement", "observer.type": "observer.placement",
    "observer.fov": "observer.field_of_view", "observer.field": "observer.field_of_view",
    "observer.r": "observer.distance", "observer.radius": "observer.distance",
    "observer.theta": "observer.inclination", "observer.phi": "observer.azimuth",
    "black_hole.a": "black_hole.spin", "black_hole.m": "black_hole.mass",
    "disk.r_in": "disk.inner_radius", "disk.r_out": "disk.outer_radius",
    "disk.rin": "disk.inner_radius", "disk.rout": "disk.outer_radius",
    "image.resolution": "image.width", "image.size": "image.width",
    "image.antialias": "image.supersampling", "image.samples": "image.supersampling",
    "sky.kind": "sky.backdrop", "sky.type": "sky.backdrop", "sky.background": "sky.backdrop",
    "pattern.kind": "pattern.shape", "pattern.type": "pattern.shape",
    "emission.emissivity": "emission.index", "emission.q": "emission.index",
    "tracing.rtol": "tracing.tolerance", "tracing.accuracy": "tracing.tolerance",
    "animation.fps_out": "animation.fps", "animation.length": "animation.duration",
}


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
