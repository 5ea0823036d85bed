"""Observing modes: what a still measures from the disk crossings of its rays.

Modes (scene key ``observing.mode``):

bolometric
    I = sum over orders of g^4 I_em(r) L(mu): the emission law's units (cgs
    erg s^-1 cm^-2 sr^-1 for ``novikov_thorne``, arbitrary otherwise).
monochromatic
    I_nu = sum of g^3 I_nu,em(nu / g, r) L(mu) at the observed frequency (given
    as frequency, wavelength or photon energy), erg s^-1 cm^-2 Hz^-1 sr^-1; with
    the mass and distance, the flux density per pixel (Jy) and the total.
true_colour
    CIE XYZ of the observed spectrum of each pixel, then sRGB (:mod:`render.light.cie`,
    :mod:`render.light.color`).  A colour-corrected blackbody of colour temperature
    T_c seen with factor g is exactly f^-4 B_nu(g T_c) (I_nu/nu^3 invariant), so
    XYZ = sum L(mu) f^-4 XYZ_bb(g T_c): one precomputed table, no per-pixel loop.
spectrum
    Disk-integrated F_nu (Jy) and nu F_nu (erg s^-1 cm^-2) on a log frequency
    grid, ray-traced (all relativistic effects) and for the same local emission
    in flat space (no light bending, no Doppler or gravitational shift, seen at
    the same inclination).
line
    A narrow line at rest energy E0 with the emission law as emissivity: each
    image-plane element adds photons at E = g E0 with weight g^3 eps(r) L(mu)
    (energy flux weight g^4 eps L).  Normalised counts, photons and energy flux
    per keV.

For a distant observer both are integrals over the image plane sampled on a grid
of their own (:func:`disk_integrated_tables`, :mod:`render.light.disk_integral`),
independent of the picture; a camera at finite distance sums its pixels and says so.

L(mu) is the limb-darkening factor of :func:`render.light.emission.limb_darkening`
at the emission angle in the emitter's frame (:func:`render.light.emission.emission_cosine`).
"""

from dataclasses import dataclass, field, replace

import numpy as np
from numba import njit, prange

from .color import automatic_reference_luminance, desaturate_into_gamut, xyz_to_linear_srgb
from .display import scene_colour_pixels, scene_scalar_pixels
from .emission import (BrokenPowerLaw, EmissionTableError, NovikovThorne, PowerLaw,
                       RadialProfile,
                       emission_cosine, limb_darkening, observed_bolometric)
from ..errors import SceneError
from ..units import angular_gravitational_radius_uas
from .cie import blackbody_xyz_sum
from .emission import observed_specific_intensity
from .polarisation import Polarisation, observed_stokes
from .disk_integral import DiskGeometry, converge
from .spectra import flat_space_spectrum, image_spectrum, line_profile, redshift_spread
from .thermal import accretion_rate_g_per_s, cgs, radiative_efficiency

__all__ = ["MODES", "Observation", "Shaded", "prepare_observation", "shade", "exposure_white",
           "check_observing", "observing_frequency_hz", "pixel_angle_rad", "disk_integrated_tables",
           "samples_own_grid", "solid_angle_per_area_sr", "disk_geometry", "pixel_scale",
           "crossing_weights", "order_sum", "polarised_columns"]

MODES = ("bolometric", "monochromatic", "true_colour", "spectrum", "line")
# Where true colour puts its white: the image's own luminance percentile, or a given value.
COLOUR_EXPOSURES = ("auto", "fixed")
THERMAL_MODES = ("monochromatic", "true_colour", "spectrum")
# Products with one value per order (shape (N, orders)); the others are per pixel.
PER_ORDER_PRODUCTS = ("emission_cosine", "stokes_i_order", "stokes_q_order", "stokes_u_order")


def _scene_error(message):

    return SceneError(message)


