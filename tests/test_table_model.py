"""nullray table: FITS table models in the layout of the OGIP memo OGIP/92-009.

The memo (George & Arnaud 1992, rev. 1995) fixes the extensions PARAMETERS, ENERGIES
and SPECTRA, their columns and the keywords checked below; astropy.io.fits reads and
verifies the file independently of the writer.
"""

import numpy as np
import pytest
from astropy.io import fits

from render import default_scene
from render.api import make_table_model
from render.errors import NullrayWarning, TableIncomplete
from render.tables import grid as table_grid
from render.tables.grid import build_table, compute_point, parse_vary, plan_table, point_spectrum
from render.light.observing import prepare_observation
from conftest import run_cli  # noqa: E402  (shared test helpers)

BASE = {"name": "tbl", "image.width": 8, "image.height": 8, "observer.placement": "distant",
        "observing.mode": "line", "observing.line_bins": 60, "disk.outer_radius": 30.0,
        "disk.orders": 1, "observing.sampling_tolerance": 0.01}
VARIES = ["black_hole.spin=0:0.5:2", "observer.inclination=20:40:3"]


def _run_here(jobs):
    return (compute_point(job) for job in jobs)


@pytest.fixture(scope="module")
def table_file(tmp_path_factory):
    folder = tmp_path_factory.mktemp("table")
    scene = default_scene(**BASE)
    paths, _ = build_table(scene, [parse_vary(v) for v in VARIES], folder, run_points=_run_here)
    return scene, paths


def test_table_model_has_the_ogip_layout_and_verifies(table_file):
    _, paths = table_file
    with fits.open(paths["table"]) as hdus:
        hdus.verify("exception")          # astropy's FITS standard checks
        primary = hdus[0].header
        # OGIP/92-009: the primary header's keywords of a table model.
        assert primary["HDUCLASS"] == "OGIP"
        assert primary["HDUCLAS1"] == "XSPEC TABLE MODEL"
        for key in ("MODLNAME", "MODLUNIT", "REDSHIFT", "ADDMODEL"):
            assert key in primary
        assert primary["ADDMODEL"] is True and len(primary["MODLNAME"]) <= 12
        assert [h.name for h in hdus[1:]] == ["PARAMETERS", "ENERGIES", "SPECTRA"]
        parameters = hdus["PARAMETERS"]
        # OGIP/92-009, the PARAMETERS extension: these columns, NINTPARM and NADDPARM.
        for column in ("NAME", "METHOD", "INITIAL", "DELTA", "MINIMUM", "BOTTOM", "TOP",
                       "MAXIMUM", "NUMBVALS", "VALUE"):
            assert column in parameters.columns.names
        assert parameters.header["NINTPARM"] == 2 and parameters.header["NADDPARM"] == 0
        assert parameters.header["HDUCLAS2"] == "PARAMETERS"
        assert list(parameters.data["NUMBVALS"]) == [2, 3]
        np.testing.assert_allclose(parameters.data["VALUE"][1], [20.0, 30.0, 40.0])
        assert hdus["ENERGIES"].columns.names == ["ENERG_LO", "ENERG_HI"]
        assert hdus["ENERGIES"].header["HDUCLAS2"] == "ENERGIES"
        spectra = hdus["SPECTRA"]
        assert spectra.columns.names[:2] == ["PARAMVAL", "INTPSPEC"]
        assert spectra.header["HDUCLAS2"] == "MODEL SPECTRA"
        assert spectra.data["INTPSPEC"].shape == (6, 60)
        # Rows run over the grid with the last parameter fastest (OGIP/92-009).
        np.testing.assert_allclose(spectra.data["PARAMVAL"][:4],
                                   [[0, 20], [0, 30], [0, 40], [0.5, 20]])


def _direct(values):
    scene = default_scene(**{**BASE, **values})
    edges, spectrum, _ = point_spectrum(prepare_observation(scene), scene)
    return edges, spectrum


def test_grid_point_read_back_equals_a_direct_computation(table_file):
    _, paths = table_file
    edges, direct = _direct({"black_hole.spin": 0.5, "observer.inclination": 30.0})
    with fits.open(paths["table"]) as hdus:
        row = hdus["SPECTRA"].data[4]
        np.testing.assert_allclose(row["PARAMVAL"], [0.5, 30.0])
        # Stored as 32-bit floats ('E' columns, as the memo allows): 1e-6 relative.
        np.testing.assert_allclose(row["INTPSPEC"], direct, rtol=1e-6, atol=1e-6 * direct.max())
        np.testing.assert_allclose(hdus["ENERGIES"].data["ENERG_LO"], edges[:-1], rtol=1e-6)


def test_linear_interpolation_between_grid_points_approaches_a_direct_computation(table_file):
    # Linear interpolation in inclination (METHOD 0 of OGIP/92-009) between 20 and 30 deg,
    # at 25 deg, against a direct computation there.  Its error is about
    # (1/8) (10 deg)^2 |d2S/di2| per bin (the interpolation remainder; common practice),
    # which the three grid inclinations estimate as |S20 - 2 S30 + S40| / 8: the L1
    # error must stay within 1.5x that (the second difference varies across 20..40 deg)
    # plus the grids' own sampling tolerance (1% L1 each).
    _, paths = table_file
    with fits.open(paths["table"]) as hdus:
        spectra = np.array(hdus["SPECTRA"].data["INTPSPEC"], dtype=float)
    s20, s30, s40 = spectra[0], spectra[1], spectra[2]
    _, direct = _direct({"black_hole.spin": 0.0, "observer.inclination": 25.0})
    interpolated = 0.5 * (s20 + s30)
    error = np.abs(interpolated - direct).sum() / direct.sum()
    bound = 1.5 * np.abs(s20 - 2 * s30 + s40).sum() / 8 / direct.sum() + 2 * 0.01
    assert error < bound
    assert error < 0.1   # and the table is useful at this spacing


