"""The data contract: every table the tool writes, declared once, column by column.

Each table (:class:`Table`) names its file, the folder it lies in, its record
set and, per column (:class:`Column`), the kind of value, unit, record set and
meaning. The writers take their column types from here (:func:`dtypes`); every
Parquet file is written with each column's declaration as field metadata and
the table's name as file metadata (:func:`described`), so a file says what it
holds wherever it goes; docs/tables.md is generated from the same declarations
(``python -m abm.tables``, ``make reference``) and a test fails when they differ.

Record sets: ``truth`` is the model's simulated ground truth, which no agency
ever holds; ``observed`` is what an agency's own records would hold;
``estimate`` is computed from observed records alone; ``setting`` is an input
(a factor level, a prior, a decision variable); ``key`` identifies a row (run,
design point, replication, day).
"""

from __future__ import annotations

import importlib
import re
from dataclasses import dataclass

import pyarrow as pa

RECORD_SETS = ("truth", "observed", "estimate", "setting", "key")
# kind -> pandas dtype; "number" (int or float) and "any" (any of the four) are for placeholder columns whose kind
# is the world's or the file's: a search's decision variable, an experiment's factor level
KINDS = {"int": "int64", "float": "float64", "text": "string", "bool": "bool", "number": "float64", "any": "object"}


@dataclass(frozen=True)
class Column:
    """One column: a name (``<word>`` marks a part named by the world or the file, e.g. ``method_<method>_checks``),
    its kind of value (int, float, text, bool; number or any where the world or the file decides), unit (empty for
    text and identifiers), record set and meaning."""

    name: str
    kind: str
    unit: str
    description: str
    record_set: str = ""  # empty: the table's

    def matches(self, name: str) -> bool:
        """True when ``name`` is this column's, placeholders standing for any non-empty text."""
        if "<" not in self.name:
            return name == self.name
        pattern = "".join(".+" if part.startswith("<") else re.escape(part)
                          for part in re.split(r"(<[^>]+>)", self.name) if part)
        return re.fullmatch(pattern, name) is not None


@dataclass(frozen=True)
class Table:
    """One table the tool writes: its name, file, folder, record set, meaning and columns."""

    name: str
    file: str  # path inside its folder
    folder: str  # run directory, batch folder, calibration folder, search folder
    record_set: str
    description: str
    columns: tuple[Column, ...]

    def column(self, name: str) -> Column | None:
        """The declaration of a column of this name (exact names first, then placeholder patterns)."""
        exact = next((c for c in self.columns if c.name == name), None)
        return exact or next((c for c in self.columns if c.matches(name)), None)

    def record_set_of(self, column: Column) -> str:
        return column.record_set or self.record_set


_TABLES: dict[str, Table] = {}


def declare(*tables: Table) -> None:
    """Add tables to the contract (each name once; every kind and record set known)."""
    for t in tables:
        if t.name in _TABLES:
            raise ValueError(f"table '{t.name}' declared twice")
        for c in t.columns:
            if c.kind not in KINDS or (c.record_set or t.record_set) not in RECORD_SETS:
                raise ValueError(f"{t.name}.{c.name}: unknown kind '{c.kind}' or record set")
        _TABLES[t.name] = t


def tables() -> dict[str, Table]:
    """Every declared table by name, in declaration order."""
    _load()
    return dict(_TABLES)


def table(name: str) -> Table:
    """The declaration of table ``name``."""
    _load()
    return _TABLES[name]


def dtypes(name: str) -> dict[str, str]:
    """The pandas dtypes of a table's fixed columns, in order (placeholder columns left out)."""
    return {c.name: KINDS[c.kind] for c in table(name).columns if "<" not in c.name}


_ARROW_KIND = {"int": pa.types.is_integer, "float": pa.types.is_floating,
               "text": lambda t: pa.types.is_string(t) or pa.types.is_large_string(t), "bool": pa.types.is_boolean,
               "number": lambda t: pa.types.is_integer(t) or pa.types.is_floating(t)}
_ARROW_KIND["any"] = lambda t: any(holds(t) for holds in list(_ARROW_KIND.values())[:4])


def described(arrow: pa.Table, name: str) -> pa.Table:
    """``arrow`` with each column's declaration as field metadata and the table's name as file metadata.

    Raises ValueError for a column the contract does not declare, or one whose values are of another kind: the
    writer and the contract disagree, a fault to fix in the code.
    """
    spec = table(name)
    fields = []
    for f in arrow.schema:
        column = spec.column(f.name)
        if column is None:
            raise ValueError(f"table '{name}' has a column '{f.name}' the data contract does not declare")
        all_null = pa.types.is_null(f.type)  # an empty frame of objects: no kind to check
        if not all_null and not _ARROW_KIND[column.kind](f.type):
            raise ValueError(f"table '{name}' column '{f.name}' holds {f.type}, declared {column.kind}")
        fields.append(f.with_metadata({"description": column.description, "unit": column.unit,
                                       "record_set": spec.record_set_of(column)}))
    return pa.Table.from_arrays(arrow.columns, schema=pa.schema(fields, metadata={"undertow.table": name}))


# Modules beside this one, one per folder the tool writes; each declares on import.
DECLARATIONS = ("run", "batch", "calibration", "search")


def _load() -> None:
    """Import the declarations (Python imports each once)."""
    for module in DECLARATIONS:
        importlib.import_module(f"{__name__}.{module}")