def check_observing(values):
    """Cross-key checks of the emission and observing keys (called by scene validation)."""
    mode = values["observing.mode"]
    law = values["emission.law"]
    bands = [k for k in ("observing.frequency", "observing.wavelength", "observing.photon_energy")
             if values[k] is not None]
    if mode == "monochromatic" and len(bands) != 1:
        raise _scene_error("observing.mode = 'monochromatic' needs exactly one of "
                           "observing.frequency (Hz), observing.wavelength (nm) or "
                           f"observing.photon_energy (keV); got {len(bands)}")
    if mode in THERMAL_MODES and law != "novikov_thorne":
        raise _scene_error(f"observing.mode = {mode!r} needs a spectrum: emission.law = "
                           f"'novikov_thorne' (got {law!r})")
    if law == "profile" and values["emission.profile"] is None:
        raise _scene_error("emission.law = 'profile' needs emission.profile, a CSV file of "
                           "'r, emissivity'")
    if (mode == "true_colour" and values["observing.colour_exposure"] == "fixed"
            and values["observing.colour_reference"] is None):
        raise _scene_error("observing.colour_exposure = 'fixed' needs observing.colour_reference "
                           "(the luminance Y shown as white, erg s^-1 cm^-2 sr^-1)")
    if not values["observing.spectrum_high"] > values["observing.spectrum_low"]:
        raise _scene_error(f"observing.spectrum_high = {values['observing.spectrum_high']!r} is "
                           "not allowed; expected a frequency above observing.spectrum_low")
    if values["polarisation.model"] != "none" and values["observer.placement"] == "camera":
        if not 0.0 < values["observer.inclination"] < 180.0:
            raise _scene_error("polarisation.model = "
                               f"{values['polarisation.model']!r} needs a camera off the spin "
                               "axis (0 < observer.inclination < 180); got "
                               f"{values['observer.inclination']!r}")
    if not values["observing.line_high"] > values["observing.line_low"]:
        raise _scene_error(f"observing.line_high = {values['observing.line_high']!r} is not "
                           "allowed; expected a value above observing.line_low")


def observing_frequency_hz(scene):
    """The observed frequency in Hz from frequency, wavelength (nm) or photon energy (keV)."""

    k = cgs()
    if scene["observing.frequency"] is not None:
        return float(scene["observing.frequency"])
    if scene["observing.wavelength"] is not None:
        return k["c"] / (scene["observing.wavelength"] * 1e-7)
    if scene["observing.photon_energy"] is not None:
        return scene["observing.photon_energy"] * k["keV"] / k["h"]
    return None


def pixel_angle_rad(scene):
    """Angular width of one pixel (rad) from field of view, mass and distance."""

    theta_g_uas = angular_gravitational_radius_uas(scene["black_hole.mass"],
                                                   scene["black_hole.distance"])
    return scene["observer.field_of_view"] / scene["image.width"] * theta_g_uas * np.pi / (
        180.0 * 3600.0 * 1e6)


@dataclass
class Observation:
    """What a scene asks to measure, prepared before tracing (law built, tables read).

    ``colour_reference`` is the luminance Y shown as white in ``true_colour`` with
    ``observing.colour_exposure: fixed`` (None otherwise).
    """

    mode: str
    law: object
    limb: str
    frequency_hz: float = None
    colour_reference: float = None
    accretion_rate_g_s: float = None
    efficiency: float = None
    info: dict = field(default_factory=dict)
    polarisation: Polarisation = field(default_factory=Polarisation)


