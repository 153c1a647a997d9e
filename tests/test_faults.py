"""Issue 9, part 4: faults lose nothing and leave nothing.

Real ``stellar-match sweep`` subprocesses are killed, interrupted, limited in
file size, raced against each other and given broken folders.  After each, no
file is left under the final name unless it is complete, no worker process
survives, the error is one line, and ``--resume`` gives the run file of an
uninterrupted run, dataset by dataset and bit for bit.
"""

from __future__ import annotations

import errno
import io
import os
import random
import resource
import signal
import subprocess
import sys
import time
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pytest
from conftest import SLY_BLOCK, assert_one_error_line
from test_resume import assert_same_run

from stellar_match import __version__, cli, scheduling, sweep
from stellar_match.config import load_config

psutil = pytest.importorskip("psutil")

#: ~4 s on one core: 10 star chunks of the [[eos]] block (parts of ~6 kB), then 3 member chunks
#: (~100 kB each); the run file is ~850 kB.  target_masses make the assembly itself take ~1 s.
FAULT_CONFIG = f"""\
# issue 9: many chunks, two sizes of part
[sweep]
central_density = {{ min = 3e14, max = 3e15, count = 200 }}
target_masses = [1.4]

[solver]
chunk_size = 20
member_chunk_size = 4

{SLY_BLOCK}
[[ensemble]]
name = "prior"
kind = "piecewise_polytrope"
[ensemble.sample]
count = 12
seed = 7
log10_p1 = [34.2, 34.7]
gamma1 = [2.0, 4.0]
gamma2 = [1.5, 3.5]
gamma3 = [1.5, 3.0]
"""
N_TASKS = 10 + 3
#: A file-size limit (bytes) that every part fits under but the run file does not.
LIMIT_ASSEMBLY = 250_000
#: A file-size limit under which the star parts fit but the member parts do not.
LIMIT_PARTS = 50_000

#: Two member chunks of 600 members x 80 stars, ~10 s each: an interrupt a second after
#: the workers start lands inside both chunks, and waiting for them would take far longer
#: than 2 s.  No test waits for them: the chunks are killed.
LONG_CHUNKS_CONFIG = """\
[sweep]
central_density = { min = 3e14, max = 3e15, count = 80 }

[solver]
member_chunk_size = 600

[[ensemble]]
name = "prior"
kind = "piecewise_polytrope"
[ensemble.sample]
count = 1200
seed = 5
log10_p1 = [34.2, 34.7]
gamma1 = [2.0, 4.0]
gamma2 = [1.5, 3.5]
gamma3 = [1.5, 3.0]
"""


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    """The config and its uninterrupted, serial run file."""
    folder = tmp_path_factory.mktemp("faults")
    cfg = folder / "faults.toml"
    cfg.write_text(FAULT_CONFIG)
    return cfg, sweep.run_config(load_config(cfg), folder / "reference.h5", workers=1)


class Output:
    """The run file of a test and every file name a run may make beside it."""

    def __init__(self, folder: Path, name: str = "run.h5") -> None:
        self.path = folder / name
        self.parts = folder / f"{name}.parts"
        self.partial = folder / f"{name}.partial"
        self.lock = folder / f"{name}.lock"

    def part_names(self) -> list[str]:
        """Finished parts (a kill while saving leaves a hidden temporary, which is no part)."""
        if not self.parts.is_dir():
            return []
        return sorted(p.name for p in self.parts.glob("*.npz") if not p.name.startswith("."))

    def assert_nothing_but_parts(self) -> None:
        """After a failed or interrupted run: no run file, no partial, no lock."""
        assert not self.path.exists()
        assert not self.partial.exists()
        assert not self.lock.exists()


def sweep_command(cfg: Path, out: Path, *args: str) -> list[str]:
    return [sys.executable, "-m", "stellar_match.cli", "sweep", str(cfg), "-o", str(out), *args]


