"""Issue 6: chunk tasks on a real Dask cluster (loopback only) give the serial run file bit for bit."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import threading
import time

import pytest
from conftest import assert_one_error_line
from test_resume import POOL_CONFIG, assert_same_run

distributed = pytest.importorskip("dask.distributed")

from stellar_match import scheduling, sweep  # noqa: E402

#: The longer config of the worker-death test: 24 member chunks, a few seconds on 2 workers
#: (the cheap settings: the test is of the scheduling, not of accuracy).
LONG_CONFIG = POOL_CONFIG.replace("count = 30", "count = 120").replace(
    "member_chunk_size = 5\n", 'member_chunk_size = 5\ntolerance = 1e-4\nensemble_maxima = "vertex"\n')
assert LONG_CONFIG.count("vertex") == 1


@pytest.fixture(scope="module")
def cluster():
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None) as c:
        yield c


@pytest.fixture(scope="module")
def configs(tmp_path_factory):
    folder = tmp_path_factory.mktemp("distributed")
    short, long = folder / "short.toml", folder / "long.toml"
    short.write_text(POOL_CONFIG)
    long.write_text(LONG_CONFIG)
    return folder, short, long


def test_dask_run_equals_serial_and_local_pool_runs(cluster, configs, tmp_path):
    folder, cfg, _ = configs
    serial = sweep.run_config(cfg, tmp_path / "serial.h5", workers=1)
    pool = sweep.run_config(cfg, tmp_path / "pool.h5", workers=2)
    dask = sweep.run_config(cfg, tmp_path / "dask.h5", scheduler=cluster.scheduler_address)
    assert not (tmp_path / "dask.h5.parts").exists()
    assert_same_run(dask, serial)
    assert_same_run(pool, serial)
    # issue 10: the ensemble weights of the three run files are bit-identical too
    from stellar_match.constraints import parse_constraints
    from stellar_match.scoring import score_runs

    c = parse_constraints('[[mass]]\nlabel = "m"\nmass = 1.9\nsigma = 0.1\n[[ellipse]]\nlabel = "e"\nmass = 1.4\n'
                          'radius = 12.0\nsigma_mass = 0.1\nsigma_radius = 0.6\n')
    weights = [score_runs([p], c).ensembles["prior"].weight for p in (serial, pool, dask)]
    assert weights[0].sum() > 0
    assert weights[0].tobytes() == weights[1].tobytes() == weights[2].tobytes()


def test_dask_worker_killed_mid_run_is_survived(cluster, configs, tmp_path):
    folder, _, cfg = configs
    serial = sweep.run_config(cfg, tmp_path / "serial.h5", workers=1)
    out = tmp_path / "dask.h5"
    parts = tmp_path / "dask.h5.parts"
    with distributed.Client(cluster.scheduler_address, set_as_default=False) as client:
        pids = client.run(os.getpid)
        assert len(pids) == 2
        outcome = {}

        def run():
            try:
                outcome["path"] = sweep.run_config(cfg, out, scheduler=cluster.scheduler_address)
            except BaseException as exc:  # noqa: BLE001 - handed to the test thread
                outcome["error"] = exc

        thread = threading.Thread(target=run)
        thread.start()
        deadline = time.monotonic() + 60
        while len(list(parts.glob("*.npz"))) < 3:
            assert thread.is_alive() and "error" not in outcome, outcome
            assert time.monotonic() < deadline
            time.sleep(0.01)
        victim = next(iter(pids.values()))
        os.kill(victim, signal.SIGKILL)
        assert not out.exists(), "the run ended before a worker could be killed"
        thread.join(timeout=120)
        assert not thread.is_alive()
        assert "error" not in outcome, outcome.get("error")
        assert victim not in client.run(os.getpid).values()  # the worker really was replaced
    assert_same_run(outcome["path"], serial)


@pytest.fixture(scope="module")
def unreachable_run(configs):
    # Nothing listens on port 1 of the loopback interface.
    folder, cfg, _ = configs
    out = folder / "unreachable.h5"
    t = time.monotonic()
    proc = subprocess.run([sys.executable, "-m", "stellar_match.cli", "sweep", str(cfg), "-o", str(out),
                           "--scheduler", "tcp://127.0.0.1:1"], capture_output=True, text=True, timeout=60)
    return proc, time.monotonic() - t, out


def test_unreachable_scheduler_is_one_line_and_exit_2(unreachable_run):
    proc, seconds, out = unreachable_run
    assert proc.returncode == 2, proc.stderr
    line = assert_one_error_line(proc.stderr)
    assert "tcp://127.0.0.1:1" in line and "--scheduler" in line
    assert seconds < scheduling.SCHEDULER_TIMEOUT + 10
    assert not out.exists()


def test_unreachable_scheduler_leaves_nothing_that_blocks_the_next_run(unreachable_run):
    _, _, out = unreachable_run
    assert not out.with_name(out.name + ".parts").exists()
