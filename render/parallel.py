"""Spreading frames over processes: a local pool or a Dask distributed cluster.

The unit of work is one frame (:class:`render.film.frame.FrameJob`), or one band
of rows of a large still (:func:`render_still_on_cluster`).  Workers return the
frame's pixels or the band's arrays; the client writes them, in order, so the
files look the same whichever backend rendered them.

Numba's parallel kernel would start one thread per core in every worker; with
several workers per machine that oversubscribes the cores.  Each task therefore
sets ``numba.set_num_threads(cores // workers_on_that_machine)`` before
tracing (numba's thread count is per calling thread, so it is set inside the
task, not once per process).

Cluster set-up (see README)::

    dask scheduler --host 0.0.0.0 --port 8786            # on one machine
    dask worker tcp://SCHEDULER:8786 --nworkers 1 --nthreads 1   # on each machine
    nullray sequence scenes/orbit.yaml --scheduler tcp://SCHEDULER:8786

Every worker needs the same nullray installed (``pip install -e .``).
"""

import os
import time
import warnings
from collections import Counter

from .errors import NullrayWarning, SchedulerError, UsageError, WorkerLostError
from .film.frame import render_frame
from .imaging.still import _render_band
from .imaging.tiling import is_tileable, plan_still, render_in_tiles
from .light.observing import prepare_observation

__all__ = ["task_results", "SchedulerError", "auto_workers", "capped_workers", "connect", "check_scheduler",
           "frame_results", "local_threads", "render_still_on_cluster"]

CONNECT_TIMEOUT_S = 10
# How long a cluster may have no worker at all before a run gives up (README, Robustness);
# a worker that joins within it picks the waiting frames up.
WORKER_WAIT_S = 120.0
# How often a waiting client looks at the scheduler's worker count.
POLL_S = 2.0


