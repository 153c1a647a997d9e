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

One run writes an output at a time: :class:`RunLock` holds ``<run>.h5.lock``
for the whole run.  Local workers die with the main process, whatever kills
it, and are killed by it when it is interrupted, so an interrupt returns at
once instead of after the chunks in flight.
"""

from __future__ import annotations

import concurrent.futures as cf
import datetime as _dt
import json
import logging
import multiprocessing as mp
import os
import shutil
import signal
import socket
import sys
import threading
import time
import zipfile
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .errors import InputError, RunFileError, StorageError
from .schema import MEMBER_SUMMARIES, STAR_DATASETS

try:  # POSIX; without it a stale lock is still detected by its pid, only not race-free
    import fcntl
except ImportError:  # pragma: no cover - Windows
    fcntl = None

__all__ = ["Task", "Work", "plan_tasks", "PartStore", "RunLock", "run_task", "execute", "SCHEDULER_TIMEOUT"]

logger = logging.getLogger(__name__)

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
    from .structure import solve_interiors

    config = work.config
    control = config.solver.control()
    values = config.axis.values
    if task.section == "eos":
        eos = work.eos[task.block]
        h = central_enthalpy(eos, config.axis.quantity, values[task.start : task.stop])
        cols = star_columns(solve_interiors(eos, h, control=control))
        if getattr(config, "radial_modes", 0):  # radial oscillation modes
            from .radial_modes import radial_columns
            cols |= radial_columns(eos, h, config.radial_modes, gamma1=config.radial_adiabatic_index,
                                   junction=config.radial_junction, control=control)
        return cols
    spec = config.ensembles[task.block]
    return solve_members(spec, task.start, task.stop, config.axis.quantity, values, control,
                         refine=config.solver.ensemble_maxima == "refined")


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

    Notes
    -----
    Every failure to write or read the folder (disk full, a file-size limit,
    a read-only or vanished folder) raises :class:`StorageError`, which names
    the folder; the parts already saved stay where they are.
    """

    def __init__(self, run_path: Path, config_text: str, software_version: str) -> None:
        self.folder = run_path.with_name(run_path.name + ".parts")
        self.config_text = config_text
        self.version = software_version

    def exists(self) -> bool:
        return self.folder.is_dir()

    def create(self) -> None:
        """Make the folder with the config and version that later resumes must match."""
        try:
            self.folder.mkdir(exist_ok=False)
        except OSError as exc:
            raise StorageError.from_os_error(exc, "cannot create the parts folder", source=str(self.folder)) from None
        try:
            _atomic_write_text(self.folder / "config.toml", self.config_text)
            _atomic_write_text(self.folder / "software_version", self.version)
        except OSError as exc:
            # a folder without its config.toml would later read as "not resumable": leave none
            shutil.rmtree(self.folder, ignore_errors=True)
            raise StorageError.from_os_error(exc, "cannot write the parts folder", source=str(self.folder)) from None

    def check_resumable(self) -> None:
        """Refuse to resume parts made from another config or software version."""
        try:
            text = (self.folder / "config.toml").read_text(encoding="utf-8")
            version = (self.folder / "software_version").read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError):
            raise RunFileError("is not a resumable run (config.toml missing)", source=str(self.folder)) from None
        if text != self.config_text:
            raise RunFileError("was made from a different config; resume with the same config or use --force",
                               source=str(self.folder))
        if version != self.version:
            raise RunFileError(f"was made by stellar_match {version}, this is {self.version}; use --force",
                               source=str(self.folder))

    def check_writable(self) -> None:
        """Fail now, not after the first chunk is solved, if the folder cannot take a part."""
        probe = self.folder / f".probe.{os.getpid()}"
        try:
            probe.write_bytes(b"")
            probe.unlink()
        except OSError as exc:
            raise StorageError.from_os_error(exc, "cannot write part files", source=str(self.folder),
                                             hint=_RESUME_HINT) from None

    def path(self, task: Task) -> Path:
        return self.folder / f"{task.key}.npz"

    def done(self, task: Task) -> bool:
        return self.path(task).exists()

    def save(self, task: Task, arrays: dict[str, np.ndarray]) -> None:
        """Write one part under a temporary name, fsync it, and rename it into place."""
        tmp = self.folder / f".{task.key}.{os.getpid()}.tmp.npz"
        try:
            np.savez(tmp, **arrays)
            with open(tmp, "rb") as f:
                os.fsync(f.fileno())
            os.replace(tmp, self.path(task))
        except OSError as exc:
            try:
                tmp.unlink(missing_ok=True)  # a half-written temporary is of no use to a resume
            except OSError:
                pass
            raise StorageError.from_os_error(exc, "cannot save a finished chunk", source=str(self.folder),
                                             hint=_RESUME_HINT) from None

    def load(self, task: Task) -> dict[str, np.ndarray]:
        """The arrays of a part; :class:`StorageError` if it cannot be read back whole."""
        try:
            return self._read(task)
        except (OSError, ValueError, EOFError, KeyError, zipfile.BadZipFile) as exc:
            reason = exc.strerror if isinstance(exc, OSError) and exc.strerror else "unreadable or truncated"
            raise StorageError(f"cannot read part {task.key} ({reason}): rerun with --resume to recompute it",
                               source=str(self.folder)) from None

    def discard_unusable(self, tasks: Iterable[Task]) -> list[Task]:
        """Delete the parts of ``tasks`` that cannot be read back whole; return their tasks.

        Parts are written to a temporary name and renamed, so a part that is
        truncated, not a zip archive, or lacks a column was not written by a
        finished task of this run (a damaged disk, a copied-in file): its
        chunk is computed again rather than trusted.
        """
        bad = []
        for task in tasks:
            if not self.done(task):
                continue
            try:
                arrays = self._read(task)
            except (OSError, ValueError, EOFError, KeyError, zipfile.BadZipFile):
                arrays = None
            if arrays is None or not _part_fits(task, arrays):
                logger.warning("%s: part %s cannot be read back whole; its chunk is computed again",
                               self.folder, task.key)
                try:
                    self.path(task).unlink(missing_ok=True)
                except OSError as exc:
                    raise StorageError.from_os_error(exc, f"cannot remove the unusable part {task.key}",
                                                     source=str(self.folder)) from None
                bad.append(task)
        return bad

    def _read(self, task: Task) -> dict[str, np.ndarray]:
        # allow_pickle=False: a part is plain arrays; anything else is foreign
        with np.load(self.path(task), allow_pickle=False) as data:
            return {k: data[k] for k in data.files}  # reading every member checks its CRC

    def remove(self) -> None:
        """Delete the folder; first renamed away, so that it vanishes at once, never half."""
        if not self.folder.is_dir():
            return
        trash = self.folder.with_name(f".{self.folder.name}.removing-{os.getpid()}")
        try:
            os.replace(self.folder, trash)
        except OSError:
            trash = self.folder
        shutil.rmtree(trash, ignore_errors=True)


