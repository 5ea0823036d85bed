"""render/light/disk_integral.py: the disk-integrated line sampled on a grid of its own.

The accuracy check builds its reference independently of the module: plain nested
Cartesian grids of the image plane (cell centres, each cell's flux spread over the g
of its centre and corners), refined once to show the reference itself is stable.
"""

import warnings

import numpy as np
import pytest

from render import default_scene, render_still
from render.camera.observers import distant_observer_rays
from render.geodesics.tracing import TraceSettings, trace
from render.light.disk import redshift_factor
from render.light.disk_integral import DiskGeometry, sample_disk
from render.light.emission import BrokenPowerLaw
from render.spacetime.kerr import isco_radius

SPIN, INCLINATION, R_OUT = 0.998, 30.0, 400.0
R_IN = isco_radius(SPIN)
LINE_EDGES = np.linspace(0.2 * 6.4, 1.6 * 6.4, 201)   # the scene's default 200 bins


def _order_zero(x, y):
    """r, g and whether the direct image (order 0) lands on the disk, by the closed form."""
    bundle = distant_observer_rays(x, y, SPIN, INCLINATION)
    settings = TraceSettings(spin=SPIN, method="closed_form", inclination_deg=INCLINATION,
                             orders=1)
    r = trace(settings, x, y, bundle, maps=False)["r"][:, 0]
    g = redshift_factor(r, bundle.lam, SPIN)
    return r, g, (r >= R_IN) & (r <= R_OUT) & np.isfinite(g)


def _cartesian_box(half, step, hole):
    """Photon counts per bin of the square |x|, |y| < half (minus |x|, |y| < hole).

    Midpoint rule: each cell adds g^3 r^-3 step^2 at its centre's g, spread uniformly
    over the range of g among its centre and the corners that hit the disk.
    """
    n = int(round(2 * half / step))
    nodes = -half + step * np.arange(n + 1)
    cx, cy = np.meshgrid(nodes, nodes)
    _, g_corner, hit_corner = _order_zero(cx.ravel(), cy.ravel())
    g_corner = np.where(hit_corner, g_corner, np.nan).reshape(n + 1, n + 1)
    mx, my = np.meshgrid(nodes[:-1] + step / 2, nodes[:-1] + step / 2)
    keep = ~((np.abs(mx) < hole) & (np.abs(my) < hole))
    r, g, hit = _order_zero(mx[keep], my[keep])
    around = np.vstack([np.stack([g_corner[:-1, :-1], g_corner[1:, :-1], g_corner[:-1, 1:],
                                  g_corner[1:, 1:]])[:, keep], np.where(hit, g, np.nan)])
    with warnings.catch_warnings():   # cells that miss the disk: all NaN, not used
        warnings.simplefilter("ignore", RuntimeWarning)
        low, high = np.nanmin(around, axis=0), np.nanmax(around, axis=0)
    counts = np.zeros(LINE_EDGES.size - 1)
    e_low, e_high = 6.4 * low[hit], 6.4 * high[hit]
    weight = g[hit] ** 3 * r[hit] ** -3.0 * step * step
    # The spread written out bin by bin (numpy only): fraction of [e_low, e_high] in each bin.
    for j in range(counts.size):
        a, b = LINE_EDGES[j], LINE_EDGES[j + 1]
        width = e_high - e_low
        with np.errstate(invalid="ignore", divide="ignore"):
            part = np.where(width > 0, np.clip((np.minimum(b, e_high) - np.maximum(a, e_low))
                                               / width, 0, 1),
                            ((6.4 * g[hit] > a) & (6.4 * g[hit] <= b)).astype(float))
        counts[j] = (weight * part).sum()
    return counts


def _cartesian_reference(scale):
    # Three nested squares: 0.025 M cells within 8 M of the hole, 0.1 M to 40 M and
    # 1 M to 440 M (the image of the 400 M edge lies within 1.05 r_out + 10 M).
    counts = (_cartesian_box(8.0, 0.025 * scale, 0.0) + _cartesian_box(40.0, 0.1 * scale, 8.0)
              + _cartesian_box(440.0, 1.0 * scale, 40.0))
    return counts / counts.sum()


