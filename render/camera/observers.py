"""Observers: how a pixel becomes the initial state of a backward-traced photon.

Two observers are provided.

Distant observer (``placement: distant``)
    An observer at infinity at polar angle ``theta_o`` (the inclination) and
    azimuth ``phi_o``.  Image-plane coordinates (alpha, beta), in units of M,
    follow Bardeen (1973): alpha grows to the right, beta along the projected
    spin axis (up).  The ray is set up from its conserved quantities,

        lam = L/E = -alpha sin(theta_o),
        eta = Q/E^2 = beta^2 + (alpha^2 - a^2) cos^2(theta_o),

    and starts at u = 1/r = 0 exactly (see :mod:`render.geodesics.integrator`), with
    dtheta/dsigma = -beta (Bardeen 1973, eqs. 2.8-2.11).  With a > 0 the side of
    the disk that approaches the observer appears at alpha < 0.

Camera (``placement: camera``)
    An observer at finite Boyer–Lindquist radius ``r_o`` carrying an
    orthonormal frame, either

    * ``zamo``: the zero-angular-momentum observer (Bardeen, Press &
      Teukolsky 1972, eq. 3.2), which exists everywhere outside the horizon:
      e_t = (d_t + omega d_phi)/N, e_r = sqrt(Delta/Sigma) d_r,
      e_theta = d_theta / sqrt(Sigma), e_phi = d_phi / varpi, with
      omega = 2ar/A, N = sqrt(Sigma Delta / A), varpi = sqrt(A/Sigma) sin(theta);
    * ``static``: the observer at rest with respect to infinity
      (4-velocity along d_t), which exists only outside the ergoregion;
      e_phi is d_phi made orthogonal to d_t (Gram–Schmidt) and normalised.

    The camera looks at the hole (-e_r), with "right" along +e_phi and "up"
    along -e_theta, so that at large distance its image matches the distant
    observer's.  A moving camera (films) uses its frame boosted by its velocity;
    with ``aim="hole"`` its axes are then turned (the smallest rotation) so that its
    optical axis looks where the camera at rest looked, as aberration shows that
    direction to the moving camera: the hole stays in the middle of the picture.
    With ``aim="frame"`` the axes stay those of the boosted frame and aberration
    pushes the hole towards the direction of motion.  It is a pinhole whose image plane lies at the hole's distance:
    a pixel at image-plane position (x, y) in M looks along the local
    direction proportional to (-1, x/r_o, y/r_o) in (r, phi, "up") components.

Both observers place pixel centres on a regular grid of square pixels whose
total width is ``field_of_view`` (M); the roll angle rotates the image-plane
axes counter-clockwise about the line of sight.

References
----------
Bardeen (1973), in Black Holes (Les Houches), 215.
Bardeen, Press & Teukolsky (1972), ApJ 178, 347.
"""

from dataclasses import dataclass

import numpy as np

from ..spacetime.kerr import ergosphere_radius, horizon_radii, metric_functions
from ..spacetime.motion import boost_frame

__all__ = [
    "Viewpoint",
    "PLACEMENTS",
    "RayBundle",
    "image_plane_grid",
    "distant_observer_rays",
    "camera_rays",
    "observer_frame",
    "check_observer_position",
    "FRAMES",
    "AIMS",
    "aberrated_direction",
    "camera_photons",
]

# Observer placements: a camera at a finite radius, or the exact observer at infinity.
PLACEMENTS = ("camera", "distant")
FRAMES = ("zamo", "static")
# Where a moving camera points its optical axis: at the hole as it appears to the moving
# camera (the light that reaches the camera at rest from straight ahead), or along its own
# boosted frame's radial axis.
AIMS = ("hole", "frame")
# Below this |sin(theta)| an observer counts as sitting on the spin axis, where
# the Boyer–Lindquist phi direction is undefined and is chosen per ray instead.
_POLE_SINE = 1e-12


