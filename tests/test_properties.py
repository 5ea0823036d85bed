"""Property tests (hypothesis) across the parameter space of a still.

Drawn: spin in (-0.9999, 0.9999), inclination in [0, 180] deg, a distant
observer or a camera (zamo or static frame) from just outside the radius its
frame allows (the horizon, or the ergoregion) to 1e4 M, field of view 1 M to
100 M, disk edges anywhere valid, opaque or transparent, 1 to 3 orders, images
of 8 x 8 to 16 x 16 pixels.

Checked:

* no NaN or inf in any output, except the documented NaN of "no such
  crossing" (r, phi, delay, g; g also inside the ISCO) and of "did not escape"
  (theta_end, phi_end); every pixel has one of the four fates;
* i and 180 - i give images mirrored top to bottom (equatorial reflection
  symmetry of the Kerr metric);
* at the end of every ray, the null condition g^{mu nu} p_mu p_nu = 0 and the
  two first integrals of the separated motion (du/dsigma)^2 = P(u),
  (dmu/dsigma)^2 = M(mu) hold to <= 1e-9 relative, i.e. the Carter constant
  recomputed from the final state equals the ray's eta (Carter 1968).  E and L
  enter the kernel only through lam = L/E and eta = Q/E^2, which are constants
  of the integration by construction; what can drift is the state, and that
  is what these checks measure.

The default run draws a few examples per property (``deadline=None``: the
first call may compile); ``pytest -m slow tests/test_properties.py`` draws many
more.
"""

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from render import default_scene
from render.camera.observers import camera_rays, distant_observer_rays, image_plane_grid
from render.geodesics.tracing import trace_bundle
from render.spacetime.kerr import ergosphere_radius, horizon_radii, isco_radius
from render.imaging.still import render_still

FAST = settings(max_examples=10, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.too_slow])
THOROUGH = settings(max_examples=150, deadline=None,
                    suppress_health_check=[HealthCheck.too_slow])

# At the kernel's tolerance tol, the end-state residuals below come out at a few
# times tol (they grow in proportion to it, measured from 1e-9 down to 1e-11), so
# the 1e-9 bound of the first integrals is checked at tracing tolerance 1e-10.
TRACE_TOLERANCE = 1e-10
INTEGRAL_BOUND = 1e-9

spins = st.floats(-0.9999, 0.9999, allow_nan=False)
inclinations = st.floats(0.0, 180.0, allow_nan=False)
fields_of_view = st.floats(1.0, 100.0, allow_nan=False)
sizes = st.integers(8, 16)


@st.composite
def observers(draw):
    """(kind, frame, distance) with the camera from just outside its allowed radius to 1e4 M."""
    kind = draw(st.sampled_from(["distant", "camera"]))
    frame = draw(st.sampled_from(["zamo", "static"]))
    # Distance above the frame's limit, log-uniform from 1e-3 M to ~1e4 M.
    excess = 10.0 ** draw(st.floats(-3.0, 4.0))
    return kind, frame, excess


def camera_distance(spin, inclination, frame, excess):
    limit = (horizon_radii(spin)[0] if frame == "zamo"
             else ergosphere_radius(spin, math.radians(inclination)))
    return min(limit + excess, 1e4)


@st.composite
def disks(draw, spin):
    """Valid disk edges: inner at or beyond the ISCO, outer beyond the inner edge."""
    r_isco = isco_radius(spin)
    inner = r_isco * (1.0 + draw(st.sampled_from([0.0, 0.0, 0.1, 1.0, 5.0])))
    outer = inner * (1.0 + 10.0 ** draw(st.floats(-3.0, 3.0)))
    return inner, min(outer, 1e6)


