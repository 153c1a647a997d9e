"""Shared fixtures and helpers for the config, table, run-file and CLI tests."""

from __future__ import annotations

from pathlib import Path

import pytest

from stellar_match import cli

#: The repository's bundled demo inputs.
EOS_TABLES = Path(__file__).resolve().parents[1] / "eos_tables"

#: SLy in the Read et al. (2009, PRD 79, 124032, Table III) parametrisation.
SLY_BLOCK = """\
[[eos]]
name = "sly"
kind = "piecewise_polytrope"
log10_p1 = 34.384
gammas = [3.005, 2.988, 2.851]
"""

#: A small, quick sweep axis (rest-mass density, g/cm^3).
SMALL_DENSITY_AXIS = """\
[sweep]
central_density = { min = 3e14, max = 3e15, count = 5 }
"""


@pytest.fixture
def run_cli(capsys):
    """Call ``cli.main(argv)`` in-process; return (exit status, stdout, stderr)."""

    def run(*argv: str) -> tuple[int, str, str]:
        code = cli.main([str(a) for a in argv])
        captured = capsys.readouterr()
        return code, captured.out, captured.err

    return run


def assert_one_error_line(err: str) -> str:
    """The CLI's error contract: exactly one line on stderr, no traceback; return it."""
    assert "Traceback" not in err
    lines = err.splitlines()
    assert len(lines) == 1, err
    assert err.endswith("\n")
    assert lines[0].startswith(f"{cli.PROG}: error: "), lines[0]
    return lines[0]
