"""The EOS kinds by config name: one table that config, ensembles and run files all use.

Each family module registers its kinds with :func:`register`, giving

* ``parse``: reads and type-checks the kind's config keys through a
  :class:`KeyReader` (errors name the file and dotted key);
* ``build``: makes the EOS from those options, validating the physics
  (an :class:`~stellar_match.errors.InputError` naming the key);
* ``rebuild``: makes the same EOS again from the ``parameters`` recorded in
  a run file (for ``--masses`` and :func:`stellar_match.sweep.eos_from_sequence`);
* ``columns``: how the kind's keys become ensemble member columns (None: the
  kind has no ensembles), arrays flattened to one column per element;
* ``density_axis``: whether central densities can be swept.

Adding a kind is one module that calls :func:`register`, imported by
``eos/__init__.py``, and its tests.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import ConfigError, InputError
from .base import EquationOfState

__all__ = [
    "KINDS", "EOSKind", "Column", "KeyReader", "register", "kind_names", "get_kind", "parse_options",
    "build_eos", "rebuild_eos", "member_columns", "member_options", "column_rank", "as_scalar", "check_number",
    "NOT_GIVEN",
]


class _NotGiven:
    def __repr__(self) -> str:
        return "NOT_GIVEN"

    def __reduce__(self) -> str:
        return "NOT_GIVEN"  # pickled by name: one marker in every process (ensembles go to workers)


#: Marks a key without a default (and, in an ensemble block, a key left to the member columns).
NOT_GIVEN: Any = _NotGiven()


def as_scalar(value: Any, key: str) -> float:
    """``value`` as one float for a factory of the Python API, or an InputError naming ``key``.

    Catches arrays, strings and booleans before a numpy comparison would
    fail with a message that names nothing.
    """
    if isinstance(value, bool | np.bool_ | str | bytes) or np.ndim(value) != 0:
        raise InputError(f"needs one number, got {value!r}", key=key)
    try:
        return float(value)
    except (TypeError, ValueError):
        raise InputError(f"needs one number, got {value!r}", key=key) from None


def check_number(value: Any, source: str, key: str, *, positive: bool = False) -> float:
    """``value`` as a finite float, or a ConfigError naming ``key`` (booleans are no numbers)."""
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ConfigError(f"needs a number, got {type(value).__name__} {value!r}", source=source, key=key)
    try:
        value = float(value)
    except OverflowError:  # a TOML integer with hundreds of digits
        value = math.inf
    if not math.isfinite(value):
        raise ConfigError("needs a finite number", source=source, key=key)
    if positive and value <= 0:
        raise ConfigError(f"needs a positive number, got {value:g}", source=source, key=key)
    return value


class KeyReader:
    """Reads the keys of one EOS block (an ``[[eos]]`` table, an inline ``base`` or an ensemble).

    Parameters
    ----------
    block : dict
        The TOML table.
    source : str
        The config file, for error messages.
    prefix : str
        Dotted key of the block, e.g. ``eos[2]`` or ``eos[0].base``.
    kind : str
        The kind being read (for "missing" messages).
    base_dir : Path or None
        Folder that relative paths are resolved against.
    open_keys : set of str
        Keys that may stay absent because ensemble members give them: an
        absent key of this set reads as :data:`NOT_GIVEN`, default or not.
    """

    def __init__(self, block: dict, source: str, prefix: str, kind: str, base_dir: Path | None = None,
                 open_keys: frozenset[str] = frozenset()) -> None:
        self.block, self.source, self.prefix, self.kind = block, source, prefix, kind
        self.base_dir, self.open_keys = base_dir, open_keys

    def where(self, key: str) -> str:
        return f"{self.prefix}.{key}" if self.prefix else key

    def fail(self, key: str, message: str) -> ConfigError:
        return ConfigError(message, source=self.source, key=self.where(key))

    def _get(self, key: str, default: Any) -> Any:
        if key in self.block:
            return self.block[key]
        if key in self.open_keys:
            return NOT_GIVEN
        if default is NOT_GIVEN:
            needed = ", ".join(k for k in get_kind(self.kind).keys if k in get_kind(self.kind).required)
            raise self.fail(key, f"missing (kind {self.kind!r} needs {needed})")
        return default

    def number(self, key: str, *, default: Any = NOT_GIVEN, positive: bool = False) -> Any:
        """A finite number (or the default)."""
        v = self._get(key, default)
        if v is NOT_GIVEN or key not in self.block:
            return v
        return check_number(v, self.source, self.where(key), positive=positive)

    def numbers(self, key: str, *, min_count: int, max_count: int, default: Any = NOT_GIVEN,
                usage: str = "") -> Any:
        """A list of ``min_count`` to ``max_count`` finite numbers."""
        v = self._get(key, default)
        if v is NOT_GIVEN or key not in self.block:
            return v
        count = f"{min_count}" if min_count == max_count else f"{min_count} to {max_count}"
        if not isinstance(v, list) or not min_count <= len(v) <= max_count:
            raise self.fail(key, f"needs {count} numbers{' ' + usage if usage else ''}, got {v!r}")
        return [check_number(x, self.source, self.where(key)) for x in v]

    def boolean(self, key: str, *, default: Any = NOT_GIVEN) -> Any:
        v = self._get(key, default)
        if v is NOT_GIVEN or key not in self.block:
            return v
        if not isinstance(v, bool):
            raise self.fail(key, f"needs true or false, got {type(v).__name__} {v!r}")
        return v

    def path(self, key: str) -> Any:
        """A file path, resolved against the config's folder."""
        v = self._get(key, NOT_GIVEN)
        if v is NOT_GIVEN:
            return v
        if not isinstance(v, str) or not v:
            raise self.fail(key, "needs a file path string")
        p = Path(v)
        if not p.is_absolute() and self.base_dir is not None:
            p = self.base_dir / p
        return p

    def table(self, key: str) -> Any:
        v = self._get(key, NOT_GIVEN)
        if v is NOT_GIVEN:
            return v
        if not isinstance(v, dict):
            raise self.fail(key, f"needs a table, got {type(v).__name__}")
        return v


