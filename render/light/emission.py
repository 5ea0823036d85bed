"""Emission laws of the disk and the rule that carries them to the observer.

An emission law gives the bolometric intensity I_em(r) that the gas emits in
its own rest frame.  Since I_nu / nu^3 is invariant along a ray (Liouville;
Misner, Thorne & Wheeler 1973, sec. 22.6), the observed bolometric intensity is
g^4 I_em (:func:`observed_bolometric`).

To add a law: write a class with a ``name``, the parameters it needs and a
method ``intensity(r)`` returning I_em at radius r (arrays in, arrays out),
register it in ``EMISSION_LAWS`` and describe its scene keys in
:mod:`render.scene.loader`.
"""

from dataclasses import dataclass

import numpy as np
from ..guards.reading import InputFileError, read_bounded
from .thermal import cgs, diluted_blackbody, page_thorne_flux

__all__ = ["PowerLaw", "BrokenPowerLaw", "NovikovThorne", "RadialProfile", "EmissionTableError", "EMISSION_LAWS",
           "observed_bolometric", "observed_specific_intensity", "make_emission_law",
           "emission_cosine", "limb_darkening", "LIMB_DARKENING_LAWS", "read_profile_table"]


@dataclass(frozen=True)
class PowerLaw:
    """Rest-frame bolometric intensity I_em(r) = (r / 1 M)^(-index), in arbitrary units.

    Examples
    --------
    >>> PowerLaw(index=3.0).intensity(2.0)
    0.125
    """

    index: float = 3.0
    name: str = "power_law"

    def intensity(self, r):
        r = np.asarray(r, dtype=float)
        value = r ** -self.index
        return float(value) if value.ndim == 0 else value

    def reference_intensity(self, r_in, r_out):
        """The intensity the exposure rule calls white: I_em at the inner edge."""
        return self.intensity(r_in)


@dataclass(frozen=True)
class BrokenPowerLaw:
    """I_em = r^-inner_index inside break_radius, continued as r^-outer_index outside it.

    I_em(r) = r^-q_in for r < r_b and r_b^(q_out - q_in) r^-q_out for r >= r_b
    (continuous at r_b), in arbitrary units: the emissivity of a disk lit by a
    compact source above the hole, steep inside and flatter outside.

    References
    ----------
    Fabian et al. (1989), MNRAS 238, 729 (power-law line emissivity); the broken
    form is common practice for lamp-post-like illumination.

    Examples
    --------
    >>> law = BrokenPowerLaw(inner_index=6.0, outer_index=3.0, break_radius=2.0)
    >>> law.intensity(1.0), law.intensity(4.0)
    (1.0, 0.001953125)
    """

    inner_index: float = 3.0
    outer_index: float = 3.0
    break_radius: float = 6.0
    name: str = "broken_power_law"

    def intensity(self, r):
        r = np.asarray(r, dtype=float)
        with np.errstate(invalid="ignore", divide="ignore"):
            value = np.where(r < self.break_radius, r ** -self.inner_index,
                             self.break_radius ** (self.outer_index - self.inner_index)
                             * r ** -self.outer_index)
        return float(value) if value.ndim == 0 else value

    def reference_intensity(self, r_in, r_out):
        """The intensity the exposure rule calls white: I_em at the inner edge."""
        return self.intensity(r_in)


@dataclass(frozen=True)
class NovikovThorne:
    """Thermal Novikov–Thorne disk: Page–Thorne flux, (colour-corrected) blackbody spectrum.

    Each face emits the Page–Thorne flux F(r) (:func:`render.light.thermal.page_thorne_flux`)
    as a blackbody of effective temperature T = (F/sigma)^(1/4), optionally
    colour-corrected: I_nu = B_nu(f_col T) / f_col^4 (Shimura & Takahara 1995).
    The rest-frame bolometric intensity is F / pi (isotropic; see
    :func:`limb_darkening` for the angular law), in erg s^-1 cm^-2 sr^-1.

    Parameters
    ----------
    spin : float
    mass_msun : float
        Black-hole mass in solar masses.
    accretion_rate_g_s : float
        Rest-mass accretion rate in g/s.
    colour_correction : float
        f_col >= 1 (1: pure blackbody).

    References
    ----------
    Novikov & Thorne (1973); Page & Thorne (1974), ApJ 191, 499;
    Shimura & Takahara (1995), ApJ 445, 780.
    """

    spin: float
    mass_msun: float
    accretion_rate_g_s: float
    colour_correction: float = 1.0
    name: str = "novikov_thorne"
    has_spectrum = True

    def flux(self, r):

        return page_thorne_flux(r, self.spin, self.mass_msun, self.accretion_rate_g_s)

    def temperature(self, r):
        """Effective temperature T(r) in K (0 at and inside the ISCO)."""

        return (np.asarray(self.flux(r)) / cgs()["sigma_sb"]) ** 0.25

    def colour_temperature(self, r):
        """Colour temperature f_col T(r) in K of the emitted spectrum."""
        return self.colour_correction * self.temperature(r)

    def intensity(self, r):
        return np.asarray(self.flux(r)) / np.pi

    def specific_intensity(self, nu, r):
        """Rest-frame I_nu(nu, r) in erg s^-1 cm^-2 Hz^-1 sr^-1 (broadcasting)."""

        return diluted_blackbody(nu, self.temperature(r), self.colour_correction)

    def reference_intensity(self, r_in, r_out):
        """Peak rest-frame intensity over the disk (F vanishes at the ISCO)."""
        radii = np.geomspace(r_in, r_out, 2000)
        return float(np.max(self.intensity(radii))) or 1.0


