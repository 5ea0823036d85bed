"""The arrays of one rendered still."""

from dataclasses import dataclass, field

import numpy as np

__all__ = ["StillResult"]


@dataclass
class StillResult:
    """Arrays of one rendered still (row 0 is the top of the image).

    Attributes
    ----------
    intensity : ndarray (H, W)
        Observed bolometric intensity (arbitrary units of the emission law), 0 off the disk.
    pixels : ndarray (H, W) of uint8
        The tone-mapped, sRGB-encoded image (exposure rule in :mod:`render.light.color`).
    fate : ndarray (H, W) of int8
        0 escaped, 1 captured, 2 disk (opaque surface), 3 unresolved.
    alpha, beta : ndarray (H, W)
        Image-plane coordinates of each pixel centre in M.
    r, phi, g, delay : ndarray (orders, H, W)
        Per order n: crossing radius (M), azimuth (rad), redshift factor and
        regularised time delay (M); NaN where the ray has no n-th crossing
        (g also NaN inside the ISCO).
    on_disk : ndarray (orders, H, W) of bool
        Whether the n-th crossing lies between the disk's edges (and, for an
        opaque disk, is the one that ended the ray).
    steps : ndarray (H, W)
        Integrator steps taken per pixel.
    metadata : dict
        The scene echoed in full, conventions, counts and timings.
    """

    intensity: np.ndarray
    pixels: np.ndarray
    fate: np.ndarray
    alpha: np.ndarray
    beta: np.ndarray
    r: np.ndarray
    phi: np.ndarray
    g: np.ndarray
    delay: np.ndarray
    on_disk: np.ndarray
    steps: np.ndarray
    metadata: dict = field(default_factory=dict)
    products: dict = field(default_factory=dict)
    tables: dict = field(default_factory=dict)
    # Temporary files behind the arrays of a still rendered in tiles (render.imaging.tiling).
    storage: object = field(default=None, repr=False, compare=False)

    def release(self):
        """Delete the temporary files of a tiled still (its arrays become unusable)."""
        if self.storage is not None:
            self.storage.release()
            self.storage = None

    def maps(self):
        """The per-pixel arrays by name (what the NPZ holds)."""
        return {name: getattr(self, name) for name in (
            "intensity", "pixels", "fate", "alpha", "beta", "r", "phi", "g", "delay",
            "on_disk", "steps")} | dict(self.products)
