"""The one front door to tracing: picks the method and drives the kernels in chunks.

:func:`trace` takes a :class:`TraceSettings` (the method already resolved by
:func:`resolve_method`) and a ray bundle, and runs either the integrator
(:mod:`render.geodesics.integrator`) or the closed form
(:mod:`render.geodesics.closed_form`); :func:`escape_directions` carries escaped
rays on to r = infinity.  Every caller (stills, their extra rays, frames,
measurements, transfer functions) goes through here.
"""

from dataclasses import dataclass

import numpy as np

from .closed_form import closed_form_bundle
from .integrator import (FATE_ESCAPED, parallel_kernel_call, trace_rays,
                         trace_to_infinity)
from ..spacetime.kerr import capture_radius

__all__ = ["TraceSettings", "trace", "trace_bundle", "escape_directions", "resolve_method",
           "METHODS", "DEFAULT_TOLERANCE"]

DEFAULT_TOLERANCE = 1e-9
# Rays per kernel call: large enough to keep both cores busy, small enough to
# stay responsive to Ctrl-C and to bound scratch memory (~10 MB).
CHUNK_RAYS = 32768


def trace_bundle(bundle, spin, *, n_record, tolerance=DEFAULT_TOLERANCE, max_steps=100000,
                 max_crossings=64, stop_on_disk=False, r_in=0.0, r_out=0.0,
                 chunk_rays=CHUNK_RAYS, progress=None, final_state=False):
    """Run the kernel on a :class:`~render.camera.observers.RayBundle`; return the raw arrays as a dict.

    Rays are traced in chunks of ``chunk_rays`` (each chunk one parallel kernel
    call), which bounds the kernel's scratch memory, lets Ctrl-C interrupt a
    long render between chunks, and drives ``progress(done, total)`` if given.
    Rays of negative conserved energy (``bundle.energy_ratio < 0``: a camera
    inside the ergoregion) are traced with the sign of E passed to the kernel.
    With ``final_state=True`` the dict also holds ``final_state`` (N, 6): the
    state (u, du/dsigma, mu, dmu/dsigma, phi, delay) where each ray ended (see
    :func:`render.geodesics.integrator.trace_rays`), for checks of its first integrals.
    """
    u_capture = 1.0 / capture_radius(spin)
    total = bundle.lam.size
    # Every ray starts at azimuth 0 and its own azimuth is added to the results: phi is
    # in the step control, so an offset would change the steps, and the rays of two
    # observers that differ only in azimuth would differ at the tolerance instead of
    # by a turn (the metric does not depend on phi).
    start_phi, states = _azimuth_removed(bundle.states)
    energy_sign = energy_signs(bundle)
    names = ("r", "phi", "delay", "inward", "fate", "n_crossings", "steps",
             "theta_end", "phi_end", "final_state")
    parts = {name: [] for name in names}
    for start in range(0, max(total, 1), chunk_rays):
        stop = min(start + chunk_rays, total)
        with parallel_kernel_call():
            arrays = trace_rays(
                np.ascontiguousarray(states[start:stop]),
                np.ascontiguousarray(bundle.lam[start:stop]),
                np.ascontiguousarray(bundle.eta[start:stop]), float(spin),
                float(bundle.u_escape), u_capture, float(tolerance), int(max_steps),
                int(max_crossings), int(n_record), bool(stop_on_disk), float(r_in),
                float(r_out), bool(final_state),
                np.ascontiguousarray(energy_sign[start:stop]))
        for name, array in zip(names, arrays):
            parts[name].append(array)
        if progress is not None:
            progress(stop, total)
    if not final_state:
        del parts["final_state"]
    raw = {name: np.concatenate(chunks) for name, chunks in parts.items()}
    return _azimuth_restored(raw, start_phi)


def _azimuth_removed(states):
    """(starting azimuths, states with azimuth 0)."""
    start_phi = np.array(states[:, 4], dtype=float)
    states = np.array(states, dtype=float)
    states[:, 4] = 0.0
    return start_phi, states


def _azimuth_restored(raw, start_phi):
    """Add each ray's starting azimuth back to the azimuths of a trace (modulo 2 pi)."""
    two_pi = 2.0 * np.pi
    raw["phi"] = np.mod(raw["phi"] + start_phi[:, None], two_pi)
    raw["phi_end"] = np.mod(raw["phi_end"] + start_phi, two_pi)
    if "final_state" in raw:
        raw["final_state"][:, 4] += start_phi
    return raw


def energy_signs(bundle):
    """Sign (+1.0 or -1.0) of each ray's conserved energy E, from ``bundle.energy_ratio``.

    The observer measures a positive energy E * energy_ratio, so the sign of E is
    that of ``energy_ratio``; E < 0 happens only for a camera inside the
    ergoregion (Misner, Thorne & Wheeler 1973, sec. 33.8).
    """
    ratio = np.broadcast_to(np.asarray(bundle.energy_ratio, dtype=float), (bundle.lam.size,))
    return np.where(ratio < 0.0, -1.0, 1.0)


METHODS = ("integrate", "closed_form", "auto")


def resolve_method(method, observer_kind="distant"):
    """The transfer method actually used: ``"integrate"`` or ``"closed_form"``.

    ``"auto"`` picks the closed form where it is valid, i.e. for a distant (static,
    at infinity) observer looking at nothing but the equatorial disk, and the
    integrator otherwise (a camera at finite distance).  Asking for
    ``"closed_form"`` with an observer it cannot describe is an error.

    Examples
    --------
    >>> resolve_method("auto", "distant"), resolve_method("auto", "camera")
    ('closed_form', 'integrate')
    """
    if method not in METHODS:
        raise ValueError(f"method must be one of {', '.join(METHODS)}, got {method!r}")
    if method == "auto":
        return "closed_form" if observer_kind == "distant" else "integrate"
    if method == "closed_form" and observer_kind != "distant":
        raise ValueError("method 'closed_form' needs a distant observer (observer.placement: "
                         f"distant), got {observer_kind!r}; use 'integrate' or 'auto'")
    return method


