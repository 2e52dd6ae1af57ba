"""Where a batch's dask graph runs: this machine's cores (the default), local threads, a local
distributed cluster, a running scheduler, or a SLURM/PBS job-queue cluster started and closed by the tool.

`open_compute(settings)` is a context manager: inside it, `dask.compute` (and xarray's
`.compute()`) run on the chosen workers; on exit every cluster or pool it started is closed.

Why the default ("auto") is a pool of processes: reading and decompressing NetCDF is the whole cost
of an extraction, and netCDF-C/HDF5 are not thread-safe, so threads of one process read one at a time
(about one core, whatever the machine). One process per core, each reading and reducing whole files
(`sensemble.extractor.filemeans`), reads at the speed of the cores. A batch too small to repay the
pool's start (under `SMALL_BATCH_BYTES` of input) runs on threads in this process instead.
"""
from __future__ import annotations

import contextlib
import multiprocessing
import os
import re
from dataclasses import dataclass, field
from numbers import Integral
from pathlib import Path
from typing import Iterator

import dask

from sensemble.cluster_config import job_script_exports, quiet_settings
from sensemble.contract.constraints import Interval, MemorySize, Options, TimeLimit
from sensemble.extractor.rawchunks import READ_THREADS_VARIABLE
from sensemble.extractor.schedule import BATCH_BYTES_KEY

#: Values of `ComputeSettings.kind`.
KINDS = ("auto", "threads", "processes", "address", "slurm", "pbs")
#: Kinds served by a job-queue cluster (dask-jobqueue, the optional `cluster` extra).
JOB_QUEUE_KINDS = ("slurm", "pbs")

# Stands in for the scheduler address in a rendered job script: the real address is only
# known once the scheduler runs, and rendering must not start one.
SCHEDULER_PLACEHOLDER = "tcp://<scheduler-address>:8786"
JOB_NAME = "sensemble-worker"
#: worker job logs go here, under the batch's output folder, unless `log_directory` says otherwise
LOG_FOLDER = "worker-logs"
#: below this much input a batch runs on threads: a process pool's start (~1 s) would cost more than it saves
SMALL_BATCH_BYTES = 64 * 2**20