def test_an_interrupted_grid_resumes_from_the_points_it_kept(tmp_path):
    scene = default_scene(**BASE)
    varies = [parse_vary("observer.inclination=20:30:2")]
    finished = []

    def stop_after_one(jobs):
        for job in jobs:
            finished.append(job.index)
            yield compute_point(job)
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        build_table(scene, varies, tmp_path, run_points=stop_after_one)
    assert not (tmp_path / "tbl_table.fits").exists()
    assert len(list((tmp_path / "tbl_table_points").glob("point_*.npz"))) == 1
    second = []

    def record(jobs):
        for job in jobs:
            second.append(job.index)
            yield compute_point(job)

    paths, _ = build_table(scene, varies, tmp_path, run_points=record)
    assert finished == [0] and second == [1]   # only the missing point is computed
    with fits.open(paths["table"]) as hdus:
        assert hdus["SPECTRA"].data["INTPSPEC"].shape[0] == 2


def test_a_failed_point_is_reported_and_the_others_are_kept(tmp_path, monkeypatch):
    scene = default_scene(**BASE)
    varies = [parse_vary("observer.inclination=20:30:2")]

    def fail_second(jobs):
        for job in jobs:
            if job.index == 1:
                yield job.index, None, None, {"error": "RuntimeError: lost"}, 0.0
            else:
                yield compute_point(job)

    with pytest.warns(NullrayWarning, match="failed"), pytest.raises(TableIncomplete):
        build_table(scene, varies, tmp_path, run_points=fail_second)
    assert len(list((tmp_path / "tbl_table_points").glob("point_*.npz"))) == 1
    assert not (tmp_path / "tbl_table.fits").exists()


@pytest.mark.parametrize("varies, fragments", [
    (["black_hole.spin=0:0.5"], ["--vary", "KEY=LOW:HIGH:COUNT"]),
    (["black_hole.spn=0:0.5:3"], ["--vary", "black_hole.spn"]),
    (["observing.line_energy=6:7:3"], ["--vary", "observing.line_energy"]),
    (["black_hole.spin=0.5:0:3"], ["LOW < HIGH"]),
    (["black_hole.spin=0:1.5:3"], ["black_hole.spin", "1.5"]),
    ([], ["--vary"]),
])
def test_bad_grids_are_refused_in_one_line_before_any_tracing(tmp_path, capsys, no_tracing,
                                                               varies, fragments):
    scene = tmp_path / "scene.yaml"
    scene.write_text("observer:\n  placement: distant\nobserving:\n  mode: line\n")
    out_dir = tmp_path / "out"
    args = ["table", scene, "--output-dir", out_dir]
    for vary in varies:
        args += ["--vary", vary]
    status, out, err = run_cli(args, capsys)
    assert status == 2 and out == "" and err.count("\n") == 1 and "Traceback" not in err
    for fragment in fragments:
        assert fragment in err, err
    assert not out_dir.exists()


def test_table_needs_a_line_or_spectrum_of_a_distant_observer():
    for values in ({"observing.mode": "bolometric"}, {"observer.placement": "camera"}):
        with pytest.raises(Exception, match="nullray table needs"):
            plan_table(default_scene(**{**BASE, **values}), [parse_vary(VARIES[0])])


def test_api_table_on_a_local_pool_of_two_workers(tmp_path):
    # The same points as computed here, through the spawned pool of render.parallel.
    scene = default_scene(**BASE)
    paths, summary = make_table_model(scene, ["observer.inclination=20:30:2"], tmp_path,
                                      workers=2)
    edges, direct = _direct({"observer.inclination": 30.0})
    with fits.open(paths["table"]) as hdus:
        np.testing.assert_allclose(hdus["SPECTRA"].data["INTPSPEC"][1], direct, rtol=1e-6,
                                   atol=1e-6 * direct.max())
    assert summary["points"] == 2
    assert table_grid.table_paths(scene, tmp_path)["table"] == paths["table"]


@pytest.mark.slow   # starts a two-process Dask cluster; the local pool's test covers the rest
def test_api_table_on_a_dask_cluster(tmp_path):
    # The same points through a Dask LocalCluster of two worker processes on loopback
    # (as a real cluster, but local): the table equals a direct computation.
    from dask.distributed import Client, LocalCluster

    scene = default_scene(**BASE)
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None) as cluster:
        with Client(cluster) as client:
            client.wait_for_workers(2, timeout=120)
        paths, summary = make_table_model(scene, ["observer.inclination=20:30:2"], tmp_path,
                                          scheduler=cluster.scheduler_address)
    edges, direct = _direct({"observer.inclination": 30.0})
    with fits.open(paths["table"]) as hdus:
        np.testing.assert_allclose(hdus["SPECTRA"].data["INTPSPEC"][1], direct, rtol=1e-6,
                                   atol=1e-6 * direct.max())
    assert summary["points"] == 2