_RESUME_HINT = "free space or fix the folder, then rerun with --resume"


def _part_fits(task: Task, arrays: dict[str, np.ndarray]) -> bool:
    """Does a part hold every column its assembly reads, one row per star or member of ``task``?"""
    if task.section == "eos":
        needed = [k for k in STAR_DATASETS if k != "stable"]
    else:
        needed = [*STAR_DATASETS, *MEMBER_SUMMARIES]
    rows = task.stop - task.start
    return all(k in arrays and arrays[k].ndim >= 1 and arrays[k].shape[0] == rows for k in needed)


def _atomic_write_text(path: Path, text: str) -> None:
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(text, encoding="utf-8")
    os.replace(tmp, path)


# --- one writer per output -----------------------------------------------------

#: Lock files this process holds: path -> open descriptor.  Process bookkeeping,
#: not a result cache: forked workers close these so a lock dies with the main process.
_HELD_LOCKS: dict[str, int] = {}


class RunLock:
    """``<run>.h5.lock``: at most one run writes an output (its parts and its run file).

    The lock file is created with ``O_CREAT | O_EXCL``, so of two runs started
    together exactly one gets it, and holds JSON with the pid, host and start
    time of its owner.  A lock whose owner is dead (same host, pid gone) is
    stale -- a run killed by SIGKILL or a power cut leaves one -- and is taken
    over.  The owner also holds an ``flock`` on the file, so two runs that
    find the same stale lock cannot both take it.

    Parameters
    ----------
    run_path : Path
        The final run file.

    Raises
    ------
    StorageError
        From :meth:`acquire`: the output is held by a live run (or by a run on
        another host, whose liveness cannot be checked), or the lock file
        cannot be created.
    """

    def __init__(self, run_path: Path) -> None:
        self.path = run_path.with_name(run_path.name + ".lock")
        self._fd: int | None = None

    def __enter__(self) -> RunLock:
        self.acquire()
        return self

    def __exit__(self, *exc_info) -> None:
        self.release()

    def acquire(self) -> None:
        """Take the lock or raise :class:`StorageError` naming the lock file."""
        record = json.dumps({
            "pid": os.getpid(),
            "host": socket.gethostname(),
            "started_utc": _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        }).encode()
        for _ in range(5):  # each retry follows a lock that vanished or changed under us
            try:
                fd = os.open(self.path, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_CLOEXEC, 0o644)
            except FileExistsError:
                if self._take_over_if_stale(record):
                    return
                continue
            except OSError as exc:
                raise StorageError.from_os_error(exc, "cannot create the lock file", source=str(self.path)) from None
            if fcntl is not None:
                try:
                    fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                except BlockingIOError:  # cannot happen: only a parseable stale lock is ever taken over
                    pass
            self._own(fd, record)
            return
        raise StorageError(f"keeps changing under this run; {_CLEAR_HINT}", source=str(self.path))

    def release(self) -> None:
        """Delete the lock file if it is still ours, and close it."""
        if self._fd is None:
            return
        fd, self._fd = self._fd, None
        _HELD_LOCKS.pop(str(self.path), None)
        try:
            if os.fstat(fd).st_ino == os.stat(self.path).st_ino:
                self.path.unlink()
        except OSError:
            pass  # already gone, or the folder went away: nothing left to release
        finally:
            os.close(fd)

    def _own(self, fd: int, record: bytes) -> None:
        try:
            os.ftruncate(fd, 0)
            os.pwrite(fd, record, 0)
            os.fsync(fd)
        except OSError as exc:
            os.close(fd)
            try:
                self.path.unlink()
            except OSError:
                pass
            raise StorageError.from_os_error(exc, "cannot write the lock file", source=str(self.path)) from None
        self._fd = fd
        _HELD_LOCKS[str(self.path)] = fd

    def _take_over_if_stale(self, record: bytes) -> bool:
        """Own an existing lock file if its owner is dead; False if it changed (look again)."""
        try:
            raw = self.path.read_bytes()
        except FileNotFoundError:
            return False
        except OSError as exc:
            raise StorageError.from_os_error(exc, "cannot read the lock file", source=str(self.path)) from None
        owner = _parse_lock(raw)
        if not self._is_stale(owner):
            raise self._refusal(owner)
        try:
            fd = os.open(self.path, os.O_RDWR | os.O_CLOEXEC)
        except FileNotFoundError:
            return False
        except OSError as exc:
            raise StorageError.from_os_error(exc, "cannot take over the stale lock file",
                                             source=str(self.path)) from None
        try:
            if fcntl is not None:
                try:
                    fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                except BlockingIOError:
                    raise StorageError(f"another run is taking over this stale lock; {_CLEAR_HINT}",
                                       source=str(self.path)) from None
            # still the file we judged, and unchanged since? (else another run got there first)
            if os.fstat(fd).st_ino != os.stat(self.path).st_ino or os.pread(fd, len(raw) + 1, 0) != raw:
                os.close(fd)
                return False
        except FileNotFoundError:
            os.close(fd)
            return False
        except BaseException:
            os.close(fd)
            raise
        self._own(fd, record)
        return True

    def _is_stale(self, owner: dict | None) -> bool:
        if owner is None or owner["host"] != socket.gethostname():
            return False  # half-written, foreign, or another host's: its owner cannot be checked
        pid = owner["pid"]
        if pid == os.getpid():
            return str(self.path) not in _HELD_LOCKS  # our pid, but not our lock: a reused pid
        return not _pid_alive(pid)

    def _refusal(self, owner: dict | None) -> StorageError:
        if owner is None:
            return StorageError(f"exists but names no owner (a run is just starting, or the file is damaged); "
                                f"{_CLEAR_HINT}", source=str(self.path))
        return StorageError(
            f"another run (pid {owner['pid']} on {owner['host']}, started {owner['started_utc']}) "
            f"writes this output; wait for it, or {_CLEAR_HINT}", source=str(self.path))


