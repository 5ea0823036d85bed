"""Linear polarisation of disk light: emission, transport to the observer, Stokes maps.

Emission
--------
A crossing emits light of degree p and E-vector angle chi_em in the emitter's
rest frame (the Keplerian gas of :mod:`render.light.disk`):

``electron_scattering``
    Chandrasekhar's (1960) semi-infinite, conservative electron-scattering
    atmosphere: p(mu) = (I_r - I_l) / (I_r + I_l) with I_l = q H_l(mu),
    I_r = H_r(mu) (mu + c), where H_l and H_r are his H-functions of the
    characteristic functions (3/4)(1 - mu^2) and (3/8)(1 - mu^2) and mu is the
    cosine of the emission angle.  The E-vector lies parallel to the disk
    surface (chi_em = 0); p rises from 0 at mu = 1 to about 11.7 % at the limb.
``constant``
    A fixed degree and angle (scene keys ``polarisation.degree``,
    ``polarisation.angle``).

The emitter's angle chi_em is measured in its rest frame, on the plane normal
to the photon direction n, from f_par = unit(n x N) (N the disk normal: the
E-vector parallel to the surface) towards f_perp = n x f_par, i.e.
counter-clockwise as the receiver sees it.

Transport
---------
The polarisation vector f is parallel transported along the null geodesic
with k.f = 0.  In Kerr the complex Walker–Penrose quantity

    kappa = kappa_1 + i kappa_2 = (A - i B)(r - i a cos(theta)),
    A = (k^t f^r - k^r f^t) + a sin^2(theta) (k^r f^phi - k^phi f^r),
    B = [(r^2 + a^2)(k^phi f^theta - k^theta f^phi) - a (k^t f^theta - k^theta f^t)] sin(theta)

is conserved (Walker & Penrose 1970; Chandrasekhar 1983, sec. 62), so the
vector at the observer follows exactly from its value at the emitter, for
every order, with no integration.  At a distant observer with screen
coordinates (alpha, beta) (Bardeen 1973) and nu = -(alpha + a sin i),

    E_alpha = (beta kappa_2 - nu kappa_1) / (beta^2 + nu^2),
    E_beta  = (beta kappa_1 + nu kappa_2) / (beta^2 + nu^2)

(Connors, Piran & Stark 1980, eqs. 4-6; Chandrasekhar 1983).  A camera at
finite radius solves the 2 x 2 real system kappa(f) = kappa for f on its
pixel's screen (see :func:`camera_screen_vectors`).  The degree p is invariant.

Angles at the observer
----------------------
The image is the sky as seen: north up, east to the LEFT (the FITS habit of
:mod:`render.output.products`, CDELT1 < 0).  The polarisation angle EVPA
follows the IAU convention (IAU 1974, Transactions XVB, 166): measured from
north through east, in (-90, 90] degrees, so EVPA = atan2(-E_x, E_y) with
(E_x, E_y) the E-vector along the image's right and up.  Stokes
Q = p I cos(2 EVPA), U = p I sin(2 EVPA), V = 0.

Not modelled: Faraday rotation, returning radiation (light bent back onto the
disk), absorption between the disk and the observer.

References
----------
Chandrasekhar (1960), Radiative Transfer, Dover, sec. 70 and Table XXIV.
Walker & Penrose (1970), Commun. Math. Phys. 18, 265.
Connors, Piran & Stark (1980), ApJ 235, 224.
Chandrasekhar (1983), The Mathematical Theory of Black Holes, sec. 62.
"""

import functools
import math
from dataclasses import dataclass

import numpy as np
from numba import njit, prange

from ..camera.observers import camera_photons

__all__ = ["POLARISATION_MODELS", "Polarisation", "chandrasekhar_degree",
           "chandrasekhar_degree_exact",
           "chandrasekhar_h_function", "walker_penrose", "emitted_kappa",
           "distant_screen_vector", "camera_screen_vectors", "evpa_from_screen",
           "crossing_kappa_signs", "observed_stokes", "crossing_stokes"]

