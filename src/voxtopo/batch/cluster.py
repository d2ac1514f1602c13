"""Where the scans run: a local cluster or a scheduler's address, how its workers are set
up, one scan as a dask task, and how long a batch waits with no worker left."""

from __future__ import annotations

import os
import time
from pathlib import Path

from ..engine.own import THREADS_VARIABLE
from ..errors import InputError, VoxtopoError
from .settings import Settings, job_options

__all__ = ["WorkersLost", "WORKER_TIMEOUT", "WORKER_CONFIG", "connect", "local_cluster"]

#: Seconds a batch waits with no dask worker connected before it stops (keeping what
#: finished); ``[batch] worker_timeout`` changes it.
WORKER_TIMEOUT = 120.0

#: Where the local cluster's workers keep their scratch files, inside the batch folder.
_SCRATCH = ".dask-scratch"

#: How workers run. Memory: our tasks hold plain numpy arrays that dask
#: cannot spill, and a paused worker would hold its scan forever, so there is no spilling
#: and no pausing: a worker that passes 95 % of its limit is restarted and its scan is
#: recorded as failed (retried once, in case another task was the one that grew).
WORKER_CONFIG = {
    "distributed.worker.memory.target": False,
    "distributed.worker.memory.spill": False,
    "distributed.worker.memory.pause": False,
    "distributed.worker.memory.terminate": 0.95,
    "distributed.scheduler.allowed-failures": 1,
    # dask's sampling profiler takes the GIL from the task thread every 10 ms to walk its
    # stack; our tasks are one long call each, so the profile says little and costs time
    "distributed.worker.profile.enabled": False,
    "distributed.admin.tick.interval": "500ms",
    # dask starts workers with MALLOC_TRIM_THRESHOLD_=65536, which turns off glibc's
    # reuse of freed large blocks: every array of a scan then costs fresh page faults
    # (measured: 16 scans of 128^3 took 6.6 % longer with it). A worker keeps, at most,
    # the memory of its largest scan for the next one.
    "distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None,
    # glibc gives each thread that allocates (zarr's readers, numba's, the task's) an arena
    # of its own, and each keeps the most it ever held: two arenas keep that down
    # (measured: out-of-core pores of 512^3 on two workers peaked at 0.78 GB a worker with
    # the default, 0.59 GB with two, in the same time)
    "distributed.nanny.pre-spawn-environ.MALLOC_ARENA_MAX": 2,
    # numba's parallel loops (the distance transform's lines) take one thread per core
    # by default: in a worker of one thread beside others that is only contention
    # (measured: the distance transform of a 512^3 out-of-core run took 28 s on two such
    # workers, 15 s in one process). Set in the worker process as it starts, not before
    # the spawn: the nanny writes pre-spawn settings into the environment of the process
    # that starts the cluster, and numba there refuses to compile again once that
    # differs from the threads it launched.
    "distributed.nanny.environ.NUMBA_NUM_THREADS": 1,
}


#: the environment variables :data:`WORKER_CONFIG` sets (or unsets) in the workers
_WORKER_VARIABLES = tuple(key.rsplit(".", 1)[1] for key in WORKER_CONFIG
                          if key.startswith(("distributed.nanny.pre-spawn-environ.",
                                             "distributed.nanny.environ.")))


class WorkersLost(VoxtopoError):
    """No dask worker was connected for longer than the batch's worker timeout."""


def connect(scheduler):
    """A client of the dask scheduler at the address ``scheduler``, or one sentence."""
    from distributed import Client

    try:
        return Client(scheduler, timeout="10s")
    except Exception as exc:
        raise InputError(f"Could not reach the dask scheduler at {scheduler} "
                         f"({' '.join(str(exc).split())[:120]}); check the address or leave "
                         f"out --scheduler to use a local cluster.") from None