@dataclass
class RayBundle:
    """Initial conditions for a batch of backward rays.

    Attributes
    ----------
    states : ndarray, shape (N, 6)
        (u, du/dsigma, mu = cos(theta), dmu/dsigma, phi, delay) at the observer.
    lam, eta : ndarray, shape (N,)
        Conserved L/E and Q/E^2.
    energy_ratio : ndarray, shape (N,)
        Photon energy measured by the observer per unit conserved energy E
        (1 for a distant observer); the redshift factor is
        ``g = energy_ratio * E / E_emitter``.  Negative for a photon of
        negative E (a camera inside the ergoregion), whose Mino-time
        velocities in ``states`` are then per |E| (see :mod:`render.geodesics.integrator`).
    u_escape : float
        1/r beyond which an outgoing ray has escaped (the observer's own 1/r).
    """

    states: np.ndarray
    lam: np.ndarray
    eta: np.ndarray
    energy_ratio: np.ndarray
    u_escape: float


def image_plane_grid(width, height, field_of_view, roll_deg=0.0, rows=None):
    """Image-plane coordinates of pixel centres, in units of M.

    Parameters
    ----------
    width, height : int
        Pixels across and down; row 0 is the top of the image.
    field_of_view : float
        Full width of the image in M (pixels are square).
    roll_deg : float
        Counter-clockwise rotation of the image axes about the line of sight.
    rows : (start, stop), optional
        Only this band of rows (a tile), bit for bit the same values as the
        corresponding rows of the full grid.

    Returns
    -------
    alpha, beta : ndarray, shape (height, width)
        Horizontal (right) and vertical (up) coordinates.

    Examples
    --------
    >>> a, b = image_plane_grid(2, 2, 2.0)
    >>> a.tolist(), b.tolist()
    ([[-0.5, 0.5], [-0.5, 0.5]], [[0.5, 0.5], [-0.5, -0.5]])
    """
    scale = field_of_view / width
    x = (np.arange(width) + 0.5 - 0.5 * width) * scale
    row_numbers = np.arange(height) if rows is None else np.arange(height)[rows[0]:rows[1]]
    y = (0.5 * height - row_numbers - 0.5) * scale
    xx, yy = np.meshgrid(x, y)
    roll = np.radians(roll_deg)
    if roll == 0.0:
        return xx, yy
    c, s = np.cos(roll), np.sin(roll)
    return c * xx - s * yy, s * xx + c * yy


def polar_position(inclination_deg):
    """(theta, sin, cos), exactly on the axis (L = 0) within 1e-7 deg of it (sin^2 underflows)."""
    if inclination_deg < 1e-7:
        return 0.0, 0.0, 1.0
    if inclination_deg > 180.0 - 1e-7:
        return np.pi, 0.0, -1.0
    if inclination_deg == 90.0:  # cos(pi/2) = 6e-17 would tilt rays meant to lie in the plane
        return 0.5 * np.pi, 1.0, 0.0
    theta = np.radians(inclination_deg)
    return theta, np.sin(theta), np.cos(theta)


def distant_observer_rays(alpha, beta, spin, inclination_deg, azimuth_deg=0.0):
    """Initial states of rays arriving at a distant observer at (alpha, beta).

    Parameters
    ----------
    alpha, beta : array_like
        Image-plane coordinates in M (Bardeen 1973 convention).
    spin : float
        a/M.
    inclination_deg : float
        Observer's polar angle in degrees, in [0, 180].
    azimuth_deg : float
        Observer's Boyer–Lindquist azimuth in degrees.

    Returns
    -------
    RayBundle

    References
    ----------
    Bardeen (1973), eqs. 2.8-2.11; Cunningham & Bardeen (1973), ApJ 183, 237.
    """
    alpha = np.asarray(alpha, dtype=float).ravel()
    beta = np.asarray(beta, dtype=float).ravel()
    a = float(spin)
    theta_o, sin_o, cos_o = polar_position(float(inclination_deg))
    phi_o = np.radians(azimuth_deg)
    lam = -alpha * sin_o
    eta = beta ** 2 + (alpha ** 2 - a * a) * cos_o ** 2
    states = np.zeros((alpha.size, 6))
    states[:, 1] = 1.0
    states[:, 2] = cos_o
    # dtheta/dsigma = -beta, so dmu/dsigma = beta sin(theta_o).
    states[:, 3] = beta * sin_o
    states[:, 4] = phi_o
    if sin_o == 0.0:
        # On the axis every ray leaves in the meridian plane that contains its
        # image-plane offset (the polar turning point is the axis itself).
        sign = cos_o
        x = -alpha * np.sin(phi_o) - sign * beta * np.cos(phi_o)
        y = alpha * np.cos(phi_o) - sign * beta * np.sin(phi_o)
        states[:, 4] = np.arctan2(y, x)
    return RayBundle(states, lam, eta, np.ones(alpha.size), 0.0)


