"""Where tile jobs run: in this process, or as dask tasks on a dask.distributed cluster.

One block-level job function is mapped either way (DEVELOPERS.md, "Adding a stage"), so the serial, chunked
and cluster paths give the same cubes. A lost worker's tasks are re-run by the scheduler
(dask.distributed reschedules the tasks of a worker that dies, up to
``distributed.scheduler.allowed-failures`` times); a task that still fails stops the run with
a clear error and, in a pipeline run, leaves no output files.
"""

import os
import re
import uuid
from contextlib import contextmanager

import numpy as np

from ._optional import require
from .errors import ConfigError, SynthError

__all__ = ["Executor", "SerialExecutor", "DaskExecutor", "make_executor", "executor_context",
           "check_execution", "spilled_snapshot"]

_ADDRESS = re.compile(r"^(?:(tcp|tls|ws|wss|ucx)://)?(\[[0-9A-Fa-f:]+\]|[A-Za-z0-9_.-]+):(\d{1,5})$")


def check_execution(workers=None, scheduler=None):
    """Refuse bad --workers / --scheduler values before any work (ConfigError, one line)."""
    if workers is not None and scheduler is not None:
        raise ConfigError("give either --workers (a local cluster) or --scheduler (an existing "
                          "one), not both")
    if workers is not None and (isinstance(workers, bool) or int(workers) < 1):
        raise ConfigError(f"--workers must be >= 1, got {workers}")
    if scheduler is not None:
        m = _ADDRESS.match(str(scheduler))
        if m is None or not 0 < int(m.group(3)) < 65536:
            raise ConfigError(f"--scheduler {str(scheduler)!r} is not a scheduler address; give "
                              "PROTOCOL://HOST:PORT, e.g. tcp://10.0.0.5:8786")


class Executor:
    """Maps a job over argument tuples, yielding (index, result) as results arrive."""

    n_workers = 1
    in_flight = 1
    #: jobs run in this process (they may share its arrays) or elsewhere (they get copies)
    in_process = True

    def map(self, fn, args_list, progress=None):  # pragma: no cover - interface
        raise NotImplementedError


class SerialExecutor(Executor):
    """Run jobs one after another in this process (the numba kernel uses this process's
    threads: a parallel loop over the columns of a tile)."""

    def map(self, fn, args_list, progress=None):
        for i, args in enumerate(args_list):
            yield i, fn(*args)
            if progress is not None:
                progress.update(1)


class _OneThread:
    """A job run on a dask worker process, whose numba kernels use one thread each (the
    workers have ``threads_per_worker=1``; the cores are shared between the processes)."""

    def __init__(self, fn):
        self.fn = fn

    def __call__(self, *args):
        import numba
        numba.set_num_threads(1)
        return self.fn(*args)


class DaskExecutor(Executor):
    """Run jobs as tasks on a dask.distributed Client (at most 2 per worker in flight)."""

    in_process = False

    def __init__(self, client, local=False):
        self.client = client
        self.local = local  # workers share this machine's file system (a LocalCluster)
        info = client.scheduler_info()
        self.n_workers = max(1, len(info.get("workers", {})))
        self.in_flight = 2 * self.n_workers

    def map(self, fn, args_list, progress=None):
        distributed = require("distributed")
        fn = _OneThread(fn)
        pending, queue = {}, enumerate(args_list)
        limit = self.in_flight
        ac = distributed.as_completed()
        run = uuid.uuid4().hex[:12]
        exhausted = False
        while not exhausted or pending:
            while not exhausted and len(pending) < limit:
                item = next(queue, None)
                if item is None:
                    exhausted = True
                    break
                i, args = item
                # each argument as one piece under a fresh key: scatter of a dict (or a list)
                # would scatter its items, under the dict's own keys
                args = tuple(a if isinstance(a, (int, float, str, bool, type(None)))
                             else self.client.scatter([a], hash=False)[0] for a in args)
                fut = self.client.submit(fn, *args, pure=False, key=f"synth-tile-{run}-{i}")
                pending[fut.key] = (i, fut)
                ac.add(fut)
            if not pending:
                break
            fut = next(ac)
            i, _ = pending.pop(fut.key)
            try:
                result = fut.result()
            except Exception as exc:
                raise SynthError(f"tile {i} failed on the dask cluster: {type(exc).__name__}: "
                                 f"{exc}") from exc
            finally:
                fut.release()
            yield i, result
            if progress is not None:
                progress.update(1)


