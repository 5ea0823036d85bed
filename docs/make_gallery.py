"""Make the gallery: docs/gallery/*.png and docs/gallery.md from the example scenes.

Run from anywhere (a few minutes on 2 cores)::

    python docs/make_gallery.py

Every picture comes from a scene in ``scenes/`` with at most a smaller image size
(the framing in M does not change) and, for the films, fewer frames; the
overrides are printed beside each picture, so any of them can be made again with
``nullray still`` / ``nullray figure`` / ``nullray sequence``.  Pictures are PNGs
of a few tens of KB (colour stills are reduced to a 256-colour palette).
"""

import shutil
import sys
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))   # this checkout's nullray, not an installed one

import numpy as np  # noqa: E402
from PIL import Image  # noqa: E402

from render.api import make_still, open_scene, render_sequence, render_still  # noqa: E402
from render.output.figures import figure_png  # noqa: E402

GALLERY = ROOT / "docs" / "gallery"
LARGEST_BYTES = 60_000


@dataclass
class Entry:
    name: str                     # the gallery file's stem
    scene: str                    # a file in scenes/, or None for the built-in default
    caption: str
    show: str = "picture"         # picture, a map name, spectrum, line or lightcurve
    overrides: list = field(default_factory=list)


ENTRIES = [
    Entry("default", None, "The default scene (`nullray still`): a power-law disk around a "
          "spin-0.9 hole seen at 76 deg by a camera 1000 M away. The whole disk is in frame; "
          "the thin photon ring hugs the shadow and the order-1 image of the disk's underside "
          "shows below it. The approaching (left) side is Doppler-boosted."),
    Entry("default-g", None, "`nullray figure --map g`: the redshift factor of the crossing seen, "
          "with axes in M and in µas (from black_hole.mass and black_hole.distance).", "g",
          ["image.width=320", "image.height=180"]),
    Entry("default-delay", None, "`nullray figure --map delay`: the time delay of the light, in M "
          "and seconds; the order-1 image arrives later.", "delay",
          ["image.width=320", "image.height=180"]),
    Entry("thermal-true-colour", "thermal-true-colour.yaml",
          "True colour of a Page–Thorne disk under the soft-shoulder display rule (the default): "
          "nothing clips, the beamed side rolls off toward white.",
          overrides=["image.width=384", "image.height=216"]),
    Entry("thermal-true-colour-scale-down", "thermal-true-colour.yaml",
          "The same light under the original rule (`display.colour_rule: scale_down`): "
          "everything above white is a flat plateau.",
          overrides=["image.width=384", "image.height=216", "display.colour_rule=scale_down",
                     "name=thermal-true-colour-scale-down"]),
    Entry("outreach-corvid", "outreach-corvid.yaml",
          "Outreach still Corvid: a cool, slowly fed disk glowing gold to red, stars lensed "
          "around the hole, with the glare of a viewer's eye (`display.glare`).",
          overrides=["image.width=480", "image.height=270"]),
    Entry("thermal-bolometric", "thermal-bolometric.yaml",
          "Bolometric intensity of a stellar-mass hole's thermal disk (inferno colour map, "
          "log scaling over 2.5 decades, exposure 0.3 so that the beamed side stays below "
          "white).", overrides=["image.width=256", "image.height=256"]),
    Entry("thermal-xray", "thermal-xray.yaml",
          "The same disk at 2 keV (monochromatic, magma colour map, x/(1+x) scaling): the "
          "Wien tail makes the inner disk and the beamed side stand out.",
          overrides=["image.width=256", "image.height=256"]),
    Entry("profile-ring", "profile-ring.yaml",
          "An emission profile read from a table: a bright ring (viridis).",
          overrides=["image.width=256", "image.height=256"]),
    Entry("thermal-spectrum", "thermal-spectrum.yaml",
          "Disk-integrated spectrum, ray-traced and in flat space (nu F_nu in Hz Jy).",
          "spectrum"),
    Entry("line-iron", "line-iron.yaml", "A relativistic iron line (6.4 keV) from a spin-0.98 "
          "hole at 35 deg.", "line", ["image.width=192", "image.height=192"]),
    Entry("sweep-inclination-marrow", "sweep-inclination-marrow.yaml",
          "Light curve of an inclination sweep, against time (M and s) and against the swept "
          "key.", "lightcurve",
          ["image.width=96", "image.height=54", "animation.frames=12",
           "animation.keyframes=[{frame: 0, observer.inclination: 5.0}, "
           "{frame: 11, observer.inclination: 88.0}]"]),
]


def _save_small(pixels_or_png, path):
    """Write a PNG of at most a few tens of KB (a 256-colour palette if needed)."""
    if isinstance(pixels_or_png, (bytes, bytearray)):
        import io

        image = Image.open(io.BytesIO(pixels_or_png))
        image.load()
    else:
        image = Image.fromarray(np.ascontiguousarray(pixels_or_png))
    image.save(path, optimize=True)
    if path.stat().st_size > LARGEST_BYTES and image.mode in ("RGB", "RGBA"):
        image.convert("RGB").quantize(256, dither=Image.Dither.NONE).save(path, optimize=True)


def _scene(entry):
    path = None if entry.scene is None else ROOT / "scenes" / entry.scene
    return open_scene(path, entry.overrides)


def make_entry(entry, workdir):
    """Render one gallery entry into docs/gallery/<name>.png; return its path."""
    target = GALLERY / f"{entry.name}.png"
    scene = _scene(entry)
    if entry.show == "picture":
        result = render_still(scene)
        _save_small(result.pixels, target)
    elif entry.show in ("spectrum", "line"):
        make_still(scene, workdir, overwrite=True)
        shutil.copyfile(Path(workdir) / f"{scene['name']}_{entry.show}.png", target)
    elif entry.show == "lightcurve":
        render_sequence(scene, workdir, workers=1, overwrite=True)
        shutil.copyfile(Path(workdir) / scene["name"] / "lightcurve.png", target)
    else:
        _save_small(figure_png(render_still(scene), entry.show), target)
    return target


def gallery_markdown():
    """docs/gallery.md: every entry's picture, caption and the command that makes it."""
    lines = ["# Gallery", "",
             "Every picture here is made by one command from the example scenes in `scenes/`:",
             "", "```sh", "python docs/make_gallery.py", "```", "",
             "(sizes reduced for the page; the display rules are in [docs/display.md](display.md) "
             "and the README, Conventions: Exposure and display).", ""]
    for entry in ENTRIES:
        scene = f"scenes/{entry.scene}" if entry.scene else "(default scene)"
        sets = " ".join(f"--set '{o}'" for o in entry.overrides)
        lines += [f"## {entry.name}", "", f"![{entry.name}](gallery/{entry.name}.png)", "",
                  entry.caption, "", f"Scene: `{scene}`" + (f", with `{sets}`" if sets else ""),
                  ""]
    return "\n".join(lines)


def main(names=()):
    GALLERY.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory() as workdir:
        for entry in ENTRIES:
            if names and entry.name not in names:
                continue
            path = make_entry(entry, workdir)
            print(f"wrote {path.relative_to(ROOT)} ({path.stat().st_size // 1024} KB)")
    (ROOT / "docs" / "gallery.md").write_text(gallery_markdown() + "\n")
    print("wrote docs/gallery.md")


if __name__ == "__main__":
    main(sys.argv[1:])