def check_observer_position(spin, distance, inclination_deg, frame):
    """Raise ``ValueError`` if an observer with this frame cannot sit there.

    A ZAMO exists outside the outer horizon; a static observer only outside the
    ergoregion, r > 1 + sqrt(1 - a^2 cos^2 theta) (Misner, Thorne & Wheeler
    1973, sec. 33.8).
    """
    r_plus, _ = horizon_radii(spin)
    theta = np.radians(inclination_deg)
    if frame == "zamo":
        if not distance > r_plus:
            raise ValueError(
                f"a zamo frame needs r > r_+ = {r_plus:.6g} M, got {distance:.6g} M")
    elif frame == "static":
        r_ergo = ergosphere_radius(spin, theta)
        if not distance > r_ergo:
            raise ValueError(
                f"a static frame needs r outside the ergoregion (> {r_ergo:.6g} M here), "
                f"got {distance:.6g} M")
    else:
        raise ValueError(f"frame must be one of {', '.join(FRAMES)}, got {frame!r}")


def observer_frame(spin, r, theta, frame):
    """Orthonormal frame (e_t, e_r, e_theta, e_phi) of an observer at (r, theta).

    Parameters
    ----------
    spin : float
        a/M.
    r, theta : float
        Boyer–Lindquist position (theta strictly off the axis).
    frame : {"zamo", "static"}

    Returns
    -------
    ndarray, shape (4, 4)
        Row i is the i-th frame vector's contravariant components (t, r, theta, phi).

    References
    ----------
    Bardeen, Press & Teukolsky (1972), ApJ 178, 347, eq. 3.2 (ZAMO).
    """
    a = float(spin)
    sigma, delta, big_a = metric_functions(r, theta, a)
    sin2 = np.sin(theta) ** 2
    g_tt = -(1.0 - 2.0 * r / sigma)
    g_tphi = -2.0 * a * r * sin2 / sigma
    g_phiphi = big_a * sin2 / sigma
    tetrad = np.zeros((4, 4))
    tetrad[1, 1] = np.sqrt(delta / sigma)
    tetrad[2, 2] = 1.0 / np.sqrt(sigma)
    if frame == "zamo":
        omega = 2.0 * a * r / big_a
        lapse = np.sqrt(sigma * delta / big_a)
        tetrad[0, 0] = 1.0 / lapse
        tetrad[0, 3] = omega / lapse
        tetrad[3, 3] = 1.0 / np.sqrt(g_phiphi)
    elif frame == "static":
        tetrad[0, 0] = 1.0 / np.sqrt(-g_tt)
        norm = np.sqrt(g_phiphi - g_tphi ** 2 / g_tt)
        tetrad[3, 0] = -g_tphi / g_tt / norm
        tetrad[3, 3] = 1.0 / norm
    else:
        raise ValueError(f"frame must be one of {', '.join(FRAMES)}, got {frame!r}")
    return tetrad


