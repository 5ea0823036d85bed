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
           "stokes_from_crossings", "crossing_kappa_signs", "observed_polarisation"]

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
def _equatorial_momentum(r, lam, eta, a, sign_r, sign_theta, k):
    """Fill k with the forward photon momentum (E = 1) at the equator; False if R < 0 there."""
    delta = r * r - 2.0 * r + a * a
    big_r = (r * r + a * a - a * lam) ** 2 - delta * (eta + (lam - a) ** 2)
    if big_r < 0.0 or eta < 0.0:
        return False
    p_theta = sign_theta * math.sqrt(eta)
    big_a = (r * r + a * a) ** 2 - a * a * delta
    k[0] = (big_a / (r * r) - 2.0 * a * lam / r) / delta
    k[1] = sign_r * math.sqrt(big_r) / (r * r)
    k[2] = p_theta / (r * r)
    k[3] = (2.0 * a / r + (delta - a * a) * lam / (r * r)) / delta
    return True


@njit(cache=True)
def _emitter_tetrad(r, a, frame):
    """Rows u, e_r, e_theta, e_phi of the Keplerian emitter at the equator (prograde for a >= 0)."""
    omega = 1.0 / (r ** 1.5 + a)
    g_tt, g_tp = -(1.0 - 2.0 / r), -2.0 * a / r
    g_pp = r * r + a * a + 2.0 * a * a / r
    u_t = 1.0 / math.sqrt(-(g_tt + 2.0 * g_tp * omega + g_pp * omega * omega))
    frame[:, :] = 0.0
    frame[0, 0], frame[0, 3] = u_t, u_t * omega
    frame[1, 1] = math.sqrt(r * r - 2.0 * r + a * a) / r
    frame[2, 2] = 1.0 / r
    low_t = g_tt * frame[0, 0] + g_tp * frame[0, 3]
    low_p = g_tp * frame[0, 0] + g_pp * frame[0, 3]
    v_t, v_p = low_p, -low_t   # orthogonal to u in the t-phi plane, along +phi
    norm = math.sqrt(g_tt * v_t * v_t + 2.0 * g_tp * v_t * v_p + g_pp * v_p * v_p)
    frame[3, 0], frame[3, 3] = v_t / norm, v_p / norm


@njit(cache=True)
def _emitted_one(r, lam, eta, a, sign_r, sign_theta, chi, k, frame, out, n, par, perp, f):
    """kappa of one crossing's unit polarisation vector at angle chi from the surface direction.

    ``n``, ``par``, ``perp`` (3) and ``f`` (4) are scratch arrays.
    """
    out[0], out[1] = 0.0, 0.0
    if not _equatorial_momentum(r, lam, eta, a, sign_r, sign_theta, k):
        return
    _emitter_tetrad(r, a, frame)
    g_tt, g_tp = -(1.0 - 2.0 / r), -2.0 * a / r
    g_pp = r * r + a * a + 2.0 * a * a / r
    g_rr = r * r / (r * r - 2.0 * r + a * a)
    # Frame components of k: k_(i) = g(k, e_i); n = spatial part / energy.
    energy = -(g_tt * k[0] * frame[0, 0] + g_tp * (k[0] * frame[0, 3] + k[3] * frame[0, 0])
               + g_pp * k[3] * frame[0, 3])
    n[0] = g_rr * k[1] * frame[1, 1] / energy
    n[1] = r * r * k[2] * frame[2, 2] / energy
    n[2] = (g_tt * k[0] * frame[3, 0] + g_tp * (k[0] * frame[3, 3] + k[3] * frame[3, 0])
            + g_pp * k[3] * frame[3, 3]) / energy
    # f_par = n x N with N = e_theta (the frame's second axis), f_perp = n x f_par.
    size = math.sqrt(n[2] ** 2 + n[0] ** 2)
    if size < 1e-12:
        return   # emitted along the normal: no direction parallel to the surface
    par[0], par[1], par[2] = -n[2] / size, 0.0, n[0] / size
    perp[0] = n[1] * par[2] - n[2] * par[1]
    perp[1] = n[2] * par[0] - n[0] * par[2]
    perp[2] = n[0] * par[1] - n[1] * par[0]
    f[:] = 0.0
    for i in range(3):
        comp = math.cos(chi) * par[i] + math.sin(chi) * perp[i]
        for mu_index in range(4):
            f[mu_index] += comp * frame[i + 1, mu_index]
    out[0], out[1] = walker_penrose(k, f, r, 0.0, 1.0, a)


