"""Work plans, part files and executors: how a sweep survives kills and spreads out.

A config is cut into *tasks* whose boundaries depend on the config alone:
chunks of ``[solver] chunk_size`` stars of every ``[[eos]]`` block and
chunks of ``[solver] member_chunk_size`` members of every ``[[ensemble]]``.
A task is a pure function of (config, task) -- see :class:`Work` -- so it gives the same bits on
the main process, on a local process pool or on a Dask cluster, and for any
number of workers.

Every finished task is saved at once as its own part file in
``<run>.h5.parts/`` (written to a temporary name and renamed, so a part
either exists whole or not at all).  A run killed at any moment -- SIGKILL,
a power cut -- loses only the tasks in flight; ``--resume`` computes the
missing parts and assembles the same run file.  The single writer is the
main process; workers only return arrays.
"""

from __future__ import annotations

import concurrent.futures as cf
import multiprocessing as mp
import os
import shutil
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .errors import InputError, RunFileError

__all__ = ["Task", "Work", "plan_tasks", "PartStore", "run_task", "execute", "SCHEDULER_TIMEOUT"]

#: Seconds to wait for a Dask scheduler before giving up with one error line.
SCHEDULER_TIMEOUT = 10.0
#: A local pool whose worker dies is restarted at most this many times.
POOL_RESTARTS = 3


@dataclass(frozen=True)
class Task:
    """One unit of work: stars ``start:stop`` of an EOS block or members of an ensemble."""

    section: str  # "eos" or "ensemble"
    block: int
    chunk: int
    start: int
    stop: int

    @property
    def key(self) -> str:
        return f"{self.section}-{self.block:04d}-{self.chunk:07d}"


def plan_tasks(config) -> list[Task]:
    """All tasks of a config, in a fixed order that depends on the config alone."""
    tasks = []
    n_stars = config.axis.values.size
    size = config.solver.chunk_size
    for spec in config.eos:
        for c, start in enumerate(range(0, n_stars, size)):
            tasks.append(Task("eos", spec.index, c, start, min(start + size, n_stars)))
    msize = config.solver.member_chunk_size
    for ens in config.ensembles:
        for c, start in enumerate(range(0, ens.size, msize)):
            tasks.append(Task("ensemble", ens.index, c, start, min(start + msize, ens.size)))
    return tasks


def task_stars(config, task: Task) -> tuple[int, int]:
    """(stars, members) a task accounts for, for progress reports."""
    if task.section == "eos":
        return task.stop - task.start, 0
    return (task.stop - task.start) * config.axis.values.size, task.stop - task.start


@dataclass(frozen=True)
class Work:
    """What every task needs: the config and its [[eos]] blocks, built once.

    Building an EOS reads and checks its table; doing that once per run, not
    once per chunk, keeps the table I/O out of the tasks.  Workers receive
    this object once (pool initializer, or scattered to a Dask cluster).
    """

    config: object
    eos: tuple


def run_task(work: Work, task: Task) -> dict[str, np.ndarray]:
    """Compute one task: a pure function of (work, task)."""
    from .ensemble import solve_members
    from .eos import central_enthalpy
    from .exterior import star_columns
    from .structure import DEFAULT_STEPS, solve_interiors

    config = work.config
    control = DEFAULT_STEPS.scaled(config.solver.step_scale)
    values = config.axis.values
    if task.section == "eos":
        eos = work.eos[task.block]
        h = central_enthalpy(eos, config.axis.quantity, values[task.start : task.stop])
        return star_columns(solve_interiors(eos, h, control=control))
    spec = config.ensembles[task.block]
    return solve_members(spec, task.start, task.stop, config.axis.quantity, values, control)


class PartStore:
    """The folder of finished parts of one run (``<run>.h5.parts``).

    Parameters
    ----------
    run_path : Path
        The final run file.
    config_text : str
        The config; a resumed run must use exactly the same text.
    software_version : str
        Parts are only reused by the same software version.
    """

    def __init__(self, run_path: Path, config_text: str, software_version: str) -> None:
        self.folder = run_path.with_name(run_path.name + ".parts")
        self.config_text = config_text
        self.version = software_version

    def exists(self) -> bool:
        return self.folder.is_dir()

    def create(self) -> None:
        self.folder.mkdir(parents=True, exist_ok=False)
        _atomic_write_text(self.folder / "config.toml", self.config_text)
        _atomic_write_text(self.folder / "software_version", self.version)

    def check_resumable(self) -> None:
        """Refuse to resume parts made from another config or software version."""
        try:
            text = (self.folder / "config.toml").read_text(encoding="utf-8")
            version = (self.folder / "software_version").read_text(encoding="utf-8")
        except OSError:
            raise RunFileError("is not a resumable run (config.toml missing)", source=str(self.folder)) from None
        if text != self.config_text:
            raise RunFileError("was made from a different config; resume with the same config or use --force",
                               source=str(self.folder))
        if version != self.version:
            raise RunFileError(f"was made by stellar_match {version}, this is {self.version}; use --force",
                               source=str(self.folder))

    def path(self, task: Task) -> Path:
        return self.folder / f"{task.key}.npz"

    def done(self, task: Task) -> bool:
        return self.path(task).exists()

    def save(self, task: Task, arrays: dict[str, np.ndarray]) -> None:
        tmp = self.folder / f".{task.key}.{os.getpid()}.tmp.npz"
        np.savez(tmp, **arrays)
        with open(tmp, "rb") as f:
            os.fsync(f.fileno())
        os.replace(tmp, self.path(task))

    def load(self, task: Task) -> dict[str, np.ndarray]:
        with np.load(self.path(task)) as data:
            return {k: data[k] for k in data.files}

    def remove(self) -> None:
        shutil.rmtree(self.folder, ignore_errors=True)


