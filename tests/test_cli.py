"""The stellar-match command line: demo, sweep, summary, and its error contract end to end."""

from __future__ import annotations

import subprocess
import sys

from conftest import SLY_BLOCK, assert_one_error_line

from stellar_match.runfile import read_run

DEMO_EOS = ("hdm-stiff", "hdm-medium", "hdm-soft")
TINY_CONFIG = "[sweep]\ncentral_density = { min = 3e14, max = 3e15, count = 12 }\n\n" + SLY_BLOCK


def table_rows(out: str) -> dict[str, list[str]]:
    """Summary-table rows keyed by EOS name (first column)."""
    rows = {}
    for line in out.splitlines():
        fields = line.split()
        if fields:
            rows[fields[0]] = fields
    return rows


def test_demo_from_another_folder_then_summary(tmp_path, monkeypatch, run_cli):
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)  # the bundled inputs must not depend on the current folder
    code, out, err = run_cli("demo", "--out-dir", "demo_out", "--prior-members", "30")  # a small prior: quick
    assert code == 0, err
    # the likelihood half: the prior ensemble scored, Bayes factors printed, results and band figure written
    assert "Bayes factor" in out and "ensemble hdm-prior: " in out and "of 30 members scored" in out
    for name in ("demo_prior.h5", "demo_likelihood.h5", "demo_likelihood.ecsv", "demo_bands.png"):
        assert (elsewhere / "demo_out" / name).is_file(), name
    run_path = elsewhere / "demo_out" / "demo.h5"
    assert run_path.is_file()
    assert (elsewhere / "demo_out" / "demo_inputs" / "demo.toml").is_file()
    assert {p.name for p in (elsewhere / "demo_out" / "demo_inputs").glob("*.csv")} >= {
        "hdm_medium.csv", "hdm_soft.csv"}
    rows = table_rows(out.split("solving the prior")[0])  # the summary table, before the likelihood half
    assert "M_max" in rows["EOS"]
    run = read_run(run_path)
    assert list(run.eos) == list(DEMO_EOS)
    for name in DEMO_EOS:
        assert rows[name][2] == f"{run.eos[name].summary['max_mass']:.4f}"

    code, summary_out, err = run_cli("summary", run_path)
    assert code == 0, err
    assert summary_out.strip() in out  # the same table the demo printed


def test_summary_of_missing_file(tmp_path, run_cli):
    code, out, err = run_cli("summary", tmp_path / "absent.h5")
    assert code == 2 and out == ""
    assert f"{tmp_path / 'absent.h5'}: run file not found" in assert_one_error_line(err)


def test_summary_of_a_non_run_file(tmp_path, run_cli):
    path = tmp_path / "notes.h5"
    path.write_text("hello\n")
    code, _, err = run_cli("summary", path)
    assert code == 2
    assert str(path) in assert_one_error_line(err)


def test_sweep_out_and_force(tmp_path, run_cli):
    cfg = tmp_path / "tiny.toml"
    cfg.write_text(TINY_CONFIG)
    out = tmp_path / "results" / "tiny_run.h5"
    out.parent.mkdir()  # run files go into existing folders only (test_faults.py checks the refusal)
    code, stdout, err = run_cli("sweep", cfg, "-o", out)
    assert code == 0, err
    assert f"wrote {out}" in stdout and "sly" in table_rows(stdout)
    first = out.read_bytes()

    code, stdout, err = run_cli("sweep", cfg, "-o", out)
    assert code == 2 and stdout == ""
    line = assert_one_error_line(err)
    assert str(out) in line and "--force" in line
    assert out.read_bytes() == first

    code, _, err = run_cli("sweep", cfg, "--out", out, "--force")
    assert code == 0, err
    assert read_run(out).eos["sly"]["mass"].size == 12
    assert not (tmp_path / "results" / "tiny_run.h5.partial").exists()


def test_sweep_default_output_beside_config(tmp_path, monkeypatch, run_cli):
    cfg = tmp_path / "tiny.toml"
    cfg.write_text(TINY_CONFIG)
    monkeypatch.chdir(tmp_path.parent)
    code, _, err = run_cli("sweep", cfg)
    assert code == 0, err
    assert (tmp_path / "tiny.h5").is_file()


def test_console_entry_point_bad_config_end_to_end(tmp_path):
    cfg = tmp_path / "bad.toml"
    cfg.write_text(TINY_CONFIG.replace("gammas = [3.005, 2.988, 2.851]", "gammas = [3.005, 2.988]"))
    result = subprocess.run([sys.executable, "-m", "stellar_match.cli", "sweep", str(cfg)],
                            capture_output=True, text=True, timeout=120, cwd=tmp_path)
    assert result.returncode == 2
    assert result.stdout == ""
    line = assert_one_error_line(result.stderr)
    assert f"{cfg}: eos[0].gammas: " in line


def test_usage_mistakes_are_one_line(run_cli):
    # argparse's own errors (a word where a number belongs) follow the one-line rule too
    code, _, err = run_cli("sweep", "x.toml", "--workers", "two")
    assert code == 2 and len(err.strip().splitlines()) == 1 and "--workers" in err


def test_malformed_scheduler_address_is_one_line(tmp_path, run_cli):
    cfg = tmp_path / "c.toml"
    cfg.write_text('[sweep]\ncentral_density = { values = [1e15] }\n[[eos]]\nname = "p"\nkind = "polytrope"\n'
                   'K = 1e5\ngamma = 2.0\n')
    code, _, err = run_cli("sweep", cfg, "--scheduler", "notanaddress")
    assert code == 2 and len(err.strip().splitlines()) == 1 and "--scheduler" in err
