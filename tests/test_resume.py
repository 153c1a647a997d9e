"""Issue 6: a sweep killed at any moment resumes to the same run file; local workers that die are replaced."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time

import h5py
import numpy as np
import pytest
from conftest import SLY_BLOCK, assert_one_error_line

from stellar_match import scheduling, sweep
from stellar_match.config import load_config

#: 5 star chunks of the [[eos]] block, then 20 member chunks: about 9 s on one core.  The test is
#: of the scheduling, not of accuracy, so the members take the cheap settings (tolerance 1e-4,
#: maxima from the samples' vertex): the wide prior's error-control re-solves and maxima
#: refinement made it ~50 s a run at the defaults.
RESUME_CONFIG = f"""\
# issue 6: long enough to be killed in the middle
[sweep]
central_density = {{ min = 3e14, max = 3e15, count = 20 }}

[solver]
chunk_size = 4
member_chunk_size = 3
tolerance = 1e-4
ensemble_maxima = "vertex"

{SLY_BLOCK}
[[ensemble]]
name = "prior"
kind = "piecewise_polytrope"
[ensemble.sample]
count = 60
seed = 7
log10_p1 = [34.2, 34.7]
gamma1 = [2.0, 4.0]
gamma2 = [1.5, 3.5]
gamma3 = [1.5, 3.0]
"""
N_TASKS = 5 + 20


def datasets(path) -> dict[str, np.ndarray]:
    """Every dataset of an HDF5 file by its full name."""
    found = {}
    with h5py.File(path, "r") as f:
        f.visititems(lambda name, obj: found.__setitem__(name, obj[()]) if isinstance(obj, h5py.Dataset) else None)
    return found


def _named(f: h5py.File, value):
    """An attribute with HDF5 object references (the dimension-scale lists) as the names they point to.

    References are file addresses, which need not agree between two files; what they label must.
    """
    if isinstance(value, h5py.Reference):
        return f[value].name
    if isinstance(value, np.ndarray) and value.dtype.kind in "OV":
        return repr([_named(f, v) for v in value.tolist()] if value.dtype.kind == "O"
                    else [tuple(_named(f, x) for x in v) for v in value.tolist()])
    if isinstance(value, list | tuple):
        return [_named(f, v) for v in value]
    return value


def attributes(path) -> dict[str, dict]:
    """Every object's attributes, except the creation time of the file."""
    found = {}
    with h5py.File(path, "r") as f:
        found["/"] = {k: v for k, v in f.attrs.items() if k != "created_utc"}
        f.visititems(lambda name, obj: found.__setitem__(name, {k: _named(f, v) for k, v in obj.attrs.items()}))
    return found


def assert_same_run(a, b) -> None:
    """Definition of a reproducible run: dataset by dataset, bit for bit (NaN where NaN)."""
    da, db = datasets(a), datasets(b)
    assert sorted(da) == sorted(db)
    assert any(n.startswith("eos/") for n in da) and any(n.startswith("ensemble/") for n in da)
    for name, values in da.items():
        other = db[name]
        assert values.dtype == other.dtype and values.shape == other.shape, name
        if values.dtype.kind == "f":
            assert np.array_equal(values, other, equal_nan=True), name
            # bit for bit, not only equal as numbers (+0.0 / -0.0, NaN payloads)
            assert values.tobytes() == other.tobytes(), name
        else:
            assert np.array_equal(values, other), name
    aa, ab = attributes(a), attributes(b)
    assert aa.keys() == ab.keys()
    for name, attrs in aa.items():
        assert attrs.keys() == ab[name].keys(), name
        for k, v in attrs.items():
            w = ab[name][k]
            same = np.array_equal(v, w, equal_nan=True) if np.asarray(v).dtype.kind == "f" else np.array_equal(v, w)
            assert same, (name, k)