POLARISATION_MODELS = ("none", "electron_scattering", "constant")

# Chandrasekhar (1960), Table XXIV (from memory): degree of polarisation at the limb,
# mu = 0, of the conservative electron-scattering (Thomson) Milne problem.  It fixes the
# constants c and q of I_l = q H_l(mu), I_r = H_r(mu)(mu + c) together with p(1) = 0.
LIMB_DEGREE = 0.11713
_H_NODES = 96   # Gauss–Legendre nodes of the H-equations (H converges to ~1e-6 with 64)


@dataclass(frozen=True)
class Polarisation:
    """The emitted polarisation: ``model`` (one of POLARISATION_MODELS), degree and angle.

    ``degree`` (0..1) and ``angle_deg`` (the emitter's chi_em) are used by ``constant``.
    """

    model: str = "none"
    degree: float = 0.0
    angle_deg: float = 0.0

    def emitted(self, mu):
        """(p, chi_em in rad) at emission cosines ``mu`` (arrays of mu's shape)."""
        mu = np.asarray(mu, dtype=float)
        if self.model == "electron_scattering":
            return chandrasekhar_degree(mu), np.zeros_like(mu)
        return np.full(mu.shape, float(self.degree)), np.full(mu.shape,
                                                              math.radians(self.angle_deg))


@functools.lru_cache(maxsize=None)
def _h_nodes(kind):
    """Gauss nodes, weights and converged H values of Chandrasekhar's H_l ('l') or H_r ('r')."""
    x, w = np.polynomial.legendre.leggauss(_H_NODES)
    mu, w = 0.5 * (x + 1.0), 0.5 * w
    psi = (0.75 if kind == "l" else 0.375) * (1.0 - mu * mu)
    kernel = w * psi / (mu[:, None] + mu[None, :])
    h = np.ones_like(mu)
    # H = 1 / (1 - mu int Psi H / (mu + mu')): plain iteration, slow but sure for the
    # conservative H_l; stop when the update is below 1e-13.
    for _ in range(200000):
        new = 1.0 / (1.0 - mu * (kernel @ h))
        if np.max(np.abs(new - h)) < 1e-13:
            h = new
            break
        h = new
    return mu, w * psi, h


def chandrasekhar_h_function(mu, kind):
    """Chandrasekhar's H_l (kind 'l') or H_r (kind 'r') at ``mu`` in [0, 1].

    H(mu) = 1 + mu H(mu) int_0^1 Psi(mu') H(mu') / (mu + mu') dmu', with
    Psi_l = (3/4)(1 - mu^2) (conservative) and Psi_r = (3/8)(1 - mu^2), solved on
    Gauss–Legendre nodes and extended to any mu by the equation itself (Nystrom).

    References
    ----------
    Chandrasekhar (1960), Radiative Transfer, sec. 70, eqs. for H_l and H_r.

    Examples
    --------
    >>> float(chandrasekhar_h_function(0.0, "l"))
    1.0
    """
    nodes, weighted_psi, h = _h_nodes(kind)
    mu = np.asarray(mu, dtype=float)
    flat = mu.reshape(-1, 1)
    value = 1.0 / (1.0 - flat[:, 0] * ((weighted_psi * h) / (flat + nodes)).sum(axis=1))
    return value.reshape(mu.shape)


def chandrasekhar_degree_exact(mu):
    """:func:`chandrasekhar_degree` from the H-functions at every point (slow: N x nodes)."""
    mu = np.asarray(mu, dtype=float)
    safe = np.clip(np.nan_to_num(mu, nan=1.0), 0.0, 1.0)
    h = float(chandrasekhar_h_function(1.0, "r")) / float(chandrasekhar_h_function(1.0, "l"))
    c = h * (1.0 + LIMB_DEGREE) / ((1.0 - h) - LIMB_DEGREE * (1.0 + h))
    i_l = h * (1.0 + c) * chandrasekhar_h_function(safe, "l")
    i_r = chandrasekhar_h_function(safe, "r") * (safe + c)
    return np.where(np.isnan(mu), np.nan, (i_r - i_l) / (i_r + i_l))


