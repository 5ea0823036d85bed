"""Tracing arbitrary image-plane points for a distant observer (the transfer-function API)."""

import numpy as np

from .camera import distant_observer_rays
from .closed_form import closed_form_bundle, resolve_method
from .disk import redshift_factor
from .geodesics import FATE_NAMES, deferred_interrupts, trace_rays
from .spacetime import check_spin, horizon_radii

__all__ = ["trace_points", "trace_bundle", "CAPTURE_MARGIN", "DEFAULT_TOLERANCE"]

# A ray counts as captured once r < r_+ (1 + CAPTURE_MARGIN): the radial motion
# is regular there in Mino time, but phi and t diverge logarithmically.
CAPTURE_MARGIN = 1e-6
DEFAULT_TOLERANCE = 1e-9
# Rays per kernel call: large enough to keep both cores busy, small enough to
# stay responsive to Ctrl-C and to bound scratch memory (~10 MB).
CHUNK_RAYS = 32768


def trace_bundle(bundle, spin, *, n_record, tolerance=DEFAULT_TOLERANCE, max_steps=100000,
                 max_crossings=64, stop_on_disk=False, r_in=0.0, r_out=0.0,
                 chunk_rays=CHUNK_RAYS, progress=None, final_state=False):
    """Run the kernel on a :class:`~render.camera.RayBundle`; return the raw arrays as a dict.

    Rays are traced in chunks of ``chunk_rays`` (each chunk one parallel kernel
    call), which bounds the kernel's scratch memory, lets Ctrl-C interrupt a
    long render between chunks, and drives ``progress(done, total)`` if given.
    Rays of negative conserved energy (``bundle.energy_ratio < 0``: a camera
    inside the ergoregion) are traced with the sign of E passed to the kernel.
    With ``final_state=True`` the dict also holds ``final_state`` (N, 6): the
    state (u, du/dsigma, mu, dmu/dsigma, phi, delay) where each ray ended (see
    :func:`render.geodesics.trace_rays`), for checks of its first integrals.
    """
    r_plus, _ = horizon_radii(spin)
    u_capture = 1.0 / (r_plus * (1.0 + CAPTURE_MARGIN))
    total = bundle.lam.size
    states = bundle.states
    energy_sign = energy_signs(bundle)
    names = ("r", "phi", "delay", "inward", "fate", "n_crossings", "steps",
             "theta_end", "phi_end", "final_state")
    parts = {name: [] for name in names}
    for start in range(0, max(total, 1), chunk_rays):
        stop = min(start + chunk_rays, total)
        with deferred_interrupts():
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
    return {name: np.concatenate(chunks) for name, chunks in parts.items()}


def energy_signs(bundle):
    """Sign (+1.0 or -1.0) of each ray's conserved energy E, from ``bundle.energy_ratio``.

    The observer measures a positive energy E * energy_ratio, so the sign of E is
    that of ``energy_ratio``; E < 0 happens only for a camera inside the
    ergoregion (Misner, Thorne & Wheeler 1973, sec. 33.8).
    """
    ratio = np.broadcast_to(np.asarray(bundle.energy_ratio, dtype=float), (bundle.lam.size,))
    return np.where(ratio < 0.0, -1.0, 1.0)


def trace_points(alpha, beta, *, spin, inclination_deg, max_orders=3, tolerance=None,
                 max_steps=100000, max_crossings=10000, method="integrate"):
    """Equatorial-plane crossings of rays reaching a distant observer at (alpha, beta).

    Every crossing of the equatorial plane outside the horizon is reported, in
    order, ignoring any disk edges, so that results can be compared with
    published transfer functions.

    Parameters
    ----------
    alpha, beta : array_like
        Image-plane points in units of M (alpha to the right, beta up; Bardeen 1973).
    spin : float
        a/M with |a| < 1.
    inclination_deg : float
        Observer inclination in [0, 180] degrees.
    max_orders : int
        Crossings recorded per ray (orders n = 0 .. max_orders-1).
    tolerance : float, optional
        Relative tolerance of the integrator (default 1e-9).
    max_steps, max_crossings : int
        Caps per ray; a ray that reaches one gets the fate "unresolved".
    method : {"integrate", "closed-form", "auto"}
        Numerical integration, or the elliptic-integral solution of
        :mod:`render.closed_form` (``"auto"``: the closed form, valid for this
        distant observer); ``tolerance`` and ``max_steps`` apply to the integrator.

    Returns
    -------
    dict of ndarray
        ``r``, ``phi``, ``g``, ``delay`` of shape (N, max_orders), NaN where there
        is no such crossing (``g`` also NaN inside the ISCO); ``phi`` is the
        Boyer–Lindquist azimuth in [0, 2 pi) measured from the observer's
        meridian; ``delay`` the regularised coordinate-time delay in M;
        ``fate`` (N,) strings "escaped", "captured" or "unresolved" (the ray
        followed to its end); ``n_crossings`` (N,) all crossings met;
        ``theta_end``, ``phi_end`` the escape direction; ``method`` (N,) strings,
        the method used ("integrate" or "closed-form").

    References
    ----------
    Bardeen (1973); Cunningham & Bardeen (1973), ApJ 183, 237.

    Examples
    --------
    >>> out = trace_points([0.0], [20.0], spin=0.0, inclination_deg=0.0, max_orders=1)
    >>> bool(out["fate"][0] == "escaped") and bool(out["r"][0, 0] > 19.0)
    True
    """
    spin = check_spin(spin)
    inclination = float(inclination_deg)
    if not 0.0 <= inclination <= 180.0:
        raise ValueError(f"inclination_deg must be in [0, 180], got {inclination_deg!r}")
    if int(max_orders) < 1:
        raise ValueError(f"max_orders must be >= 1, got {max_orders!r}")
    tolerance = DEFAULT_TOLERANCE if tolerance is None else float(tolerance)
    if not tolerance > 0.0:
        raise ValueError(f"tolerance must be > 0, got {tolerance!r}")
    alpha = np.atleast_1d(np.asarray(alpha, dtype=float)).ravel()
    beta = np.atleast_1d(np.asarray(beta, dtype=float)).ravel()
    alpha, beta = np.broadcast_arrays(alpha, beta)
    bundle = distant_observer_rays(alpha, beta, spin, inclination)
    method = resolve_method(method, "distant")
    if method == "closed-form":
        raw = closed_form_bundle(alpha, beta, bundle, spin, inclination,
                                 n_record=int(max_orders), max_crossings=max_crossings)
    else:
        raw = trace_bundle(bundle, spin, n_record=int(max_orders), tolerance=tolerance,
                           max_steps=max_steps, max_crossings=max_crossings)
    g = redshift_factor(raw["r"], bundle.lam[:, None], spin)
    names = np.array([FATE_NAMES[i] for i in range(len(FATE_NAMES))])
    return {
        "r": raw["r"], "phi": raw["phi"], "g": g, "delay": raw["delay"],
        "fate": names[raw["fate"]], "n_crossings": raw["n_crossings"],
        "theta_end": raw["theta_end"], "phi_end": raw["phi_end"],
        "method": np.full(alpha.size, method),
    }