def local_cluster(workers: int, limit: int, scratch: Path, dashboard: bool = True,
                  config: dict | None = None):
    """A local cluster of ``workers`` one-thread worker processes of ``limit`` bytes each,
    set up as :data:`WORKER_CONFIG` and ``config`` (more dask settings) say, keeping their
    scratch files in ``scratch``; returns (client, cluster). The batch runner and local
    out-of-core runs both use it."""
    import dask
    # imported before the settings below, which would otherwise be undone with dask's
    # own defaults for distributed when they are
    from distributed import Client, LocalCluster

    scratch.mkdir(exist_ok=True)
    # dask's nanny writes its pre-spawn settings into this process's environment, where
    # the workers inherit them and where they beat the configuration: a cluster started
    # earlier with dask's defaults leaves MALLOC_TRIM_THRESHOLD_ there. So the workers'
    # own variables are taken out while they start, and the environment is given back as
    # it was.
    environment = dict(os.environ)
    for variable in _WORKER_VARIABLES:
        os.environ.pop(variable, None)
    try:
        with dask.config.set({**WORKER_CONFIG, **(config or {}),
                              "temporary-directory": str(scratch)}):
            cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                   memory_limit=limit, host="127.0.0.1",
                                   dashboard_address="127.0.0.1:0" if dashboard else None,
                                   silence_logs=40, local_directory=str(scratch))
    finally:
        _restore(environment)
    return Client(cluster), cluster


def _restore(environment: dict) -> None:
    """Give ``os.environ`` back as ``environment`` was, touching only the keys that differ
    (other threads never see it emptied)."""
    for key in set(os.environ) - set(environment):
        del os.environ[key]
    for key, value in environment.items():
        if os.environ.get(key) != value:
            os.environ[key] = value


# --- one scan, on a worker -------------------------------------------------------------------

def _run_one(job: str, path: str, out: str, load_options: dict, settings: dict,
             overrides: dict) -> dict:
    """Run one scan's job into ``out`` on a dask worker.

    ``overrides`` are this scan's own job options from the manifest (a pore ``mask``).
    Bad input and unexpected errors alike come back as a failed record with a message,
    so that one broken scan never stops the others."""
    from .. import jobs

    start = time.perf_counter()
    # dask gives each task one thread: the engine's second thread would only compete
    # with the worker's other tasks (and with other workers on the same machine)
    os.environ[THREADS_VARIABLE] = "1"
    try:
        module = jobs.get(job)
        options = job_options(job, {**settings[job], **overrides})
        result = module.run(jobs.read_input(job, path, load_options), options)
        module.write(result, out, force=True)
        return {"status": "done", "message": "", "seconds": time.perf_counter() - start}
    except (VoxtopoError, MemoryError) as error:
        message = str(error) or type(error).__name__
    except Exception as error:  # an unexpected failure still must not stop the others
        message = f"unexpected {type(error).__name__}: {' '.join(str(error).split())[:300]}"
    return {"status": "failed", "message": message, "seconds": time.perf_counter() - start}


def _record_of(future) -> dict:
    try:
        return future.result()
    except Exception as error:  # the worker itself died (memory limit, kill)
        return {"status": "failed", "seconds": float("nan"),
                "message": f"the dask worker running it failed "
                           f"({type(error).__name__}: {' '.join(str(error).split())[:200]}); "
                           f"it may have run out of memory"}


#: jobs that spread one scan's chunk tasks over the whole cluster, run one scan at a time
OUT_OF_CORE_JOBS = ("analyse-out-of-core", "pores-out-of-core")


def _run_out_of_core(client, entry, load_options, settings: Settings, out, job) -> dict:
    from ..jobs.analyse import analyse_out_of_core
    from ..jobs.pores import pores_out_of_core

    start = time.perf_counter()
    try:
        if job == "pores-out-of-core":
            pores_out_of_core(entry.path, out,
                              job_options("pores", {**settings.pores, **entry.files}),
                              load_options=load_options, force=True, scheduler=client)
        else:
            # the scan's own roi goes in too, so that the path refuses it rather than drop it
            options = job_options("analyse", {**settings.analyse, **entry.files})
            analyse_out_of_core(entry.path, out, options, load_options=load_options,
                                chunks=settings.batch.get("chunks"), force=True,
                                scheduler=client)
        return {"status": "done", "message": "", "seconds": time.perf_counter() - start}
    except (VoxtopoError, MemoryError) as error:
        return {"status": "failed", "message": str(error),
                "seconds": time.perf_counter() - start}