@functools.lru_cache(maxsize=None)
def _degree_table():
    """p on a grid uniform in s = sqrt(mu), where p is smooth (H has mu log mu terms at 0)."""
    s = np.linspace(0.0, 1.0, 4097)
    return s, chandrasekhar_degree_exact(s * s)


def chandrasekhar_degree(mu):
    """Degree of linear polarisation of an electron-scattering atmosphere at emission cosine mu.

    p = (I_r - I_l) / (I_r + I_l), I_l = q H_l(mu), I_r = H_r(mu)(mu + c), with
    q = h (1 + c), h = H_r(1) / H_l(1), from p(1) = 0 (no preferred direction along
    the normal), and c from Chandrasekhar's limb value p(0) = (c - q)/(c + q) = 11.713 %
    (c = 0.873, as in his sec. 70).  Positive p: the E-vector is parallel to the
    surface.  Interpolated (linearly in sqrt(mu), error below 1e-7) from a table of
    :func:`chandrasekhar_degree_exact`.  NaN stays NaN.

    References
    ----------
    Chandrasekhar (1960), Radiative Transfer, sec. 70 and Table XXIV (p = 11.71 % at mu = 0).

    Examples
    --------
    >>> round(float(chandrasekhar_degree(1.0)), 12)
    0.0
    """
    mu = np.asarray(mu, dtype=float)
    s, table = _degree_table()
    with np.errstate(invalid="ignore"):
        return np.interp(np.sqrt(np.clip(mu, 0.0, 1.0)), s, table) + 0.0 * mu


@njit(cache=True)
def walker_penrose(k, f, r, cos_t, sin_t, a):
    """(kappa_1, kappa_2) of momentum k and polarisation f (contravariant t, r, theta, phi).

    Works on scalars (k, f of length 4) and, elementwise, on arrays ``k[i]`` of any shape.

    References
    ----------
    Walker & Penrose (1970); Chandrasekhar (1983), sec. 62; Connors, Piran & Stark (1980), eq. 3.
    """
    big_a = (k[0] * f[1] - k[1] * f[0]) + a * sin_t * sin_t * (k[1] * f[3] - k[3] * f[1])
    big_b = ((r * r + a * a) * (k[3] * f[2] - k[2] * f[3])
             - a * (k[0] * f[2] - k[2] * f[0])) * sin_t
    c = a * cos_t
    return big_a * r - big_b * c, -(big_a * c + big_b * r)


