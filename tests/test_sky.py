"""The sky at infinity: escape directions, lensing of point stars and panoramas, star counts.

Every check compares with something outside the code under test: a published
lensing formula, an independent scipy integration of the Schwarzschild orbit
equation, flat-space geometry, or a fact of the trade.
"""

import math

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.optimize import brentq

from render.camera.observers import camera_rays, image_plane_grid
from render.geodesics.tracing import trace_bundle
from render.imaging.sky import (StarField, camera_vectors, load_panorama, pixel_solid_angle,
                                sample_panorama, sample_panorama_image, sky_vectors, splat_stars,
                                star_field)
from render.geodesics.tracing import escape_directions

TOLERANCE = 1e-10


def directions(x, y, distance, spin=0.0, inclination=90.0):
    """Sky directions (theta, phi) of camera rays at image-plane points (x, y)."""
    x = np.atleast_1d(np.asarray(x, dtype=float))
    y = np.atleast_1d(np.asarray(y, dtype=float))
    bundle = camera_rays(x, y, spin, distance, inclination, 0.0, "zamo")
    raw = trace_bundle(bundle, spin, n_record=1, tolerance=TOLERANCE, final_state=True)
    return escape_directions(bundle, raw, spin, TOLERANCE)


def schwarzschild_ring_angle(distance):
    """Angle from the hole of the ring image of a source at infinity exactly behind it.

    Independent of nullray: the Schwarzschild orbit equation (d u/d phi)^2 =
    1/b^2 - u^2 + 2 u^3 (u = 1/r, M = 1; e.g. Misner, Thorne & Wheeler 1973,
    eq. 25.58) integrated with scipy from the observer at u = 1/D through the
    periapsis to u = 0 must sweep exactly pi; the static observer sees the ray
    at sin(psi) = b sqrt(1 - 2/D) / D (Synge 1966).
    """
    def sweep(b):
        # 2 u^3 - u^2 + 1/b^2 = 2 (u - u0)(u - u1)(u - u2), u0 the periapsis (smallest
        # positive root), u1 < 0 < u0 < u2.  With u = u0 (1 - t^2) the integrand
        # du / sqrt(P) becomes 2 u0 dt / sqrt(-2 u0 (u - u1)(u - u2)), regular at t = 0.
        roots = np.sort(np.roots([2.0, -1.0, 0.0, 1.0 / b ** 2]).real)
        u1, u0, u2 = roots

        def integrand(t):
            u = u0 * (1.0 - t * t)
            return 2.0 * u0 / math.sqrt(-2.0 * u0 * (u - u1) * (u - u2))

        t_observer = math.sqrt(1.0 - (1.0 / distance) / u0)
        inward = quad(integrand, 0.0, t_observer, epsabs=0, epsrel=1e-12)[0]
        outward = quad(integrand, 0.0, 1.0, epsabs=0, epsrel=1e-12)[0]
        return inward + outward - math.pi

    b_ring = brentq(sweep, 3.0 * math.sqrt(3.0) * 1.01, distance * 0.5, xtol=1e-13, rtol=1e-14)
    return math.asin(b_ring * math.sqrt(1.0 - 2.0 / distance) / distance), b_ring


def ring_angle_from_tracer(distance):
    """psi with phi_inf = pi (behind the hole) along the image's horizontal axis."""
    def offset(x):
        _, phi = directions([x], [0.0], distance)
        return (phi[0] - math.pi + math.pi) % (2.0 * math.pi) - math.pi

    theta_e = math.sqrt(4.0 / distance)
    # Just outside the shadow's edge (Synge 1966) at the lowest.
    x_shadow = distance * math.tan(math.asin(
        math.sqrt(27.0) * math.sqrt(1.0 - 2.0 / distance) / distance))
    x = brentq(offset, max(0.5 * theta_e * distance, 1.1 * x_shadow), 2.0 * theta_e * distance, xtol=1e-12 * distance,
               rtol=1e-14)
    return math.atan(x / distance)


@pytest.mark.parametrize("distance", [50.0, 1e4])
def test_einstein_ring_of_a_star_behind_the_hole(distance):
    psi = ring_angle_from_tracer(distance)
    exact, b_ring = schwarzschild_ring_angle(distance)
    # Against the independent scipy integration: the tracer runs at tolerance 1e-10 and the
    # quadrature at 1e-12, so 1e-7 relative leaves a wide margin over both.
    assert psi == pytest.approx(exact, rel=1e-7)
    if distance >= 1e4:
        # Einstein (1936): a source at infinity behind a point mass seen from distance D
        # forms a ring of angular radius sqrt(4M/D).  Strong-field correction: the
        # deflection 4M/b + (15 pi/4)(M/b)^2 (second order; e.g. Keeton & Petters 2005,
        # from memory) moves the ring out by theta_E (1 + 15 pi/(32 b)), 0.74% at D = 1e4.
        theta_e = math.sqrt(4.0 / distance)
        assert psi == pytest.approx(theta_e, rel=0.02)
        # The next term is of order (M/b)^2 ~ 3e-5 relative here; 1e-3 is generous.
        assert psi == pytest.approx(theta_e * (1.0 + 15.0 * math.pi / (32.0 * b_ring)), rel=1e-3)


