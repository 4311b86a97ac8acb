"""The scenario schema engine: keys, their checks, and the parsed scenario.

A kind of scenario file declares its tables once as ``{table: {key: Key}}`` (the
``gridflex run`` tables are :data:`gridflex.scenario.tables.SCHEMA`); this module
parses a TOML file against such a declaration: it fills defaults, converts
quantities to SI, resolves paths against the file's folder and names the file, the
table and the key in every message. Checks that tie several keys or tables together
belong to each kind of scenario (see :mod:`gridflex.scenario.checks`).
"""

from __future__ import annotations

import math
import tomllib
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any, Generic, Literal, TypeVar, overload

from gridflex.errors import InputError
from gridflex.units import parse_quantity, si_unit
from gridflex.validation import (
    check_choice,
    check_flag,
    check_integer,
    check_number,
    check_path_text,
)

if TYPE_CHECKING:
    from gridflex.scenario.tables import (
        BreakTable,
        EnsembleTable,
        FitTable,
        FlexureTables,
        GravityTable,
        GridTable,
        InfillTable,
        LoadTable,
        MarginTable,
        OutputTable,
        PlateTable,
        SolverTable,
        SweepTable,
        WorkingGridTable,
    )

__all__ = [
    "Key",
    "REQUIRED",
    "Scenario",
    "parse_tables",
    "present",
    "read_scenario",
]

REQUIRED = object()
"""Default of a key that must be given."""


@dataclass(frozen=True)
class Key:
    """Declaration of one scenario key.

    Parameters
    ----------
    kind : str
        ``"quantity"`` (number or string with unit of *dimension*), ``"number"``,
        ``"integer"``, ``"string"``, ``"choice"``, ``"path"``, ``"bool"``,
        ``"flag_or_names"`` (true, false or a list of names), ``"list"``,
        ``"distribution"`` (a list of samples or an inline table, read by the workflow).
    help : str
        One line for documentation.
    default : object
        Value when the key is absent; :data:`REQUIRED` if it must be given, ``None``
        if optional without default.
    dimension : str, optional
        Unit dimension for quantities (see :data:`gridflex.units.DIMENSIONS`).
    choices : tuple of str
        Allowed values for ``"choice"``: the library's own constant, never a copy.
    minimum : float, optional
        Smallest allowed value (inclusive) for numbers and quantities.
    strict : bool, default False
        Whether *minimum* itself is refused (e.g. a spacing must be > 0).
    maximum : float, optional
        Largest allowed value (inclusive, in SI) for numbers and quantities.
    """

    kind: str
    help: str
    default: Any = None
    dimension: str = ""
    choices: tuple[str, ...] = ()
    minimum: float | None = None
    strict: bool = False
    maximum: float | None = None


TablesT = TypeVar("TablesT", bound=Mapping[str, Any])
"""The type of :attr:`Scenario.tables`: a TypedDict per kind of scenario, or a dict."""


@dataclass(frozen=True)
class Scenario(Generic[TablesT]):
    """A validated scenario.

    Attributes
    ----------
    path : pathlib.Path
        The scenario file (paths inside it are resolved against its folder).
    text : str
        The scenario text as read (recorded in output metadata).
    tables : dict
        ``{table: {key: value}}`` with defaults filled in and quantities in SI;
        array tables map to a list of such dicts.
    """

    path: Path
    text: str
    tables: TablesT

    # The ``gridflex run`` tables, typed (see gridflex.scenario.tables; a test keeps
    # these overloads equal to FlexureTables). A plain ``Scenario`` annotation is taken
    # as a run scenario; a ``Scenario[dict[str, Any]]`` (basin, history) and any other
    # table name fall through to the last overload.
    @overload
    def table(self: Scenario[FlexureTables], name: Literal["plate"]) -> PlateTable: ...
    @overload
    def table(self: Scenario[FlexureTables], name: Literal["margin"]) -> MarginTable | None: ...
    @overload
    def table(self: Scenario[FlexureTables], name: Literal["breaks"]) -> list[BreakTable]: ...
    @overload
    def table(self: Scenario[FlexureTables], name: Literal["solver"]) -> SolverTable: ...
    @overload
    def table(self: Scenario[FlexureTables], name: Literal["grid"]) -> GridTable | None: ...
    @overload
    def table(self: Scenario[FlexureTables], name: Literal["working_grid"]) -> WorkingGridTable: ...
    @overload
    def table(self: Scenario[FlexureTables], name: Literal["loads"]) -> list[LoadTable]: ...
    @overload
    def table(self: Scenario[FlexureTables], name: Literal["infill"]) -> InfillTable | None: ...
    @overload
    def table(self: Scenario[FlexureTables], name: Literal["gravity"]) -> GravityTable | None: ...
    @overload
    def table(self: Scenario[FlexureTables], name: Literal["output"]) -> OutputTable: ...
    @overload
    def table(self: Scenario[FlexureTables], name: Literal["fit"]) -> FitTable | None: ...
    @overload
    def table(self: Scenario[FlexureTables], name: Literal["sweep"]) -> SweepTable | None: ...
    @overload
    def table(self: Scenario[FlexureTables], name: Literal["ensemble"]) -> EnsembleTable | None: ...
    @overload
    def table(self, name: str) -> Any: ...
    def table(self, name: str) -> Any:
        """Values of one table (defaults for an absent table, ``None`` for an absent
        optional one, a list of dicts for an array table)."""
        return self.tables[name]

    def where(self, table: str, key: str = "", index: int | None = None) -> str:
        """``file [table] key`` for messages."""
        tag = f"[[{table}]] #{index + 1}" if index is not None else f"[{table}]"
        return f"{self.path}: {tag}" + (f" {key}" if key else "")

    @property
    def input_files(self) -> list[Path]:
        """Every file the scenario reads: paths in any table but ``[output]``.

        Outputs must never be written over one of these."""
        files = [self.path]
        for name, values in self.tables.items():
            if name == "output" or values is None:
                continue
            for row in values if isinstance(values, list) else [values]:
                files.extend(v for v in row.values() if isinstance(v, Path))
        return files


