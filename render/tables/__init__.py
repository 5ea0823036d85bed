"""Table models: spectra of a scene on a grid of parameter values (nullray table)."""