@njit(cache=True)
def _surface_kappa(r, lam, eta, a, sign_r, sign_theta, is_unit):
    """Walker–Penrose constant of a crossing's surface-parallel E-vector (f.f = 1 if ``is_unit``).

    In closed form, with no emitter tetrad.  At the equator (cos theta = 0) the
    E-vector f parallel to the surface has f^theta = 0, and f.u = 0, f.k = 0 for
    the Keplerian emitter (u_t, u_phi proportional to -(x^3 - 2x + a) and
    x^4 - 2ax + a^2, x = sqrt(r); Bardeen, Press & Teukolsky 1972) and the
    forward photon k (E = 1, k_t = -1, k_phi = lam, Delta k_r = K = +-sqrt(R)).
    These fix f up to a factor: (f^t, f^r, f^phi) = (K U_phi, Delta (U_phi +
    lam U_t), -K U_t), with U_t, U_phi the two polynomials above.  With
    k^t - a k^phi = (r^2 + a^2 - a lam) / Delta the constant reduces to
    r kappa = (A', -B'),

        A' = r^2 (U_phi + lam U_t)(r^2 + a^2 - a lam) - R (U_phi + a U_t),
        B' = +-sqrt(eta) K (a U_phi + (r^2 + a^2) U_t),

    four multiplications deep and free of divisions.  Its length (any real
    factor) leaves the observed angle unchanged, so f is only normalised when
    ``is_unit`` asks for it.  Returns (0, 0) for light leaving along the normal
    (f parallel to k).

    References
    ----------
    Walker & Penrose (1970); Connors, Piran & Stark (1980), sec. II;
    Chandrasekhar (1983), sec. 62; Bardeen, Press & Teukolsky (1972), ApJ 178, 347
    (the circular orbits' u_t, u_phi).
    """
    r2, a2 = r * r, a * a
    delta = r2 - 2.0 * r + a2
    reach = r2 + a2 - a * lam
    big_r = max(reach * reach - delta * (eta + (lam - a) ** 2), 0.0)   # rounding at a turn
    root_r = sign_r * math.sqrt(big_r)
    x = math.sqrt(r)
    u_t = -(x * (r - 2.0) + a)
    u_phi = r2 - 2.0 * a * x + a2
    kappa1 = r2 * (u_phi + lam * u_t) * reach - big_r * (u_phi + a * u_t)
    kappa2 = -sign_theta * math.sqrt(max(eta, 0.0)) * root_r * (a * u_phi + (r2 + a2) * u_t)
    if not is_unit:
        return kappa1, kappa2
    f_t, f_r, f_phi = root_r * u_phi, delta * (u_phi + lam * u_t), -root_r * u_t
    size = (-(1.0 - 2.0 / r) * f_t * f_t - 4.0 * a / r * f_t * f_phi + r2 / delta * f_r * f_r
            + (r2 + a2 + 2.0 * a2 / r) * f_phi * f_phi)
    scale = 1.0 / (r * math.sqrt(size)) if size > 0.0 else 0.0
    return kappa1 * scale, kappa2 * scale


@njit(cache=True)
def _turned_kappa(k1, k2, cos_chi, sin_chi):
    """kappa of the E-vector turned by chi from the surface direction towards n x f_par.

    Turning f by 90 degrees on the screen multiplies kappa by -i (the constant
    is the self-dual part of the bivector k ^ f), so the emitter's angle is a
    complex phase: kappa(chi) = kappa(0) exp(-i chi).
    """
    return k1 * cos_chi + k2 * sin_chi, k2 * cos_chi - k1 * sin_chi


@njit(cache=True)
def _emitted_kernel(r, lam, eta, a, sign_r, sign_theta, chi, kappa1, kappa2):
    n_rays, n_orders = r.shape
    for i in range(n_rays):
        for j in range(n_orders):
            if not (r[i, j] == r[i, j]) or not (chi[i, j] == chi[i, j]):
                kappa1[i, j], kappa2[i, j] = np.nan, np.nan
                continue
            k1, k2 = _surface_kappa(r[i, j], lam[i], eta[i], a, sign_r[i, j], sign_theta[i, j],
                                    True)
            kappa1[i, j], kappa2[i, j] = _turned_kappa(k1, k2, math.cos(chi[i, j]),
                                                       math.sin(chi[i, j]))