def camera_rays(x, y, spin, distance, inclination_deg, azimuth_deg=0.0, frame="zamo",
                velocity=None, aim="frame"):
    """Initial states of rays reaching a camera at finite distance.

    Parameters
    ----------
    x, y : array_like
        Image-plane positions in M at the hole's distance (right, up).
    spin : float
        a/M.
    distance : float
        Boyer–Lindquist radius of the camera in M.
    inclination_deg, azimuth_deg : float
        Camera's polar angle and azimuth in degrees.
    frame : {"zamo", "static"}
        The camera's local frame (see the module docstring).
    velocity : array_like, shape (3,), optional
        The camera's 3-velocity (v_r, v_theta, v_phi) relative to ``frame``;
        the pixels are then set up in the boosted frame
        (:func:`render.spacetime.motion.boost_frame`), so aberration and Doppler shift
        are included.
    aim : {"frame", "hole"}
        A moving camera's optical axis: along the boosted frame's radial axis, or
        turned to where the camera at rest looked, as the moving camera sees it
        (:func:`aberrated_direction`; see the module docstring).  Unused at rest.

    Returns
    -------
    RayBundle
    """
    x = np.asarray(x, dtype=float).ravel()
    y = np.asarray(y, dtype=float).ravel()
    a = float(spin)
    r = float(distance)
    check_observer_position(a, r, inclination_deg, frame)
    theta, sin_o, cos_o = polar_position(float(inclination_deg))
    phi_o = np.radians(azimuth_deg)
    n_r, n_theta, n_phi = _travel_directions(x, y, r)
    phi0 = np.full(x.size, phi_o)
    on_axis = sin_o == 0.0
    if on_axis:
        phi0, n_theta, n_phi = _on_axis_directions(n_theta, n_phi, phi_o, cos_o)
    tetrad = _camera_tetrad(a, r, theta, frame, on_axis, cos_o, velocity, aim)
    # Photon 4-momentum with unit energy in the camera frame.
    p = (tetrad[0][:, None] + n_r * tetrad[1][:, None] + n_theta * tetrad[2][:, None]
         + n_phi * tetrad[3][:, None])
    lam, eta, energy, mino_r, mino_theta = _constants_of_motion(p, a, r, theta, sin_o, cos_o,
                                                                on_axis)
    u = 1.0 / r
    states = np.zeros((x.size, 6))
    states[:, 0] = u
    states[:, 1] = u * u * mino_r
    states[:, 2] = cos_o
    states[:, 3] = sin_o * mino_theta  # dmu/dsigma = -sin(theta) dtheta/dsigma
    states[:, 4] = phi0
    return RayBundle(states, lam, eta, 1.0 / energy, u)


def camera_photons(x, y, spin, distance, inclination_deg, frame="zamo"):
    """(k, tetrad, n) of the photons reaching a camera (off the axis, at rest in ``frame``).

    ``k`` (4, N) is each photon's contravariant momentum per unit conserved
    energy (p_t = -1), ``tetrad`` the camera's frame (:func:`observer_frame`) and
    ``n`` (N, 3) the photon's direction of travel on (e_r, e_theta, e_phi), for
    quantities carried along the ray such as the polarisation
    (:mod:`render.light.polarisation`).
    """
    x = np.asarray(x, dtype=float).ravel()
    y = np.asarray(y, dtype=float).ravel()
    r = float(distance)
    theta, sin_o, _ = polar_position(float(inclination_deg))
    if sin_o == 0.0:
        raise ValueError("camera_photons needs a camera off the spin axis")
    n = np.stack(_travel_directions(x, y, r), axis=1)
    tetrad = observer_frame(float(spin), r, theta, frame)
    p = tetrad[0][:, None] + (n @ tetrad[1:]).T
    sigma, _, _ = metric_functions(r, theta, float(spin))
    g_tt = -(1.0 - 2.0 * r / sigma)
    g_tphi = -2.0 * float(spin) * r * sin_o ** 2 / sigma
    energy = -(g_tt * p[0] + g_tphi * p[3])
    return p / energy, tetrad, n


def _travel_directions(x, y, r):
    """Unit directions of travel (n_r, n_theta, n_phi) in the camera's local triad.

    The camera looks at the hole; the pixel at image-plane point (x, y) looks
    along d = (-1, -y/r, x/r) normalised, and the photon arriving there travels
    along n = -d.
    """
    d = np.stack([-np.ones_like(x), -y / r, x / r])
    d /= np.linalg.norm(d, axis=0)
    return -d[0], -d[1], -d[2]