def prepare_observation(scene):
    """Build the emission law and the mode's settings; bad input raises SceneError."""

    name = scene["emission.law"]
    info = {"mode": scene["observing.mode"], "law": name,
            "limb_darkening": scene["emission.limb_darkening"]}
    obs = Observation(mode=scene["observing.mode"], law=None,
                      limb=scene["emission.limb_darkening"])
    if name == "power_law":
        obs.law = PowerLaw(index=scene["emission.index"])
    elif name == "broken_power_law":
        obs.law = BrokenPowerLaw(inner_index=scene["emission.inner_index"],
                                 outer_index=scene["emission.outer_index"],
                                 break_radius=scene["emission.break_radius"])
        info.update({"inner_index": obs.law.inner_index, "outer_index": obs.law.outer_index,
                     "break_radius": obs.law.break_radius})
    elif name == "profile":
        path = scene.side_file("emission.profile")
        try:
            obs.law = RadialProfile.from_csv(path)
        except EmissionTableError as exc:
            raise _scene_error(f"emission.profile = {scene['emission.profile']!r}: {exc}") from None
        info["profile"] = str(path)
    else:
        mass = scene["black_hole.mass"]
        unit = scene["emission.accretion_unit"]
        mdot = accretion_rate_g_per_s(scene["emission.accretion_rate"], unit, mass_msun=mass,
                                      spin=scene.spin, opacity=scene["emission.opacity"])
        obs.accretion_rate_g_s = mdot
        obs.efficiency = radiative_efficiency(scene.spin)
        obs.law = NovikovThorne(spin=scene.spin, mass_msun=mass, accretion_rate_g_s=mdot,
                                colour_correction=scene["emission.colour_correction"])
        info.update({"accretion_rate_g_s": float(mdot), "radiative_efficiency": obs.efficiency,
                     "colour_correction": scene["emission.colour_correction"],
                     "eddington_assumes": "L = radiative_efficiency * Mdot c^2, L_Edd = "
                     "4 pi G M c / kappa, kappa = emission.opacity or sigma_T/m_p"})
    if obs.mode == "monochromatic":
        obs.frequency_hz = observing_frequency_hz(scene)
        info["frequency_hz"] = obs.frequency_hz
    if obs.mode == "true_colour" and scene["observing.colour_exposure"] == "fixed":
        obs.colour_reference = float(scene["observing.colour_reference"])
    obs.polarisation = Polarisation(scene["polarisation.model"], scene["polarisation.degree"],
                                    scene["polarisation.angle"])
    if obs.polarisation.model != "none":
        info["polarisation"] = {
            "model": obs.polarisation.model,
            "angle_convention": "IAU: from north (image up) through east (image left), deg",
            "stokes": "Q = p I cos 2 EVPA, U = p I sin 2 EVPA, V = 0"}
    obs.info = info
    return obs


def exposure_white(observation, r_in, r_out):
    """The intensity the fixed exposure rule shows as white, I_white.

    The rule (README, "Exposure") is display = x / (1 + x) with
    x = exposure * I_obs / I_white, and I_white never comes from the image:

    * ``true_colour``: the luminance reference ``observing.colour_reference`` when
      ``observing.colour_exposure`` is ``fixed``; None when it is ``auto`` (then
      the white is the image's own, set when it is shaded);
    * ``monochromatic``: the peak rest-frame specific intensity over the disk at the
      observed frequency (1 if the disk is dark there);
    * every other mode: the emission law's reference intensity
      (:meth:`reference_intensity`: the inner edge's intensity for ``power_law``,
      the peak over the disk for the other laws).

    Parameters
    ----------
    observation : Observation
        The prepared observation (:func:`prepare_observation`).
    r_in, r_out : float
        The disk's inner and outer edges in M.

    Returns
    -------
    float or None

    References
    ----------
    Reinhard, Stark, Shirley & Ferwerda (2002), ACM Trans. Graph. 21, 267, eq. 3
    (the curve x / (1 + x) the white scales).

    Examples
    --------
    >>> exposure_white(Observation("bolometric", PowerLaw(index=3.0), "none"), 2.0, 20.0)
    0.125
    """
    if observation.mode == "true_colour":
        return observation.colour_reference
    law = observation.law
    if observation.mode == "monochromatic":
        radii = np.geomspace(r_in, r_out, 2000)
        return float(np.max(law.specific_intensity(observation.frequency_hz, radii))) or 1.0
    return float(law.reference_intensity(r_in, r_out))


@dataclass
class Shaded:
    """Per-ray shading results (flat, N rays) of one observing mode."""

    intensity: np.ndarray
    pixels: np.ndarray
    products: dict = field(default_factory=dict)
    tables: dict = field(default_factory=dict)
    info: dict = field(default_factory=dict)