_CLEAR_HINT = "if no stellar-match run uses this output any more, delete the lock file"


def _parse_lock(raw: bytes) -> dict | None:
    try:
        owner = json.loads(raw.decode("utf-8"))
        owner = {"pid": int(owner["pid"]), "host": str(owner["host"]), "started_utc": str(owner["started_utc"])}
    except (ValueError, KeyError, TypeError, UnicodeDecodeError):
        return None
    return owner


def _pid_alive(pid: int) -> bool:
    """Is a process with this pid running on this host (a zombie counts as dead)?"""
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True  # another user's process
    try:  # Linux: a killed process not yet reaped by its parent is a zombie, state "Z"
        stat = Path(f"/proc/{pid}/stat").read_text()
        return stat.rsplit(")", 1)[1].split()[0] != "Z"
    except (OSError, IndexError):
        return True


# --- executors -----------------------------------------------------------------

_WORKER_WORK = None  # set once per local worker process by the pool initializer

#: prctl(2) option: the signal the kernel sends a process when its parent dies (linux/prctl.h).
_PR_SET_PDEATHSIG = 1
#: Seconds between a worker's checks that its main process still lives (where prctl is missing).
_PARENT_CHECK_INTERVAL = 1.0


def _init_worker(work: Work, parent: int) -> None:
    """Set up a local worker: its work, and ties that end it with the main process.

    The main process alone decides about interrupts: a Ctrl-C reaches the
    whole process group, and a worker that raised KeyboardInterrupt would
    print a traceback; the main process kills its workers instead.
    """
    global _WORKER_WORK
    _WORKER_WORK = work
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    # fork copied the CLI's SIGTERM handler; a worker told to stop should just stop
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    # the main process's lock file must not stay held by an orphaned worker (fork copied the fd)
    for fd in _HELD_LOCKS.values():
        try:
            os.close(fd)
        except OSError:
            pass
    _HELD_LOCKS.clear()
    _die_with(parent)