def emitted_kappa(r, lam, eta, spin, sign_r, sign_theta, chi):
    """Walker–Penrose constant (kappa_1, kappa_2) of each crossing's emitted E-vector.

    Parameters
    ----------
    r : ndarray (N, orders)
        Crossing radii (NaN: no crossing; gives NaN).
    lam, eta : ndarray (N,)
        The rays' L/E and Q/E^2.
    spin : float
    sign_r, sign_theta : ndarray (N, orders)
        Signs of the forward photon's k^r and k^theta at the crossing
        (:func:`crossing_kappa_signs`).
    chi : ndarray (N, orders)
        The emitter's E-vector angle (rad) from the direction parallel to the surface.

    Returns
    -------
    kappa1, kappa2 : ndarray (N, orders)
        Of the unit E-vector (f.f = 1); zero where the photon leaves along the normal.

    References
    ----------
    Walker & Penrose (1970); Connors, Piran & Stark (1980), sec. II.
    """
    r = np.ascontiguousarray(r, dtype=float)
    shape = r.shape
    kappa1, kappa2 = np.empty(shape), np.empty(shape)
    _emitted_kernel(r, np.ascontiguousarray(lam, dtype=float),
                    np.ascontiguousarray(eta, dtype=float), float(spin),
                    np.ascontiguousarray(np.broadcast_to(sign_r, shape), dtype=float),
                    np.ascontiguousarray(np.broadcast_to(sign_theta, shape), dtype=float),
                    np.ascontiguousarray(np.broadcast_to(chi, shape), dtype=float),
                    kappa1, kappa2)
    return kappa1, kappa2


def crossing_kappa_signs(inward, mu_start, dmu_start):
    """Signs of the forward photon's (k^r, k^theta) at each recorded crossing.

    ``inward`` (the kernels' per-crossing flag) says the backward ray moved
    inward, i.e. the photon itself moved outward (k^r > 0).  Crossings of the
    equator alternate in direction: a ray that starts (backward) on the side
    s = sign(mu) of the plane reaches crossing n (from 0) going towards -s (-1)^n
    backward, so the photon moves towards +s (-1)^n in mu = cos(theta), i.e.
    k^theta has the sign -s (-1)^n.

    Examples
    --------
    >>> r_sign, t_sign = crossing_kappa_signs(np.array([[True, False]]), np.array([0.5]),
    ...                                       np.array([0.0]))
    >>> r_sign.tolist(), t_sign.tolist()
    ([[1.0, -1.0]], [[-1.0, 1.0]])
    """
    inward = np.asarray(inward)
    side = np.where(mu_start != 0.0, np.sign(mu_start), np.sign(dmu_start))
    side = np.where(side == 0.0, 1.0, side)
    alternate = (-1.0) ** np.arange(inward.shape[1])
    return np.where(inward, 1.0, -1.0), -side[:, None] * alternate[None, :]


def distant_screen_vector(kappa1, kappa2, alpha, beta, spin, inclination_deg):
    """E-vector (E_alpha, E_beta) at a distant observer from the Walker–Penrose constant.

    References
    ----------
    Connors, Piran & Stark (1980), eqs. 4-6; Chandrasekhar (1983), sec. 62.

    Examples
    --------
    >>> distant_screen_vector(3.0, 0.0, 3.0, 0.0, 0.0, 90.0)   # kappa(e_alpha) = (-nu, beta)
    (1.0, 0.0)
    """
    nu = -(np.asarray(alpha, dtype=float) + spin * np.sin(np.radians(inclination_deg)))
    beta = np.asarray(beta, dtype=float)
    norm = beta * beta + nu * nu
    with np.errstate(invalid="ignore", divide="ignore"):
        e_alpha = (beta * kappa2 - nu * kappa1) / norm
        e_beta = (beta * kappa1 + nu * kappa2) / norm
    if np.ndim(e_alpha) == 0:
        return float(e_alpha), float(e_beta)
    return e_alpha, e_beta


def camera_screen_vectors(k, tetrad, direction, r, theta, spin):
    """kappa of a camera pixel's two screen directions: ((k1, k2) of right, (k1, k2) of up).

    The pixel's screen is the plane normal to the photon's direction of travel
    ``direction`` (N, 3) (frame components along e_r, e_theta, e_phi); "right"
    is e_phi made orthogonal to it and "up" completes (right, up, -direction)
    as the camera's (e_phi, -e_theta, -e_r) would.  ``k`` (4, N) is the photon's
    momentum, ``tetrad`` the camera's frame (rows e_t, e_r, e_theta, e_phi).

    References
    ----------
    Walker & Penrose (1970); Chandrasekhar (1983), sec. 62.
    """
    n = np.asarray(direction, dtype=float)
    right = np.array([0.0, 0.0, 1.0])[None, :] - n[:, 2:3] * n
    right /= np.linalg.norm(right, axis=1, keepdims=True)
    up = np.cross(n, right)   # (right, up, n) right-handed: n points at the viewer
    cos_t, sin_t = math.cos(theta), math.sin(theta)
    out = []
    for vector in (right, up):
        f = vector @ tetrad[1:]          # (N, 4) contravariant components
        out.append(walker_penrose(np.ascontiguousarray(k), np.ascontiguousarray(f.T), r,
                                  cos_t, sin_t, float(spin)))
    return out