TableT = TypeVar("TableT")


def present(table: TableT | None, where: str) -> TableT:
    """*table* itself; ``None`` (an optional table the scenario left out) is refused.

    Parameters
    ----------
    table : dict or None
        A value of :meth:`Scenario.table`.
    where : str
        ``file [table]`` for the message (see :meth:`Scenario.where`).

    Raises
    ------
    InputError
        The table is absent but this step needs it.
    """
    if table is None:
        raise InputError(f"{where}: this table is required here")
    return table


_Checker = Callable[[Any, Key, str, Path], Any]


def _check_number(value: Any, key: Key, where: str, base: Path) -> Any:
    return check_number(where, value, minimum=key.minimum, maximum=key.maximum, strict=key.strict)


def _check_integer(value: Any, key: Key, where: str, base: Path) -> Any:
    minimum = None if key.minimum is None else math.ceil(key.minimum)
    return check_integer(where, value, minimum=minimum)


def _check_quantity(value: Any, key: Key, where: str, base: Path) -> Any:
    number = parse_quantity(value, key.dimension, where)
    if key.minimum is not None and (  # the value as written, not in SI
        number <= key.minimum if key.strict else number < key.minimum
    ):
        sign = ">" if key.strict else ">="
        raise InputError(f"{where} must be {sign} {key.minimum:g}, got {value!r}")
    if key.maximum is not None and number > key.maximum:
        unit = f" {si_unit(key.dimension)}" if key.dimension else ""
        raise InputError(f"{where} must be at most {key.maximum:g}{unit}, got {value!r}")
    return number


def _check_string(value: Any, key: Key, where: str, base: Path) -> Any:
    if not isinstance(value, str) or not value:
        raise InputError(f"{where} must be a non-empty string, got {value!r}")
    return value


def _check_choice(value: Any, key: Key, where: str, base: Path) -> Any:
    return check_choice(where, value, key.choices)


def _check_path(value: Any, key: Key, where: str, base: Path) -> Any:
    _check_string(value, key, where, base)
    check_path_text(where, value)
    if value.endswith(("/", "\\")):  # Path() would drop the separator
        raise InputError(f"{where} must name a file, got the folder {value!r}")
    path = Path(value).expanduser()
    return path if path.is_absolute() else (base / path)


def _check_bool(value: Any, key: Key, where: str, base: Path) -> Any:
    return check_flag(where, value)


def _check_flag_or_names(value: Any, key: Key, where: str, base: Path) -> Any:
    if isinstance(value, list):
        if not all(isinstance(item, str) and item for item in value):
            raise InputError(f"{where} must be true, false or a list of names, got {value!r}")
        return list(value)
    return check_flag(where, value)


def _check_list(value: Any, key: Key, where: str, base: Path) -> Any:
    if not isinstance(value, list):
        raise InputError(f"{where} must be a list, got {value!r}")
    return value