def escape_directions(bundle, raw, spin, tolerance, max_steps=100000):
    """Sky direction (theta, phi) at r = infinity of every escaped ray of a traced bundle.

    A distant observer's rays already end at u = 0 (``raw["theta_end"]``).  A
    camera's escaped rays ended at the camera's radius; they are carried on to
    u = 0 from their final state (``raw["final_state"]``, from
    ``trace_bundle(final_state=True)``) without recording crossings.  Rays
    whose last step already went past u = 0, and rays of zero angular momentum
    (which pass through the poles, where the kernel keeps a phi shift of pi
    outside the state), are traced again from the camera to u = 0 instead.

    Parameters
    ----------
    bundle : RayBundle
    raw : dict
        Output of :func:`render.geodesics.tracing.trace_bundle` (with ``final_state`` for a camera).
    spin : float
    tolerance : float
        Relative tolerance of the continuation (as ``tracing.tolerance``).

    Returns
    -------
    theta, phi : ndarray (N,)
        NaN for rays that did not escape.
    """
    fate = raw["fate"]
    escaped = fate == FATE_ESCAPED
    theta = np.full(fate.size, np.nan)
    phi = np.full(fate.size, np.nan)
    if bundle.u_escape == 0.0:
        theta[escaped] = raw["theta_end"][escaped]
        phi[escaped] = raw["phi_end"][escaped]
        return theta, phi
    final = raw["final_state"]
    lam = np.asarray(bundle.lam, dtype=float)
    eta = np.asarray(bundle.eta, dtype=float)
    restart = escaped & ((final[:, 0] <= 0.0) | (lam == 0.0) | ~np.isfinite(final[:, 0]))
    start = np.where(restart[:, None], bundle.states, final)
    rows = np.nonzero(escaped)[0]
    u_capture = 1.0 / capture_radius(spin)
    t = np.empty(rows.size)
    p = np.empty(rows.size)
    start_phi, start_states = _azimuth_removed(start[rows])   # as in trace_bundle
    with parallel_kernel_call():
        trace_to_infinity(np.ascontiguousarray(start_states), np.ascontiguousarray(lam[rows]),
                          np.ascontiguousarray(eta[rows]), float(spin), u_capture,
                          float(tolerance), int(max_steps), t, p)
    theta[rows] = t
    phi[rows] = np.mod(p + start_phi, 2.0 * np.pi)
    return theta, phi


@dataclass(frozen=True)
class TraceSettings:
    """How a bundle of rays is traced: the method, its controls and the disk that stops rays.

    Attributes
    ----------
    spin : float
        a/M.
    method : {"integrate", "closed_form"}
        Already resolved (:func:`resolve_method`); the closed form needs a distant observer.
    inclination_deg : float
        The distant observer's inclination (the closed form's starting point).
    orders : int
        Equatorial crossings recorded per ray.
    tolerance, max_steps : float, int
        The integrator's relative tolerance and step cap per ray.
    max_crossings : int
        Crossings followed per ray before it counts as unresolved.
    stop_on_disk : bool
        An opaque disk between ``r_in`` and ``r_out`` (M) ends a ray at its first crossing.
    want_escape : bool
        Keep what the direction at infinity needs (:func:`escape_directions`): the
        integrator's final states, the closed form's ``theta_end``, ``phi_end``.
    """

    spin: float
    method: str = "integrate"
    inclination_deg: float = 0.0
    orders: int = 1
    tolerance: float = DEFAULT_TOLERANCE
    max_steps: int = 100000
    max_crossings: int = 64
    stop_on_disk: bool = False
    r_in: float = 0.0
    r_out: float = 0.0
    want_escape: bool = False


def trace(settings, alpha, beta, bundle, progress=None, maps=True):
    """Trace ``bundle`` as ``settings`` ask; return the raw arrays (see :func:`trace_bundle`).

    ``alpha, beta`` are the rays' image-plane points (M), which the closed form
    starts from.  ``maps=False`` lets the closed form skip phi and the delay
    (NaN then); the integrator computes them anyway.

    Examples
    --------
    >>> from render.camera.observers import distant_observer_rays
    >>> a, b = np.array([0.0]), np.array([20.0])
    >>> settings = TraceSettings(spin=0.0, method="closed_form", orders=1)
    >>> raw = trace(settings, a, b, distant_observer_rays(a, b, 0.0, 0.0))
    >>> bool(raw["r"][0, 0] > 19.0)
    True
    """
    if settings.method == "closed_form":
        return closed_form_bundle(alpha, beta, bundle, settings.spin, settings.inclination_deg,
                                  n_record=settings.orders, max_crossings=settings.max_crossings,
                                  stop_on_disk=settings.stop_on_disk, r_in=settings.r_in,
                                  r_out=settings.r_out, want_end=settings.want_escape,
                                  want_maps=maps, progress=progress)
    if settings.method != "integrate":
        raise ValueError(f"settings.method must be 'integrate' or 'closed_form' (resolved), "
                         f"got {settings.method!r}")
    return trace_bundle(bundle, settings.spin, n_record=settings.orders,
                        tolerance=settings.tolerance, max_steps=settings.max_steps,
                        max_crossings=settings.max_crossings, stop_on_disk=settings.stop_on_disk,
                        r_in=settings.r_in, r_out=settings.r_out, progress=progress,
                        final_state=settings.want_escape)