def evpa_from_screen(e_x, e_y):
    """IAU polarisation angle (rad, in (-pi/2, pi/2]) of an E-vector along image right/up.

    North is up and east is left, so the angle from north through east is
    atan2(-E_x, E_y), folded into (-pi/2, pi/2] (E and -E are the same polarisation).

    Examples
    --------
    >>> round(float(np.degrees(evpa_from_screen(-1.0, 1.0))), 6)   # towards north-east
    45.0
    """
    angle = np.arctan2(-np.asarray(e_x, dtype=float), np.asarray(e_y, dtype=float))
    return np.where(angle <= -np.pi / 2, angle + np.pi, np.where(angle > np.pi / 2,
                                                                 angle - np.pi, angle))


def _emission_table(polarisation):
    """The emitted degree as a table uniform in sqrt(mu), and the emitter's angle chi (rad)."""
    if polarisation.model == "electron_scattering":
        return _degree_table()[1], 0.0
    return np.full(2, float(polarisation.degree)), math.radians(polarisation.angle_deg)


def observed_stokes(view, polarisation, raw, bundle, alpha, beta, mu, intensity, hits):
    """Stokes maps at the observer of the crossings that shine: per order, summed, degree, angle.

    One pass over the crossings (:func:`_stokes_kernel`): for each crossing that
    shines, the emitted degree p(mu), the Walker–Penrose constant of its E-vector
    in closed form, the E-vector on the observer's screen and Q + iU =
    p I exp(2 i EVPA), with no trigonometric function per crossing; crossings
    that do not shine cost a test of ``hits``.

    Parameters
    ----------
    view : Viewpoint
        The observer (distant, or a camera at rest in its frame, off the axis).
    polarisation : Polarisation
        Its ``model`` is not ``none``.
    raw : dict
        The traced rays (``r``, ``inward``; :func:`render.geodesics.tracing.trace`).
    bundle : RayBundle
    alpha, beta : ndarray
        The rays' image-plane points (M), as the bundle was made from them.
    mu : ndarray (N, orders)
        Emission cosines in the emitters' frames.
    intensity : ndarray (N, orders)
        Each crossing's contribution to Stokes I (any units; NaN counts as 0).
    hits : ndarray of bool (N, orders)
        The crossings that shine.

    Returns
    -------
    dict
        ``stokes_i_order``, ``stokes_q_order``, ``stokes_u_order`` (N, orders);
        ``stokes_i``, ``stokes_q``, ``stokes_u``, ``polarised_degree``
        (sqrt(Q^2 + U^2) / I, NaN where I = 0) and ``polarisation_angle`` (IAU,
        degrees, NaN where unpolarised), each (N,).  Q = p I cos(2 EVPA),
        U = p I sin(2 EVPA), V = 0; the angle is undefined (no Q, U) for light
        leaving along the disk's normal.

    References
    ----------
    Walker & Penrose (1970); Connors, Piran & Stark (1980), eqs. 4-6;
    IAU (1974), Transactions XVB, 166 (the angle).
    """
    screen = np.empty((0, 4))
    if view.placement != "distant":
        screen = _camera_screen(view, alpha, beta)
    return crossing_stokes(view.spin, view.inclination_deg, view.roll_deg, polarisation, raw["r"],
                           raw["inward"], bundle, (alpha, beta), mu, intensity, hits, screen)