def crossing_weights(obs, r, g, hits, bundle):
    """(mu, weight) of each crossing: its emission cosine where it shines (else NaN) and
    its limb-darkening weight (else 0).  ``r``, ``g`` and ``hits`` are (N, orders) arrays
    of the rays of ``bundle``.
    """
    eta, energy_ratio = bundle.eta[:, None], bundle.energy_ratio[:, None]
    shape = np.shape(r)
    rows, cols = np.nonzero(hits)

    def lit(values):
        values = np.asarray(values)
        return values[rows, cols] if values.ndim == 2 and values.shape[1] == shape[1] \
            else np.broadcast_to(values, shape)[rows, cols]

    mu = np.full(shape, np.nan)
    mu[rows, cols] = emission_cosine(np.asarray(r)[rows, cols], lit(eta), lit(g),
                                     lit(energy_ratio))
    weight = np.zeros(shape)
    weight[rows, cols] = limb_darkening(mu[rows, cols], obs.limb)
    return mu, weight


def on_lit(function, r, hits, fill=0.0):
    """``function(r)`` evaluated at the shining crossings only, ``fill`` elsewhere.

    Most crossing slots of an image are empty (no such order) or off the disk;
    per-radius quantities (a colour temperature) are evaluated where they shine.

    Examples
    --------
    >>> on_lit(np.sqrt, np.array([4.0, 9.0]), np.array([True, False])).tolist()
    [2.0, 0.0]
    """
    out = np.full(np.shape(r), fill)
    out[hits] = function(np.asarray(r)[hits])
    return out


def order_sum(values, hits):
    """Per-ray sum over the shining crossings of an (N, orders) array (NaN counts as 0).

    The orders are added in turn from n = 0, as ``numpy.sum`` adds so few terms, and an
    infinite term counts as the largest float (as ``numpy.nan_to_num``).

    Examples
    --------
    >>> order_sum(np.array([[1.0, np.nan, 4.0]]), np.array([[True, True, False]])).tolist()
    [1.0]
    """
    hits = np.asarray(hits, dtype=np.bool_)
    values = np.ascontiguousarray(np.broadcast_to(values, hits.shape), dtype=float)
    out = np.empty(hits.shape[0])
    _order_sum_kernel(values, np.ascontiguousarray(hits), np.finfo(float).max, out)
    return out


@njit(cache=True, parallel=True)
def _order_sum_kernel(values, hits, largest, out):
    for i in prange(values.shape[0]):
        total = 0.0
        for k in range(values.shape[1]):
            v = values[i, k]
            if not hits[i, k] or v != v:
                continue
            total += min(max(v, -largest), largest)
        out[i] = total


def disk_reaches_border(hits, height, width):
    """Whether any crossing that shines lies in the outermost ring of pixels.

    Examples
    --------
    >>> import numpy as np
    >>> hits = np.zeros((9, 1), dtype=bool); hits[4] = True   # the centre of 3 x 3
    >>> disk_reaches_border(hits, 3, 3)
    False
    """
    grid = np.asarray(hits).reshape(height, width, -1).any(axis=2)
    return bool(grid[0].any() or grid[-1].any() or grid[:, 0].any() or grid[:, -1].any())


