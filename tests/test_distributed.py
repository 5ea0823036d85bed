"""Frames rendered by a local process pool or a Dask cluster equal the serial frames."""

import json

import numpy as np
import pytest
from PIL import Image

from render import default_scene
from render.api import render_sequence
from render.errors import SchedulerError
from render.parallel import connect, local_threads


def _scene():
    return default_scene(name="spread", **{
        "image.width": 32, "image.height": 18, "observer.placement": "distant",
        "observer.field_of_view": 30.0, "output.npz": False, "animation.frames": 4,
        "pattern.shape": "spot", "pattern.size": 2.0, "animation.time_step": 20.0,
        "animation.keyframes": [{"frame": 0, "observer.inclination": 30},
                                {"frame": 3, "observer.inclination": 70}]})


def _frames(folder):
    return [np.asarray(Image.open(folder / f"frame_{k:05d}.png")) for k in range(4)]


@pytest.fixture(scope="module")
def serial(tmp_path_factory):
    out = tmp_path_factory.mktemp("serial")
    render_sequence(_scene(), out, products=False)
    return out / "spread"


def _same_as_serial(folder, serial):
    for mine, reference in zip(_frames(folder), _frames(serial)):
        assert np.array_equal(mine, reference)
    ours = json.loads((folder / "manifest.json").read_text())["frames"]
    theirs = json.loads((serial / "manifest.json").read_text())["frames"]
    assert {k: v["sha256"] for k, v in ours.items()} == {k: v["sha256"] for k, v in theirs.items()}


def test_local_pool_gives_the_serial_frames(tmp_path, serial):
    result = render_sequence(_scene(), tmp_path, workers=2, products=False)
    assert result.rendered == [0, 1, 2, 3]  # written in frame order by the client
    _same_as_serial(tmp_path / "spread", serial)


@pytest.fixture(scope="module")
def cluster():
    # A Dask LocalCluster of two worker processes on loopback (as a real cluster, but local).
    from dask.distributed import Client, LocalCluster

    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None) as local:
        with Client(local) as client:
            client.wait_for_workers(2, timeout=120)
        yield local


def test_dask_local_cluster_gives_the_serial_frames(tmp_path, serial, cluster):
    result = render_sequence(_scene(), tmp_path, scheduler=cluster.scheduler_address,
                             products=False)
    assert result.rendered == [0, 1, 2, 3]
    _same_as_serial(tmp_path / "spread", serial)


def test_a_still_in_bands_on_the_cluster_equals_the_local_still(tmp_path, cluster):
    from render import render_still
    from render.parallel import render_still_on_cluster

    scene = default_scene(**{"image.width": 40, "image.height": 30, "observer.placement": "distant",
                             "disk.surface": "transparent"})
    local = render_still(scene)
    spread = render_still_on_cluster(scene, cluster.scheduler_address, workdir=tmp_path)
    try:
        assert spread.metadata["tiles"]["count"] == 8  # 4 bands per worker, 2 workers
        for name in ("pixels", "fate", "steps"):
            assert np.array_equal(getattr(spread, name), getattr(local, name)), name
        # Float maps: now and then a worker process's kernel results differ from this
        # process's (observed: every ray alike, same step counts, r by ~5e-12 relative, the
        # delay of rays grazing the photon orbit, |delay| ~ 2e3 M, by ~1e-8 relative; as if
        # the kernel were compiled differently).  1e-7 of each map's scale is far below
        # anything a wrong band split could cause (wrong rows differ at order 1).
        for name in ("intensity", "r", "phi", "g", "delay"):
            reference = np.asarray(getattr(local, name))
            scale = float(np.nanmax(np.abs(reference)))
            assert np.allclose(getattr(spread, name), reference, rtol=1e-7,
                               atol=1e-7 * scale, equal_nan=True), name
    finally:
        spread.release()


