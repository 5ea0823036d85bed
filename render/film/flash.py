"""The photosensitive flash check of a frame sequence (general flashes per second).

WCAG 2.2 success criterion 2.3.1 (general flash threshold; ITU-R BT.1702 gives
similar guidance for television): content must not have more than three
general flashes in any one-second period.  A *flash* is a pair of opposing
changes in relative luminance of at least 10 % of the maximum, where the
darker image is below 0.80, over an area of at least 25 % of a 10-degree
visual field: 0.25 x (341 x 256) pixels of a 1024 x 768 screen, i.e. 2.8 % of a
full-screen frame (WCAG 2.2, definition of "general flash and red flash
thresholds" and its Understanding document).  This check is a whole-frame
proxy: a frame-to-frame transition counts when at least that fraction of the
pixels brightens (or darkens) by that much; a flash is a brightening followed
by a darkening or vice versa.  It does not look for contiguous areas or for
red flashes, so it can only over-count general flashes, never miss one.
"""

import numpy as np

from ..light.color import SRGB_LUMINANCE

__all__ = ["relative_luminance", "flash_check", "flash_transition", "flash_report", "FLASH_DELTA", "FLASH_DARK",
           "FLASH_AREA_FRACTION", "FLASHES_ALLOWED"]

FLASH_DELTA = 0.10
FLASH_DARK = 0.80
FLASH_AREA_FRACTION = 0.25 * 341 * 256 / (1024 * 768)
FLASHES_ALLOWED = 3


def _linear(v):
    """The sRGB transfer function undone (IEC 61966-2-1), v in 0..1."""
    return np.where(v <= 0.04045, v / 12.92, ((v + 0.055) / 1.055) ** 2.4)


_LINEAR_OF_8_BIT = _linear(np.arange(256) / 255.0)


def relative_luminance(pixels):
    """Relative luminance (0..1) of 8-bit sRGB or grey pixels (IEC 61966-2-1; WCAG 2.2 def.).

    Examples
    --------
    >>> float(relative_luminance(np.array([255], dtype=np.uint8))[0])
    1.0
    """
    pixels = np.asarray(pixels)
    if pixels.dtype == np.uint8:
        linear = _LINEAR_OF_8_BIT[pixels]   # the same numbers, without a power per pixel
    else:
        linear = _linear(np.asarray(pixels, dtype=float) / 255.0)
    if linear.ndim >= 3 and linear.shape[-1] == 3:
        return linear @ np.array(SRGB_LUMINANCE)
    return linear


def flash_transition(before, after):
    """+1, -1 or 0: the change from one frame's relative luminance to the next's.

    +1 (-1) when at least ``FLASH_AREA_FRACTION`` of the pixels brighten (darken) by
    ``FLASH_DELTA`` or more where the darker of the two is below ``FLASH_DARK``.
    """
    change = after - before
    darker = np.minimum(before, after) < FLASH_DARK
    up = np.mean((change >= FLASH_DELTA) & darker)
    down = np.mean((change <= -FLASH_DELTA) & darker)
    if max(up, down) < FLASH_AREA_FRACTION:
        return 0
    return 1 if up >= down else -1


def _transitions(luminances):
    """+1, -1 or 0 per consecutive frame pair (see the module docstring); any iterable."""
    events, before = [], None
    for after in luminances:
        if before is not None:
            events.append(flash_transition(before, after))
        before = after
    return events


def flash_check(luminances, fps):
    """Count general flashes per one-second window of a frame sequence.

    Parameters
    ----------
    luminances : sequence of ndarray
        Relative luminance of each frame (:func:`relative_luminance`).
    fps : float
        Frames per second of screen time.

    Returns
    -------
    dict
        ``worst_flashes`` (most flashes in any one-second window),
        ``worst_start_s`` (where that window starts), ``passes`` (at most three),
        ``criterion``.

    References
    ----------
    WCAG 2.2, success criterion 2.3.1 "Three Flashes or Below Threshold";
    ITU-R BT.1702.

    Examples
    --------
    >>> frames = [np.full((4, 4), float(k % 2)) for k in range(25)]   # black/white at 24 fps
    >>> report = flash_check(frames, 24.0)
    >>> report["worst_flashes"], report["passes"]
    (12, False)
    """
    return flash_report(_transitions(luminances), fps)


def flash_report(events, fps):
    """The :func:`flash_check` report from the frame-to-frame changes (:func:`flash_transition`)."""
    window = max(1, int(round(fps)))  # transitions within one second of screen time
    worst, start = 0, 0
    for first in range(max(1, len(events) - window + 1)):
        chunk = [e for e in events[first:first + window] if e != 0]
        # Count the opposing changes: a run of same-sign changes is one change.
        changes = sum(1 for i, e in enumerate(chunk) if i == 0 or e != chunk[i - 1])
        flashes = changes // 2
        if flashes > worst:
            worst, start = flashes, first
    return {"worst_flashes": int(worst), "worst_start_s": start / fps,
            "worst_start_frame": int(start), "passes": worst <= FLASHES_ALLOWED,
            "criterion": "WCAG 2.2 SC 2.3.1 general flash (whole-frame proxy; see docs)",
            "area_fraction": FLASH_AREA_FRACTION, "fps": fps}
