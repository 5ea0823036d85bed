"""The finite-distance camera against the exact distant observer, and its two frames."""

import math

import numpy as np
import pytest

from render import render_still

SPIN = 0.9
INCLINATION = 60.0


def still(small_scene, **values):
    base = {"black_hole.spin": SPIN, "observer.inclination": INCLINATION,
            "disk.surface": "transparent", "disk.outer_radius": 30.0}
    base.update(values)
    return render_still(small_scene(**base))


def camera(small_scene, distance, frame="zamo", **values):
    return still(small_scene, **{"observer.placement": "camera", "observer.distance": distance,
                                 "observer.frame": frame}, **values)


def both_on_disk(a, b):
    """Pixels whose first crossing lies on the disk (r_in..30 M) in both stills."""
    return a.on_disk[0] & b.on_disk[0]


@pytest.fixture(scope="module")
def far_cameras():
    """Distant observer and zamo/static cameras at 1e4, 1e5 and 1e6 M (same 64x64 grid)."""
    from render import default_scene

    def scene(**values):
        base = {"image.width": 64, "image.height": 64, "observer.placement": "distant"}
        base.update(values)
        return default_scene(**base)

    out = {"distant": still(scene)}
    for distance in (1e4, 1e5, 1e6):
        for frame in ("zamo", "static"):
            out[distance, frame] = camera(scene, distance, frame)
    return out


def test_far_camera_converges_to_distant_observer(far_cameras):
    # A pinhole at radius D differs from the observer at infinity at O(rho / D): its
    # pixel rays are not parallel but converge on the camera, so the ray of the pixel at
    # image radius rho is the distant observer's ray for an inclination (and azimuth)
    # off by up to rho/D rad; and its impact parameter is rescaled by 1 + O(M/D)
    # (Synge 1966: sin(psi) = b sqrt(1 - 2M/D) / D).  Hence
    # (1) the pixel-wise differences in crossing radius and redshift must fall ~10x per
    #     10x in D (accepted 8-12.5: the next order is O(rho/D) ~ 3e-3 relative at 1e4);
    # (2) |dr| / r <= (tan i + 1) rho / D: a disk ring of radius r projects to the
    #     ellipse of semi-minor axis r cos i (flat-space projection, common practice),
    #     so at a fixed image point d ln r / d i = tan i, plus the O(M/D) rescaling.
    distant = far_cameras["distant"]
    rho = np.hypot(distant.alpha, distant.beta)
    bound_factor = math.tan(math.radians(INCLINATION)) + 1.0
    spreads = []
    for distance in (1e4, 1e5, 1e6):
        cam = far_cameras[distance, "zamo"]
        assert np.array_equal(cam.fate, distant.fate)
        ok = both_on_disk(cam, distant)
        assert ok.sum() > 1500
        dr = np.abs(cam.r[0] - distant.r[0])[ok]
        dg = np.abs(cam.g[0] - distant.g[0])[ok]
        assert np.all(dr / distant.r[0][ok] <= bound_factor * rho[ok] / distance)
        spreads.append((dr.max(), np.median(dr), dg.max(), np.median(dg)))
    spreads = np.array(spreads)
    ratios = spreads[:-1] / spreads[1:]
    assert np.all((ratios > 8.0) & (ratios < 12.5)), ratios


@pytest.mark.parametrize("distance", [1e4, 1e5])
def test_static_and_zamo_frames_differ_by_aberration(far_cameras, distance):
    # The static observer moves relative to the ZAMO in -phi with speed
    # v = omega varpi / N ~ 2 a sin(i) M / D^2 (ZAMO angular velocity omega = 2 a M r / A,
    # Bardeen, Press & Teukolsky 1972, eq. 3.2).  For a radial line of sight,
    # first-order aberration (common practice) shifts the static image by v rad, i.e.
    # by v D = 2 a sin(i) / D in M on the image plane, along alpha (= e_phi).
    # Fit that shift from the two r-maps and their alpha-gradient (central
    # differences): it must match within 1% (the fit's truncation error, O(pixel^2)).
    zamo, static = far_cameras[distance, "zamo"], far_cameras[distance, "static"]
    assert np.array_equal(zamo.fate, static.fate)
    pixel = zamo.alpha[0, 1] - zamo.alpha[0, 0]
    slope = (zamo.r[0][:, 2:] - zamo.r[0][:, :-2]) / (2.0 * pixel)
    change = (static.r[0] - zamo.r[0])[:, 1:-1]
    ok = np.isfinite(slope) & np.isfinite(change) & (np.abs(slope) < 5.0)
    assert ok.sum() > 2000
    shift = np.sum(change[ok] * slope[ok]) / np.sum(slope[ok] ** 2)
    expected = 2.0 * SPIN * math.sin(math.radians(INCLINATION)) / distance
    assert shift == pytest.approx(expected, rel=1e-2)
    # What is left after removing the shift is second order in it and in the pixel.
    assert np.max(np.abs(change[ok] - shift * slope[ok])) < 0.05 * expected


@pytest.mark.parametrize("inclination", [0.0, 180.0])
@pytest.mark.parametrize("frame", ["zamo", "static"])
def test_face_on_camera_has_no_nan(small_scene, inclination, frame):
    # On the axis the Boyer–Lindquist phi direction is undefined; the camera must still
    # give every pixel a ray: finite intensity, no unresolved ray, finite r and g on
    # every disk hit, and the axisymmetric image (common practice) under rotation by 90
    # degrees (even grid: pixel centres map onto pixel centres).
    result = camera(small_scene, 1e3, frame, **{"observer.inclination": inclination,
                                                "disk.surface": "opaque"})
    assert np.all(np.isfinite(result.intensity))
    assert not np.any(result.fate == 3)
    hits = result.on_disk[0]
    assert hits.sum() > 2000
    assert np.all(np.isfinite(result.r[0][hits])) and np.all(np.isfinite(result.g[0][hits]))
    peak = result.intensity.max()
    assert np.allclose(np.rot90(result.intensity), result.intensity, rtol=0, atol=1e-9 * peak)