@dataclass(frozen=True)
class Column:
    """How one config key of a kind becomes ensemble member columns.

    Attributes
    ----------
    key : str
        The config key.
    element : callable or None
        For an array key, ``element(k)`` is the column name of its element k
        (e.g. ``gamma1``, ``cs2_0``); None for a number, whose column is the key.
    min_count, max_count : int
        For arrays: the columns ``element(0) .. element(min_count - 1)`` are
        required, the next ones up to ``max_count`` are used when offered.
    length_key : str or None
        For arrays whose length is that of another (fixed) key's array.
    default : object
        Value used when the key is neither fixed nor a column.
    """

    key: str
    element: Callable[[int], str] | None = None
    min_count: int = 1
    max_count: int = 1
    length_key: str | None = None
    default: Any = NOT_GIVEN


@dataclass(frozen=True)
class EOSKind:
    """One EOS kind: its keys, its builder, its ensemble columns and its run-file rebuild.

    Attributes
    ----------
    name : str
        The config ``kind``.
    keys : tuple of str
        Every config key of the kind (``name`` and ``kind`` aside).
    required : tuple of str
        The keys without a default.
    parse : callable
        ``parse(reader) -> options``: typed values of the keys.
    build : callable
        ``build(name, options) -> EquationOfState``; raises InputError naming the key.
    rebuild : callable or None
        ``rebuild(name, parameters) -> EquationOfState`` from a run file's
        ``parameters``; None: ``build`` takes the parameters as options.
    columns : tuple of Column or None
        Ensemble member columns; None if the kind has no ensembles.
    density_axis : callable
        ``density_axis(options) -> bool``: False if only central pressures can be swept.
    summary : str
        One line for documentation.
    extra_datasets : tuple of str
        Per-star datasets beyond the standard ones that every EOS of the kind
        writes (names of ``schema.OPTIONAL_STAR_DATASETS``).
    """

    name: str
    keys: tuple[str, ...]
    required: tuple[str, ...]
    parse: Callable[[KeyReader], dict]
    build: Callable[[str, dict], EquationOfState]
    rebuild: Callable[[str, dict], EquationOfState] | None = None
    columns: tuple[Column, ...] | None = None
    density_axis: Callable[[dict], bool] = field(default=lambda options: True)
    summary: str = ""
    extra_datasets: tuple[str, ...] = ()


#: Every kind, by config name, in registration order.
KINDS: dict[str, EOSKind] = {}


def register(kind: EOSKind) -> EOSKind:
    """Add a kind to :data:`KINDS` (each family module calls this once per kind)."""
    if kind.name in KINDS:
        raise ValueError(f"EOS kind {kind.name!r} registered twice")
    KINDS[kind.name] = kind
    return kind


