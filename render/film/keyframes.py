"""Keyframes: a scene key's value at any frame, interpolated between the keyframes given.

``animation.keyframes`` gives numeric keys at chosen frames, screen times
(``time``, seconds) or fractions of the film (``at``, 0 the first frame and 1
the last; :func:`render.scene.loader.keyframe_position`), so a film previewed
with fewer frames keeps its keyframes at the same moments; between two
keyframes a key is interpolated ``linear``, ``smooth`` (smoothstep
3 s^2 - 2 s^3, at rest at each keyframe) or ``cubic`` (Hermite with
Catmull–Rom tangents, smooth through the keyframes); before the first and
after the last keyframe it holds its value.

References
----------
Catmull & Rom (1974), "A class of local interpolating splines", in Computer
Aided Geometric Design, Academic Press, 317 (the cubic's tangents).
"""

import numpy as np

from ..scene.loader import frame_count, keyframe_position

__all__ = ["interpolate", "keyframe_tracks", "values_at"]


def _segment_weight(s, kind):
    """Fraction of the way from one keyframe's value to the next at fraction ``s`` of the frames."""
    if kind == "smooth":
        return s * s * (3.0 - 2.0 * s)
    return s


def interpolate(points, frame, default="smooth"):
    """Value at ``frame`` of keyframes ``points`` = [(frame, value, interpolation or None)].

    The interpolation named at a keyframe applies to the segment that starts
    there (``default`` if it names none).

    Examples
    --------
    >>> pts = [(0, 0.0, "linear"), (10, 10.0, None)]
    >>> interpolate(pts, 2.5), interpolate(pts, -1), interpolate(pts, 20)
    (2.5, 0.0, 10.0)
    >>> interpolate([(0, 0.0, "smooth"), (10, 1.0, None)], 5)
    0.5
    """
    frames = [p[0] for p in points]
    if frame <= frames[0]:
        return points[0][1]
    if frame >= frames[-1]:
        return points[-1][1]
    i = int(np.searchsorted(frames, frame, side="right")) - 1
    f0, v0, kind = points[i]
    f1, v1, _ = points[i + 1]
    kind = kind or default
    s = (frame - f0) / (f1 - f0)
    if kind != "cubic":
        return v0 + (v1 - v0) * _segment_weight(s, kind)

    def tangent(j):
        # Catmull–Rom tangent for uneven spacing; one-sided at the ends.
        lo, hi = max(j - 1, 0), min(j + 1, len(points) - 1)
        return (points[hi][1] - points[lo][1]) / (points[hi][0] - points[lo][0])

    h = f1 - f0
    m0, m1 = tangent(i) * h, tangent(i + 1) * h
    s2, s3 = s * s, s * s * s
    return ((2 * s3 - 3 * s2 + 1) * v0 + (s3 - 2 * s2 + s) * m0
            + (-2 * s3 + 3 * s2) * v1 + (s3 - s2) * m1)


def keyframe_tracks(scene):
    """{key: [(frame, value, interpolation or None), ...]} of a scene's ``animation.keyframes``.

    Keyframes placed by ``time`` or ``at`` are at their (possibly fractional)
    frame positions in the scene's film.
    """
    frames = frame_count(scene.values) or 1
    fps = scene["animation.fps"]
    tracks = {}
    for entry in scene["animation.keyframes"]:
        position = keyframe_position(entry, frames, fps)
        for key, value in entry.items():
            if key not in ("frame", "time", "at", "interpolation"):
                tracks.setdefault(key, []).append(
                    (position, value, entry.get("interpolation")))
    return tracks


def values_at(scene, tracks, frame):
    """{key: value} of every keyframed key at ``frame`` (the scene's default interpolation)."""
    default = scene["animation.interpolation"]
    return {key: interpolate(points, frame, default) for key, points in tracks.items()}