def carter_residuals(state, lam, eta, a):
    """Relative residuals of the first integrals at a state (u, du/ds, mu, dmu/ds, ...).

    Returns (radial, polar, null), each relative to the largest term it balances.
    Written from the Boyer–Lindquist Kerr geodesic equations with E = 1
    (Carter 1968, eqs. for R(r) and Theta(theta); MTW 1973 eq. 33.32-33.33), not
    from the kernel's polynomial coefficients.
    """
    u, p_u, mu, p_mu = state[:, 0], state[:, 1], state[:, 2], state[:, 3]
    a2 = a * a
    # u^4 R(1/u), R = (r^2 + a^2 - a lam)^2 - Delta (eta + (lam - a)^2)
    r_first = (1.0 + (a2 - a * lam) * u * u) ** 2
    r_second = (u * u - 2.0 * u ** 3 + a2 * u ** 4) * (eta + (lam - a) ** 2)
    radial = np.abs(p_u * p_u - (r_first - r_second)) / np.maximum.reduce(
        [np.ones_like(u), p_u * p_u, r_first, np.abs(r_second)])
    # Carter constant from the polar state: Q = p_theta^2 + cos^2(lam^2/sin^2 - a^2),
    # p_theta = dtheta/dsigma = -(dmu/dsigma)/sin(theta); written times sin^2 so
    # that it stays finite on the axis (where lam = 0).
    sin2 = 1.0 - mu * mu
    polar = np.abs(p_mu * p_mu + mu * mu * (lam * lam - a2 * sin2) - eta * sin2) / np.maximum(
        np.abs(eta) + lam * lam + a2, 1e-300)
    # Null condition: Sigma g^{mu nu} p_mu p_nu = -[(r^2+a^2) - a lam]^2/Delta
    #   + (lam - a sin^2)^2/sin^2 + Delta p_r^2 + p_theta^2 (MTW 1973, eq. 33.2 inverse
    # metric), multiplied by sin^2 Delta u^4 so that it is regular at u = 0 and on the
    # axis (where p_theta^2 = (dmu/dsigma)^2/sin^2 is 0/0).  Without the sin^2 factor a
    # state error in mu (absolute, ~ the tolerance) would count 1/sin^2 times more near
    # the poles: mu = cos(theta) resolves theta only to ~tolerance/sin(theta) there.
    delta_u4 = u * u * (1.0 - 2.0 * u + a2 * u * u)
    residual = (sin2 * (p_u * p_u - r_first)
                + delta_u4 * ((lam - a * sin2) ** 2 + p_mu * p_mu))
    # Relative to the size its terms have for this ray away from the axis: the
    # radial ones are ~r_first, the angular ones ~Delta u^4 (eta + lam^2 + a^2).
    null = np.abs(residual) / (r_first + delta_u4 * (np.abs(eta) + lam * lam + a2))
    return radial, polar, null


def bundle_for(spin, inclination, observer, fov, width, height):
    kind, frame, excess = observer
    alpha, beta = image_plane_grid(width, height, fov)
    if kind == "distant":
        return distant_observer_rays(alpha, beta, spin, inclination)
    distance = camera_distance(spin, inclination, frame, excess)
    return camera_rays(alpha, beta, spin, distance, inclination, 0.0, frame)


def check_end_states(spin, inclination, observer, fov, width, disk, opaque):
    bundle = bundle_for(spin, inclination, observer, fov, width, width)
    r_in, r_out = disk
    raw = trace_bundle(bundle, spin, n_record=2, tolerance=TRACE_TOLERANCE,
                       stop_on_disk=opaque, r_in=r_in, r_out=r_out, final_state=True)
    assert set(np.unique(raw["fate"])) <= {0, 1, 2, 3}
    # Every initial state is finite (a degenerate frame near the axis once gave NaN),
    # and every ray that ended has a final state (unresolved ones: their last state).
    assert np.all(np.isfinite(bundle.states)) and np.all(np.isfinite(bundle.eta))
    # A camera just outside the horizon may sit inside the ergoregion: photons of negative
    # conserved energy are traced too (with the sign of E), and obey the same integrals
    # (R and Theta in lam, eta are the same functions for either sign of E; Carter 1968).
    final = raw["final_state"]
    assert np.all(np.isfinite(final)), final[~np.isfinite(final).all(axis=1)]
    lam, eta = bundle.lam, bundle.eta
    radial, polar, null = carter_residuals(final, lam, eta, spin)
    assert radial.max() <= INTEGRAL_BOUND, radial.max()
    assert polar.max() <= INTEGRAL_BOUND, polar.max()
    assert null.max() <= INTEGRAL_BOUND, null.max()
    # The initial states satisfy the same conditions to rounding (checks the checker;
    # the camera's frame arithmetic leaves a few 1e-12).
    start = carter_residuals(bundle.states, bundle.lam, bundle.eta, spin)
    assert max(float(x.max()) for x in start) <= 1e-10


end_state_args = dict(spin=spins, inclination=inclinations, observer=observers(),
                      fov=fields_of_view, width=sizes,
                      disk=st.tuples(st.floats(1.0, 8.0), st.floats(1.1, 40.0)),
                      opaque=st.booleans())


def _disk_args(spin, disk):
    # Edges drawn as multiples of the ISCO (the kernel itself accepts any edges).
    r_isco = isco_radius(spin)
    return r_isco * disk[0], r_isco * disk[0] * disk[1]


@FAST
@given(**end_state_args)
def test_null_condition_and_carter_constant_hold_at_every_ray_end(
        spin, inclination, observer, fov, width, disk, opaque):
    check_end_states(spin, inclination, observer, fov, width, _disk_args(spin, disk), opaque)


