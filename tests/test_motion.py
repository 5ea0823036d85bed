"""Moving observers: boosted frames, aberration and Doppler shift, camera paths."""

import numpy as np
import pytest
from conftest import kerr_metric

from render import default_scene
from render.film.sequence import plan_sequence
from render.camera.observers import camera_rays, image_plane_grid
from render.spacetime.motion import MotionError, boost_frame, velocity_from_coordinates
from render.errors import SceneError
from render.spacetime.kerr import circular_orbit_time_component, keplerian_angular_velocity


def _metric(r, theta, a):
    return kerr_metric(r, theta, a)


def test_boosted_frame_is_orthonormal():
    # A Lorentz boost keeps the frame orthonormal: e_a . e_b = eta_ab (common practice).
    from render.camera.observers import observer_frame

    r, theta, a = 7.0, 1.1, 0.8
    boosted = boost_frame(observer_frame(a, r, theta, "zamo"), [0.3, -0.2, 0.5])
    gram = boosted @ _metric(r, theta, a) @ boosted.T
    assert np.allclose(gram, np.diag([-1.0, 1.0, 1.0, 1.0]), atol=1e-12)


@pytest.mark.parametrize("r", [10.0, 1.0e4])
def test_zamo_boosted_to_rest_equals_the_static_camera(r):
    # A camera at rest with respect to infinity, set up as a ZAMO boosted by its velocity
    # relative to the ZAMO, must see exactly what the static-frame camera sees.  The static
    # observer's measured photon energy is E / sqrt(-g_tt) (Misner, Thorne & Wheeler 1973,
    # sec. 33.4: u = d_t / |d_t|), an independent check of energy_ratio.
    a, inclination = 0.9, 60.0
    theta = np.radians(inclination)
    x, y = image_plane_grid(9, 7, 30.0)
    rest = velocity_from_coordinates(a, r, theta, 0.0, 0.0, 0.0)
    moving = camera_rays(x, y, a, r, inclination, 0.0, "zamo", velocity=rest)
    static = camera_rays(x, y, a, r, inclination, 0.0, "static")
    assert np.allclose(moving.lam, static.lam, rtol=1e-10, atol=1e-10)
    assert np.allclose(moving.eta, static.eta, rtol=1e-10, atol=1e-9)
    assert np.allclose(moving.states, static.states, rtol=1e-10, atol=1e-12)
    sigma = r * r + a * a * np.cos(theta) ** 2
    assert np.allclose(moving.energy_ratio, 1.0 / np.sqrt(1 - 2 * r / sigma), rtol=1e-12)


def _static_frame_direction(bundle, r, theta):
    """Look direction (r, theta, phi) in the static frame of a=0 from the rays' constants.

    Schwarzschild: p_t = -E, p_phi = L = lam E, p_theta^2 = E^2 (eta - lam^2 cot^2 theta)
    (Carter 1968); the static observer measures E_s = E / sqrt(1 - 2/r) and
    n_i = p_(i) / E_s.  Only the sign of n_theta is taken from the ray's initial state.
    """
    f = 1.0 - 2.0 / r
    energy = 1.0 / np.sqrt(f)  # per unit E
    n_phi = bundle.lam / (r * np.sin(theta)) / energy
    p_theta2 = np.maximum(bundle.eta - bundle.lam ** 2 / np.tan(theta) ** 2, 0.0)
    # states[:, 3] = sin(theta) Sigma p^theta / E (render.camera.observers): its sign is p^theta's.
    n_theta = np.sign(bundle.states[:, 3]) * np.sqrt(p_theta2) / r / energy
    n_r = np.sqrt(np.maximum(1.0 - n_theta ** 2 - n_phi ** 2, 0.0))  # outgoing at the camera
    return -np.stack([n_r, n_theta, n_phi], axis=1)


@pytest.mark.parametrize("direction, speed", [((-1.0, 0.0, 0.0), 0.5),
                                              ((0.0, 0.0, 1.0), 0.6),
                                              ((0.0, -0.6, 0.8), 0.3)])
