"""The stellar-match command line: demo, sweep, summary, and its error contract end to end."""

from __future__ import annotations

import subprocess
import sys

from conftest import SLY_BLOCK, assert_one_error_line

from stellar_match.runfile import read_run

DEMO_EOS = ("hdm-stiff", "hdm-medium", "hdm-soft")
TINY_CONFIG = "[sweep]\ncentral_density = { min = 3e14, max = 3e15, count = 12 }\n\n" + SLY_BLOCK


def table_rows(out: str) -> dict[str, list[str]]:
    """Summary-table rows keyed by EOS name (first column); the first row of each name
    (the demo prints the likelihood table after the summary, with an "EOS" heading too)."""
    rows = {}
    for line in out.splitlines():
        fields = line.split()
        if fields:
            rows.setdefault(fields[0], fields)
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


# --- batch runs: progress as log lines, -v / -q (issue 13) ---------------------------------

#: Three chunks of four stars: three progress lines with --log-interval 0.
CHUNKED_CONFIG = ("[sweep]\ncentral_density = { min = 3e14, max = 3e15, count = 12 }\n"
                  "[solver]\nchunk_size = 4\n\n" + SLY_BLOCK)


def cli_in_subprocess(tmp_path, *argv: str) -> tuple[int, str]:
    """Run the console entry point with stderr redirected to a file, as a batch job does; (status, stderr)."""
    log = tmp_path / "job.log"
    with open(log, "w") as stderr:
        code = subprocess.run([sys.executable, "-m", "stellar_match.cli", *argv], stdout=subprocess.DEVNULL,
                              stderr=stderr, timeout=120, cwd=tmp_path).returncode
    return code, log.read_text()


def test_progress_is_logged_when_stderr_is_a_file(tmp_path):
    cfg = tmp_path / "c.toml"
    cfg.write_text(CHUNKED_CONFIG)
    code, log = cli_in_subprocess(tmp_path, "sweep", cfg, "-o", tmp_path / "c.h5", "--workers", "1",
                                  "--log-interval", "0")
    assert code == 0, log
    lines = [ln for ln in log.splitlines() if "stellar_match.cli INFO: sweep:" in ln]
    assert [ln.split("sweep: ")[1].split(" stars")[0] for ln in lines[:3]] == ["4/12", "8/12", "12/12"]
    assert all("stars/s" in ln and "ETA" in ln for ln in lines[:3])
    assert "sweep: done, 12 stars" in lines[-1]
    assert "Traceback" not in log and "\r" not in log  # no progress bar in a file


def test_quiet_silences_the_progress_log(tmp_path):
    cfg = tmp_path / "c.toml"
    cfg.write_text(CHUNKED_CONFIG)
    code, log = cli_in_subprocess(tmp_path, "-q", "sweep", cfg, "-o", tmp_path / "c.h5", "--workers", "1",
                                  "--log-interval", "0")
    assert code == 0 and log == ""


def test_verbose_logs_tasks_and_a_default_run_logs_nothing_short(tmp_path, run_cli):
    cfg = tmp_path / "c.toml"
    cfg.write_text(CHUNKED_CONFIG)
    code, _, err = run_cli("sweep", cfg, "-o", tmp_path / "a.h5", "--workers", "1", "-v")  # -v after the command
    assert code == 0, err
    assert "task eos-0000-0000000 (0:4): started" in err and "DEBUG" in err
    code, _, err = run_cli("sweep", cfg, "-o", tmp_path / "b.h5", "--workers", "1")
    assert code == 0 and err == ""  # the first line comes after --log-interval (30 s) only


def test_progress_rates_leave_resumed_chunks_out(caplog, monkeypatch):
    import logging

    from stellar_match import cli

    monkeypatch.setattr(cli.logger, "isEnabledFor", lambda level: True)
    progress = cli._Progress(12, interval=0.0)
    progress.resumed(8)
    with caplog.at_level(logging.INFO, logger="stellar_match.cli"):
        progress(4)
        progress.close(finished=True)
    status, done = [r.getMessage() for r in caplog.records]
    assert status.startswith("sweep: 12/12 stars") and "(8 stars from resumed chunks)" in status
    assert done.startswith("sweep: done, 12 stars")


