"""The scene keys the composer's page can change, described for the page from ``KEYS``.

The page builds its controls from :func:`control_table`, so a control's label,
unit, allowed range and choices come from the one key table
(:mod:`render.scene.keys`) and never drift from the validator.
"""

from ..scene.keys import KEYS

__all__ = ["CONTROL_KEYS", "control_table", "PREVIEW_SIDE", "DRAG_SIDE", "MAX_PREVIEW_SIDE",
           "MAX_STILL_SIDE"]

# Grouped as the page shows them; only these keys can be changed from the page.
CONTROL_GROUPS = (
    ("black hole", ("black_hole.spin",)),
    ("observer", ("observer.placement", "observer.distance", "observer.inclination",
                  "observer.azimuth", "observer.roll", "observer.field_of_view")),
    ("disk", ("disk.inner_radius", "disk.outer_radius", "disk.surface")),
    ("emission", ("emission.law", "emission.index")),
    ("observing", ("observing.mode", "output.exposure", "sky.backdrop", "tracing.method")),
    ("still", ("name", "image.width", "image.height")),
)
CONTROL_KEYS = tuple(key for _, keys in CONTROL_GROUPS for key in keys)

PREVIEW_SIDE = 256      # longer side of the preview after a change
DRAG_SIDE = 128         # longer side while the camera is dragged (coarser, quicker)
MAX_PREVIEW_SIDE = 512  # the page may not ask for more
MAX_STILL_SIDE = 4096   # the composer's "render still" refuses larger images


def control_table(scene):
    """The page's controls: one dict per key with its group, value and the key table's text.

    Parameters
    ----------
    scene : render.scene.loader.Scene
        The scene whose values the controls start from.

    Returns
    -------
    list of dict
        ``key``, ``group``, ``kind`` ("choice" or "text"), ``choices``, ``value``
        (as text, the way ``--set key=value`` reads it), ``unit``, ``allowed``
        and ``meaning``.

    Examples
    --------
    >>> from render.scene.loader import default_scene
    >>> spin = control_table(default_scene())[0]
    >>> spin["key"], spin["value"], spin["kind"]
    ('black_hole.spin', '0.9', 'text')
    """
    table = []
    for group, keys in CONTROL_GROUPS:
        for key in keys:
            spec = KEYS[key]
            choices = list(spec.choices) if spec.kind == "choice" else []
            table.append({"key": key, "group": group, "kind": "choice" if choices else "text",
                          "choices": choices, "value": value_text(scene[key]),
                          "unit": spec.unit, "allowed": spec.allowed, "meaning": spec.doc})
    return table


def value_text(value):
    """A scene value as the text a control shows (and ``--set`` would read back)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return f"{value:.10g}"
    return "null" if value is None else str(value)