def shade(obs, scene, raw, g, hits, bundle, alpha=None, beta=None):
    """Shade the crossings of a traced bundle for the prepared observation.

    Parameters
    ----------
    obs : Observation
    scene : Scene
    raw : dict
        Output of :func:`render.geodesics.tracing.trace_bundle` (``r`` of shape (N, orders)).
    g : ndarray (N, orders)
        Redshift factors.
    hits : ndarray of bool (N, orders)
        Crossings that shine.
    bundle : RayBundle
    alpha, beta : ndarray, optional
        The rays' image-plane points (M): given, polarisation is shaded too.

    Returns
    -------
    Shaded
    """
    r = raw["r"]
    law = obs.law
    r_in, r_out = scene.inner_radius, scene["disk.outer_radius"]
    mu, weight = crossing_weights(obs, r, g, hits, bundle)
    with np.errstate(invalid="ignore"):
        # The law sees every crossing slot (a law modulated per crossing, as a moving
        # pattern's, needs their shape), NaN where none shines: its kernels skip those.
        emitted = np.where(hits, law.intensity(np.where(hits, r, np.nan)), 0.0)
        per_crossing = observed_bolometric(g, emitted) * weight
    bolometric = order_sum(per_crossing, hits)
    info = dict(obs.info)
    info.update(pixel_scale(scene))
    products = {}
    if obs.limb != "none" or obs.mode != "bolometric" or law.name != "power_law":
        products["emission_cosine"] = np.where(hits, mu, np.nan)
    tables = {}
    white = exposure_white(obs, r_in, r_out)
    intensity = bolometric
    if obs.mode == "monochromatic":

        per_crossing = observed_specific_intensity(obs.frequency_hz, g, r, law) * weight
        intensity = order_sum(per_crossing, hits)
        products["specific_intensity"] = intensity
        products["bolometric_intensity"] = bolometric
        info["units"] = "intensity: erg s^-1 cm^-2 Hz^-1 sr^-1"
        _add_flux(scene, intensity, products, info)
    if obs.mode == "true_colour":
        pixels, colour_products, colour_info = _true_colour(obs, scene, r, g, weight, hits)
        products.update(colour_products)
        info.update(colour_info)
    else:
        pixels = scene_scalar_pixels(scene, intensity, white)
    if obs.mode == "line":
        with np.errstate(invalid="ignore"):
            intensity = order_sum(g ** 4 * law.intensity(r) * weight, hits)
        pixels = scene_scalar_pixels(scene, intensity, white)
        products["line_intensity"] = intensity
        info["line_energy_kev"] = scene["observing.line_energy"]
    if obs.mode in ("spectrum", "line") and not samples_own_grid(scene):
        tables, picture_info = _picture_tables(obs, scene, r, g, weight, hits)
        info.setdefault("warnings", []).extend(picture_info.pop("warnings", []))
        info.update(picture_info)
    if obs.polarisation.model != "none" and alpha is not None:
        _add_polarisation(obs, scene, raw, bundle, (alpha, beta), (mu, per_crossing, g, weight),
                          hits, products, tables)
    if obs.mode in ("bolometric", "true_colour", "spectrum") and law.name == "novikov_thorne":
        info["units"] = "intensity: bolometric, erg s^-1 cm^-2 sr^-1"
    return Shaded(intensity=intensity, pixels=pixels, products=products, tables=tables, info=info)


def _add_polarisation(obs, scene, raw, bundle, points, crossings, hits, products, tables):
    """Add the Stokes maps (and a camera's picture spectrum's Q, U) of shaded crossings.

    ``points`` are the rays' (alpha, beta); ``crossings`` their (mu, per-crossing
    intensity, g, limb weight), each (N, orders).  A distant observer's spectrum
    carries its polarisation on the disk grid (:func:`disk_integrated_tables`).
    """
    mu, per_crossing, g, weight = crossings
    view = scene.viewpoint()
    products.update(observed_stokes(view, obs.polarisation, raw, bundle, points[0], points[1],
                                    mu, per_crossing, hits))
    if obs.mode == "spectrum" and "spectrum" in tables:
        # Stokes Q, U are linear in I: the same pass with the pixels' weights as I gives
        # the weights p L cos 2 EVPA, p L sin 2 EVPA of the picture's Q_nu, U_nu.
        area = (scene["observer.field_of_view"] / scene["image.width"]) ** 2
        stokes = observed_stokes(view, obs.polarisation, raw, bundle, points[0], points[1], mu,
                                 weight * area, hits)
        table = tables["spectrum"]
        q, u = image_spectrum(obs.law, table["frequency_hz"], raw["r"], g,
                              np.stack([stokes["stokes_q_order"], stokes["stokes_u_order"]],
                                       axis=-1), hits, solid_angle_per_area_sr(scene)).T
        table.update(polarised_columns(table["flux_relativistic_jy"], q, u))