def crossing_stokes(spin, inclination_deg, roll_deg, polarisation, r, inward, bundle, points, mu,
                    intensity, hits, screen=None):
    """:func:`observed_stokes` from plain values (a distant observer unless ``screen`` is given).

    ``points`` are the rays' (alpha, beta) in M; ``screen`` (N, 4), when given,
    maps each ray's (kappa_1, kappa_2) linearly to its E-vector (right, up)
    before the roll (a camera's pixel screens, :func:`_camera_screen`).
    """
    shape = np.shape(r)
    table, chi = _emission_table(polarisation)
    # Orders first in memory: the still's per-order maps (orders, H, W) are then views.
    per_order = np.zeros((3, shape[1], shape[0]))
    totals = np.empty((5, shape[0]))
    roll = math.radians(roll_deg)
    arrays = (np.ascontiguousarray(r, dtype=float), np.ascontiguousarray(hits, dtype=np.bool_),
              np.ascontiguousarray(inward, dtype=np.bool_),
              np.ascontiguousarray(bundle.lam, dtype=float),
              np.ascontiguousarray(bundle.eta, dtype=float),
              np.ascontiguousarray(bundle.states, dtype=float),
              np.ascontiguousarray(points[0], dtype=float).ravel(),
              np.ascontiguousarray(points[1], dtype=float).ravel(),
              np.ascontiguousarray(mu, dtype=float), np.ascontiguousarray(intensity, dtype=float),
              float(spin), float(spin) * math.sin(math.radians(inclination_deg)), math.cos(roll),
              math.sin(roll), np.empty((0, 4)) if screen is None else screen, table,
              math.cos(chi), math.sin(chi), per_order, totals)
    if shape[0] <= STOKES_BLOCK:
        _stokes_kernel(0, shape[0], *arrays)
    else:
        _stokes_blocks(*arrays)
    out = {name: per_order[k].T for k, name in enumerate(("stokes_i_order", "stokes_q_order",
                                                          "stokes_u_order"))}
    for row, name in enumerate(("stokes_i", "stokes_q", "stokes_u", "polarised_degree",
                                "polarisation_angle")):
        out[name] = totals[row]
    return out


@njit(cache=True)
def _tabled_degree(table, mu):
    """The degree at emission cosine mu from a table uniform in sqrt(mu) (NaN stays NaN)."""
    if not (mu == mu):
        return np.nan
    last = table.size - 1
    x = math.sqrt(min(max(mu, 0.0), 1.0)) * last
    k = min(int(x), last - 1)
    return table[k] + (x - k) * (table[k + 1] - table[k])


@njit(cache=True)
def _ray_side(states, n):
    """The side s = sign(mu) of the equator a ray starts on (its first move if on it)."""
    if states[n, 2] != 0.0:
        return 1.0 if states[n, 2] > 0.0 else -1.0
    if states[n, 3] != 0.0:
        return 1.0 if states[n, 3] > 0.0 else -1.0
    return 1.0


# Rays per serial block of the Stokes pass.  A block of 2^17 rays is 1-3 ms of work; below
# that a parallel region's start and closing barrier (numba's threads, waiting on one
# another, for milliseconds on a loaded machine) cost more than they save.
STOKES_BLOCK = 1 << 17