# --- small corrections (issue 13, item 7) --------------------------------------------------


def test_summary_help_lists_every_column_it_prints(tmp_path, run_cli):
    cfg = tmp_path / "c.toml"
    cfg.write_text(TINY_CONFIG)
    code, out, err = run_cli("sweep", cfg, "-o", tmp_path / "c.h5", "--workers", "1")
    assert code == 0, err
    printed = out.splitlines()[1].split()  # the heading row of the table the sweep printed
    assert printed[0] == "EOS"
    code, help_text, _ = run_cli("summary", "--help")
    assert code == 0
    for heading in printed:
        assert f"\n  {heading} " in help_text, heading
    assert "star_status" in help_text and "ensemble" in help_text


def test_options_before_positional_files(tmp_path, run_cli):
    cfg = tmp_path / "c.toml"
    cfg.write_text(TINY_CONFIG)
    run = tmp_path / "c.h5"
    code, _, err = run_cli("sweep", "--workers", "1", "-o", run, cfg)
    assert code == 0, err
    code, out, err = run_cli("overlay", "--eos", "sly", run, "-o", tmp_path / "x.png")
    assert code == 0, err
    assert (tmp_path / "x.png").read_bytes().startswith(b"\x89PNG")
    code, out, err = run_cli("redshift", "--eos", "sly", run, "-o", tmp_path / "z.csv")
    assert code == 0, err
    assert (tmp_path / "z.csv").is_file()
    code, out, err = run_cli("summary", "-q", run)
    assert code == 0 and "sly" in out


def test_resume_of_a_finished_run_says_it_is_complete(tmp_path, run_cli):
    cfg = tmp_path / "c.toml"
    cfg.write_text(TINY_CONFIG)
    run = tmp_path / "c.h5"
    assert run_cli("sweep", cfg, "-o", run, "--workers", "1")[0] == 0
    before = run.read_bytes()
    code, out, err = run_cli("sweep", cfg, "-o", run, "--resume")
    assert code == 0, err
    assert f"{run}: complete already" in out and "sly" in table_rows(out)
    assert run.read_bytes() == before and not (tmp_path / "c.h5.parts").exists()
    other = tmp_path / "other.toml"  # a finished run of another config is not this run's to resume
    other.write_text(TINY_CONFIG.replace("count = 12", "count = 13"))
    code, out, err = run_cli("sweep", other, "-o", run, "--resume")
    assert code == 2
    line = assert_one_error_line(err)
    assert str(run) in line and "different run" in line and "--force" in line
    assert run.read_bytes() == before


def test_demo_keeps_edited_inputs_unless_forced(tmp_path, run_cli, monkeypatch):
    import shutil

    from stellar_match import cli

    cfg = tmp_path / "c.toml"
    cfg.write_text(TINY_CONFIG)
    small = cli._run_sweep(cfg, tmp_path / "small.h5", False, workers=1)
    # the demo sweep itself is run by test_demo_from_another_folder_then_summary
    monkeypatch.setattr(cli, "_run_sweep", lambda config, out, force, **kw: shutil.copyfile(small, out))
    out_dir = tmp_path / "demo"
    assert run_cli("demo", "--out-dir", out_dir)[0] == 0
    cli._demo_inputs(out_dir / "demo_inputs", force=False)  # unchanged copies are rewritten silently
    edited = out_dir / "demo_inputs" / "demo.toml"
    text = edited.read_text() + "\n# my change\n"
    edited.write_text(text)
    code, out, err = run_cli("demo", "--out-dir", out_dir)
    assert code == 2 and out == ""
    line = assert_one_error_line(err)
    assert str(edited) in line and "--force" in line
    assert edited.read_text() == text
    code, _, err = run_cli("demo", "--out-dir", out_dir, "--force")
    assert code == 0, err
    assert "# my change" not in edited.read_text()


def test_workers_rule_is_said_once(run_cli):
    code, _, err = run_cli("sweep", "x.toml", "--workers", "0")
    assert code == 2
    line = assert_one_error_line(err)
    assert line.count("--workers") == 1 and ">= 1" in line and "'0'" in line