@pytest.mark.slow
def test_line_of_a_near_extremal_hole_matches_an_independent_cartesian_integral():
    # The case of issue 15: a = 0.998, i = 30 deg, emissivity r^-3 from the ISCO to 400 M.
    # Reference: nested Cartesian grids (above), refined 2x; the two differ by < 0.1%
    # L1, so the fine one is good to about that (first-order convergence at the edges).
    coarse, fine = _cartesian_reference(2.0), _cartesian_reference(1.0)
    assert np.abs(coarse - fine).sum() < 1e-3
    scene = default_scene(**{"image.width": 16, "image.height": 16, "observing.mode": "line",
                             "black_hole.spin": SPIN, "observer.inclination": INCLINATION,
                             "disk.outer_radius": R_OUT, "observer.placement": "distant",
                             "disk.orders": 1})
    counts = render_still(scene).tables["line"]["counts"]
    # The target of issue 15: within 0.5% L1 of the converged reference, at 16 pixels.
    assert np.abs(counts - fine).sum() < 5e-3
    # Blue horn: the brightest bin is where the reference puts it (one bin = 45 eV).
    assert np.argmax(counts) == np.argmax(fine)


def test_lattice_widens_until_the_disk_fits_and_says_when_it_could_not():
    # Geometry (common practice): the image of a ring of radius r far out has radius
    # about r, so a lattice of 20 M cannot hold a 1000 M disk even widened 1.5^3 times.
    geometry = DiskGeometry(spin=0.0, inclination_deg=30.0, r_in=6.0, r_out=1000.0)
    assert sample_disk(geometry, 32, rho_max=20.0).info["truncated"]
    widened = sample_disk(geometry, 32, rho_max=700.0)   # 700 -> 1050 M holds it
    assert not widened.info["truncated"] and widened.info["rho_max"] == pytest.approx(1050.0)


def test_disk_grid_area_of_a_distant_face_on_disk_far_out():
    # Far from the hole light bending is weak (deflection 4M/b: Einstein 1916): a
    # face-on annulus 300..400 M appears with area pi (400^2 - 300^2) to within
    # ~2 x 4M/r ~ 3%; the deflection makes the image slightly larger, never smaller.
    geometry = DiskGeometry(spin=0.0, inclination_deg=0.0, r_in=300.0, r_out=400.0)
    area = sample_disk(geometry, 128).weight.sum()
    flat = np.pi * (400.0 ** 2 - 300.0 ** 2)
    assert 1.0 <= area / flat < 1.03


@pytest.mark.slow   # two converged disk grids, ~6 s
def test_line_flux_falls_as_the_inverse_square_of_the_distance():
    # F = L / (4 pi D^2) (common practice): twice the distance, a quarter of the flux.
    def flux(distance):
        scene = default_scene(**{"image.width": 8, "image.height": 8, "observing.mode": "line",
                                 "observer.placement": "distant",
                                 "black_hole.distance": distance})
        return render_still(scene).metadata["observing"]["line_photon_flux"]

    assert flux(2e3) / flux(1e3) == pytest.approx(0.25, rel=1e-12)


def test_broken_power_law_is_continuous_with_its_two_indices():
    # Definition (Fabian et al. 1989 for each power-law part): r^-q_in inside r_b,
    # r_b^(q_out - q_in) r^-q_out outside, equal at r_b.
    law = BrokenPowerLaw(inner_index=5.0, outer_index=2.5, break_radius=4.0)
    assert law.intensity(2.0) == pytest.approx(2.0 ** -5)
    assert law.intensity(8.0) == pytest.approx(4.0 ** 2.5 * 8.0 ** -2.5 * 4.0 ** -5.0)
    below, above = law.intensity(4.0 * (1 - 1e-12)), law.intensity(4.0)
    assert above == pytest.approx(below, rel=1e-10)


def test_broken_power_law_scene_reaches_the_line():
    # The law's steeper inner part puts more of the line at low g (Fabian et al. 1989):
    # a steep inner index moves the mean photon energy down.
    def mean_energy(inner_index):
        scene = default_scene(**{"image.width": 8, "image.height": 8, "observing.mode": "line",
                                 "observer.placement": "distant",
                                 "observer.inclination": 30.0, "disk.outer_radius": 20.0,
                                 "emission.law": "broken_power_law",
                                 "emission.inner_index": inner_index,
                                 "emission.outer_index": 3.0, "emission.break_radius": 5.0,
                                 "observing.sampling_tolerance": 0.02})
        table = render_still(scene).tables["line"]
        return (table["energy_kev"] * table["counts"]).sum()

    assert mean_energy(8.0) < mean_energy(3.0)
