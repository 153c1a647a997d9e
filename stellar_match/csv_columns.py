"""Named numeric columns of a small CSV file (ensemble members, measurement samples).

One reader for the CSV inputs that are not EOS tables: a header row of
names, ``#`` comment lines and blank lines skipped, every row with as many
fields as the header.  Each mistake is one :class:`ConfigError` naming the
config key, the file and the line.
"""

from __future__ import annotations

import hashlib
import io
import math
from pathlib import Path

import numpy as np

from .errors import ConfigError

__all__ = ["read_columns", "read_header"]


def read_columns(path: Path, columns: list[str], *, optional: tuple[str, ...] = (), what: str, item: str,
                 source: str, key: str, finite: bool = False) -> tuple[np.ndarray, str, list[str]]:
    """Read ``columns`` (required) and those of ``optional`` the header has.

    Parameters
    ----------
    what : str
        The file's role in messages, e.g. "members file".
    item : str
        What one value is, e.g. "parameter" ("a parameter is not a number").
    finite : bool
        Refuse inf and nan values too.

    Returns
    -------
    table : ndarray, shape (rows, len(columns) + optional columns present)
    sha256 : str
        Of the file's bytes.
    present : list of str
        The optional columns found, in the order of their table columns.
    """
    def fail(message: str, line: int | None = None) -> ConfigError:
        where = f" (line {line})" if line is not None else ""
        return ConfigError(f"{what} {path}{where}: {message}", source=source, key=key)

    try:
        raw = path.read_bytes()
    except IsADirectoryError:
        raise fail("is a folder, not a CSV file") from None
    except OSError:
        raise fail("not found or unreadable") from None
    lines = _content_lines(raw)
    if not lines:
        raise fail("empty: no header row")
    header = [h.strip() for h in lines[0][1].split(",")]
    missing = [c for c in columns if c not in header]
    if missing:
        raise fail(f"lacks column(s) {', '.join(missing)}; header has {', '.join(header)}", lines[0][0])
    present = [c for c in optional if c in header]
    idx = [header.index(c) for c in [*columns, *present]]
    rows = []
    for number, line in lines[1:]:
        fields = [f.strip() for f in line.split(",")]
        if len(fields) != len(header):
            raise fail(f"{len(fields)} fields where the header has {len(header)}", number)
        try:
            row = [float(fields[c]) for c in idx]
        except ValueError:
            raise fail(f"a {item} is not a number", number) from None
        if finite and not all(math.isfinite(v) for v in row):
            raise fail(f"a {item} is not finite", number)
        rows.append(row)
    return np.array(rows).reshape(len(rows), len(idx)), hashlib.sha256(raw).hexdigest(), present


def _content_lines(raw: bytes) -> list[tuple[int, str]]:
    """(line number, stripped text) of the lines that are neither blank nor ``#`` comments."""
    text = raw.decode("utf-8-sig", errors="replace")
    return [(i, ln.strip()) for i, ln in enumerate(io.StringIO(text), start=1)
            if ln.strip() and not ln.strip().startswith("#")]


def read_header(path: Path) -> list[str]:
    """The column names of a CSV file's header row; empty if the file cannot be read.

    For choosing which columns to ask :func:`read_columns` for; that call
    then says what is wrong with an unreadable file.
    """
    try:
        lines = _content_lines(Path(path).read_bytes())
    except OSError:
        return []
    return [h.strip() for h in lines[0][1].split(",")] if lines else []
