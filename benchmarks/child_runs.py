"""Run a command in a child process and sample the resident memory of it and its workers."""

from __future__ import annotations

import subprocess
import time

import psutil


def run_sampling_memory(cmd: list[str], every: float = 0.2) -> tuple[float, dict[int, int], int, str]:
    """(wall seconds, peak RSS in bytes by pid, return code, stderr) of ``cmd``.

    The peak of the main process and of every descendant is sampled every
    ``every`` seconds with psutil; the main process is the first key.
    """
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    main = psutil.Process(proc.pid)
    peak: dict[int, int] = {proc.pid: 0}
    while proc.poll() is None:
        try:
            for p in [main, *main.children(recursive=True)]:
                peak[p.pid] = max(peak.get(p.pid, 0), p.memory_info().rss)
        except psutil.Error:
            pass
        time.sleep(every)
    wall = time.perf_counter() - t0
    return wall, peak, proc.returncode, proc.stderr.read().decode()