def _die_with(parent: int) -> None:
    """End this worker when ``parent`` dies, by any signal, SIGKILL included."""
    if sys.platform.startswith("linux"):
        try:
            import ctypes

            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(_PR_SET_PDEATHSIG, signal.SIGKILL, 0, 0, 0)
        except (OSError, AttributeError):
            pass  # no prctl: the watcher thread below still notices
    if os.getppid() != parent:  # the parent died before the kernel was told to watch it
        os._exit(1)
    threading.Thread(target=_watch_parent, args=(parent,), name="stellar-match-parent-watch",
                     daemon=True).start()


def _watch_parent(parent: int) -> None:
    # an orphan is re-parented (to init or a subreaper): its parent pid changes
    while os.getppid() == parent:
        time.sleep(_PARENT_CHECK_INTERVAL)
    os._exit(1)


def _worker_run(task: Task):
    return task, run_task(_WORKER_WORK, task)


def _serial(work: Work, tasks: list[Task]) -> Iterator[tuple[Task, dict]]:
    for task in tasks:
        logger.debug("task %s (%d:%d): started in this process", task.key, task.start, task.stop)
        yield task, run_task(work, task)


def _kill_workers(pool: cf.ProcessPoolExecutor) -> None:
    """Kill a pool's workers now, instead of waiting for the chunks they are solving.

    Used on an interrupt (SIGINT, SIGTERM) or any error in the main process:
    the finished chunks are saved already; the ones in flight are recomputed
    by ``--resume``.  ``ProcessPoolExecutor`` has no public way to do this
    before Python 3.14 (``kill_workers``), hence its ``_processes``.
    """
    processes = list((getattr(pool, "_processes", None) or {}).values())
    for proc in processes:
        try:
            proc.kill()
        except (OSError, ValueError, AttributeError):
            pass  # already gone
    pool.shutdown(wait=False, cancel_futures=True)
    for proc in processes:
        try:
            proc.join(timeout=5)
        except (OSError, ValueError, AttributeError, AssertionError):
            pass


def _local_pool(work: Work, tasks: list[Task], workers: int) -> Iterator[tuple[Task, dict]]:
    """Tasks on ``workers`` local processes; a pool whose worker died is restarted."""
    pending = list(tasks)
    restarts = 0
    while pending:
        ctx = mp.get_context("fork" if "fork" in mp.get_all_start_methods() else "spawn")
        with cf.ProcessPoolExecutor(max_workers=workers, mp_context=ctx, initializer=_init_worker,
                                    initargs=(work, os.getpid())) as pool:
            window = 4 * workers
            queue = list(pending)
            running: dict[cf.Future, Task] = {}
            try:
                while queue or running:
                    while queue and len(running) < window:
                        t = queue.pop(0)
                        running[pool.submit(_worker_run, t)] = t
                        logger.debug("task %s (%d:%d): sent to a local worker", t.key, t.start, t.stop)
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
                logger.warning("a local worker died; restarting the pool (%d of %d), %d chunks to go",
                               restarts, POOL_RESTARTS, len(pending))
                continue  # the unfinished tasks stay pending and go to a new pool
            except BaseException:
                # KeyboardInterrupt (SIGINT, or SIGTERM turned into one by the CLI), GeneratorExit
                # when the caller stops early, or an error while saving: leaving the `with` would
                # wait for every chunk in flight, which can take minutes
                _kill_workers(pool)
                raise


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
            logger.debug("task %s (%d:%d): submitted to %s", t.key, t.start, t.stop, address)
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
                logger.debug("task %s (%d:%d): submitted to %s", t.key, t.start, t.stop, address)
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