def read_threads_per_worker(workers: int) -> dict[str, str]:
    """Environment for the worker processes of a local kind: each its share of this machine's cores for reading
    compressed chunks (`extractor.rawchunks`), so that N workers on N cores do not start N reading threads each."""
    return {READ_THREADS_VARIABLE: str(max(1, cores_available() // max(1, int(workers))))}


def _set_environment(values: dict[str, str]) -> None:
    os.environ.update(values)


class ComputeError(RuntimeError):
    """The compute back-end could not be set up (one line, says what to change)."""


def cores_available() -> int:
    """Cores this process may run on (CPU affinity where the system tells it), at least 1."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


@dataclass(frozen=True)
class ComputeSettings:
    """How and where a batch computes (the `[compute]` section of a config).

    `workers`, `threads_per_worker` and `memory_limit` size the local kinds ("auto", "threads",
    "processes"). For "slurm"/"pbs", each of `jobs` batch jobs asks for `cores` cores and
    `memory` memory (per job) for `walltime`, and runs `cores // threads_per_worker` worker
    processes; `queue`, `account`, `job_extra_directives` (extra `#SBATCH`/`#PBS` lines),
    `job_script_prologue` (shell lines run before the worker starts, e.g. activating the
    environment), `local_directory` (node-local scratch), `log_directory` and `interface`
    (network interface, e.g. "ib0") go into the job script.
    """

    kind: str = "auto"
    workers: int = field(default_factory=cores_available)
    threads_per_worker: int = 1
    memory_limit: str | None = None  # per local worker, e.g. "4GiB"; None: dask's "auto"
    address: str | None = None  # for kind = "address", e.g. "tcp://10.0.0.5:8786"
    dashboard_address: str | None = None  # e.g. ":8787"; None: no dashboard
    # job queues
    queue: str | None = None
    account: str | None = None
    cores: int | None = None  # per job
    memory: str | None = None  # per job, e.g. "32GiB"
    walltime: str | None = None  # e.g. "02:00:00"
    jobs: int = 1
    job_extra_directives: tuple[str, ...] = ()
    job_script_prologue: tuple[str, ...] = ()
    local_directory: str | None = None
    log_directory: str | None = None
    interface: str | None = None

    # Allowed values, declared once; the config reader checks them before anything starts.
    _parameter_constraints = {
        "kind": [Options(*KINDS)],
        "workers": [Interval(Integral, 0, None, closed="neither")],
        "threads_per_worker": [Interval(Integral, 0, None, closed="neither")],
        "cores": [Interval(Integral, 0, None, closed="neither"), None],
        "jobs": [Interval(Integral, 0, None, closed="neither")],
        "memory": [MemorySize(), None],
        "memory_limit": [MemorySize(), None],
        "walltime": [TimeLimit(), None],
    }


def _job_queue_module(kind: str):
    try:
        import dask_jobqueue
    except ImportError as error:
        raise ComputeError(
            f"compute kind '{kind}' needs dask-jobqueue, which is not installed: "
            "pip install 'sensemble[cluster]'"
        ) from error
    return dask_jobqueue


def job_name(batch: str | None) -> str:
    """The name of a batch's worker jobs (what `squeue`/`qstat` show): the tool's and the batch's."""
    if not batch:
        return JOB_NAME
    cleaned = re.sub(r"[^A-Za-z0-9._-]+", "_", str(batch)).strip("._-")[:40]
    return f"{JOB_NAME}-{cleaned}" if cleaned else JOB_NAME


def _job_kwargs(settings: ComputeSettings, batch: str | None = None, out_dir: str | Path | None = None) -> dict:
    """Keyword arguments shared by dask-jobqueue's cluster and job classes.

    Worker logs go to `log_directory`, else under `out_dir` (`LOG_FOLDER`), else dask-jobqueue's default
    (the scheduler's own: `slurm-<id>.out` in the folder the command ran from). The job script first exports
    `sensemble.cluster_config`'s settings for the workers, then runs `job_script_prologue`.
    """
    if settings.cores is None or settings.memory is None:
        raise ComputeError(
            f"compute kind '{settings.kind}' needs cores and memory per job "
            "(e.g. cores = 8, memory = \"32GiB\" in [compute])"
        )
    kwargs = dict(
        cores=settings.cores,
        memory=settings.memory,
        processes=max(1, settings.cores // settings.threads_per_worker),
        job_name=job_name(batch),
        job_extra_directives=list(settings.job_extra_directives),
        job_script_prologue=job_script_exports(quiet_settings(bool(settings.dashboard_address)))
        # each worker process of a job reads with its own threads only (`read_threads_per_worker`)
        + [f"export {READ_THREADS_VARIABLE}={settings.threads_per_worker}"]
        + list(settings.job_script_prologue),
    )
    optional = dict(
        queue=settings.queue,
        account=settings.account,
        walltime=settings.walltime,
        local_directory=settings.local_directory,
        log_directory=settings.log_directory or (str(Path(out_dir) / LOG_FOLDER) if out_dir else None),
        interface=settings.interface,
    )
    kwargs.update({key: value for key, value in optional.items() if value is not None})
    return kwargs


def _job_classes(settings: ComputeSettings):
    jobqueue = _job_queue_module(settings.kind)
    if settings.kind == "slurm":
        return jobqueue.SLURMCluster, jobqueue.slurm.SLURMJob
    from sensemble.pbs_jobs import LogFolderPBSJob

    return jobqueue.PBSCluster, LogFolderPBSJob


def render_job_script(settings: ComputeSettings, *, batch: str | None = None,
                      out_dir: str | Path | None = None) -> str:
    """The batch script each worker job of a SLURM/PBS cluster would be submitted with.

    Rendered by dask-jobqueue exactly as its cluster would (`cluster.job_script()` builds the
    same job object), but without starting a scheduler or submitting anything; the scheduler
    address is the placeholder `SCHEDULER_PLACEHOLDER`. `batch` and `out_dir` as for `open_compute`.
    """
    if settings.kind not in JOB_QUEUE_KINDS:
        raise ComputeError(
            f"compute kind '{settings.kind}' has no job script; only {' and '.join(JOB_QUEUE_KINDS)} do"
        )
    _, job_class = _job_classes(settings)
    try:
        job = job_class(SCHEDULER_PLACEHOLDER, name="dummy-name", **_job_kwargs(settings, batch, out_dir))
    except ValueError as error:  # dask-jobqueue's own checks (memory strings and the like)
        raise ComputeError(f"compute kind '{settings.kind}': {_first_line(error)}") from error
    return job.job_script()


def _first_line(error: BaseException) -> str:
    return (str(error).strip().splitlines() or [type(error).__name__])[0]


class LocalPool:
    """dask scheduler of kind "auto": `workers` processes of this machine, each computing whole tasks.

    Called by dask as a scheduler (``dask.config.set(scheduler=pool)``). A graph whose batch declared fewer
    than `SMALL_BATCH_BYTES` of input (`BATCH_BYTES_KEY`), or declared nothing, runs on `workers` threads
    here; otherwise on the process pool, started at its first use and reused until `close`. Workers
    start from a fork server that has imported the extractor once (the "forkserver" start method: a clean
    process, not a copy of this one with its open files and threads).
    """

    def __init__(self, workers: int):
        self.workers = max(1, int(workers))
        self._executor = None

    def uses_processes(self) -> bool:
        declared = dask.config.get(BATCH_BYTES_KEY, None)
        return self.workers > 1 and declared is not None and declared >= SMALL_BATCH_BYTES

    def __call__(self, dsk, keys, **kwargs):
        kwargs.pop("num_workers", None)
        if not self.uses_processes():
            import dask.threaded

            return dask.threaded.get(dsk, keys, num_workers=self.workers, **kwargs)
        import dask.multiprocessing

        # one task per submission (dask's multiprocessing default batches 6): a worker is never handed a batch of
        # large files while the other has nothing left at the end of the graph
        kwargs.setdefault("chunksize", 1)
        return dask.multiprocessing.get(dsk, keys, pool=self._pool(), num_workers=self.workers, **kwargs)

    def _pool(self):
        if self._executor is None:
            from concurrent.futures import ProcessPoolExecutor

            methods = multiprocessing.get_all_start_methods()
            context = multiprocessing.get_context("forkserver" if "forkserver" in methods else "spawn")
            if context.get_start_method() == "forkserver":
                context.set_forkserver_preload(["sensemble.extractor.filemeans", "xarray"])
            self._executor = ProcessPoolExecutor(self.workers, mp_context=context, initializer=_set_environment,
                                                 initargs=(read_threads_per_worker(self.workers),))
        return self._executor

    def close(self) -> None:
        if self._executor is not None:
            self._executor.shutdown(wait=True, cancel_futures=True)
            self._executor = None


@contextlib.contextmanager
def open_compute(settings: ComputeSettings, *, batch: str | None = None,
                 out_dir: str | Path | None = None) -> Iterator[object | None]:
    """Run the dask work inside the `with` block as `settings` say.

    Yields a `distributed.Client` (kinds "processes", "address", "slurm", "pbs") or None
    (kind "auto": a `LocalPool` of `workers` processes; kind "threads": dask's local threaded
    scheduler with `workers` threads). Clusters and pools started here are closed on exit, also
    when the block raises. For the job-queue kinds, `batch` names the worker jobs (`job_name`) and
    their logs go under `out_dir` unless `log_directory` is set.
    """
    if settings.kind not in KINDS:
        raise ComputeError(f"unknown compute kind '{settings.kind}'; choose one of {', '.join(KINDS)}")
    if settings.kind == "threads":
        with dask.config.set(scheduler="threads", num_workers=max(1, settings.workers)):
            yield None
        return
    if settings.kind == "auto":
        pool = LocalPool(settings.workers)
        try:
            with dask.config.set(scheduler=pool):
                yield None
        finally:
            pool.close()
        return

    from distributed import Client, LocalCluster

    with contextlib.ExitStack() as stack:
        # the scheduler, the nannies and the workers of a cluster started here check themselves less often
        stack.enter_context(dask.config.set(quiet_settings(bool(settings.dashboard_address))))
        if settings.kind == "address":
            if not settings.address:
                raise ComputeError("compute kind 'address' needs address (e.g. \"tcp://host:8786\")")
            try:
                client = Client(settings.address, timeout="20s")
            except (OSError, TimeoutError) as error:
                raise ComputeError(
                    f"no dask scheduler answered at {settings.address}: {_first_line(error)}"
                ) from error
            stack.callback(client.close)
        elif settings.kind == "processes":
            try:
                cluster = LocalCluster(
                    n_workers=max(1, settings.workers),
                    threads_per_worker=settings.threads_per_worker,
                    processes=True,
                    memory_limit=settings.memory_limit or "auto",
                    dashboard_address=settings.dashboard_address,
                    scheduler_kwargs=None if settings.dashboard_address else {"dashboard": False},
                    local_directory=settings.local_directory,
                    env=read_threads_per_worker(settings.workers),
                )
            except ValueError as error:  # e.g. a memory limit dask cannot read
                raise ComputeError(f"compute kind 'processes': {_first_line(error)}") from error
            stack.callback(cluster.close)
            client = Client(cluster)
            stack.callback(client.close)
        else:
            cluster_class, job_class = _job_classes(settings)
            if settings.dashboard_address:
                scheduler_options = {"dashboard_address": settings.dashboard_address}
            else:
                scheduler_options = {"dashboard": False}
            try:
                cluster = cluster_class(scheduler_options=scheduler_options, job_cls=job_class,
                                        **_job_kwargs(settings, batch, out_dir))
            except ValueError as error:
                raise ComputeError(f"compute kind '{settings.kind}': {_first_line(error)}") from error
            stack.callback(cluster.close)
            cluster.scale(jobs=settings.jobs)
            client = Client(cluster)
            stack.callback(client.close)
        yield client


def active_client():
    """The distributed client dask would compute on now, or None (a local scheduler)."""
    from sensemble.extractor.schedule import distributed_client

    return distributed_client()


def compute_batch(*collections, progress: bool = True):
    """`dask.compute(*collections)` in one graph, with a progress bar that suits the back-end.

    dask's local `ProgressBar` sees nothing of a distributed cluster, so under a client the
    graph is submitted as futures and followed with distributed's terminal progress bar.
    Raises the first task's exception, like `dask.compute`. (The extractor's batch uses the same code.)
    """
    from sensemble.extractor.schedule import compute_all

    return tuple(compute_all(list(collections), progress))
