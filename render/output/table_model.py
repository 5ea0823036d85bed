"""FITS table models of spectra on a grid of parameters, following the OGIP standard.

The layout is that of the open OGIP standard for spectral table models (memo
OGIP/92-009); the HDUCLAS1 value below is the one the memo prescribes:

* PRIMARY HDU, no data: HDUCLASS = 'OGIP', HDUCLAS1 = 'XSPEC TABLE MODEL',
  HDUVERS = '1.0.0', MODLNAME (up to 12 characters), MODLUNIT, REDSHIFT,
  ADDMODEL (True: an additive model, spectra in photons cm^-2 s^-1 per bin);
* PARAMETERS: one row per parameter, columns NAME, METHOD (0 linear
  interpolation), INITIAL, DELTA, MINIMUM, BOTTOM, TOP, MAXIMUM, NUMBVALS,
  VALUE (the grid values, padded to the longest grid); keywords NINTPARM
  (interpolated parameters) and NADDPARM (additional ones, 0 here);
  HDUCLAS2 = 'PARAMETERS';
* ENERGIES: ENERG_LO, ENERG_HI in keV; HDUCLAS2 = 'ENERGIES';
* SPECTRA: PARAMVAL (the parameter values of the row) and INTPSPEC (the
  spectrum, photons cm^-2 s^-1 per energy bin); HDUCLAS2 = 'MODEL SPECTRA'.
  Rows run over the grid with the *last* parameter varying fastest.

References
----------
George, I. M. & Arnaud, K. A. (1992, rev. 1995), OGIP memo OGIP/92-009.
"""

import io

import numpy as np

from .files import atomic_write

__all__ = ["table_model_hdus", "write_table_model", "grid_points"]


def grid_points(values):
    """Every combination of the parameters' grid values, the last varying fastest.

    Examples
    --------
    >>> grid_points([[1.0, 2.0], [10.0, 20.0, 30.0]])[:4].tolist()
    [[1.0, 10.0], [1.0, 20.0], [1.0, 30.0], [2.0, 10.0]]
    """
    mesh = np.meshgrid(*[np.asarray(v, dtype=float) for v in values], indexing="ij")
    return np.stack([m.ravel() for m in mesh], axis=1)


def table_model_hdus(name, unit, parameters, values, energy_edges_kev, spectra,
                     redshift=False, history=()):
    """The HDU list of an additive OGIP table model.

    Parameters
    ----------
    name : str
        MODLNAME (cut to 12 characters).
    unit : str
        MODLUNIT, the unit of the model spectra ('photons/cm^2/s').
    parameters : list of str
        Parameter names (cut to 12 characters each).
    values : list of array_like
        Grid values of each parameter, increasing.
    energy_edges_kev : array_like (E + 1,)
    spectra : array_like (prod(len(v)), E)
        One spectrum per grid point (order of :func:`grid_points`), photons
        cm^-2 s^-1 per energy bin.
    redshift : bool
        Whether a fitting program may add a redshift parameter.
    history : iterable of str
        HISTORY cards for the primary header (how the table was made).
    """
    from astropy.io import fits

    values = [np.asarray(v, dtype=float) for v in values]
    longest = max(v.size for v in values)
    padded = np.array([np.concatenate([v, np.full(longest - v.size, v[-1])]) for v in values])
    primary = fits.PrimaryHDU()
    header = primary.header
    for key, value in (("HDUCLASS", "OGIP"), ("HDUCLAS1", "XSPEC TABLE MODEL"),
                       ("HDUVERS", "1.0.0"), ("MODLNAME", name[:12]), ("MODLUNIT", unit),
                       ("REDSHIFT", bool(redshift)), ("ADDMODEL", True),
                       ("CREATOR", "nullray")):
        header[key] = value
    for line in history:
        header.add_history(line)
    spans = [(float(v[0]), float(v[-1])) for v in values]
    columns = [
        fits.Column("NAME", "12A", array=np.array([p[:12] for p in parameters])),
        fits.Column("METHOD", "J", array=np.zeros(len(values), dtype=np.int32)),
        fits.Column("INITIAL", "E", array=[0.5 * (lo + hi) for lo, hi in spans]),
        fits.Column("DELTA", "E", array=[0.01 * (hi - lo) if hi > lo else 0.0
                                         for lo, hi in spans]),
        fits.Column("MINIMUM", "E", array=[lo for lo, _ in spans]),
        fits.Column("BOTTOM", "E", array=[lo for lo, _ in spans]),
        fits.Column("TOP", "E", array=[hi for _, hi in spans]),
        fits.Column("MAXIMUM", "E", array=[hi for _, hi in spans]),
        fits.Column("NUMBVALS", "J", array=np.array([v.size for v in values], dtype=np.int32)),
        fits.Column("VALUE", f"{longest}E", array=padded),
    ]
    parameters_hdu = fits.BinTableHDU.from_columns(columns, name="PARAMETERS")
    _classify(parameters_hdu.header, "PARAMETERS")
    parameters_hdu.header["NINTPARM"] = len(values)
    parameters_hdu.header["NADDPARM"] = 0
    edges = np.asarray(energy_edges_kev, dtype=float)
    energies = fits.BinTableHDU.from_columns(
        [fits.Column("ENERG_LO", "E", unit="keV", array=edges[:-1]),
         fits.Column("ENERG_HI", "E", unit="keV", array=edges[1:])], name="ENERGIES")
    _classify(energies.header, "ENERGIES")
    spectra = np.asarray(spectra, dtype=float)
    rows = grid_points(values)
    spectra_hdu = fits.BinTableHDU.from_columns(
        [fits.Column("PARAMVAL", f"{len(values)}E", array=rows),
         fits.Column("INTPSPEC", f"{edges.size - 1}E", unit=unit, array=spectra)],
        name="SPECTRA")
    _classify(spectra_hdu.header, "MODEL SPECTRA")
    return fits.HDUList([primary, parameters_hdu, energies, spectra_hdu])


def _classify(header, kind):
    header["HDUCLASS"] = "OGIP"
    header["HDUCLAS1"] = "XSPEC TABLE MODEL"
    header["HDUCLAS2"] = kind
    header["HDUVERS"] = "1.0.0"


def write_table_model(path, hdus, overwrite=False):
    """Write the HDU list atomically (:func:`render.output.files.atomic_write`)."""
    buffer = io.BytesIO()
    hdus.writeto(buffer, output_verify="exception")
    data = buffer.getvalue()
    return atomic_write(path, lambda f: f.write(data), overwrite)
