"""The arrays of one rendered still."""

import io
from dataclasses import dataclass, field

import numpy as np

__all__ = ["StillResult"]


@dataclass(repr=False)
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

    def __repr__(self):
        """A one-line summary (size, spin, inclination, method, mode, fates), never the arrays."""
        height, width = self.fate.shape[:2]
        meta = self.metadata
        scene = meta.get("scene", {})
        parts = [f"{width}x{height}"]
        if scene:
            parts.append(f"name {scene['name']!r}")
            parts.append(f"spin {scene['black_hole']['spin']:g}")
            parts.append(f"inclination {scene['observer']['inclination']:g} deg")
            parts.append(f"mode {scene['observing']['mode']}")
        if "tracing_method" in meta:
            parts.append(f"method {meta['tracing_method']}")
        if "fate_counts" in meta:
            counts = ", ".join(f"{k} {v}" for k, v in meta["fate_counts"].items())
            parts.append(f"fates: {counts}")
        if self.storage is not None:
            parts.append("tiled (arrays in temporary files)")
        return f"<StillResult {'; '.join(parts)}>"

    def _repr_png_(self):
        """The picture as PNG bytes (what a notebook shows for a result)."""
        from PIL import Image

        buffer = io.BytesIO()
        Image.fromarray(np.asarray(self.pixels)).save(buffer, format="PNG")
        return buffer.getvalue()

    def to_xarray(self):
        """The maps as an ``xarray.Dataset`` with named dimensions and coordinates in M.

        Image maps have dimensions (y, x), per-order maps (order, y, x); the
        coordinates ``x`` and ``y`` are the image-plane alpha and beta of the
        pixel centres along the middle row and column (exact for an unrolled
        image; ``alpha`` and ``beta`` are kept as 2-D maps too), ``order`` counts
        the crossings.  The attributes are the metadata's numbers and text, the
        scene as YAML under ``scene``.  Needs the ``xarray`` extra
        (``pip install 'nullray[xarray]'``).

        Returns
        -------
        xarray.Dataset
        """
        try:
            import xarray
        except ImportError:
            raise ImportError("StillResult.to_xarray needs xarray: pip install "
                              "'nullray[xarray]'") from None
        import json

        import yaml

        height, width = self.fate.shape[:2]
        orders = self.r.shape[0]
        data = {}
        for name, array in self.maps().items():
            array = np.asarray(array)
            if array.shape[:2] == (height, width) and array.ndim == 2:
                data[name] = (("y", "x"), array)
            elif array.shape[:3] == (orders, height, width) and array.ndim == 3:
                data[name] = (("order", "y", "x"), array)
            elif array.shape[:2] == (height, width) and array.ndim == 3:
                data[name] = (("y", "x", "channel"), array)
        alpha, beta = np.asarray(self.alpha), np.asarray(self.beta)
        coords = {"x": ("x", alpha[height // 2, :], {"units": "M", "long_name": "alpha"}),
                  "y": ("y", beta[:, width // 2], {"units": "M", "long_name": "beta"}),
                  "order": ("order", np.arange(orders))}
        attrs = {key: value for key, value in self.metadata.items()
                 if isinstance(value, (str, int, float, bool)) and value is not None}
        if "scene" in self.metadata:
            attrs["scene"] = yaml.safe_dump(self.metadata["scene"], sort_keys=False)
        if "fate_counts" in self.metadata:
            attrs["fate_counts"] = json.dumps(self.metadata["fate_counts"])
        return xarray.Dataset(data, coords=coords, attrs=attrs)

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