def _atomic_write_text(path: Path, text: str) -> None:
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(text, encoding="utf-8")
    os.replace(tmp, path)


# --- executors -----------------------------------------------------------------

_WORKER_WORK = None  # set once per local worker process by the pool initializer


def _init_worker(work: Work) -> None:
    global _WORKER_WORK
    _WORKER_WORK = work


def _worker_run(task: Task):
    return task, run_task(_WORKER_WORK, task)


def _serial(work: Work, tasks: list[Task]) -> Iterator[tuple[Task, dict]]:
    for task in tasks:
        yield task, run_task(work, task)


def _local_pool(work: Work, tasks: list[Task], workers: int) -> Iterator[tuple[Task, dict]]:
    """Tasks on ``workers`` local processes; a pool whose worker died is restarted."""
    pending = list(tasks)
    restarts = 0
    while pending:
        ctx = mp.get_context("fork" if "fork" in mp.get_all_start_methods() else "spawn")
        with cf.ProcessPoolExecutor(max_workers=workers, mp_context=ctx, initializer=_init_worker,
                                    initargs=(work,)) as pool:
            window = 4 * workers
            queue = list(pending)
            running: dict[cf.Future, Task] = {}
            try:
                while queue or running:
                    while queue and len(running) < window:
                        t = queue.pop(0)
                        running[pool.submit(_worker_run, t)] = t
                    finished, _ = cf.wait(running, return_when=cf.FIRST_COMPLETED)
                    for fut in finished:
                        task = running.pop(fut)
                        _, arrays = fut.result()
                        pending.remove(task)
                        yield task, arrays
            except cf.process.BrokenProcessPool:
                restarts += 1
                if restarts > POOL_RESTARTS:
                    raise RuntimeError(f"local workers died {restarts} times; giving up") from None
                continue  # the unfinished tasks stay pending and go to a new pool


def _dask(work: Work, tasks: list[Task], address: str, timeout: float) -> Iterator[tuple[Task, dict]]:
    """Tasks on an existing Dask distributed cluster (``dask.distributed.Client``)."""
    try:
        from dask.distributed import Client, as_completed
    except ImportError:
        raise InputError('--scheduler needs dask.distributed: pip install -e ".[distributed]"') from None
    import re

    if not re.fullmatch(r"([a-z]+://)?[^\s:/]+:\d+", address):
        raise InputError(f"scheduler address {address!r} is not of the form tcp://host:port",
                         key="--scheduler")
    try:
        client = Client(address, timeout=timeout, set_as_default=False)
    except (OSError, TimeoutError, ValueError) as exc:
        raise InputError(f"cannot reach the Dask scheduler at {address} within {timeout:g} s ({exc})",
                         key="--scheduler") from None
    try:
        shared = client.scatter(work, broadcast=True)
        window = max(8, 4 * max(1, len(client.scheduler_info().get("workers", {}))))
        queue = list(tasks)
        futures = {}
        while queue and len(futures) < window:
            t = queue.pop(0)
            futures[client.submit(run_task, shared, t, pure=False, retries=3)] = t
        if not futures:
            return
        done_iter = as_completed(list(futures), loop=client.loop)  # this client, not a default one
        for fut in done_iter:
            task = futures.pop(fut)
            yield task, fut.result()
            fut.release()
            if queue:
                t = queue.pop(0)
                f = client.submit(run_task, shared, t, pure=False, retries=3)
                futures[f] = t
                done_iter.add(f)
    finally:
        client.close()


def execute(work: Work, tasks: list[Task], *, workers: int = 1, scheduler: str | None = None,
            timeout: float | None = None) -> Iterable[tuple[Task, dict]]:
    """Run ``tasks``, yielding (task, arrays) in completion order.

    Parameters
    ----------
    workers : int
        Local processes (1: in this process).  Ignored with ``scheduler``.
    scheduler : str, optional
        Address of a Dask distributed scheduler (e.g. ``tcp://host:8786``).
    timeout : float, optional
        Seconds to wait for the scheduler (default :data:`SCHEDULER_TIMEOUT`).
    """
    timeout = SCHEDULER_TIMEOUT if timeout is None else timeout
    if scheduler:
        return _dask(work, tasks, scheduler, timeout)
    if workers <= 1 or len(tasks) <= 1:
        return _serial(work, tasks)
    return _local_pool(work, tasks, workers)


ProgressFn = Callable[[int, int], None]
