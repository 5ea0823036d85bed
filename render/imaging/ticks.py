"""Polarisation ticks drawn over a still's picture (an optional overlay, not a measurement)."""

import numpy as np

__all__ = ["draw_ticks", "TICK_COLOUR"]

TICK_COLOUR = (40, 220, 255)   # cyan: visible on the grey and warm palettes of the stills


def draw_ticks(pixels, stokes_i, stokes_q, stokes_u, cell=None, min_fraction=0.05):
    """A copy of ``pixels`` (H, W) or (H, W, 3) uint8 as RGB with one tick per cell.

    Each cell of ``cell`` x ``cell`` pixels (default: a 24th of the width, at least 6)
    gets a segment through its centre along the mean E-vector, EVPA = atan2(U, Q) / 2
    from north (up) through east (left), of length proportional to the cell's degree
    sqrt(Q^2 + U^2) / I relative to the image's largest; cells fainter than
    ``min_fraction`` of the brightest cell get none.

    Examples
    --------
    >>> i = np.ones((12, 12)); q = -i; u = 0 * i          # EVPA 90 deg: horizontal ticks
    >>> out = draw_ticks(np.zeros((12, 12), np.uint8), i, q, u, cell=12)
    >>> bool((out[6, 1:11] == TICK_COLOUR).all()), bool((out[1, 6] == 0).all())
    (True, True)
    """
    rgb = np.repeat(pixels[..., None], 3, axis=2) if pixels.ndim == 2 else pixels.copy()
    height, width = rgb.shape[:2]
    cell = cell or max(6, width // 24)
    rows, cols = height // cell, width // cell
    if rows == 0 or cols == 0:
        return rgb

    def binned(a):
        a = np.nan_to_num(np.asarray(a, dtype=float)[:rows * cell, :cols * cell])
        return a.reshape(rows, cell, cols, cell).sum(axis=(1, 3))

    i, q, u = binned(stokes_i), binned(stokes_q), binned(stokes_u)
    with np.errstate(invalid="ignore", divide="ignore"):
        degree = np.where(i > min_fraction * i.max(), np.hypot(q, u) / i, 0.0)
    if not degree.max() > 0.0:
        return rgb
    evpa = 0.5 * np.arctan2(u, q)
    # Image right is -east, up is north: the E-vector along (x, y) = (-sin, cos)(EVPA).
    dx, dy = -np.sin(evpa), np.cos(evpa)
    half = 0.5 * (cell - 1) * degree / degree.max()
    steps = np.linspace(-1.0, 1.0, 2 * cell + 1)
    for r in range(rows):
        for c in range(cols):
            if half[r, c] <= 0.0:
                continue
            x = c * cell + 0.5 * (cell - 1) + steps * half[r, c] * dx[r, c]
            y = r * cell + 0.5 * (cell - 1) - steps * half[r, c] * dy[r, c]   # rows go down
            rgb[np.rint(y).astype(int), np.rint(x).astype(int)] = TICK_COLOUR
    return rgb
