"""Tables that benchmark scripts write into README.md, between a pair of markers per script."""

from __future__ import annotations

from pathlib import Path

README = Path(__file__).resolve().parents[1] / "README.md"


def markers(script: str) -> tuple[str, str]:
    """The (start, end) comment lines around the table that ``script`` writes."""
    return (f"<!-- {script} table: written by benchmarks/{script}.py --readme -->",
            f"<!-- end of {script} table -->")


def write_table(script: str, table: str, path: Path = README) -> None:
    """Replace what lies between ``script``'s markers in README.md with ``table``."""
    start, end = markers(script)
    text = path.read_text(encoding="utf-8")
    if start not in text or end not in text:
        raise SystemExit(f"{path.name} lacks the markers {start!r} ... {end!r}")
    head, rest = text.split(start, 1)
    _, tail = rest.split(end, 1)
    path.write_text(f"{head}{start}\n{table}{end}{tail}", encoding="utf-8")