#: Thread-count variables the worker processes get (one thread each); never left set in the
#: caller's own environment.
THREAD_VARS = ("OMP_NUM_THREADS", "MKL_NUM_THREADS", "OPENBLAS_NUM_THREADS")


@contextmanager
def _workers_only_environ(dask_config):
    """dask.distributed's nanny sets its ``pre-spawn-environ`` variables (the thread counts)
    in the calling process's ``os.environ`` before it spawns a worker, and leaves them there.
    Keep them for the workers only: restore the caller's values once the workers started, and
    again at the end (a restarted worker sets them anew)."""
    keys = set(THREAD_VARS) | {"PYTHONHASHSEED"}
    keys |= set(dask_config.get("distributed.nanny.pre-spawn-environ", default={}) or {})
    saved = {k: os.environ.get(k) for k in keys}

    def restore():
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v
    try:
        yield restore
    finally:
        restore()


@contextmanager
def executor_context(workers=None, scheduler=None, dashboard=False):
    """An Executor for the options: a local cluster of ``workers`` processes (one thread
    each, bound to 127.0.0.1, no dashboard unless ``dashboard``), an existing scheduler
    address (a cluster you trust: tasks run code sent by this process and results are
    unpickled here), or serial."""
    check_execution(workers, scheduler)
    if workers is None and scheduler is None:
        yield SerialExecutor()
        return
    distributed = require("distributed")
    if scheduler is not None:
        try:
            client = distributed.Client(scheduler, timeout="10s")
        except (OSError, TimeoutError) as exc:
            raise ConfigError(f"cannot reach the dask scheduler at {scheduler}: {exc}") from None
        try:
            yield DaskExecutor(client)
        finally:
            client.close()
        return
    import dask
    with _workers_only_environ(dask.config) as restore:
        cluster = distributed.LocalCluster(
            n_workers=int(workers), threads_per_worker=1, processes=True, host="127.0.0.1",
            dashboard_address="127.0.0.1:0" if dashboard else None)
        restore()
        client = distributed.Client(cluster)
        try:
            ex = DaskExecutor(client, local=True)
            ex.dashboard_link = cluster.dashboard_link if dashboard else None
            yield ex
        finally:
            client.close()
            cluster.close()


@contextmanager
def spilled_snapshot(snapshot, executor):
    """What the tile jobs of ``executor`` should read an in-memory ``snapshot`` from. On a
    local dask cluster it is written once to a temporary HDF5 file that the workers read
    block by block themselves (:class:`synth.snapshot.lazy.SnapshotFile`), instead of
    pickling every block through this process (which then competes with the workers for the
    cores); elsewhere the snapshot is used as it is. The file is removed at the end (and by
    the next run if this one is killed)."""
    from .snapshot.core import Snapshot
    spill = (isinstance(snapshot, Snapshot) and getattr(executor, "local", False)
             and all(np.ndim(a) == 3 for a in (snapshot._cgs["abundance"] or {}).values()))
    if not spill:
        yield snapshot
        return
    import astropy.units as u
    from .rundir import remove_temp_folder, temp_folder
    from .snapshot.lazy import SnapshotFile
    from .snapshot.readers import write_hdf5
    folder = temp_folder()
    try:
        path = os.path.join(folder, "snapshot.h5")
        write_hdf5(snapshot, path)
        sig = snapshot.sigma_turb_cms
        kw = {"sigma_turb": float(sig) * u.cm / u.s} if np.ndim(sig) == 0 else {}
        yield SnapshotFile(path, **kw).view("z")
    finally:
        remove_temp_folder(folder)


def make_executor(client=None):
    """An Executor from a dask Client (or serial when None)."""
    return SerialExecutor() if client is None else DaskExecutor(client)