def test_flat_space_limit_maps_the_panorama_pixel_for_pixel():
    # M/D -> 0 (D = 1e8 M, 60 x 30 deg field): light goes straight, so each pixel sees the
    # panorama in its own flat-space look direction (camera at phi = 0 on the equator:
    # look = -x, right = +y, up = +z).  Deflections are ~4M/b < 1e-6 rad, 1e-4 of a texel.
    distance = 1e8
    width, height = 48, 24
    fov = 2.0 * distance * math.tan(math.radians(30.0))
    x, y = image_plane_grid(width, height, fov)
    theta, phi = directions(x.ravel(), y.ravel(), distance)
    look = np.stack([-np.ones(x.size), x.ravel() / distance, y.ravel() / distance], axis=-1)
    look /= np.linalg.norm(look, axis=-1, keepdims=True)
    theta_flat = np.arccos(look[:, 2])
    phi_flat = np.arctan2(look[:, 1], look[:, 0])
    texture = np.random.default_rng(4).uniform(size=(90, 180, 3))   # 2 deg texels
    lensed = sample_panorama(texture, theta, phi)
    flat = sample_panorama(texture, theta_flat, phi_flat)
    # Bilinear lookups of a texture with O(1) jumps per texel: 1e-4 texel moves the value
    # by < 1e-3.
    assert np.max(np.abs(lensed - flat)) < 1e-3


def test_panorama_orientation_is_not_mirrored():
    # A sky chart seen from inside the sphere (common practice): phi grows to the left.
    # A camera at azimuth 0 looking at the hole sees phi = 180 deg straight ahead; a
    # point slightly to the right of it in the image has phi < 180 deg.
    texture = np.zeros((4, 8, 1))
    texture[:, 3] = 1.0     # column 3 of 8 spans phi = 180..225 deg (left of centre)
    value = sample_panorama(texture, np.array([math.pi / 2, math.pi / 2]),
                            np.radians([202.5, 157.5]))
    assert value[:, 0].tolist() == [1.0, 0.0]
    theta, phi = directions([1e6, -1e6], [0.0, 0.0], 1e8)
    assert phi[0] < math.pi < phi[1]


def paczynski(u):
    # Paczynski (1986), ApJ 304, 1, eq. 7 (total magnification of a point lens).
    return (u * u + 2.0) / (u * math.sqrt(u * u + 4.0))