def start_sweep(cfg: Path, out: Path, *args: str) -> subprocess.Popen:
    """Start a sweep in a session of its own, its stderr going to ``<out>.stderr``.

    A file, not a pipe: a worker that outlives the main process would hold a
    pipe open, and reading it would hang the test instead of failing it.
    """
    with open(out.with_name(out.name + ".stderr"), "w") as stderr:
        return subprocess.Popen(sweep_command(cfg, out, *args), stdout=subprocess.DEVNULL, stderr=stderr,
                                text=True, start_new_session=True)


def stderr_of(proc: subprocess.Popen) -> str:
    out = Path(proc.args[proc.args.index("-o") + 1])
    return out.with_name(out.name + ".stderr").read_text()


def run_sweep(cfg: Path, out: Path, *args: str, file_size_limit: int | None = None) -> subprocess.CompletedProcess:
    def limit() -> None:  # in the child only: like a nearly full disk, for this run alone
        resource.setrlimit(resource.RLIMIT_FSIZE, (file_size_limit, file_size_limit))

    return subprocess.run(sweep_command(cfg, out, *args), capture_output=True, text=True, timeout=180,
                          preexec_fn=limit if file_size_limit is not None else None)


@contextmanager
def reaped(proc: subprocess.Popen):
    """Never leave a sweep of a failed test running, workers included (they share its session)."""
    try:
        yield proc
    finally:
        try:
            os.killpg(proc.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass  # the usual case: the whole group is gone already
        proc.wait()


def wait_until(condition, proc: subprocess.Popen, what: str, timeout: float = 60.0) -> None:
    deadline = time.monotonic() + timeout
    while not condition():
        assert proc.poll() is None, f"the sweep ended before {what}: {stderr_of(proc)!r}"
        assert time.monotonic() < deadline, f"timed out waiting for {what}"
        time.sleep(0.005)


def _alive(p) -> bool:
    try:
        return p.is_running() and p.status() != psutil.STATUS_ZOMBIE
    except psutil.NoSuchProcess:
        return False


def assert_gone(processes, timeout: float) -> None:
    deadline = time.monotonic() + timeout
    while any(_alive(p) for p in processes) and time.monotonic() < deadline:
        time.sleep(0.02)
    left = [p.pid for p in processes if _alive(p)]
    assert not left, f"processes left behind: {left}"


def busy_workers(proc: subprocess.Popen, count: int = 2) -> list:
    """Wait until the main process has ``count`` workers and they are inside their chunks."""
    main = psutil.Process(proc.pid)
    wait_until(lambda: len(main.children()) >= count, proc, f"{count} workers")
    time.sleep(1.0)  # both have picked up a chunk (LONG_CHUNKS_CONFIG chunks take ~10 s)
    return main.children(recursive=True)


def interrupt_line(stderr: str) -> str:
    assert "Traceback" not in stderr
    lines = stderr.splitlines()
    assert len(lines) == 1, stderr
    assert lines[0].startswith(f"{cli.PROG}: interrupted"), lines[0]
    return lines[0]


# --- kill -9 ---------------------------------------------------------------------------


def test_sigkill_at_random_moments_then_resume_is_bit_identical(reference, tmp_path):
    cfg, ref = reference
    out = Output(tmp_path)
    # seeded, so every run of the suite kills at the same moments: after k finished parts
    # (an overshoot past k is a kill during the start-up of a resumed run), then during assembly
    moments = [*sorted(random.Random(20260901).sample(range(1, N_TASKS - 1), 3)), "assembly"]
    for i, moment in enumerate(moments):
        resume = ("--resume",) if i else ()
        with reaped(start_sweep(cfg, out.path, "--workers", "2", *resume)) as proc:
            if moment == "assembly":
                wait_until(out.partial.exists, proc, "the assembly")
            else:
                wait_until(lambda k=moment: len(out.part_names()) >= k, proc, f"{moment} parts")
            workers = psutil.Process(proc.pid).children(recursive=True)
            os.kill(proc.pid, signal.SIGKILL)
            assert proc.wait(timeout=10) == -signal.SIGKILL
            assert_gone(workers, timeout=5)  # inside: leaving `reaped` kills the whole group
        assert not out.path.exists()  # never a run file that is not complete
        if moment != "assembly":
            assert len(out.part_names()) < N_TASKS
    assert out.lock.exists()  # left by the kill; the resume below must take it over unasked
    assert len(out.part_names()) == N_TASKS

    done = run_sweep(cfg, out.path, "--resume", "--workers", "2")
    assert done.returncode == 0, done.stderr
    assert not out.parts.exists() and not out.partial.exists() and not out.lock.exists()
    assert_same_run(out.path, ref)


def test_sigkill_of_the_main_process_ends_its_workers(tmp_path):
    cfg = tmp_path / "long.toml"
    cfg.write_text(LONG_CHUNKS_CONFIG)
    out = Output(tmp_path)
    with reaped(start_sweep(cfg, out.path, "--workers", "2")) as proc:
        workers = busy_workers(proc)
        assert len(workers) >= 2 and all(_alive(w) for w in workers)
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(timeout=10)
        # their chunks take ~10 s more: without a tie to the main process they keep running
        # (checked inside the `with`: leaving `reaped` kills whatever is left of the group)
        assert_gone(workers, timeout=3)
    assert not out.path.exists()


# --- SIGINT and SIGTERM --------------------------------------------------------------------


@pytest.mark.parametrize(("signum", "whole_group", "status"), [
    (signal.SIGINT, True, 130),    # Ctrl-C on a terminal: the whole process group gets it
    (signal.SIGINT, False, 130),   # kill -INT of the main process alone
    (signal.SIGTERM, False, 143),  # a batch system at its time limit
], ids=["ctrl-c", "sigint-main", "sigterm-main"])
def test_interrupt_stops_within_two_seconds_and_leaves_no_worker(tmp_path, signum, whole_group, status):
    cfg = tmp_path / "long.toml"
    cfg.write_text(LONG_CHUNKS_CONFIG)
    out = Output(tmp_path)
    with reaped(start_sweep(cfg, out.path, "--workers", "2")) as proc:
        workers = busy_workers(proc)
        assert out.part_names() == []  # both chunks in flight
        sent = time.monotonic()
        if whole_group:
            os.killpg(proc.pid, signum)  # the session leader's pid is its group id
        else:
            os.kill(proc.pid, signum)
        code = proc.wait(timeout=30)
        elapsed = time.monotonic() - sent
        stderr = stderr_of(proc)
        # the main process killed and reaped them before it exited (checked before `reaped`
        # kills whatever is left of the group)
        assert_gone(workers, timeout=0.5)
    assert code == status, stderr
    # not a speed benchmark: a chunk takes ~10 s, so waiting for the chunks in
    # flight (instead of killing the workers) cannot finish within 2 s
    assert elapsed < 2.0, elapsed
    line = interrupt_line(stderr)  # no worker printed a KeyboardInterrupt traceback
    assert str(out.parts) in line and "--resume" in line
    assert ("SIGTERM" in line) == (signum == signal.SIGTERM)
    assert out.part_names() == []  # the chunks in flight were abandoned, not waited for
    assert out.parts.is_dir()
    out.assert_nothing_but_parts()


# --- one writer per output -----------------------------------------------------------------


def test_a_second_run_on_the_same_output_is_refused(tmp_path):
    # a sweep long enough (about 7 s) that the second run surely starts while the first holds the lock
    cfg = tmp_path / "long.toml"
    cfg.write_text(FAULT_CONFIG.replace("count = 200", "count = 2000"))
    ref = sweep.run_config(load_config(cfg), tmp_path / "reference.h5", workers=1)
    out = Output(tmp_path)
    with reaped(start_sweep(cfg, out.path, "--workers", "1")) as first:
        wait_until(out.lock.exists, first, "the lock file")
        second = run_sweep(cfg, out.path, "--resume", "--workers", "1")
        assert first.poll() is None  # the two really overlapped
        assert second.returncode == 2
        line = assert_one_error_line(second.stderr)
        assert str(out.lock) in line and f"pid {first.pid}" in line and "delete the lock file" in line
        assert first.wait(timeout=120) == 0, stderr_of(first)
    assert not out.lock.exists() and not out.parts.exists()
    assert_same_run(out.path, ref)  # the refused run changed nothing of the first one's


# --- full disk, file-size limits ---------------------------------------------------------------


def test_file_size_limit_while_saving_parts_keeps_the_saved_ones(reference, tmp_path):
    cfg, ref = reference
    out = Output(tmp_path)
    limited = run_sweep(cfg, out.path, "--workers", "1", file_size_limit=LIMIT_PARTS)
    assert limited.returncode == 2
    line = assert_one_error_line(limited.stderr)
    assert "file-size limit" in line and str(out.parts) in line and "--resume" in line
    out.assert_nothing_but_parts()
    saved = out.part_names()
    assert len([n for n in saved if n.startswith("eos-")]) == 10  # the small parts were kept
    assert len(saved) < N_TASKS
    assert not [p.name for p in out.parts.iterdir() if ".tmp" in p.name]  # no half-written temporary

    done = run_sweep(cfg, out.path, "--resume", "--workers", "1")
    assert done.returncode == 0, done.stderr
    assert_same_run(out.path, ref)


def test_file_size_limit_during_assembly_leaves_no_run_file(reference, tmp_path):
    cfg, ref = reference
    out = Output(tmp_path)
    limited = run_sweep(cfg, out.path, "--workers", "2", file_size_limit=LIMIT_ASSEMBLY)
    assert limited.returncode == 2  # before: SIGSEGV in HDF5 after the failed write
    line = assert_one_error_line(limited.stderr)
    assert "file-size limit" in line and str(out.parts) in line and "--resume" in line
    out.assert_nothing_but_parts()
    assert len(out.part_names()) == N_TASKS

    done = run_sweep(cfg, out.path, "--resume", "--workers", "2")
    assert done.returncode == 0, done.stderr
    assert not out.parts.exists()
    assert_same_run(out.path, ref)


# --- broken folders and parts ---------------------------------------------------------------


def _crash_after(monkeypatch, count: int) -> None:
    """Make in-process runs fail after ``count`` tasks, leaving their parts behind."""
    real = scheduling.run_task
    calls = []

    def run_task(work, task):
        calls.append(task)
        if len(calls) > count:
            raise RuntimeError("simulated crash")
        return real(work, task)

    monkeypatch.setattr(scheduling, "run_task", run_task)


def test_garbage_and_truncated_parts_are_recomputed_on_resume(reference, tmp_path, monkeypatch):
    cfg, ref = reference
    out = Output(tmp_path)
    _crash_after(monkeypatch, 11)  # all star chunks and one member chunk
    with pytest.raises(RuntimeError, match="simulated crash"):
        sweep.run_config(cfg, out.path, workers=1)
    monkeypatch.undo()
    assert len(out.part_names()) == 11
    (out.parts / "eos-0000-0000003.npz").write_bytes(b"not a part file\n" * 20)
    member_part = out.parts / "ensemble-0000-0000000.npz"
    member_part.write_bytes(member_part.read_bytes()[: member_part.stat().st_size // 2])
    # a whole archive, but not of this chunk: 5 rows where the chunk has 20 stars
    np.savez(out.parts / "eos-0000-0000007.npz", mass=np.zeros(5))

    done = run_sweep(cfg, out.path, "--resume", "--workers", "1")
    assert done.returncode == 0, done.stderr
    assert "Traceback" not in done.stderr
    assert_same_run(out.path, ref)


def test_parts_folder_that_vanishes_mid_run(reference, tmp_path):
    cfg, _ = reference
    out = Output(tmp_path)
    moved = tmp_path / "moved-away"
    with reaped(start_sweep(cfg, out.path, "--workers", "1")) as proc:
        wait_until(lambda: len(out.part_names()) >= 2, proc, "two parts")
        os.replace(out.parts, moved)  # e.g. a clean-up script, or a stale network mount
        kept = sorted(p.name for p in moved.glob("[!.]*.npz"))
        code = proc.wait(timeout=60)
        stderr = stderr_of(proc)
    assert code == 2
    line = assert_one_error_line(stderr)
    assert str(out.parts) in line and "--resume" in line
    out.assert_nothing_but_parts()
    assert not out.parts.exists()  # not silently re-created
    assert sorted(p.name for p in moved.glob("[!.]*.npz")) == kept


def _refuse_writes_inside(monkeypatch, folder: Path) -> None:
    """Opening a file for writing inside ``folder`` fails with EROFS, as on a read-only mount.

    The tests run as root, and root writes into a ``chmod 0o555`` folder
    anyway; so the read-only folder is simulated here, in-process, at
    ``io.open`` (which numpy's savez and pathlib use).
    """
    real_open = io.open

    def guarded_open(file, mode="r", *args, **kwargs):
        if any(c in mode for c in "wax+") and Path(os.fsdecode(file)).parent == folder:
            raise OSError(errno.EROFS, os.strerror(errno.EROFS), os.fsdecode(file))
        return real_open(file, mode, *args, **kwargs)

    monkeypatch.setattr(io, "open", guarded_open)


def test_read_only_parts_folder_on_resume(reference, tmp_path, monkeypatch, run_cli):
    cfg, _ = reference
    out = Output(tmp_path)
    _crash_after(monkeypatch, 3)
    with pytest.raises(RuntimeError, match="simulated crash"):
        sweep.run_config(cfg, out.path, workers=1)
    monkeypatch.undo()
    before = {p.name: p.read_bytes() for p in out.parts.iterdir()}

    _refuse_writes_inside(monkeypatch, out.parts)
    code, stdout, err = run_cli("sweep", cfg, "-o", out.path, "--resume", "--workers", "1")
    assert code == 2 and stdout == ""
    line = assert_one_error_line(err)
    assert str(out.parts) in line and "read-only file system" in line
    out.assert_nothing_but_parts()
    assert {p.name: p.read_bytes() for p in out.parts.iterdir()} == before


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes into a read-only folder anyway")
def test_read_only_parts_folder_on_resume_for_real(reference, tmp_path, monkeypatch):
    cfg, _ = reference
    out = Output(tmp_path)
    scheduling.PartStore(out.path, cfg.read_text(), __version__).create()
    out.parts.chmod(0o555)
    try:
        failed = run_sweep(cfg, out.path, "--resume", "--workers", "1")
    finally:
        out.parts.chmod(0o755)
    assert failed.returncode == 2
    assert str(out.parts) in assert_one_error_line(failed.stderr)
    out.assert_nothing_but_parts()


def test_a_file_where_the_parts_folder_should_be(reference, tmp_path, run_cli):
    cfg, _ = reference
    out = Output(tmp_path)
    out.parts.write_text("someone else's notes\n")
    code, _, err = run_cli("sweep", cfg, "-o", out.path, "--resume", "--workers", "1")
    assert code == 2
    assert str(out.parts) in assert_one_error_line(err)
    assert out.parts.read_text() == "someone else's notes\n"
    out.assert_nothing_but_parts()


def test_output_into_a_missing_folder_is_refused(reference, tmp_path):
    cfg, _ = reference
    out = tmp_path / "missing" / "dir" / "run.h5"
    failed = run_sweep(cfg, out, "--workers", "1")
    assert failed.returncode == 2
    line = assert_one_error_line(failed.stderr)
    assert str(out.parent) in line and "does not exist" in line
    assert not (tmp_path / "missing").exists()