def _on_axis_directions(n_theta, n_phi, phi_o, cos_o):
    """(phi0, n_theta, n_phi) of rays reaching a camera on the spin axis.

    Off-axis frame vectors become the limits at azimuth phi_o; the ray moves
    away from the axis in the meridian plane of its transverse direction,
    which becomes its own phi with n_phi = 0 (so L = 0).
    """
    sign = cos_o
    tx = -(sign * n_theta * np.cos(phi_o) - n_phi * np.sin(phi_o))
    ty = -(sign * n_theta * np.sin(phi_o) + n_phi * np.cos(phi_o))
    return np.arctan2(ty, tx), -sign * np.hypot(n_theta, n_phi), np.zeros_like(n_phi)


def _camera_tetrad(a, r, theta, frame, on_axis, cos_o, velocity, aim="frame"):
    """The camera's tetrad: ``frame`` at its position, boosted by ``velocity`` if given.

    With ``aim="hole"`` the boosted spatial axes are turned so that the first one
    points along the aberrated radial direction (:func:`aberrated_direction`).
    """
    if aim not in AIMS:
        raise ValueError(f"aim must be one of {', '.join(AIMS)}, got {aim!r}")
    if on_axis:
        tetrad = observer_frame(a, r, 1e-8 if cos_o > 0 else np.pi - 1e-8, frame)
        tetrad[3] = 0.0  # never used: n_phi = 0 on the axis
    else:
        tetrad = observer_frame(a, r, theta, frame)
    if velocity is not None:
        tetrad = boost_frame(tetrad, velocity)
        if aim == "hole":
            turn = _rotation_taking_x_to(aberrated_direction((1.0, 0.0, 0.0), velocity))
            # Pixel direction n on the new axes is turn @ n on the boosted ones.
            tetrad[1:] = turn.T @ tetrad[1:]
    return tetrad


def aberrated_direction(direction, velocity):
    """Direction of travel of a photon seen by an observer moving with ``velocity``.

    Parameters
    ----------
    direction : array_like, shape (3,)
        Unit direction of travel in the rest frame (any orthonormal triad).
    velocity : array_like, shape (3,)
        The moving observer's 3-velocity in the same triad, in units of c; |v| < 1.

    Returns
    -------
    ndarray, shape (3,)
        The unit direction of travel in the moving observer's boosted triad
        (:func:`render.spacetime.motion.boost_frame`).

    References
    ----------
    Einstein (1905), Ann. Phys. 17, 891, section 7 (aberration); Rindler (2006),
    Relativity: Special, General, and Cosmological, eq. 4.8 (the vector form
    n' = [n + ((gamma - 1)(n.v)/v^2 - gamma) v] / [gamma (1 - n.v)]).

    Examples
    --------
    >>> [round(float(x), 6) for x in aberrated_direction((0.0, 1.0, 0.0), (0.6, 0.0, 0.0))]
    [-0.6, 0.8, 0.0]
    """
    n = np.asarray(direction, dtype=float).reshape(3)
    v = np.asarray(velocity, dtype=float).reshape(3)
    speed2 = float(v @ v)
    if speed2 == 0.0:
        return n.copy()
    gamma = 1.0 / np.sqrt(1.0 - speed2)
    along = float(n @ v)
    moved = n + ((gamma - 1.0) * along / speed2 - gamma) * v
    return moved / (gamma * (1.0 - along))


def _rotation_taking_x_to(target):
    """The smallest rotation (3 x 3) that takes (1, 0, 0) to the unit vector ``target``.

    Rodrigues' formula about the axis x cross target; the identity if they coincide.
    """
    target = np.asarray(target, dtype=float) / np.linalg.norm(target)
    axis = np.cross((1.0, 0.0, 0.0), target)
    sine, cosine = float(np.linalg.norm(axis)), float(target[0])
    if sine == 0.0:
        if cosine > 0.0:
            return np.eye(3)
        return np.diag([-1.0, -1.0, 1.0])   # half a turn about the third axis
    k = axis / sine
    cross = np.array([[0.0, -k[2], k[1]], [k[2], 0.0, -k[0]], [-k[1], k[0], 0.0]])
    return np.eye(3) + sine * cross + (1.0 - cosine) * cross @ cross