def polarised_columns(flux_jy, stokes_q_jy, stokes_u_jy):
    """The spectrum's polarisation columns: Q_nu, U_nu (Jy), degree and IAU angle (deg).

    Examples
    --------
    >>> columns = polarised_columns(np.array([2.0]), np.array([0.0]), np.array([-0.2]))
    >>> float(columns["polarised_degree"][0]), float(columns["polarisation_angle_deg"][0])
    (0.1, -45.0)
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        degree = np.where(flux_jy > 0.0, np.hypot(stokes_q_jy, stokes_u_jy) / flux_jy, np.nan)
    return {"stokes_q_jy": stokes_q_jy, "stokes_u_jy": stokes_u_jy, "polarised_degree": degree,
            "polarisation_angle_deg": np.degrees(0.5 * np.arctan2(stokes_u_jy, stokes_q_jy))}


def samples_own_grid(scene):
    """Whether the spectrum and line modes sample the disk on a grid of their own.

    They do for a distant observer (:mod:`render.light.disk_integral`, with the
    closed form); a camera at finite distance sums the pixels of its picture.
    """
    return scene["observer.placement"] == "distant"


def _picture_tables(obs, scene, r, g, weight, hits):
    """The spectrum or line of a camera's picture: a sum over its pixels (it depends on them)."""
    info = {"warnings": [
        f"the {obs.mode} of a camera at finite distance sums the pixels of the picture, so it "
        "depends on image.width and observer.field_of_view; a distant observer "
        "(observer.placement: distant) samples the disk on a grid of its own"],
        "sampling": "picture pixels"}
    if disk_reaches_border(hits, scene["image.height"], scene["image.width"]):
        info["warnings"].append(
            f"the disk reaches the image border: the {obs.mode} counts only what the field "
            "of view contains (widen observer.field_of_view)")
    pixel_area = (scene["observer.field_of_view"] / scene["image.width"]) ** 2
    area = np.full(r.shape, pixel_area)
    if obs.mode == "spectrum":
        return {"spectrum": _spectrum_table(obs, scene, r, g, weight * area, hits)}, info
    spread = redshift_spread(g, hits, scene["image.height"], scene["image.width"])
    bin_g = (scene["observing.line_high"] - scene["observing.line_low"]) / scene[
        "observing.line_bins"]
    lit = hits & np.isfinite(g)
    if lit.any() and np.median((spread[0] + spread[1])[lit]) > bin_g:
        info["warnings"].append(
            "a typical pixel covers more than one line bin in g: the profile is smoothed by "
            "the picture's sampling (more pixels, fewer bins, or a distant observer)")
    table, line_info = _line_table(obs, scene, r, g, weight * area, hits, spread)
    info["warnings"] += line_info.pop("warnings", [])
    info.update(line_info)
    return {"line": table}, info


def solid_angle_per_area_sr(scene):
    """Solid angle (sr) of 1 M^2 of the image plane at the hole's distance: (GM/(c^2 D))^2."""
    theta_g = angular_gravitational_radius_uas(scene["black_hole.mass"],
                                               scene["black_hole.distance"])
    return (theta_g * np.pi / (180.0 * 3600.0 * 1e6)) ** 2


def _line_table(obs, scene, r, g, area_weight, hits, spread):
    """The line profile (counts, photon and energy flux per keV) of weighted samples.

    ``area_weight`` (N, orders) is the image-plane area in M^2 each sample stands
    for times its limb-darkening factor.  The emissivity is read as erg s^-1
    cm^-2 sr^-1 in the emitter's frame, so the physical columns scale with it.
    """
    k = cgs()
    rest = scene["observing.line_energy"]
    table, _, line_info = line_profile(
        g, obs.law.intensity(r) * area_weight, hits, rest, scene["observing.line_bins"],
        scene["observing.line_low"], scene["observing.line_high"], g_spread=spread)
    width = table["energy_high_kev"] - table["energy_low_kev"]
    steradians = solid_angle_per_area_sr(scene)
    energy_flux = table["energy_flux"] * steradians
    photons = table["photons"] * steradians / (rest * k["keV"])
    out = {name: table[name] for name in ("energy_low_kev", "energy_high_kev", "energy_kev",
                                            "counts", "counts_per_kev")}
    out["photon_flux_per_kev"] = photons / width
    out["energy_flux_per_kev"] = energy_flux / width
    info = {"line_energy_kev": rest,
            "photons_outside_bins": line_info["photons_outside_bins"],
            "line_photon_flux": float(photons.sum()),
            "line_energy_flux_erg_s_cm2": float(energy_flux.sum()),
            "line_units": "photon_flux_per_kev: photons s^-1 cm^-2 keV^-1, energy_flux_per_kev: "
                          "erg s^-1 cm^-2 keV^-1, for an emissivity in erg s^-1 cm^-2 sr^-1 "
                          "(the emission law's values taken in these units)"}
    if line_info["photons_outside_bins"] > 0.01:
        info["warnings"] = [f"{100 * line_info['photons_outside_bins']:.1f}% of the line's "
                            "photons fall outside the bins (widen observing.line_low and "
                            "observing.line_high)"]
    return out, info