@njit(cache=True, parallel=True)
def _stokes_blocks(r, hits, inward, lam, eta, states, alpha, beta, mu, intensity, a, a_sin_i,
                   cos_roll, sin_roll, screen, table, cos_chi, sin_chi, per_order, totals):
    """:func:`_stokes_kernel` over blocks of STOKES_BLOCK rays, in parallel."""
    n_rays = r.shape[0]
    for b in prange((n_rays + STOKES_BLOCK - 1) // STOKES_BLOCK):
        _stokes_kernel(b * STOKES_BLOCK, min((b + 1) * STOKES_BLOCK, n_rays), r, hits, inward,
                       lam, eta, states, alpha, beta, mu, intensity, a, a_sin_i, cos_roll,
                       sin_roll, screen, table, cos_chi, sin_chi, per_order, totals)


@njit(cache=True)
def _stokes_kernel(start, stop, r, hits, inward, lam, eta, states, alpha, beta, mu, intensity,
                   a, a_sin_i, cos_roll, sin_roll, screen, table, cos_chi, sin_chi, per_order,
                   totals):
    """Rays ``start:stop``, per crossing that shines: p(mu), kappa, the E-vector, I, Q, U.

    The photon's signs at crossing j are those of :func:`crossing_kappa_signs`.
    The E-vector (E_x, E_y) along the image's right and up gives
    Q + iU = p I (E_y - i E_x)^2 / |E|^2 (EVPA = atan2(-E_x, E_y)).
    ``per_order`` (3, orders, N): I, Q, U of each crossing (left as they are where
    nothing shines: zeros); ``totals`` rows: I, Q, U summed over orders, the degree
    and the angle (deg) of the sums.
    """
    n_orders = r.shape[1]
    is_camera = screen.shape[0] > 0
    for n in range(start, stop):
        i_sum = q_sum = u_sum = 0.0
        side = _ray_side(states, n)
        nu = -(alpha[n] + a_sin_i)
        for j in range(n_orders):
            if not hits[n, j] or not (intensity[n, j] == intensity[n, j]):
                continue
            value = intensity[n, j]
            per_order[0, j, n] = value
            i_sum += value
            p = _tabled_degree(table, mu[n, j])
            if not (p != 0.0 and p == p):
                continue
            sign_theta = -side if j % 2 == 0 else side
            k1, k2 = _surface_kappa(r[n, j], lam[n], eta[n], a, 1.0 if inward[n, j] else -1.0,
                                    sign_theta, False)
            k1, k2 = _turned_kappa(k1, k2, cos_chi, sin_chi)
            if is_camera:
                e_a = screen[n, 0] * k1 + screen[n, 1] * k2
                e_b = screen[n, 2] * k1 + screen[n, 3] * k2
            else:   # Connors, Piran & Stark (1980), eqs. 4-6, times beta^2 + nu^2
                e_a = beta[n] * k2 - nu * k1
                e_b = beta[n] * k1 + nu * k2
            e_x = cos_roll * e_a + sin_roll * e_b
            e_y = -sin_roll * e_a + cos_roll * e_b
            size = e_x * e_x + e_y * e_y
            if not size > 0.0:
                continue   # along the normal: no direction parallel to the surface
            scale = p * value / size
            q = scale * (e_y * e_y - e_x * e_x)
            u = -2.0 * scale * e_x * e_y
            per_order[1, j, n], per_order[2, j, n] = q, u
            q_sum += q
            u_sum += u
        polarised = math.hypot(q_sum, u_sum)
        totals[0, n], totals[1, n], totals[2, n] = i_sum, q_sum, u_sum
        totals[3, n] = polarised / i_sum if i_sum > 0.0 else np.nan
        totals[4, n] = math.degrees(0.5 * math.atan2(u_sum, q_sum)) if polarised > 0.0 else np.nan


def _camera_screen(view, alpha, beta):
    """Per pixel, the 2 x 2 map kappa -> (E_right, E_up) of a camera (N, 4), row-major.

    Solves kappa = c_r kappa(right) + c_u kappa(up) for the pixel's screen vectors.
    """
    k, tetrad, n = camera_photons(alpha, beta, view.spin, view.distance, view.inclination_deg,
                                  view.frame)
    theta = math.radians(view.inclination_deg)
    (r1, r2), (u1, u2) = camera_screen_vectors(k, tetrad, n, view.distance, theta, view.spin)
    det = r1 * u2 - r2 * u1
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.ascontiguousarray(np.stack([u2, -u1, -r2, r1], axis=1) / det[:, None])
