"""Smoke tests of the benchmark scripts: they run end to end on tiny sizes and write their JSON."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np

BENCHMARKS = Path(__file__).resolve().parents[1] / "benchmarks"


def run_script(name: str, *args, json_path: Path) -> dict:
    proc = subprocess.run([sys.executable, str(BENCHMARKS / name), *map(str, args), "--json", str(json_path)],
                          capture_output=True, text=True, timeout=120, check=False)
    assert proc.returncode == 0, proc.stderr
    assert f"wrote {json_path}" in proc.stdout
    return json.loads(json_path.read_text())


def test_bench_ensemble_quick(tmp_path):
    report = run_script("bench_ensemble.py", "--quick", json_path=tmp_path / "ensemble.json")
    assert report["quick"] is True
    assert {"machine", "throughput", "memory", "implied_1e6_members"} <= report.keys()
    t = report["throughput"]
    for key in ("one_worker", "two_workers"):
        run = t[key]
        assert run["members_per_second"] > 0 and run["stars_per_second"] > 0
        assert sum(run["status_counts"].values()) == run["members"]
    assert t["speed_up"] > 0 and t["speed_up_target"] == 1.7
    assert len(report["memory"]["runs"]) == 2
    assert all(r["main_peak_rss_mib"] > 0 for r in report["memory"]["runs"])
    assert report["implied_1e6_members"]["1_worker_hours"] > 0


def test_bench_sequence_small(tmp_path):
    report = run_script("bench_sequence.py", "--stars", 40, "--baseline-stars", 4, "--reference-stars", 4,
                        json_path=tmp_path / "sequence.json")
    assert report["stars"] == 40
    for key in ("case1_sly", "case2_table", "case3_baseline_solve_ivp"):
        assert report[key]["stars_per_second"] > 0, key
    assert "mass" in report["case1_sly"]["max_relative_error"]
    assert {"ratio_case1_over_case3", "response_cost_factor"} <= report.keys()


def readme_validation_cases() -> list[str]:
    """The case column of README's validation table."""
    text = (BENCHMARKS.parent / "README.md").read_text(encoding="utf-8")
    section = text.split("## Validation", 1)[1].split("\n## ", 1)[0]
    rows = [line for line in section.splitlines() if line.startswith("| ") and not line.startswith("| case ")]
    return [line[2:].split(" | ")[0] for line in rows]


def test_validation_report_computes_every_row_of_the_readme_table():
    # issue 13: the script printed 9 of the table's rows; each row is now a computation of its own
    proc = subprocess.run([sys.executable, str(BENCHMARKS / "validation_report.py"), "--list"],
                          capture_output=True, text=True, timeout=120, check=False)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.splitlines() == readme_validation_cases()


def test_validation_report_prints_a_row_it_computed():
    proc = subprocess.run([sys.executable, str(BENCHMARKS / "validation_report.py"), "--only", "Schwarzschild radius"],
                          capture_output=True, text=True, timeout=120, check=False)
    assert proc.returncode == 0, proc.stderr
    lines = proc.stdout.splitlines()
    assert len(lines) == 3 and lines[2].startswith("| Schwarzschild radius of Sun / Earth |")
    assert lines[2].endswith(" km / 8.870 mm |")  # 2 GM_earth/c^2 (IAU 2015 B3): 8.870 mm


def test_bench_likelihood_quick(tmp_path):
    report = run_script("bench_likelihood.py", "--quick", json_path=tmp_path / "likelihood.json")
    assert report["quick"] is True
    calls = report["sampler_call"]
    assert calls["goal_ms"] == 15.0
    for key in ("default_4_measurements", "default_without_binary", "sweep_defaults_4_measurements"):
        assert calls[key]["best_ms"] > 0 and calls[key]["stars"] == 60
    # the same EOS and measurements: the sampler settings change ln L by far less than its meaning
    assert abs(calls["default_4_measurements"]["log_likelihood"]
               - calls["sweep_defaults_4_measurements"]["log_likelihood"]) < 1e-3
    assert report["scoring"]["members_per_second"] > 0 and report["implied_1e6_members"]["total_hours"] > 0


def test_bench_inference_quick(tmp_path):
    report = run_script("bench_inference.py", "--quick", json_path=tmp_path / "inference.json")
    assert report["quick"] is True
    for key in ("plain", "ensemble_60", "ensemble_60_one_worker", "ensemble_10", "wide_prior"):
        assert report[key]["wall_s"] > 0 and report[key]["stars_per_s"] > 0, key
    assert report["sampler"]["median_ms"] > 0 and np.isfinite(report["sampler"]["log_likelihood"])
    assert report["ratio_60"] > 0 and report["implied_1e6_x_60_h"] > 0 and report["peak_worker_rss_mib"] > 0


def test_bench_calibration_small(tmp_path):
    report = run_script("bench_calibration.py", "--stars", 2, json_path=tmp_path / "calibration.json")
    assert len(report["groups"]) == 8
    for group in report["groups"].values():
        assert group["stars"] >= 1 and group["beyond_tolerance"] == 0  # the promise of status 0
        assert group["estimate_over_true"]["0.0"] > 0