def _spectrum_table(obs, scene, r, g, area_weight, hits, stokes=None):
    """F_nu (Jy) and nu F_nu (erg s^-1 cm^-2), ray-traced and in flat space.

    ``stokes``, when given, is the pair of weights (N, orders) of Q and U
    (``area_weight`` times p cos 2 EVPA and p sin 2 EVPA): the table gains the
    columns of :func:`polarised_columns`, from the same Planck evaluations.
    """
    k = cgs()
    nu = np.geomspace(scene["observing.spectrum_low"], scene["observing.spectrum_high"],
                      scene["observing.spectrum_points"])
    if stokes is not None:
        area_weight = np.stack([area_weight, stokes[0], stokes[1]], axis=-1)
    relativistic = image_spectrum(obs.law, nu, r, g, area_weight, hits,
                                  solid_angle_per_area_sr(scene))
    polarised = {}
    if stokes is not None:
        relativistic, q, u = relativistic.T
        polarised = polarised_columns(relativistic, q, u)
    flat = flat_space_spectrum(obs.law, nu, scene.inner_radius, scene["disk.outer_radius"],
                               scene["observer.inclination"], scene["black_hole.mass"],
                               scene["black_hole.distance"], obs.limb)
    return {"frequency_hz": nu, "energy_kev": nu * k["h"] / k["keV"],
            "flux_relativistic_jy": relativistic, "flux_flat_jy": flat,
            "nufnu_relativistic_erg_s_cm2": nu * relativistic * k["Jy"],
            "nufnu_flat_erg_s_cm2": nu * flat * k["Jy"]} | polarised


def disk_geometry(scene):
    """The :class:`~render.light.disk_integral.DiskGeometry` of a distant-observer scene."""
    return DiskGeometry(spin=scene.spin, inclination_deg=scene["observer.inclination"],
                        r_in=scene.inner_radius, r_out=scene["disk.outer_radius"],
                        orders=scene["disk.orders"], opaque=scene["disk.surface"] == "opaque",
                        max_crossings=scene["tracing.max_crossings"])