def kind_names() -> tuple[str, ...]:
    return tuple(KINDS)


def get_kind(name: str) -> EOSKind:
    return KINDS[name]


def parse_options(block: dict, source: str, prefix: str, base_dir: Path | None, *, extra: set[str] = frozenset(),
                  open_keys: frozenset[str] = frozenset()) -> tuple[str, dict]:
    """Check one EOS table: its ``kind``, no unknown keys, the kind's keys; return (kind, options).

    ``extra`` are keys the caller handles (``name``; an ensemble's ``members``...).
    """
    def where(k: str) -> str:
        return f"{prefix}.{k}" if prefix else k

    if "kind" not in block:
        raise ConfigError("missing", source=source, key=where("kind"))
    kind = block["kind"]
    if not isinstance(kind, str) or kind not in KINDS:
        raise ConfigError(f"unknown kind {kind!r} (use one of: {', '.join(KINDS)})", source=source,
                          key=where("kind"))
    spec = KINDS[kind]
    allowed = {"kind", *extra, *spec.keys}
    for k in block:
        if k not in allowed:
            raise ConfigError(f"unknown key (expected one of: {', '.join(sorted(allowed))})", source=source,
                              key=where(k))
    return kind, spec.parse(KeyReader(block, source, prefix, kind, base_dir, open_keys))


def build_eos(kind: str, name: str, options: dict) -> EquationOfState:
    """Build an EOS of ``kind`` from parsed options."""
    return KINDS[kind].build(name, options)


def rebuild_eos(kind: str, name: str, parameters: dict) -> EquationOfState:
    """Rebuild an EOS from the ``kind`` and ``parameters`` of a run-file group.

    Raises
    ------
    InputError
        For an unknown kind or missing parameters.
    """
    spec = KINDS.get(kind)
    if spec is None:
        raise InputError(f"EOS {name!r}: cannot rebuild kind {kind!r}", key=f"eos/{name}/kind")
    try:
        if spec.rebuild is not None:
            return spec.rebuild(name, parameters)
        return spec.build(name, {k: parameters[k] for k in spec.keys if k in parameters or k in spec.required})
    except KeyError as exc:
        raise InputError(f"EOS {name!r}: run file lacks parameter {exc.args[0]!r}",
                         key=f"eos/{name}/parameters") from None


def member_columns(kind: str, fixed: dict, offered: set[str]) -> tuple[str, ...]:
    """The member columns of an ensemble of ``kind`` whose block fixes ``fixed``.

    A key fixed in the block is no column.  A required number is a column;
    a number with a default is a column only when ``offered`` (a sampler
    range or a CSV column of that name).  An array gives one column per
    element: as many as its ``length_key`` array has, else the required ones
    and those offered next.
    """
    names: list[str] = []
    for col in KINDS[kind].columns or ():
        if fixed.get(col.key, NOT_GIVEN) is not NOT_GIVEN:
            continue
        if col.element is None:
            if col.default is NOT_GIVEN or col.key in offered:
                names.append(col.key)
            continue
        if col.length_key is not None:
            count = len(fixed[col.length_key])
        else:
            count = col.min_count
            while count < col.max_count and col.element(count) in offered:
                count += 1
        names.extend(col.element(k) for k in range(count))
    return tuple(names)


def column_rank(kind: str, name: str) -> tuple[int, int]:
    """Sort key of member column ``name`` of ``kind``: its key's place among the kind's columns, then the element."""
    for i, col in enumerate(KINDS[kind].columns or ()):
        if col.element is None:
            if name == col.key:
                return (i, 0)
        else:
            for k in range(max(col.max_count, 64)):
                if col.element(k) == name:
                    return (i, k)
    return (len(KINDS[kind].columns or ()), 0)


def member_options(kind: str, fixed: dict, names: tuple[str, ...], row) -> dict:
    """The options of one member: the block's fixed keys, the row's columns, else the defaults."""
    values = dict(zip(names, (float(x) for x in row), strict=True))
    options = {k: v for k, v in fixed.items() if v is not NOT_GIVEN}
    for col in KINDS[kind].columns or ():
        if col.key in options:
            continue
        if col.element is None:
            options[col.key] = values[col.key] if col.key in values else col.default
        else:
            k, items = 0, []
            while col.element(k) in values:
                items.append(values[col.element(k)])
                k += 1
            options[col.key] = items
    return options