def _check_distribution(value: Any, key: Key, where: str, base: Path) -> Any:
    if not isinstance(value, (list, dict)) or not value:
        raise InputError(
            f"{where} must be a list of samples or a table such as "
            f'{{distribution = "normal", mean = ..., std = ...}}, got {value!r}'
        )
    return value


_CHECKERS: dict[str, _Checker] = {
    "number": _check_number,
    "integer": _check_integer,
    "quantity": _check_quantity,
    "string": _check_string,
    "choice": _check_choice,
    "path": _check_path,
    "bool": _check_bool,
    "flag_or_names": _check_flag_or_names,
    "list": _check_list,
    "distribution": _check_distribution,
}


def _parse_table(values: Any, spec: dict[str, Key], where: str, base: Path) -> dict[str, Any]:
    if not isinstance(values, dict):
        raise InputError(f"{where}: expected a table, got {values!r}")
    unknown = sorted(set(values) - set(spec))
    if unknown:
        raise InputError(
            f"{where}: unknown key {unknown[0]!r}; valid keys are " + ", ".join(sorted(spec))
        )
    out: dict[str, Any] = {}
    for name, key in spec.items():
        if name not in values:
            if key.default is REQUIRED:
                raise InputError(f"{where} {name}: required key is missing ({key.help})")
            out[name] = key.default
            continue
        out[name] = _CHECKERS[key.kind](values[name], key, f"{where} {name}", base)
    return out


def parse_tables(
    data: dict[str, Any],
    path: Path,
    text: str,
    schema: dict[str, dict[str, Key]],
    array_tables: frozenset[str],
    required_tables: tuple[str, ...],
    optional_tables: frozenset[str] = frozenset(),
) -> Scenario[dict[str, Any]]:
    """Validate *data* against *schema* (tables, keys, defaults); no cross-key checks.

    Shared by every kind of scenario file (see
    :func:`gridflex.scenario.tables.parse_scenario`).

    Parameters
    ----------
    data : dict
        The TOML file as read.
    path : pathlib.Path
        The file (named in messages; relative paths are taken from its folder).
    text : str
        The file's text, kept in the scenario.
    schema : dict
        ``{table: {key: Key}}``.
    array_tables : frozenset of str
        Tables written as arrays of tables (``[[name]]``); absent, an empty list.
    required_tables : tuple of str
        Tables that must be given.
    optional_tables : frozenset of str, optional
        Tables whose presence switches a feature on: absent, they are ``None``. Any
        other absent table holds its defaults (``None`` if it has a required key).

    Returns
    -------
    Scenario
    """
    base = path.parent
    unknown = sorted(set(data) - set(schema))
    if unknown:
        raise InputError(
            f"{path}: unknown table [{unknown[0]}]; valid tables are "
            + ", ".join(f"[{t}]" for t in schema)
        )
    for name in required_tables:
        if name not in data:
            raise InputError(f"{path}: required table [{name}] is missing")
    tables: dict[str, Any] = {}
    for name, spec in schema.items():
        raw = data.get(name)
        if name in array_tables:
            items = raw if raw is not None else []
            if not isinstance(items, list):
                raise InputError(f"{path}: [{name}] must be an array of tables, written [[{name}]]")
            tables[name] = [
                _parse_table(item, spec, f"{path}: [[{name}]] #{i + 1}", base)
                for i, item in enumerate(items)
            ]
        elif raw is None:
            if name in optional_tables or any(k.default is REQUIRED for k in spec.values()):
                tables[name] = None
            else:
                tables[name] = {k: v.default for k, v in spec.items()}
        else:
            tables[name] = _parse_table(raw, spec, f"{path}: [{name}]", base)
    return Scenario(path=path, text=text, tables=tables)


ScenarioT = TypeVar("ScenarioT", bound=Scenario[Any])


def read_scenario(
    path: str | Path, parser: Callable[[dict[str, Any], Path, str], ScenarioT]
) -> ScenarioT:
    """Read a TOML scenario file and validate it with *parser*.

    Parameters
    ----------
    path : str or pathlib.Path
        The scenario file; relative paths inside it are taken from its folder.
    parser : callable
        ``parser(data, resolved_path, text)``: the validator of the kind of scenario.

    Returns
    -------
    Scenario

    Raises
    ------
    InputError
        Missing or unreadable file, malformed TOML, or whatever *parser* refuses.
    """
    path = Path(check_path_text("scenario file", path))
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError as exc:
        raise InputError(f"{path}: scenario file not found") from exc
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read the scenario file ({exc})") from exc
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{path}: malformed TOML: {exc}") from exc
    return parser(data, path.resolve(), text)