def test_sigkill_then_resume_gives_the_uninterrupted_run_file(tmp_path, run_cli):
    cfg = tmp_path / "long.toml"
    cfg.write_text(RESUME_CONFIG)
    out = tmp_path / "long.h5"
    parts = tmp_path / "long.h5.parts"
    proc = subprocess.Popen([sys.executable, "-m", "stellar_match.cli", "sweep", str(cfg), "-o", str(out),
                             "--workers", "1"], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + 30
        # wait for the star chunks and a few member chunks, so both kinds of part get resumed
        while len(list(parts.glob("*.npz"))) < 8:
            assert proc.poll() is None, f"the sweep ended before it could be killed: {proc.stderr.read()!r}"
            assert time.monotonic() < deadline, "no part files appeared"
            time.sleep(0.02)
        os.kill(proc.pid, signal.SIGKILL)
        assert proc.wait(timeout=10) == -signal.SIGKILL
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        proc.stderr.close()
    assert not out.exists()
    assert not out.with_name("long.h5.partial").exists()
    done = sorted(p.name for p in parts.glob("*.npz"))
    assert 8 <= len(done) < N_TASKS, done
    assert any(n.startswith("eos-") for n in done) and any(n.startswith("ensemble-") for n in done)

    # the parts belong to this config: another config text may not resume them
    other = tmp_path / "other.toml"
    other.write_text(RESUME_CONFIG + "# an edit\n")
    code, _, err = run_cli("sweep", other, "-o", out, "--resume", "--workers", "1")
    assert code == 2
    assert "different config" in assert_one_error_line(err)
    # and a run without --resume may not silently start over
    code, _, err = run_cli("sweep", cfg, "-o", out, "--workers", "1")
    assert code == 2
    assert "--resume" in assert_one_error_line(err)
    assert sorted(p.name for p in parts.glob("*.npz")) == done  # neither touched the parts

    code, _, err = run_cli("sweep", cfg, "-o", out, "--resume", "--workers", "1")
    assert code == 0, err
    assert not parts.exists()
    fresh = sweep.run_config(load_config(cfg), tmp_path / "fresh.h5", workers=1)
    assert_same_run(out, fresh)


# --- local workers that die ---------------------------------------------------------

POOL_CONFIG = f"""\
[sweep]
central_density = {{ min = 3e14, max = 3e15, count = 10 }}

[solver]
chunk_size = 4
member_chunk_size = 5

{SLY_BLOCK}
[[ensemble]]
name = "prior"
kind = "piecewise_polytrope"
[ensemble.sample]
count = 30
seed = 11
log10_p1 = [34.2, 34.7]
gamma1 = [2.0, 4.0]
gamma2 = [1.5, 3.5]
gamma3 = [1.5, 3.0]
"""
_REAL_WORKER_RUN = scheduling._worker_run
_MARKER_ENV = "STELLAR_MATCH_TEST_DEATH_MARKER"


def _dies_once(task):
    """In a forked pool worker: the first task ever kills its process without a word."""
    marker = os.environ[_MARKER_ENV]
    try:
        fd = os.open(marker, os.O_CREAT | os.O_EXCL | os.O_WRONLY)
    except FileExistsError:
        return _REAL_WORKER_RUN(task)
    os.close(fd)
    os._exit(1)


def _always_dies(task):
    os._exit(1)


@pytest.fixture(scope="module")
def pool_reference(tmp_path_factory):
    folder = tmp_path_factory.mktemp("pool")
    cfg = folder / "pool.toml"
    cfg.write_text(POOL_CONFIG)
    return cfg, sweep.run_config(cfg, folder / "serial.h5", workers=1)


@pytest.mark.skipif("fork" not in __import__("multiprocessing").get_all_start_methods(),
                    reason="the patched worker function reaches the pool only through fork")
def test_local_worker_death_is_survived(pool_reference, tmp_path, monkeypatch):
    cfg, serial = pool_reference
    marker = tmp_path / "died"
    monkeypatch.setenv(_MARKER_ENV, str(marker))
    monkeypatch.setattr(scheduling, "_worker_run", _dies_once)  # copied into the workers by fork
    out = sweep.run_config(cfg, tmp_path / "pool.h5", workers=2)
    assert marker.exists()  # a worker did die
    assert_same_run(out, serial)


@pytest.mark.skipif("fork" not in __import__("multiprocessing").get_all_start_methods(),
                    reason="the patched worker function reaches the pool only through fork")
def test_local_workers_that_always_die_give_up_and_keep_no_run_file(pool_reference, tmp_path, monkeypatch):
    cfg, _ = pool_reference
    monkeypatch.setattr(scheduling, "_worker_run", _always_dies)
    with pytest.raises(RuntimeError, match="died"):
        sweep.run_config(cfg, tmp_path / "pool.h5", workers=2)
    assert not (tmp_path / "pool.h5").exists()
    assert (tmp_path / "pool.h5.parts").is_dir()  # resumable once the machine is fixed