def test_aberration_and_doppler_of_a_moving_camera_far_away(direction, speed):
    # Far from the hole a camera moving with speed v sees the sky of a camera at rest
    # aberrated: cos(theta') = (cos(theta) + v)/(1 + v cos(theta)) between the look direction
    # and the velocity, and measures photon energies multiplied by gamma (1 + v cos(theta))
    # (Einstein 1905, sec. 7).  Tolerance 1e-8: the static directions are rebuilt from the
    # conserved quantities at r = 1e5 M, where the hole bends rays by ~4e-5 rad at most but
    # both sides use the same exact local relations.
    r, inclination = 1.0e5, 70.0
    theta = np.radians(inclination)
    w = np.array(direction) / np.linalg.norm(direction)
    x, y = image_plane_grid(11, 9, 0.9 * r)  # field of view ~48 degrees
    bundle = camera_rays(x, y, 0.0, r, inclination, 0.0, "zamo", velocity=speed * w)
    look_moving = np.stack([-np.ones(x.size), -y.ravel() / r, x.ravel() / r], axis=1)
    look_moving /= np.linalg.norm(look_moving, axis=1)[:, None]
    cos_moving = look_moving @ w
    look_static = _static_frame_direction(bundle, r, theta)
    cos_static = look_static @ w
    assert np.allclose(cos_moving, (cos_static + speed) / (1 + speed * cos_static), atol=1e-8)
    gamma = 1.0 / np.sqrt(1 - speed ** 2)
    # energy_ratio = E_camera / E with E_camera = gamma E_static (1 + v cos), E_static = E / sqrt(f).
    expected_ratio = gamma * (1 + speed * cos_static) / np.sqrt(1 - 2.0 / r)
    assert np.allclose(bundle.energy_ratio, expected_ratio, rtol=1e-8)


@pytest.mark.parametrize("direction, velocity", [((1.0, 0.0, 0.0), (0.0, 0.0, 0.6)),
                                                 ((0.6, -0.8, 0.0), (0.3, 0.2, -0.5)),
                                                 ((0.0, 0.0, 1.0), (0.0, 0.0, -0.9))])
def test_aberrated_direction_follows_einsteins_formula(direction, velocity):
    # Einstein (1905), sec. 7: with theta the angle between the photon's direction of travel
    # and the observer's velocity, cos(theta') = (cos(theta) - v) / (1 - v cos(theta)); the
    # plane of n and v is kept (common practice).  Tolerance 1e-12: a few roundings.
    from render.camera.observers import aberrated_direction

    n, v = np.array(direction), np.array(velocity)
    speed = np.linalg.norm(v)
    seen = aberrated_direction(n, v)
    cos_rest = n @ v / speed
    assert np.linalg.norm(seen) == pytest.approx(1.0, abs=1e-12)
    assert seen @ v / speed == pytest.approx((cos_rest - speed) / (1 - speed * cos_rest),
                                             abs=1e-12)
    assert np.linalg.det(np.stack([n, v, seen])) == pytest.approx(0.0, abs=1e-12)


@pytest.mark.parametrize("velocity", [(0.0, 0.0, 0.35), (0.2, -0.3, 0.4), (-0.5, 0.0, 0.0)])
def test_a_camera_aimed_at_the_hole_sees_it_in_the_middle(velocity):
    # observer.aim: hole.  The middle pixel of the moving camera must receive the photon that
    # the camera at rest (ZAMO) receives in its middle pixel, travelling straight out along
    # e_r: the same lam and eta, and the moving camera measures its energy multiplied by the
    # Doppler factor gamma (1 - v_r) (Einstein 1905, sec. 7).  aim: frame keeps the boosted
    # axes, so there the middle pixel sees another photon.  Tolerance 1e-10: a few roundings
    # in the constants of motion at r = 12 M.
    a, r, inclination = 0.7, 12.0, 75.0
    x, y = np.zeros(1), np.zeros(1)
    rest = camera_rays(x, y, a, r, inclination, 0.0, "zamo")
    aimed = camera_rays(x, y, a, r, inclination, 0.0, "zamo", velocity=velocity, aim="hole")
    along_frame = camera_rays(x, y, a, r, inclination, 0.0, "zamo", velocity=velocity)
    assert aimed.lam == pytest.approx(rest.lam, abs=1e-10)
    assert aimed.eta == pytest.approx(rest.eta, rel=1e-10, abs=1e-10)
    gamma = 1.0 / np.sqrt(1.0 - np.dot(velocity, velocity))
    assert aimed.energy_ratio / rest.energy_ratio == pytest.approx(gamma * (1 - velocity[0]),
                                                                   rel=1e-12)
    if velocity[1:] != (0.0, 0.0):   # purely radial motion aberrates nothing on the axis
        assert abs(along_frame.lam[0] - rest.lam[0]) + abs(along_frame.eta[0] - rest.eta[0]) > 1e-3