@njit(cache=True, parallel=True)
def _emitted_kernel(r, lam, eta, a, sign_r, sign_theta, chi, kappa1, kappa2):
    n_rays, n_orders = r.shape
    block = 512   # rays per scratch allocation (one per block, not per ray)
    for b in prange((n_rays + block - 1) // block):
        k, f, out = np.empty(4), np.empty(4), np.empty(2)
        frame = np.empty((4, 4))
        n, par, perp = np.empty(3), np.empty(3), np.empty(3)
        for i in range(b * block, min((b + 1) * block, n_rays)):
            for j in range(n_orders):
                if not (r[i, j] == r[i, j]) or not (chi[i, j] == chi[i, j]):
                    kappa1[i, j], kappa2[i, j] = np.nan, np.nan
                    continue
                _emitted_one(r[i, j], lam[i], eta[i], a, sign_r[i, j], sign_theta[i, j],
                             chi[i, j], k, frame, out, n, par, perp, f)
                kappa1[i, j], kappa2[i, j] = out[0], out[1]


@njit(cache=True, parallel=True)
def _traced_kappa_kernel(r, lam, eta, a, inward, mu_start, dmu_start, chi, kappa1, kappa2):
    """:func:`_emitted_kernel` with the signs of :func:`crossing_kappa_signs` made per ray."""
    n_rays, n_orders = r.shape
    block = 512
    for b in prange((n_rays + block - 1) // block):
        k, f, out = np.empty(4), np.empty(4), np.empty(2)
        frame = np.empty((4, 4))
        n, par, perp = np.empty(3), np.empty(3), np.empty(3)
        for i in range(b * block, min((b + 1) * block, n_rays)):
            side = 1.0
            if mu_start[i] != 0.0:
                side = 1.0 if mu_start[i] > 0.0 else -1.0
            elif dmu_start[i] != 0.0:
                side = 1.0 if dmu_start[i] > 0.0 else -1.0
            for j in range(n_orders):
                if not (r[i, j] == r[i, j]) or not (chi[i, j] == chi[i, j]):
                    kappa1[i, j], kappa2[i, j] = np.nan, np.nan
                    continue
                sign_r = 1.0 if inward[i, j] else -1.0
                sign_theta = -side if j % 2 == 0 else side
                _emitted_one(r[i, j], lam[i], eta[i], a, sign_r, sign_theta, chi[i, j], k, frame,
                             out, n, par, perp, f)
                kappa1[i, j], kappa2[i, j] = out[0], out[1]


def emitted_kappa(r, lam, eta, spin, sign_r, sign_theta, chi):
    """Walker–Penrose constant (kappa_1, kappa_2) of each crossing's emitted unit E-vector.

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
        Zero where the photon leaves along the normal or the crossing is not a
        real point of the ray.

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


def stokes_from_crossings(intensity, degree, evpa, hits):
    """Per-crossing Stokes (I, Q, U) (N, orders) and their sums over orders (N,).

    Q = p I cos(2 EVPA), U = p I sin(2 EVPA); crossings that do not shine, or
    whose angle is undefined (p = 0 along the normal), add their I and no Q, U.

    Examples
    --------
    >>> i, q, u, total = stokes_from_crossings(np.array([[2.0]]), np.array([[0.5]]),
    ...                                        np.array([[0.0]]), np.array([[True]]))
    >>> q.tolist(), [float(t[0]) for t in total]
    ([[1.0]], [2.0, 1.0, 0.0])
    """
    shape = np.shape(hits)
    arrays = [np.ascontiguousarray(np.broadcast_to(a, shape), dtype=float)
              for a in (intensity, degree, evpa)]
    i, q, u = np.empty(shape), np.empty(shape), np.empty(shape)
    totals = np.empty((3, shape[0]))
    _stokes_kernel(*arrays, np.ascontiguousarray(hits, dtype=np.bool_), i, q, u, totals)
    return i, q, u, (totals[0], totals[1], totals[2])


@njit(cache=True, parallel=True)
def _stokes_kernel(intensity, degree, evpa, hits, i_out, q_out, u_out, totals):
    for n in prange(intensity.shape[0]):
        i_sum = q_sum = u_sum = 0.0
        for j in range(intensity.shape[1]):
            i = intensity[n, j] if hits[n, j] and intensity[n, j] == intensity[n, j] else 0.0
            q = u = 0.0
            if i != 0.0 and evpa[n, j] == evpa[n, j] and degree[n, j] == degree[n, j]:
                polarised = degree[n, j] * i
                q = polarised * math.cos(2.0 * evpa[n, j])
                u = polarised * math.sin(2.0 * evpa[n, j])
            i_out[n, j], q_out[n, j], u_out[n, j] = i, q, u
            i_sum += i
            q_sum += q
            u_sum += u
        totals[0, n], totals[1, n], totals[2, n] = i_sum, q_sum, u_sum


def observed_polarisation(view, polarisation, raw, bundle, alpha, beta, mu, hits=None):
    """Degree and IAU angle (rad) at the observer of every crossing, (N, orders) each.

    Parameters
    ----------
    view : Viewpoint
        The observer (distant, or a camera at rest in its frame, off the axis).
    polarisation : Polarisation
    raw : dict
        The traced rays (``r``, ``inward``; :func:`render.geodesics.tracing.trace`).
    bundle : RayBundle
    alpha, beta : ndarray
        The rays' image-plane points (M), as the bundle was made from them.
    mu : ndarray (N, orders)
        Emission cosines in the emitters' frames.
    hits : ndarray of bool (N, orders), optional
        The crossings that shine; the others are skipped (NaN angle, zero degree).

    Returns
    -------
    degree, evpa : ndarray (N, orders)
        NaN angle where the E-vector is undefined (emission along the normal).
    """
    degree, chi = polarisation.emitted(mu)
    r = raw["r"] if hits is None else np.where(hits, raw["r"], np.nan)
    shape = np.shape(r)
    kappa1, kappa2 = np.empty(shape), np.empty(shape)
    # The crossings' photon directions (crossing_kappa_signs) worked out inside the kernel.
    _traced_kappa_kernel(np.ascontiguousarray(r, dtype=float),
                         np.ascontiguousarray(bundle.lam, dtype=float),
                         np.ascontiguousarray(bundle.eta, dtype=float), float(view.spin),
                         np.ascontiguousarray(raw["inward"], dtype=np.bool_),
                         np.ascontiguousarray(bundle.states[:, 2], dtype=float),
                         np.ascontiguousarray(bundle.states[:, 3], dtype=float),
                         np.ascontiguousarray(np.broadcast_to(chi, shape), dtype=float),
                         kappa1, kappa2)
    alpha = np.asarray(alpha, dtype=float).reshape(-1, 1)
    beta = np.asarray(beta, dtype=float).reshape(-1, 1)
    roll = math.radians(view.roll_deg)
    degree = np.ascontiguousarray(np.broadcast_to(degree, kappa1.shape), dtype=float)
    if view.placement == "distant":
        # Connors, Piran & Stark (1980), eqs. 4-6 (distant_screen_vector), the roll and the
        # IAU angle (evpa_from_screen) in one pass over the crossings.
        nu = -(alpha.ravel() + view.spin * math.sin(math.radians(view.inclination_deg)))
        degree_out, evpa = np.empty(kappa1.shape), np.empty(kappa1.shape)
        _distant_evpa_kernel(kappa1, kappa2, np.ascontiguousarray(nu),
                             np.ascontiguousarray(beta.ravel()), math.cos(roll),
                             math.sin(roll), degree, degree_out, evpa)
        return degree_out, evpa
    e_a, e_b = _camera_screen(view, kappa1, kappa2, alpha, beta)
    # The screen axes (alpha, beta) are the pixel axes turned by the roll (image_plane_grid).
    e_x = math.cos(roll) * e_a + math.sin(roll) * e_b
    e_y = -math.sin(roll) * e_a + math.cos(roll) * e_b
    undefined = ~((kappa1 != 0.0) | (kappa2 != 0.0))   # NaN (skipped) counts as undefined
    evpa = np.where(undefined, np.nan, evpa_from_screen(e_x, e_y))
    return np.where(undefined, 0.0, degree), evpa


@njit(cache=True, parallel=True)
def _distant_evpa_kernel(kappa1, kappa2, nu, beta, cos_roll, sin_roll, degree, degree_out,
                         evpa):
    """Per crossing: the distant screen's E-vector, turned by the roll, as an IAU angle."""
    half_pi = 0.5 * math.pi
    for n in prange(kappa1.shape[0]):
        norm = beta[n] * beta[n] + nu[n] * nu[n]
        for j in range(kappa1.shape[1]):
            k1, k2 = kappa1[n, j], kappa2[n, j]
            if not (k1 != 0.0 or k2 != 0.0):
                degree_out[n, j], evpa[n, j] = 0.0, np.nan   # along the normal: no E-vector
                continue
            if not (k1 == k1 and k2 == k2):
                degree_out[n, j], evpa[n, j] = degree[n, j], np.nan   # a skipped crossing
                continue
            e_a = (beta[n] * k2 - nu[n] * k1) / norm
            e_b = (beta[n] * k1 + nu[n] * k2) / norm
            e_x = cos_roll * e_a + sin_roll * e_b
            e_y = -sin_roll * e_a + cos_roll * e_b
            angle = math.atan2(-e_x, e_y)
            if angle <= -half_pi:
                angle += math.pi
            elif angle > half_pi:
                angle -= math.pi
            degree_out[n, j], evpa[n, j] = degree[n, j], angle


def _camera_screen(view, kappa1, kappa2, alpha, beta):
    """(E_right, E_up) at a camera: solve kappa = c_r kappa(right) + c_u kappa(up) per pixel."""
    k, tetrad, n = camera_photons(alpha, beta, view.spin, view.distance, view.inclination_deg,
                                  view.frame)
    theta = math.radians(view.inclination_deg)
    (r1, r2), (u1, u2) = camera_screen_vectors(k, tetrad, n, view.distance, theta, view.spin)
    det = (r1 * u2 - r2 * u1)[:, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        e_right = (kappa1 * u2[:, None] - kappa2 * u1[:, None]) / det
        e_up = (r1[:, None] * kappa2 - r2[:, None] * kappa1) / det
    return e_right, e_up
