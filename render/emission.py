"""Emission laws of the disk and the rule that carries them to the observer.

An emission law gives the bolometric intensity I_em(r) that the gas emits in
its own rest frame.  Since I_nu / nu^3 is invariant along a ray (Liouville;
Misner, Thorne & Wheeler 1973, sec. 22.6), the observed bolometric intensity is
g^4 I_em (:func:`observed_bolometric`).

To add a law: write a class with a ``name``, the parameters it needs and a
method ``intensity(r)`` returning I_em at radius r (arrays in, arrays out),
register it in ``EMISSION_LAWS`` and describe its scene keys in
:mod:`render.scene`.
"""

from dataclasses import dataclass

import numpy as np

__all__ = ["PowerLaw", "EMISSION_LAWS", "observed_bolometric", "make_emission_law"]


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


EMISSION_LAWS = {"power_law": PowerLaw}


def make_emission_law(name, **parameters):
    """Build a registered emission law by its scene name."""
    return EMISSION_LAWS[name](**parameters)


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
    return np.asarray(g) ** 4 * np.asarray(emitted)