class EmissionTableError(ValueError):
    """A radial profile table that cannot be used; the message is one line."""


# Largest emission profile read: a table of a radial function needs far less, and a
# hostile file (or /dev/zero) must not fill memory.
MAX_PROFILE_BYTES = 8 * 1024 * 1024
MAX_PROFILE_ROWS = 100_000


def read_profile_table(path):
    """Read a CSV radial profile: columns r (M) and emissivity (>= 0), r increasing.

    Lines starting with '#' are comments; one header line of non-numbers is
    allowed.  Only a regular file of at most ``MAX_PROFILE_BYTES`` with at most
    ``MAX_PROFILE_ROWS`` rows is read (:func:`render.guards.reading.read_bounded`).
    Messages name the file, the line number and what was expected, never the
    file's contents (the path may name a file that is not a table at all).

    Returns
    -------
    r, emissivity : ndarray

    Raises
    ------
    EmissionTableError
        Not a regular file, too large, too many rows, fewer than two rows,
        non-numbers, non-increasing or non-positive r, negative or non-finite
        emissivity.
    """
    import csv
    import io

    try:
        raw = read_bounded(path, MAX_PROFILE_BYTES)
        text = raw.decode("utf-8")
    except InputFileError as exc:
        raise EmissionTableError(f"emission profile {path} {exc}") from None
    except UnicodeDecodeError as exc:
        raise EmissionTableError(f"emission profile {path} is not UTF-8 text (byte {exc.start})"
                                 ) from None
    try:
        values = _profile_rows(csv.reader(io.StringIO(text, newline="")), path)
    except csv.Error as exc:
        raise EmissionTableError(f"emission profile {path} is not CSV text ({exc})") from None
    table = np.array(values, dtype=float).reshape(-1, 2)
    if len(table) < 2:
        raise EmissionTableError(f"emission profile {path} needs at least two rows of "
                                 "'r, emissivity'")
    r, emissivity = table[:, 0], table[:, 1]
    if not np.all(np.isfinite(table)):
        raise EmissionTableError(f"emission profile {path} has a value that is not finite")
    if np.any(r <= 0) or np.any(np.diff(r) <= 0):
        raise EmissionTableError(f"emission profile {path}: r must be positive and strictly "
                                 "increasing")
    if np.any(emissivity < 0):
        raise EmissionTableError(f"emission profile {path}: emissivity must be >= 0")
    return r, emissivity


def _profile_rows(reader, path):
    """[(r, emissivity)] of a CSV reader's data rows, skipping comments and one header."""
    values = []
    for number, row in enumerate((row for row in reader if row and not row[0].lstrip()
                                  .startswith("#") and any(c.strip() for c in row)), start=1):
        if len(values) >= MAX_PROFILE_ROWS:
            raise EmissionTableError(f"emission profile {path} has more than "
                                     f"{MAX_PROFILE_ROWS} rows")
        try:
            if len(row) != 2:
                raise ValueError
            values.append((float(row[0]), float(row[1])))
        except ValueError:
            if number == 1 and len(row) == 2:
                continue  # header line
            raise EmissionTableError(f"emission profile {path}: line {reader.line_num} is not "
                                     "two numbers 'r, emissivity'") from None
    return values


@dataclass(frozen=True)
class RadialProfile:
    """User-supplied rest-frame intensity I_em(r), linearly interpolated; 0 outside the table.

    Examples
    --------
    >>> law = RadialProfile(radii=(2.0, 4.0), values=(1.0, 3.0))
    >>> float(law.intensity(3.0))
    2.0
    """

    radii: tuple
    values: tuple
    name: str = "profile"

    @classmethod
    def from_csv(cls, path):
        r, emissivity = read_profile_table(path)
        return cls(radii=tuple(r), values=tuple(emissivity))

    def intensity(self, r):
        r = np.asarray(r, dtype=float)
        value = np.interp(r, self.radii, self.values, left=0.0, right=0.0)
        value = np.where(np.isnan(r), np.nan, value)
        return float(value) if value.ndim == 0 else value

    def reference_intensity(self, r_in, r_out):
        radii = np.concatenate([np.geomspace(r_in, r_out, 2000), np.asarray(self.radii)])
        inside = radii[(radii >= r_in) & (radii <= r_out)]
        return float(np.max(self.intensity(inside))) or 1.0