@pytest.mark.parametrize("u", [0.5, 1.0, 2.0])
def test_point_star_magnification_matches_paczynski(u):
    # Weak field: D = 1e6 M, theta_E = 2e-3 rad, b ~ 2000 M (strong-field terms ~ 1e-3).
    distance = 1e6
    theta_e = math.sqrt(4.0 / distance)
    side = 150
    fov = 7.0 * theta_e * distance            # +-3.5 theta_E: both images inside
    x, y = image_plane_grid(side, side, fov)
    theta, phi = directions(x.ravel(), y.ravel(), distance)
    sky = sky_vectors(theta, phi).reshape(side, side, 3)
    cam = camera_vectors(x, y, distance)
    beta = u * theta_e                        # the star, above the point behind the hole
    star = StarField(np.array([[-math.cos(beta), 0.0, math.sin(beta)]]), np.array([1.0]),
                     np.array([5800.0]))
    flux, images, _ = splat_stars(star, sky, cam, np.ones((side, side)))
    # 1% (the figure): the splat's second-order error at 0.047 theta_E per pixel is
    # ~0.1%, the strong-field terms ~0.1%.
    assert flux.sum() == pytest.approx(paczynski(u), rel=0.01)
    # Each image on its own: mu_+- = (A +- 1)/2 (Paczynski 1986, eq. 6), the primary on the
    # star's side of the hole (upper half), the secondary on the other; same 1% of A.  (The
    # cell around the hole itself, whose corners are bent to all sides, adds a third,
    # ~1e-6 "image" that stands for the relativistic images near the shadow.)
    total = paczynski(u)
    upper = flux[: side // 2].sum()
    lower = flux[side // 2:].sum()
    assert upper == pytest.approx((total + 1.0) / 2.0, abs=0.01 * total)
    assert lower == pytest.approx((total - 1.0) / 2.0, abs=0.01 * total)
    assert images.sum() >= 2.0 - 1e-9


def fibonacci_sphere(n):
    """n nearly uniform points on the unit sphere (the golden-angle spiral; common practice)."""
    k = np.arange(n) + 0.5
    z = 1.0 - 2.0 * k / n
    azimuth = math.pi * (3.0 - math.sqrt(5.0)) * k
    s = np.sqrt(1.0 - z * z)
    return np.stack([s * np.cos(azimuth), s * np.sin(azimuth), z], axis=-1)


def test_lensing_conserves_the_surface_brightness_of_a_uniform_star_sky():
    # Etherington (1933) / Liouville: lensing conserves surface brightness, so a sky
    # uniformly covered with stars of equal flux stays uniform on the image (flux per
    # observed solid angle n F), however strongly the star images are magnified or
    # thinned out -- away from the shadow, where the map folds faster than the pixels.
    distance = 30.0
    side = 96
    fov = 2.0 * distance * math.tan(0.5)       # +-0.5 rad
    x, y = image_plane_grid(side, side, fov)
    theta, phi = directions(x.ravel(), y.ravel(), distance)
    sky = sky_vectors(theta, phi).reshape(side, side, 3)
    cam = camera_vectors(x, y, distance)
    n_stars = 2_000_000
    stars = StarField(fibonacci_sphere(n_stars), np.ones(n_stars), np.full(n_stars, 5800.0))
    flux, images, _ = splat_stars(stars, sky, cam, np.ones((side, side)))
    omega = pixel_solid_angle(x, y, distance, fov / side)
    expected = n_stars / (4.0 * math.pi) * omega            # unlensed flux per pixel
    # Shadow of the static camera: sin(psi) = sqrt(27) sqrt(1 - 2/D) / D (Synge 1966).
    psi_shadow = math.asin(math.sqrt(27.0) * math.sqrt(1.0 - 2.0 / distance) / distance)
    # Left out: 1.5 shadow radii (the whole sky's secondary images, squeezed below the
    # pixel scale), and +-0.03 rad about the Einstein ring of the point behind the hole,
    # where the lattice star nearest to that caustic point is magnified some 100x (a real
    # property of point sources that would dominate an annulus).
    psi_ring, _ = schwarzschild_ring_angle(distance)
    psi = np.arctan(np.hypot(x, y) / distance)
    ratios, thinning = [], []
    # The outermost pixels only get the flux of the cells inside the image: stop short.
    for lo in np.arange(1.5 * psi_shadow, 0.45, 0.03):
        if abs(lo + 0.015 - psi_ring) < 0.045:
            continue
        ring = (psi >= lo) & (psi < lo + 0.03)
        ratios.append(flux[..., 0][ring].sum() / expected[ring].sum())
        thinning.append(images[ring].sum() / expected[ring].sum())
    ratios = np.array(ratios)
    assert len(ratios) >= 4
    # 2%: at 96 pixels the piecewise-linear lens map is good to ~0.5% in these annuli
    # (0.99 at 64, 0.997 at 128 pixels when tried), and each annulus holds >= 1e4 stars.
    assert np.all(np.abs(ratios - 1.0) < 0.02), ratios
    # The test has teeth: the star images per pixel vary over these annuli by a factor of
    # more than 5 (many squeezed images near the shadow, few magnified ones near the
    # ring), while their flux stays at n F.
    assert max(thinning) / min(thinning) > 5.0, thinning


def test_star_counts_are_euclidean():
    # Uniformly spread sources in Euclidean space: N(> F) ~ F^(-3/2) (common practice).
    stars = star_field(10.0, seed=11)
    expected = 10.0 * 4.0 * math.pi * (180.0 / math.pi) ** 2
    assert abs(len(stars) - expected) < 5.0 * math.sqrt(expected)   # Poisson, 5 sigma
    thresholds = 10.0 ** (-0.4 * np.array([6.0, 6.5, 7.0, 7.5]))
    counts = [(stars.flux > f).sum() for f in thresholds]
    slope = np.polyfit(np.log(thresholds), np.log(counts), 1)[0]
    # Thousands of stars per bin above magnitude 6: the slope is known to ~1%.
    assert slope == pytest.approx(-1.5, abs=0.03)
    # Seeded: the same seed gives the same sky, another seed another one.
    again = star_field(10.0, seed=11)
    assert np.array_equal(again.directions, stars.directions)
    assert not np.array_equal(star_field(10.0, seed=12).flux[:10], stars.flux[:10])
    # Directions on the unit sphere, uniform: mean z ~ 0 within 5 sigma (sigma = 1/sqrt(3N)).
    assert np.allclose(np.linalg.norm(stars.directions, axis=1), 1.0)
    assert abs(stars.directions[:, 2].mean()) < 5.0 / math.sqrt(3.0 * len(stars))
    assert stars.temperature.min() >= 2500.0 and stars.temperature.max() <= 40000.0


def test_generated_panorama_round_trips_as_a_file(tmp_path):
    from PIL import Image

    pixels = sample_panorama_image(32, seed=2)
    assert pixels.shape == (32, 64, 3)
    Image.fromarray(pixels).save(tmp_path / "sky.png")
    linear = load_panorama(tmp_path / "sky.png")
    # IEC 61966-2-1 decoding of the 8-bit values, computed here independently.
    v = pixels / 255.0
    expected = np.where(v <= 0.04045, v / 12.92, ((v + 0.055) / 1.055) ** 2.4)
    assert np.allclose(linear, expected, rtol=0, atol=1e-12)


def test_moving_camera_sees_the_sky_aberrated_and_doppler_shifted():
    # A camera moving at v = 0.6 c along e_phi in (nearly) flat space, D = 1e8 M: its look
    # direction d' at angle theta' from the velocity is, in the rest frame, at
    # cos(theta) = (cos(theta') - v) / (1 - v cos(theta')) about the same axis (Einstein 1905,
    # aberration), and sky photons arrive with E'/E = 1 / (gamma (1 - v cos(theta')))
    # (Einstein 1905, Doppler).
    distance, v = 1e8, 0.6
    x, y = image_plane_grid(12, 8, 2.0 * distance)
    x, y = x.ravel(), y.ravel()
    bundle = camera_rays(x, y, 0.0, distance, 90.0, 0.0, "zamo", velocity=(0.0, 0.0, v))
    raw = trace_bundle(bundle, 0.0, n_record=1, tolerance=TOLERANCE, final_state=True)
    theta, phi = escape_directions(bundle, raw, 0.0, TOLERANCE)
    # Look directions in the moving frame, (r, phi, up) components = world (x, y, z) here.
    d = np.stack([-np.ones_like(x), x / distance, y / distance], axis=-1)
    d /= np.linalg.norm(d, axis=-1, keepdims=True)
    cos_moving = d[:, 1]
    cos_rest = (cos_moving - v) / (1.0 - v * cos_moving)
    perpendicular = d[:, [0, 2]] / np.linalg.norm(d[:, [0, 2]], axis=-1, keepdims=True)
    sin_rest = np.sqrt(1.0 - cos_rest ** 2)
    rest = np.stack([perpendicular[:, 0] * sin_rest, cos_rest, perpendicular[:, 1] * sin_rest],
                    axis=-1)
    # Deflections ~4M/b < 1e-7 rad here; 1e-6 rad covers them.
    assert np.allclose(sky_vectors(theta, phi), rest, rtol=0, atol=1e-6)
    gamma = 1.0 / math.sqrt(1.0 - v * v)
    assert np.allclose(bundle.energy_ratio, 1.0 / (gamma * (1.0 - v * cos_moving)), rtol=1e-7)


def test_a_star_exactly_behind_the_hole_is_seen_as_a_ring():
    # Einstein (1936): the images of a point exactly behind the lens form a ring.  Seen from
    # D = 1e4 M its radius is the tracer's ring angle (checked against scipy above); every
    # pixel that receives the star's light must lie within 1.5 pixels of it (bilinear
    # splats reach one pixel), and the ring must go all the way round.
    distance = 1e4
    side = 64
    theta_e = math.sqrt(4.0 / distance)
    fov = 3.0 * theta_e * distance
    x, y = image_plane_grid(side, side, fov)
    theta, phi = directions(x.ravel(), y.ravel(), distance)
    sky = sky_vectors(theta, phi).reshape(side, side, 3)
    star = StarField(np.array([[-1.0, 0.0, 0.0]]), np.array([1.0]), np.array([5800.0]))
    flux, images, _ = splat_stars(star, sky, camera_vectors(x, y, distance),
                                  np.ones((side, side)))
    lit = flux[..., 0] > 0
    psi = np.arctan(np.hypot(x, y) / distance)
    pixel_angle = fov / side / distance
    ring = ring_angle_from_tracer(distance)
    assert np.all(np.abs(psi[lit] - ring) < 1.5 * pixel_angle)
    azimuth = np.degrees(np.arctan2(y[lit], x[lit]))
    assert len(np.unique(np.floor(azimuth / 10.0))) == 36          # every 10-degree sector
    # Flux-weighted radius: within a quarter pixel of the ring (symmetric bilinear spread).
    weighted = (psi * flux[..., 0]).sum() / flux.sum()
    assert abs(weighted - ring) < 0.25 * pixel_angle