def test_unreachable_scheduler_is_one_line():
    with pytest.raises(SchedulerError) as info:
        connect("tcp://127.0.0.1:9", timeout=1)
    assert "\n" not in str(info.value) and "cannot be reached" in str(info.value)


def test_numba_threads_share_the_cores():
    assert local_threads(2, cores=2) == 1
    assert local_threads(3, cores=8) == 2


@pytest.mark.slow
def test_pool_workers_leave_when_the_client_is_killed(tmp_path):
    # kill -9 of the client cannot shut its pool down: the workers must notice and exit
    # rather than wait for work forever (psutil lists them before the kill).
    import signal
    import subprocess
    import sys

    import psutil
    import yaml

    scene = tmp_path / "orphans.yaml"
    scene.write_text(yaml.safe_dump({
        "image": {"width": 32, "height": 18}, "observer": {"placement": "distant"},
        "animation": {"frames": 40, "keyframes": [{"frame": 0, "observer.inclination": 10},
                                                  {"frame": 39, "observer.inclination": 80}]}}))
    client = subprocess.Popen([sys.executable, "-m", "render", "sequence", str(scene),
                               "--output-dir", str(tmp_path / "out"), "--workers", "2"],
                              stderr=subprocess.PIPE, stdout=subprocess.DEVNULL, text=True)
    for line in client.stderr:
        if line.startswith("frame "):
            break
    workers = [p for p in psutil.Process(client.pid).children(recursive=True)
               if "spawn_main" in " ".join(p.cmdline())]
    client.send_signal(signal.SIGKILL)
    client.wait(timeout=30)
    client.stderr.close()
    assert len(workers) == 2
    _, alive = psutil.wait_procs(workers, timeout=20)
    for process in alive:  # clean up before failing
        process.kill()
    assert not alive


def test_a_huge_worker_count_is_capped_and_said_in_one_line(tmp_path, capsys):
    # --workers 1000000000 spawned processes until stopped (issue 13): it is capped at
    # the frames left (here 1, so no pool at all) and the command says so in one line.
    from conftest import run_cli

    scene = tmp_path / "tiny.yaml"
    scene.write_text("image:\n  width: 16\n  height: 16\nobserver:\n  placement: distant\n"
                     "animation:\n  frames: 1\n", encoding="utf-8")
    status, out, err = run_cli(["sequence", scene, "--workers", "1000000000", "--output-dir",
                                tmp_path / "out", "--quiet"], capsys)
    assert status == 0, err
    notes = [line for line in err.splitlines() if "--workers" in line]
    assert notes == ["nullray: warning: --workers 1000000000 capped to 1 (the 1 frame left)"]
    assert (tmp_path / "out" / "tiny" / "frame_00000.png").is_file()


@pytest.mark.slow   # waits out the (shortened) give-up time: about 10 s
def test_a_cluster_left_without_workers_says_so_and_gives_up(tmp_path):
    # A killed Dask worker left the client waiting silently forever (issue 13): it must
    # warn once that it waits for workers, then stop with one WorkerLostError after the
    # documented wait (shortened here) when none joins.
    from dask.distributed import Client, LocalCluster

    from render.errors import NullrayWarning, WorkerLostError
    from render.film.sequence import plan_sequence
    from render.parallel import frame_results

    scene = default_scene(name="lonely", **{
        "image.width": 96, "image.height": 96, "observer.distance": 60.0,
        "animation.frames": 12, "animation.camera_path": "orbit"})
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None) as local, Client(local) as client:
        client.wait_for_workers(1, timeout=120)
        results = frame_results(plan_sequence(scene).jobs, client=client, worker_wait=3.0)
        first = next(results)   # the frames are submitted and the first one is back
        assert first.index == 0
        local.scale(0)          # the only worker leaves while frames are waiting
        with pytest.warns(NullrayWarning, match="no Dask worker"), \
                pytest.raises(WorkerLostError, match="within 3 s") as caught:
            for _ in results:
                pass
        assert "\n" not in str(caught.value)
