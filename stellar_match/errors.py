"""The one exception family for user mistakes.

Bad configs, bad tables, bad run files and impossible requests raise
:class:`InputError` (or a subclass).  It carries where the mistake is (file,
key, row) so that the command line can print one precise line and exit with
status 2.  Bugs in stellar_match itself still raise ordinary exceptions.
"""

from __future__ import annotations

import errno


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


class StorageError(InputError):
    """A file could not be written or read back: disk full, a file-size or quota
    limit, a read-only, vanished or missing folder, or an output held by another run.

    Not a mistake in the inputs, but one the user fixes outside stellar_match
    (free space, raise the limit, fix permissions, wait for the other run), so
    it gets the same one-line treatment on the command line.
    """

    @classmethod
    def from_os_error(cls, exc: OSError, doing: str, *, source: str | None = None,
                      hint: str = "") -> StorageError:
        """One line for an ``OSError`` met while ``doing`` something ("cannot save a part").

        Parameters
        ----------
        exc : OSError
            The failure; its errno picks the wording the user can act on.
        doing : str
            What failed, e.g. ``"cannot write the run file"``.
        source : str, optional
            The file or folder concerned (default: the one named by ``exc``).
        hint : str
            What to do next, appended after a colon.
        """
        reason = _OS_REASONS.get(exc.errno or 0) or exc.strerror or str(exc) or type(exc).__name__
        where = source if source is not None else exc.filename
        return cls(f"{doing} ({reason})" + (f": {hint}" if hint else ""),
                   source=None if where is None else str(where))


#: Wording for the errors a full disk, a limit or a permission gives (errno -> reason).
_OS_REASONS = {
    errno.ENOSPC: "no space left on the device",
    errno.EFBIG: "file too large: a file-size limit (ulimit -f) was reached",
    errno.EDQUOT: "disk quota exceeded",
    errno.EROFS: "read-only file system",
    errno.EACCES: "permission denied",
    errno.EPERM: "operation not permitted",
    errno.ENOENT: "it does not exist (any more)",
    errno.ENOTDIR: "a file stands where a folder should be",
    errno.EEXIST: "a file of that name is in the way",
    errno.EIO: "input/output error of the device",
}