# --- the whole run -----------------------------------------------------------------------
def _format_seconds(seconds: float) -> str:
    seconds = int(round(seconds))
    if seconds < 60:
        return f"{seconds} s"
    minutes, seconds = divmod(seconds, 60)
    if minutes < 60:
        return f"{minutes} min {seconds:02d} s"
    hours, minutes = divmod(minutes, 60)
    return f"{hours} h {minutes:02d} min"


class _Progress:
    """done / failed / left with a time estimate, one line per finished scan on stderr."""

    def __init__(self, total: int, skipped: int, stream):
        self.stream = stream
        self.total, self.skipped = total, skipped
        self.done = self.failed = 0
        self.started = time.perf_counter()

    def update(self, name: str, record: dict) -> None:
        if record["status"] == "done":
            self.done += 1
        else:
            self.failed += 1
        finished = self.done + self.failed
        left = self.total - finished
        eta = (time.perf_counter() - self.started) / finished * left
        what = "done" if record["status"] == "done" else f"FAILED: {record['message']}"
        self.stream.write(f"voxtopo batch: {name} {what}\n"
                          f"voxtopo batch: {self.done} done, {self.failed} failed, {left} left"
                          f"{f' (+{self.skipped} done earlier)' if self.skipped else ''}; "
                          f"about {_format_seconds(eta)} to go\n")
        self.stream.flush()


def _submit_all(client, todo, jobs, loads, settings, scans_dir, skipped, stream, records,
                scheduler, timeout) -> None:
    """Run the scans, filling ``records`` as each finishes (so that what finished before an
    interruption is known)."""
    from distributed import wait

    progress = _Progress(len(todo), skipped, stream)
    futures = {}
    in_process = [e for e in todo if jobs[e.name] in OUT_OF_CORE_JOBS]
    for entry in todo:
        if jobs[entry.name] in OUT_OF_CORE_JOBS:
            continue
        overrides = dict(entry.files)
        future = client.submit(_run_one, jobs[entry.name], entry.path,
                               str(scans_dir / entry.name), loads[entry.name],
                               settings.as_dict(), overrides,
                               key=f"voxtopo-scan-{entry.name}", pure=False, retries=0)
        futures[future] = entry
    # the tables' and report's libraries load while the first scans run, not after the last
    import jinja2  # noqa: F401

    from ..report import plots  # noqa: F401
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        pass

    pending = set(futures)
    alone_since = None
    while pending:
        try:
            finished, pending = wait(pending, timeout=1.0, return_when="FIRST_COMPLETED")
        except TimeoutError:        # nothing finished within the second
            finished = set()
        for future in finished:
            entry = futures[future]
            records[entry.name] = _record_of(future)
            progress.update(entry.name, records[entry.name])
        if finished or client.scheduler_info().get("workers"):
            alone_since = None
            continue
        alone_since = alone_since or time.monotonic()
        if time.monotonic() - alone_since > timeout:
            for future in pending:
                future.cancel()
            kept = sum(r["status"] == "done" for r in records.values()) + skipped
            raise WorkersLost(
                f"No dask worker has been connected to the scheduler at "
                f"{scheduler or 'the local cluster'} for {timeout:g} s; the {kept} finished "
                f"scan(s) were kept in {scans_dir}, and running the same command again once "
                f"workers are back resumes the rest.")
    for entry in in_process:
        # Out-of-core scans spread their chunk tasks over the whole cluster.
        records[entry.name] = _run_out_of_core(client, entry, loads[entry.name], settings,
                                               scans_dir / entry.name, jobs[entry.name])
        progress.update(entry.name, records[entry.name])
