"""Transfer functions of the thin disk: where a distant observer's rays cross the plane, and g."""

import numpy as np

from ..camera.observers import distant_observer_rays
from ..geodesics.integrator import FATE_NAMES
from ..geodesics.tracing import DEFAULT_TOLERANCE, TraceSettings, resolve_method, trace
from ..spacetime.kerr import check_spin
from .disk import redshift_factor

__all__ = ["trace_points"]


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
    method : {"integrate", "closed_form", "auto"}
        Numerical integration, or the elliptic-integral solution of
        :mod:`render.geodesics.closed_form` (``"auto"``: the closed form, valid for this
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
        the method used ("integrate" or "closed_form").

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
    settings = TraceSettings(spin=spin, method=method, inclination_deg=inclination,
                             orders=int(max_orders), tolerance=tolerance,
                             max_steps=int(max_steps), max_crossings=int(max_crossings),
                             want_escape=True)
    raw = trace(settings, alpha, beta, bundle)
    g = redshift_factor(raw["r"], bundle.lam[:, None], spin)
    names = np.array([FATE_NAMES[i] for i in range(len(FATE_NAMES))])
    return {
        "r": raw["r"], "phi": raw["phi"], "g": g, "delay": raw["delay"],
        "fate": names[raw["fate"]], "n_crossings": raw["n_crossings"],
        "theta_end": raw["theta_end"], "phi_end": raw["phi_end"],
        "method": np.full(alpha.size, method),
    }