EMISSION_LAWS = {"power_law": PowerLaw, "broken_power_law": BrokenPowerLaw,
                 "novikov_thorne": NovikovThorne, "profile": RadialProfile}


def make_emission_law(name, **parameters):
    """Build a registered emission law by its scene name."""
    return EMISSION_LAWS[name](**parameters)


# Chandrasekhar (1960), Radiative Transfer, sec. 68 and table XXIV: a semi-infinite
# electron-scattering atmosphere emerges with I(mu) close to I(0) (1 + 2.06 mu) (from memory;
# the same approximation as used by e.g. Laor 1991, ApJ 376, 90).
_ES_SLOPE = 2.06
LIMB_DARKENING_LAWS = ("none", "electron_scattering")


def limb_darkening(mu, law="none"):
    """Angular factor of the emitted intensity, normalised so the flux is unchanged.

    Parameters
    ----------
    mu : array_like
        Cosine of the emission angle from the disk normal in the emitter's frame.
    law : {"none", "electron_scattering"}
        ``electron_scattering``: (1 + 2.06 mu) / (1 + 2 * 2.06 / 3), whose
        2 int_0^1 factor mu dmu = 1, so F = pi I_em still holds.

    References
    ----------
    Chandrasekhar (1960), Radiative Transfer, sec. 68.

    Examples
    --------
    >>> float(limb_darkening(0.5))
    1.0
    """
    mu = np.asarray(mu, dtype=float)
    if law == "none":
        return np.ones_like(mu)
    if law == "electron_scattering":
        return (1.0 + _ES_SLOPE * np.abs(mu)) / (1.0 + 2.0 * _ES_SLOPE / 3.0)
    raise ValueError(f"limb-darkening law must be one of {', '.join(LIMB_DARKENING_LAWS)}, "
                     f"got {law!r}")


def emission_cosine(r, eta, g, energy_ratio=1.0):
    """Cosine of the emission angle from the disk normal, in the emitter's rest frame.

    At the equator the photon's covariant polar momentum is |p_theta| = sqrt(Theta) =
    sqrt(eta) E (Carter 1968), and the disk normal in the frame of an emitter
    on a circular orbit (no theta motion) is e_theta = d_theta / r.  The energy
    the emitter measures is E_em = E energy_ratio / g, so

        mu_em = (|p_theta| / r) / E_em = g sqrt(eta) / (r |energy_ratio|)

    (|p_theta| = sqrt(eta) |E|, and E energy_ratio, the observer's energy, is positive
    even for E < 0).

    The sign of the radial motion does not enter mu.

    Parameters
    ----------
    r : array_like
        Crossing radius in M.
    eta : array_like
        Carter constant Q / E^2 of the ray.
    g : array_like
        Redshift factor nu_obs / nu_em.
    energy_ratio : array_like
        Observer-measured energy per unit conserved E (1 for a distant observer).

    References
    ----------
    Carter (1968), Phys. Rev. 174, 1559; Cunningham (1975), ApJ 202, 788, sec. II.

    Examples
    --------
    >>> float(emission_cosine(1000.0, 1000.0 ** 2, 1.0))
    1.0
    """
    with np.errstate(invalid="ignore"):
        mu = np.asarray(g) * np.sqrt(np.maximum(np.asarray(eta, dtype=float), 0.0)) / (
            np.asarray(r, dtype=float) * np.abs(np.asarray(energy_ratio)))
    return np.clip(mu, 0.0, 1.0)


def observed_bolometric(g, emitted):
    """Observed bolometric intensity g^4 I_em.

    References
    ----------
    Misner, Thorne & Wheeler (1973), Gravitation, sec. 22.6 (I_nu/nu^3 invariant,
    integrated over frequency gives I/nu^4 invariant).

    Examples
    --------
    >>> float(observed_bolometric(0.5, 16.0))
    1.0
    """
    g2 = np.square(g)   # g^4 as two squares: numpy's general power is ~10x slower
    return np.square(g2) * np.asarray(emitted)


def observed_specific_intensity(nu_obs, g, r, law):
    """Observed I_nu = g^3 I_nu,em(nu_obs / g, r), erg s^-1 cm^-2 Hz^-1 sr^-1.

    ``nu_obs`` broadcasts against ``g`` and ``r``; NaN g or r gives NaN.

    References
    ----------
    Misner, Thorne & Wheeler (1973), sec. 22.6 (I_nu / nu^3 invariant along a ray).
    """
    g = np.asarray(g, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        return g ** 3 * law.specific_intensity(np.asarray(nu_obs) / g, r)