def local_threads(workers, cores=None):
    """Numba threads per worker so that ``workers`` processes share the cores.

    Examples
    --------
    >>> local_threads(2, cores=8), local_threads(16, cores=8)
    (4, 1)
    """
    cores = cores or os.cpu_count() or 1
    return max(1, cores // max(1, int(workers)))


def connect(address, timeout=CONNECT_TIMEOUT_S):
    """A ``dask.distributed.Client`` for ``address``; :class:`SchedulerError` if unreachable."""
    _require_cluster_extra()
    from dask.distributed import Client

    _check_reachable(address, timeout)
    try:
        client = Client(address, timeout=timeout, set_as_default=False)
    except Exception as exc:  # OSError, TimeoutError, ValueError for a malformed address
        detail = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise SchedulerError(f"--scheduler {address!r} cannot be reached: {detail}") from None
    return client


def check_scheduler(address, timeout=CONNECT_TIMEOUT_S):
    """Raise :class:`SchedulerError` now if Dask is not installed or ``address`` refuses connections."""
    _require_cluster_extra()
    _check_reachable(address, timeout)


CLUSTER_EXTRA_MISSING = ("--scheduler needs Dask's distributed scheduler, which is the optional "
                         "'cluster' extra: pip install 'nullray[cluster]'")


def _require_cluster_extra():
    """One line naming the extra to install when dask.distributed is missing."""
    try:
        import dask.distributed  # noqa: F401
    except ImportError:
        raise SchedulerError(CLUSTER_EXTRA_MISSING) from None


def _check_reachable(address, timeout):
    """Fail fast on a refused or unroutable tcp:// address (Dask itself retries until timeout)."""
    import socket
    from urllib.parse import urlsplit

    if "://" not in address:
        address = f"tcp://{address}"
    parts = urlsplit(address)
    if parts.scheme not in ("tcp", "tls"):
        return  # other transports (inproc, ucx): leave the check to Dask
    try:
        host, port = parts.hostname, parts.port
    except ValueError:
        raise SchedulerError(f"--scheduler {address!r} is not an address host:port") from None
    if not host or port is None:
        raise SchedulerError(f"--scheduler {address!r} is not an address host:port (e.g. "
                             "tcp://10.0.0.5:8786)")
    try:
        socket.create_connection((host, port), timeout=timeout).close()
    except OSError as exc:
        raise SchedulerError(f"--scheduler {address!r} cannot be reached: "
                             f"{exc.strerror or exc}") from None


def _dask_threads(client):
    """{worker address: numba threads}: each machine's cores shared by its worker threads."""
    cores = client.run(os.cpu_count)
    workers = client.scheduler_info(n_workers=-1)["workers"] if _accepts_n_workers(client) \
        else client.scheduler_info()["workers"]
    per_host = Counter()
    for address, info in workers.items():
        per_host[info.get("host", address)] += int(info.get("nthreads", 1))
    return {address: max(1, (cores.get(address) or 1) // per_host[info.get("host", address)])
            for address, info in workers.items()}


def _accepts_n_workers(client):
    import inspect

    return "n_workers" in inspect.signature(client.scheduler_info).parameters


def _dask_task(job, threads):
    from dask.distributed import get_worker


    return render_frame(job, numba_threads=threads.get(get_worker().address, 1))


def _pool_init(parent):
    # Workers never print tracebacks of Ctrl-C: the client reports the interruption.
    import signal
    import threading
    import time

    signal.signal(signal.SIGINT, signal.SIG_IGN)

    def exit_when_orphaned():
        # A client killed with SIGKILL cannot shut its pool down; its workers would wait
        # for work forever.  They leave once their parent is gone.
        while os.getppid() == parent:
            time.sleep(0.5)
        os._exit(1)

    threading.Thread(target=exit_when_orphaned, daemon=True).start()


def _caused_by_interrupt(exc):
    seen = 0
    while exc is not None and seen < 1000:
        if isinstance(exc, KeyboardInterrupt):
            return True
        exc, seen = exc.__cause__ or exc.__context__, seen + 1
    return False


def frame_results(jobs, workers=1, client=None, worker_wait=WORKER_WAIT_S):
    """Yield :class:`~render.film.frame.FrameResult` for ``jobs``, in their order.

    Parameters
    ----------
    jobs : list of FrameJob
    workers : int
        Local processes; 1 renders in this process.
    client : dask.distributed.Client, optional
        Send the frames to this cluster instead.
    worker_wait : float
        Seconds the cluster may have no worker before :class:`WorkerLostError`.
    """

    jobs = list(jobs)
    if not jobs:
        return
    if client is not None:
        threads = _dask_threads(client)
        futures = [client.submit(_dask_task, job, threads, pure=False,
                                 key=f"nullray-frame-{job.index}-{id(jobs)}") for job in jobs]
        yield from _results_in_order(futures, client, worker_wait)
        return
    if workers <= 1:
        for job in jobs:
            try:
                result = render_frame(job)
            except SystemError as exc:
                # Ctrl-C inside the numba kernel surfaces as "returned a result with an
                # exception set", caused by the KeyboardInterrupt: report it as one.
                if _caused_by_interrupt(exc):
                    raise KeyboardInterrupt from None
                raise
            yield result
        return
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    # spawn: numba's threading layers are not safe across fork.
    context = multiprocessing.get_context("spawn")
    threads = local_threads(workers)
    with ProcessPoolExecutor(max_workers=int(workers), mp_context=context,
                             initializer=_pool_init, initargs=(os.getpid(),)) as pool:
        futures = [pool.submit(render_frame, job, threads) for job in jobs]
        yield from _results_in_order(futures)


def task_results(function, jobs, workers=1, client=None, worker_wait=WORKER_WAIT_S):
    """Yield ``function(job, numba_threads)`` for each job, in the jobs' order.

    The generic counterpart of :func:`frame_results` (used by table models,
    :mod:`render.tables.grid`): in this process (``workers`` 1), on a local pool of
    spawned processes, or on a Dask cluster (``client``), with each worker's
    numba threads capped so that the cores are shared, not oversubscribed.
    """
    jobs = list(jobs)
    if not jobs:
        return
    if client is not None:
        threads = _dask_threads(client)
        futures = [client.submit(_dask_call, function, job, threads, pure=False,
                                 key=f"nullray-task-{index}-{id(jobs)}")
                   for index, job in enumerate(jobs)]
        yield from _results_in_order(futures, client, worker_wait)
        return
    if workers <= 1:
        for job in jobs:
            yield function(job)
        return
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    context = multiprocessing.get_context("spawn")   # numba's threads are not fork-safe
    threads = local_threads(workers)
    with ProcessPoolExecutor(max_workers=int(workers), mp_context=context,
                             initializer=_pool_init, initargs=(os.getpid(),)) as pool:
        futures = [pool.submit(function, job, threads) for job in jobs]
        yield from _results_in_order(futures)


def _dask_call(function, job, threads):
    from dask.distributed import get_worker

    return function(job, threads.get(get_worker().address, 1))


def _results_in_order(futures, client=None, worker_wait=WORKER_WAIT_S):
    """Yield the futures' results in submission order; cancel the rest if stopped early.

    A worker that dies (killed, out of memory) becomes one :class:`WorkerLostError`;
    the frames already yielded are kept by the caller, so a rerun resumes.  With a
    Dask ``client``, a cluster left without workers is said once (a warning) and
    given up after ``worker_wait`` seconds unless a worker joins.
    """
    from concurrent.futures.process import BrokenProcessPool

    try:
        for number, future in enumerate(futures):
            try:
                yield (future.result() if client is None
                       else _cluster_result(future, client, worker_wait))
            except BrokenProcessPool:
                raise WorkerLostError(
                    f"a worker process died (killed, or out of memory) after {number} "
                    "results; what finished is kept, rerun to resume") from None
            except Exception as exc:
                if type(exc).__name__ == "KilledWorker":   # dask.distributed's lost worker
                    raise WorkerLostError(f"a cluster worker died while rendering: {exc}; "
                                          "what finished is kept, rerun to resume") from None
                raise
    finally:
        for future in futures:
            future.cancel()


def _cluster_result(future, client, worker_wait):
    """A Dask future's result, watching that the cluster still has a worker to compute it."""
    alone_since = None
    while True:
        try:
            return future.result(timeout=POLL_S)
        except TimeoutError:   # dask.distributed's timeout is the built-in TimeoutError
            pass
        if _worker_count(client):
            alone_since = None
            continue
        now = time.monotonic()
        if alone_since is None:
            alone_since = now
            warnings.warn(f"no Dask worker is connected to the scheduler; waiting up to "
                          f"{worker_wait:.0f} s for one to join", NullrayWarning, stacklevel=2)
        elif now - alone_since > worker_wait:
            raise WorkerLostError(f"no Dask worker joined the scheduler within "
                                  f"{worker_wait:.0f} s after the last one left; what finished "
                                  "is kept, rerun to resume")


def _worker_count(client):
    info = (client.scheduler_info(n_workers=-1) if _accepts_n_workers(client)
            else client.scheduler_info())
    return len(info["workers"])


def _still_band_task(scene, rows, threads):
    from dask.distributed import get_worker
    import numba


    count = threads.get(get_worker().address, 1)
    numba.set_num_threads(max(1, min(int(count), numba.config.NUMBA_NUM_THREADS)))
    return _render_band(scene, prepare_observation(scene), rows, None,
                        bool(scene["output.npz"]))


def render_still_on_cluster(scene, address, *, workdir=None, progress=None, bands_per_worker=4):
    """Render one still as bands of rows on a Dask cluster; return a StillResult.

    The bands are submitted at once and collected in order by the client, which
    assembles them as :func:`render.imaging.tiling.render_in_tiles` does for a still
    larger than its memory budget (temporary files in ``workdir``; call
    ``result.release()`` when written), so the result is the same as the
    local render's.  Observing modes that shade the whole image at once
    cannot be split and are refused.
    """
    import dataclasses


    prepare_observation(scene)
    base = plan_still(scene)
    if not is_tileable(scene.values):
        raise UsageError(f"observing.mode = {scene['observing.mode']!r} shades the whole image "
                         "at once and cannot be split into bands for --scheduler; render it "
                         "without --scheduler")
    client = connect(address)
    futures = {}
    try:
        threads = _dask_threads(client)
        wanted = max(1, bands_per_worker * max(1, len(threads)))
        rows = max(1, min(base.rows_per_tile, -(-base.height // wanted)))
        plan = dataclasses.replace(base, rows_per_tile=rows,
                                   tile_bytes=base.whole_bytes * rows / base.height)
        futures = {band: client.submit(_still_band_task, scene, band, threads, pure=False)
                   for band in plan.bands()}

        def render_band(band, band_progress):
            part = _cluster_result(futures.pop(band), client, WORKER_WAIT_S)
            band_progress((band[1] - band[0]) * plan.width, None)
            return part

        return render_in_tiles(scene, plan, render_band, workdir=workdir, progress=progress)
    finally:
        for future in futures.values():
            future.cancel()
        client.close()


# With fewer frames left than this, a local pool's start-up (numba's cache load in every
# spawned worker, ~1.5 s) outweighs its gain (README, Performance: bench_sequence.py).
AUTO_POOL_MIN_FRAMES = 8


def auto_workers(frames_left, cores=None):
    """The default worker count: every core for a long enough sequence, else 1.

    Examples
    --------
    >>> auto_workers(120, cores=2), auto_workers(3, cores=2), auto_workers(120, cores=1)
    (2, 1, 1)
    """
    cores = cores or os.cpu_count() or 1
    return cores if frames_left >= AUTO_POOL_MIN_FRAMES else 1


def capped_workers(requested, frames_left, cores=None):
    """``(count, reason)``: at most one local worker per core and per frame left.

    ``reason`` is None when ``requested`` is used as given, else a one-line note of
    the cap (a process per frame beyond the cores only competes for them, and each
    costs about 100 MB and a numba cache load).

    Examples
    --------
    >>> capped_workers(2, 10, cores=4)
    (2, None)
    >>> capped_workers(1000000000, 10, cores=4)[0], capped_workers(8, 3, cores=4)[0]
    (4, 3)
    """
    cores = cores or os.cpu_count() or 1
    count = max(1, min(int(requested), cores, max(int(frames_left), 1)))
    if count == requested:
        return count, None
    limit = (f"the {cores} cores" if count == cores
             else f"the {frames_left} frame{'s' if frames_left != 1 else ''} left")
    return count, f"--workers {requested} capped to {count} ({limit})"