def test_scenes_aim_moving_cameras_at_the_hole_by_default():
    # The scene key reaches the camera: a film frame's viewpoint carries it.
    assert default_scene().viewpoint().aim == "hole"
    assert default_scene(**{"observer.aim": "frame"}).viewpoint().aim == "frame"
    with pytest.raises(SceneError, match="observer.aim"):
        default_scene(**{"observer.aim": "sideways"})


def test_keplerian_orbit_camera_moves_with_the_circular_geodesic():
    # The orbit camera on the equator at r = 12 M is the circular geodesic with
    # dphi/dt = 1/(r^1.5 + a) and dt/dtau = u^t (Bardeen, Press & Teukolsky 1972,
    # eqs. 2.16 and 2.12); its boosted frame's e_t is that 4-velocity.
    from render.camera.observers import observer_frame

    a, r = 0.7, 12.0
    scene = default_scene(**{"animation.frames": 3, "animation.camera_path": "orbit",
                             "observer.distance": r, "observer.inclination": 90.0,
                             "animation.time_step": 5.0, "black_hole.spin": a,
                             "image.width": 8, "image.height": 8})
    plan = plan_sequence(scene)
    u_t = float(circular_orbit_time_component(r, a))
    omega = float(keplerian_angular_velocity(r, a))
    assert plan.jobs[2].coordinate_time == pytest.approx(10.0 * u_t, rel=1e-12)
    azimuth = plan.jobs[2].scene["observer.azimuth"]
    assert np.radians(azimuth) == pytest.approx(omega * 10.0 * u_t, rel=1e-12)
    e_t = boost_frame(observer_frame(a, r, np.pi / 2, "zamo"), plan.jobs[1].velocity)[0]
    assert np.allclose(e_t, u_t * np.array([1.0, 0.0, 0.0, omega]), rtol=1e-12)


def test_plunge_follows_free_fall_from_rest_at_infinity():
    # Schwarzschild radial free fall from rest at infinity: dr/dtau = -sqrt(2/r), so
    # r(tau) = (r0^1.5 - 1.5 sqrt(2) tau)^(2/3) (Misner, Thorne & Wheeler 1973, eq. 25.38,
    # from memory).  Tolerance 1e-7: solve_ivp runs at rtol 1e-10.
    r0, step = 40.0, 20.0
    scene = default_scene(**{"animation.frames": 6, "animation.camera_path": "plunge",
                             "observer.distance": r0, "black_hole.spin": 0.0,
                             "animation.time_step": step, "image.width": 8,
                             "image.height": 8})
    plan = plan_sequence(scene)
    for job in plan.jobs:
        expected = (r0 ** 1.5 - 1.5 * np.sqrt(2.0) * job.clock) ** (2.0 / 3.0)
        assert job.scene["observer.distance"] == pytest.approx(expected, rel=1e-7)
        # Speed relative to the static (= ZAMO) observer: sqrt(2/r) (same source).
        assert -job.velocity[0] == pytest.approx(np.sqrt(2.0 / expected), rel=1e-7)


def test_plunge_into_the_horizon_is_refused_before_tracing(no_tracing):
    scene = default_scene(**{"animation.frames": 40, "animation.camera_path": "plunge",
                             "observer.distance": 20.0, "animation.time_step": 5.0})
    with pytest.raises(SceneError, match="horizon"):
        plan_sequence(scene)


def test_orbit_at_rest_inside_the_ergoregion_is_refused():
    # Inside the ergoregion no observer can stay at fixed phi (Misner, Thorne & Wheeler 1973,
    # sec. 33.8): an orbit with dphi/dt = 0 at r = 1.8 M, spin 0.9, on the equator.
    scene = default_scene(**{"animation.frames": 2, "animation.camera_path": "orbit",
                             "observer.distance": 1.8, "observer.inclination": 90.0,
                             "animation.angular_velocity": 0.0})
    with pytest.raises(SceneError, match="speed"):
        plan_sequence(scene)


def test_static_camera_keyframed_into_the_ergoregion_names_the_frame():
    scene = default_scene(**{
        "animation.frames": 5, "observer.frame": "static", "observer.inclination": 90.0,
        "animation.keyframes": [{"frame": 0, "observer.distance": 10.0},
                                {"frame": 4, "observer.distance": 1.5}]})
    with pytest.raises(SceneError, match=r"^frame \d: observer.distance .*ergoregion"):
        plan_sequence(scene)


def test_velocity_faster_than_light_is_refused():
    with pytest.raises(MotionError):
        boost_frame(np.eye(4), [0.8, 0.7, 0.0])