def disk_integrated_tables(obs, scene):
    """The spectrum or line of the whole disk, sampled on its own grid (distant observer).

    Returns ``(tables, info)``: ``{"spectrum": ...}`` or ``{"line": ...}`` and the
    sampling's account (grid, rays, the last L1 change, warnings).  The picture
    (image.width, field of view) plays no part.  With a polarisation model the
    spectrum gains the columns of :func:`polarised_columns`, integrated on the
    same grid, and the grid is refined until Q_nu and U_nu converge too
    (:func:`render.light.disk_integral.relative_change`).
    """
    is_polarised = obs.mode == "spectrum" and obs.polarisation.model != "none"
    geometry = replace(disk_geometry(scene),
                       polarisation=obs.polarisation if is_polarised else None)

    def weights(samples):
        return samples.weight * limb_darkening(samples.mu, obs.limb)

    def stokes(samples):
        if not is_polarised:
            return None
        weight = weights(samples)
        return weight * samples.stokes_q, weight * samples.stokes_u

    if obs.mode == "spectrum":
        def measure(samples):
            table = _spectrum_table(obs, scene, samples.r, samples.g, weights(samples),
                                    samples.hits, stokes(samples))
            if not is_polarised:
                return table["nufnu_relativistic_erg_s_cm2"]
            return table["frequency_hz"] * np.stack([table[name] for name in (
                "flux_relativistic_jy", "stokes_q_jy", "stokes_u_jy")])
    else:
        def measure(samples):
            spread = (samples.below, samples.above)
            return _line_table(obs, scene, samples.r, samples.g, weights(samples), samples.hits,
                               spread)[0]["photon_flux_per_kev"]
    tolerance = scene["observing.sampling_tolerance"]
    _, samples = converge(geometry, measure, tolerance)
    info = {"sampling": "disk grid (log-polar image plane, closed form)",
            "disk_grid": samples.info}
    warnings = []
    if obs.mode == "spectrum":
        tables = {"spectrum": _spectrum_table(obs, scene, samples.r, samples.g, weights(samples),
                                              samples.hits, stokes(samples))}
    else:
        table, line_info = _line_table(obs, scene, samples.r, samples.g, weights(samples),
                                       samples.hits, (samples.below, samples.above))
        warnings += line_info.pop("warnings", [])
        info.update(line_info)
        tables = {"line": table}
    if samples.info["truncated"]:
        warnings.append(f"the disk's image reaches beyond the {obs.mode}'s sampling grid "
                        f"(rho up to {samples.info['rho_max']:.4g} M): some flux is missing")
    if not samples.info["converged"]:
        warnings.append(f"the {obs.mode}'s sampling stopped at {samples.info['cells'][0]} cells "
                        f"a side with a last change of {samples.info['l1_change']:.2g}, above "
                        f"observing.sampling_tolerance = {tolerance:g}")
    info["warnings"] = warnings
    return tables, info


def _add_flux(scene, intensity, products, info):

    omega = pixel_angle_rad(scene) ** 2
    flux = intensity * omega / cgs()["Jy"]
    products["flux_density_jy"] = flux
    info.update({"pixel_solid_angle_sr": omega, "total_flux_jy": float(np.sum(flux))})


def pixel_scale(scene):
    """The picture's pixel scale for the metadata of every mode: in angle and in M."""
    unit = scene["observing.angle_unit"]
    scale = pixel_angle_rad(scene) * 180.0 / np.pi * 3600.0 * (1e6 if unit == "uas" else 1e3)
    return {"pixel_scale": scale, "pixel_scale_unit": unit,
            "pixel_scale_m": scene["observer.field_of_view"] / scene["image.width"]}


def colour_xyz(law, r, g, weight, hits=None):
    """XYZ (N, 3) of the observed colour-corrected blackbody light, summed over orders.

    With ``hits`` (N, orders) only those crossings shine (the temperature of the
    others is not even evaluated); without, every crossing with a finite g.
    """
    if hits is None:
        t_obs = g * law.colour_temperature(r)
    else:
        t_obs = np.asarray(g) * on_lit(law.colour_temperature, r, hits, np.nan)
    dilution = law.colour_correction ** -4
    return blackbody_xyz_sum(t_obs, np.broadcast_to(weight, t_obs.shape) * dilution)


def _true_colour(obs, scene, r, g, weight, hits):
    xyz = colour_xyz(obs.law, r, g, weight, hits)
    reference = exposure_white(obs, scene.inner_radius, scene["disk.outer_radius"])
    if reference is None:   # the automatic exposure: the image's own white
        reference = automatic_reference_luminance(xyz[:, 1])
    rgb = desaturate_into_gamut(xyz_to_linear_srgb(xyz))
    pixels, pixels16 = scene_colour_pixels(scene, rgb, reference)
    products = {
        "xyz": xyz.astype(np.float32),
        "rgb_linear": rgb.astype(np.float32),
        "pixels16": pixels16,
    }
    info = {"colour_reference_y": reference, "colour_exposure": scene["observing.colour_exposure"],
            "white_point": "D65 (x, y) = (0.3127, 0.3290), no chromatic adaptation",
            "gamut": "negative linear sRGB desaturated toward grey of equal Y",
            "colour_rule": scene["display.colour_rule"],
            "units": "xyz and rgb_linear: CIE-weighted radiance, erg s^-1 cm^-2 sr^-1"}
    return pixels, products, info