@pytest.mark.slow
@THOROUGH
@given(**end_state_args)
def test_null_condition_and_carter_constant_thorough(
        spin, inclination, observer, fov, width, disk, opaque):
    check_end_states(spin, inclination, observer, fov, width, _disk_args(spin, disk), opaque)


# --- every output of a still --------------------------------------------------------------


@st.composite
def scenes(draw):
    spin = draw(spins)
    inclination = draw(inclinations)
    kind, frame, excess = draw(observers())
    inner, outer = draw(disks(spin))
    width = draw(sizes)
    values = {
        "black_hole.spin": spin, "observer.inclination": inclination,
        "observer.placement": kind, "observer.frame": frame,
        "observer.field_of_view": draw(fields_of_view),
        "image.width": width, "image.height": draw(sizes),
        "disk.inner_radius": "isco" if inner == isco_radius(spin) else inner,
        "disk.outer_radius": outer,
        "disk.surface": draw(st.sampled_from(["opaque", "transparent"])),
        "disk.orders": draw(st.integers(1, 3)),
        "emission.limb_darkening": draw(st.sampled_from(["none", "electron_scattering"])),
    }
    if kind == "camera":
        values["observer.distance"] = camera_distance(spin, inclination, frame, excess)
    return values


def check_still_outputs(values):
    still = render_still(default_scene(**values))
    height, width = values["image.height"], values["image.width"]
    orders = values["disk.orders"]
    # Every pixel has exactly one of the four fates, and the counts add up.
    assert still.fate.shape == (height, width)
    assert set(np.unique(still.fate)) <= {0, 1, 2, 3}
    assert sum(still.metadata["fate_counts"].values()) == width * height
    # Arrays without a documented NaN: all finite.
    for name in ("intensity", "alpha", "beta", "steps"):
        assert np.all(np.isfinite(getattr(still, name))), name
    assert still.pixels.dtype == np.uint8
    assert np.all(still.intensity >= 0.0)
    # Per-order maps: NaN exactly where there is no such crossing; never inf.
    for name in ("r", "phi", "delay", "g"):
        array = getattr(still, name)
        assert array.shape == (orders, height, width)
        assert not np.any(np.isinf(array)), name
    crossed = np.isfinite(still.r)
    assert np.array_equal(np.isfinite(still.phi), crossed)
    assert np.array_equal(np.isfinite(still.delay), crossed)
    # g: NaN where there is no crossing and, by the documented convention, inside the ISCO.
    inside_isco = crossed & (still.r < isco_radius(values["black_hole.spin"]))
    assert np.array_equal(np.isfinite(still.g), crossed & ~inside_isco)
    # A lit crossing has a finite radius between the edges and a finite, positive g.
    lit = still.on_disk
    assert np.all(np.isfinite(still.g[lit])) and np.all(still.g[lit] > 0.0)
    for name, array in still.products.items():
        if name == "emission_cosine":
            assert np.array_equal(np.isfinite(array), lit), name
        else:
            assert not np.any(np.isinf(array)), name
    return still


@FAST
@given(values=scenes())
def test_still_outputs_are_finite_and_every_pixel_has_a_fate(values):
    check_still_outputs(values)


@pytest.mark.slow
@THOROUGH
@given(values=scenes())
def test_still_outputs_thorough(values):
    check_still_outputs(values)


# --- mirror symmetry ----------------------------------------------------------------------


def check_mirror(values):
    # Reflection symmetry of the Kerr metric about its equator (theta -> pi - theta; e.g.
    # Chandrasekhar 1983, from memory): the observer at 180 - i sees the image at i flipped
    # top to bottom.  cos(180 - i) equals -cos(i) only to rounding, so fates may differ
    # only for a pixel within rounding of a fate boundary, which none of these is
    # expected to be; radii agree to far better than 1e-6 relative (tolerance 1e-9 per step).
    upper = render_still(default_scene(**values))
    mirrored = dict(values, **{"observer.inclination": 180.0 - values["observer.inclination"]})
    lower = render_still(default_scene(**mirrored))
    assert np.array_equal(upper.fate, lower.fate[::-1])
    assert np.allclose(upper.r, lower.r[:, ::-1], rtol=1e-6, atol=0, equal_nan=True)
    assert np.allclose(upper.g, lower.g[:, ::-1], rtol=1e-6, atol=0, equal_nan=True)
    peak = max(upper.intensity.max(), 1e-300)
    assert np.allclose(upper.intensity, lower.intensity[::-1], rtol=1e-6, atol=1e-9 * peak)


@FAST
@given(values=scenes())
def test_opposite_inclinations_mirror_top_to_bottom(values):
    check_mirror(values)


@pytest.mark.slow
@THOROUGH
@given(values=scenes())
def test_opposite_inclinations_mirror_thorough(values):
    check_mirror(values)
