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

# Public names, loaded on first use (PEP 562), so that `import render.cli` stays light:
# the command line can then answer Ctrl-C in its first second with one line.
_PUBLIC = {
    "circular_orbit_angular_momentum": "spacetime.kerr", "circular_orbit_energy": "spacetime.kerr",
    "circular_orbit_time_component": "spacetime.kerr", "ergosphere_radius": "spacetime.kerr",
    "horizon_radii": "spacetime.kerr", "isco_radius": "spacetime.kerr",
    "keplerian_angular_velocity": "spacetime.kerr", "photon_orbit_radii": "spacetime.kerr",
    "photon_orbit_radius": "spacetime.kerr",
    "SceneError": "errors", "OutputExists": "errors", "OutputWriteError": "errors",
    "WorkerLostError": "errors", "NullrayWarning": "errors",
    "Scene": "scene.loader", "default_scene": "scene.loader", "load_scene": "scene.loader",
    "trace_points": "light.transfer",
    "eddington_luminosity": "light.thermal", "effective_temperature": "light.thermal",
    "page_thorne_flux": "light.thermal", "planck_nu": "light.thermal",
    "radiative_efficiency": "light.thermal",
    "StillResult": "imaging.result", "write_still": "output.files",
    "write_products": "output.products", "critical_curve": "measure.shadow",
    "shadow_moments": "measure.shadow", "measure_scene": "measure.shadow_measurement",
    "make_still": "api", "render_sequence": "api", "render_still": "api",
    "plot": "output.figures", "read_still": "output.figures", "make_figures": "api",
}

__all__ = ["__version__", *_PUBLIC]


def __getattr__(name):
    if name in _PUBLIC:
        import importlib

        value = getattr(importlib.import_module(f"{__name__}.{_PUBLIC[name]}"), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_PUBLIC))
