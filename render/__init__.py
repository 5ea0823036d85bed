"""nullray: physically correct images of thin disks around Kerr black holes.

The Python API, in pipeline order::

    scene = render.load_scene("scenes/default.yaml")   # validated Scene
    result = render.render_still(scene)                  # arrays (StillResult)
    render.write_still(result, "outputs")                # PNG + NPZ, atomically

and for distant-observer transfer functions::

    render.trace_points(alpha, beta, spin=0.9, inclination_deg=60.0)
"""

__version__ = "0.1.0"

from .spacetime import (  # noqa: E402
    circular_orbit_angular_momentum,
    circular_orbit_energy,
    circular_orbit_time_component,
    ergosphere_radius,
    horizon_radii,
    isco_radius,
    keplerian_angular_velocity,
    photon_orbit_radii,
    photon_orbit_radius,
)
from .scene import SceneError, Scene, default_scene, load_scene  # noqa: E402
from .points import trace_points  # noqa: E402
from .still import StillResult, render_still  # noqa: E402
from .output import write_still  # noqa: E402
from .thermal import (  # noqa: E402
    eddington_luminosity,
    effective_temperature,
    page_thorne_flux,
    planck_nu,
    radiative_efficiency,
)
from .products import write_products  # noqa: E402
from .shadow import critical_curve, shadow_moments  # noqa: E402

__all__ = [
    "__version__",
    "circular_orbit_angular_momentum", "circular_orbit_energy", "circular_orbit_time_component",
    "ergosphere_radius", "horizon_radii", "isco_radius", "keplerian_angular_velocity",
    "photon_orbit_radii", "photon_orbit_radius",
    "SceneError", "Scene", "default_scene", "load_scene",
    "trace_points", "StillResult", "render_still", "write_still",
    "radiative_efficiency", "page_thorne_flux", "effective_temperature",
    "eddington_luminosity", "planck_nu", "write_products",
    "critical_curve", "shadow_moments",
]