def _constants_of_motion(p, a, r, theta, sin_o, cos_o, on_axis):
    """(lambda, eta, E, Mino-time dr, Mino-time dtheta per |E|) of photon momenta p.

    Parameters
    ----------
    p : ndarray (4, N)
        Contravariant Boyer–Lindquist momenta (t, r, theta, phi) at the camera.
    a, r, theta : float
        Spin and the camera's position.
    sin_o, cos_o : float
        sin and cos of the camera's polar angle.
    on_axis : bool
        Whether the camera is on the spin axis (then lambda = 0).

    Returns
    -------
    lam, eta, energy, mino_r, mino_theta : ndarray (N,)

    References
    ----------
    Carter (1968), Phys. Rev. 174, 1559 (lambda = L/E, Carter constant eta = Q/E^2).
    """
    sigma, delta, big_a = metric_functions(r, theta, a)
    sin2 = sin_o * sin_o
    g_tt = -(1.0 - 2.0 * r / sigma)
    g_tphi = -2.0 * a * r * sin2 / sigma
    g_phiphi = big_a * sin2 / sigma
    energy = -(g_tt * p[0] + g_tphi * p[3])
    ang_mom = g_tphi * p[0] + g_phiphi * p[3]
    lam = ang_mom / energy
    if on_axis:
        lam = np.zeros_like(lam)
        polar_term = -a * a * cos_o ** 2
    else:
        polar_term = cos_o ** 2 * (lam ** 2 / sin2 - a * a)
    # Mino time per |E| (render.geodesics.integrator): for E < 0 (only inside the ergoregion)
    # dividing by E would reverse the (r, theta) motion along the ray.
    mino_theta = sigma * p[2] / np.abs(energy)
    mino_r = sigma * p[1] / np.abs(energy)
    eta = mino_theta ** 2 + polar_term
    return lam, eta, energy, mino_r, mino_theta


@dataclass(frozen=True)
class Viewpoint:
    """Where an observer stands and what its image covers: the one observer set-up.

    Attributes
    ----------
    placement : {"distant", "camera"}
        The exact observer at infinity, or a camera at Boyer–Lindquist radius ``distance``.
    spin : float
        a/M.
    distance : float
        The camera's radius in M (unused for ``distant``).
    inclination_deg, azimuth_deg : float
        The observer's polar angle from the spin axis and its azimuth.
    frame : str
        The camera's local frame (one of :data:`FRAMES`).
    field_of_view : float
        Full width of the image in M at the hole's distance.
    roll_deg : float
        Counter-clockwise rotation of the image about the line of sight.
    width, height : int
        Pixels across and down.
    aim : str
        Where a moving camera points (one of :data:`AIMS`; see :func:`camera_rays`).
    """

    placement: str
    spin: float
    distance: float
    inclination_deg: float
    azimuth_deg: float = 0.0
    frame: str = "zamo"
    field_of_view: float = 40.0
    roll_deg: float = 0.0
    width: int = 64
    height: int = 64
    aim: str = "hole"

    def grid(self, rows=None):
        """Image-plane coordinates (alpha, beta) in M of the pixel centres (see :func:`image_plane_grid`)."""
        return image_plane_grid(self.width, self.height, self.field_of_view, self.roll_deg,
                                rows=rows)

    def rays_at(self, x, y, velocity=None):
        """The :class:`RayBundle` through image-plane points (x, y) in M.

        ``velocity`` is a moving camera's velocity in its frame (:func:`camera_rays`).
        """
        if self.placement == "distant":
            return distant_observer_rays(x, y, self.spin, self.inclination_deg, self.azimuth_deg)
        return camera_rays(x, y, self.spin, self.distance, self.inclination_deg,
                           self.azimuth_deg, self.frame, velocity=velocity, aim=self.aim)

    def rays(self, rows=None, velocity=None):
        """(alpha, beta, bundle) of the pixel centres, or of the band ``rows = (start, stop)``.

        Examples
        --------
        >>> view = Viewpoint("distant", 0.5, 0.0, 60.0, width=4, height=2)
        >>> alpha, beta, bundle = view.rays()
        >>> alpha.shape, bundle.lam.shape
        ((2, 4), (8,))
        """
        alpha, beta = self.grid(rows)
        return alpha, beta, self.rays_at(alpha, beta, velocity)

