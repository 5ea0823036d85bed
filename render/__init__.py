"""nullray: physically correct images of thin disks around Kerr black holes.

The Python API, in pipeline order::

    scene = render.load_scene("scenes/default.yaml")   # validated Scene
    result = render.render_still(scene)                  # arrays (StillResult)
    render.write_still(result, "outputs")                # PNG + NPZ, atomically

and for distant-observer transfer functions::

    render.trace_points(alpha, beta, spin=0.9, inclination_deg=60.0)

The package is laid out by concept (DEVELOPERS.md): ``spacetime``, ``camera``,
``geodesics``, ``light``, ``imaging``, ``scene``, ``output``, ``film``,
``measure``, then ``parallel``, ``api`` and ``cli``; each imports only from those
before it.
"""

from .about import __version__
from .spacetime.kerr import (
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
from .errors import OutputExists, OutputWriteError, SceneError, WorkerLostError
from .scene.loader import Scene, default_scene, load_scene
from .light.transfer import trace_points
from .light.thermal import (
    eddington_luminosity,
    effective_temperature,
    page_thorne_flux,
    planck_nu,
    radiative_efficiency,
)
from .imaging.result import StillResult
from .output.files import write_still
from .output.products import write_products
from .measure.shadow import critical_curve, shadow_moments
from .measure.shadow_measurement import measure_scene
from .api import make_still, render_sequence, render_still

__all__ = [
    "__version__",
    "circular_orbit_angular_momentum", "circular_orbit_energy", "circular_orbit_time_component",
    "ergosphere_radius", "horizon_radii", "isco_radius", "keplerian_angular_velocity",
    "photon_orbit_radii", "photon_orbit_radius",
    "SceneError", "OutputExists", "OutputWriteError", "WorkerLostError",
    "Scene", "default_scene", "load_scene",
    "trace_points", "StillResult", "render_still", "make_still", "render_sequence",
    "write_still", "radiative_efficiency", "page_thorne_flux", "effective_temperature",
    "eddington_luminosity", "planck_nu", "write_products",
    "critical_curve", "shadow_moments", "measure_scene",
]
