"""The one exception family for user mistakes.

Bad configs, bad tables, bad run files and impossible requests raise
:class:`InputError` (or a subclass).  It carries where the mistake is (file,
key, row) so that the command line can print one precise line and exit with
status 2.  Bugs in stellar_match itself still raise ordinary exceptions.
"""

from __future__ import annotations


class InputError(Exception):
    """A user-facing input problem, located as precisely as possible.

    Parameters
    ----------
    message : str
        What is wrong, in the user's terms (include the expected value or unit).
    source : str, optional
        The file the problem is in.
    key : str, optional
        The dotted config key (``eos[2].gammas``) or dataset name.
    row : int, optional
        The 1-based line number in a table file.
    """

    def __init__(
        self,
        message: str,
        *,
        source: str | None = None,
        key: str | None = None,
        row: int | None = None,
    ) -> None:
        self.message = message
        self.source = source
        self.key = key
        self.row = row
        super().__init__(self.one_line())

    def one_line(self) -> str:
        """Return ``file: key: row N: message`` with absent parts left out."""
        where = []
        if self.source:
            where.append(str(self.source))
        if self.key:
            where.append(self.key)
        if self.row is not None:
            where.append(f"line {self.row}")
        text = ": ".join([*where, self.message])
        # One line is a promise to the CLI; TOML keys and paths may hold line breaks.
        return "\\n".join(text.splitlines())


class ConfigError(InputError):
    """A problem in a TOML sweep config."""


class TableError(InputError):
    """A problem in a tabulated equation of state."""


class RunFileError(InputError):
    """A problem with an HDF5 run file (missing, foreign, or incomplete)."""
