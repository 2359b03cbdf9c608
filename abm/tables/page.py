"""docs/tables.md: every table the tool writes, generated from the data contract (:mod:`abm.tables`)."""

from __future__ import annotations

from . import Table, tables

INTRO = """\
# Tables

<!-- Generated from the data contract (abm/tables) by `make reference` (python -m abm.reference); do not edit. -->

Every table the tool writes, column by column: kind of value, unit, record set and meaning. Each Parquet file
carries the same declarations as field metadata (`description`, `unit`, `record_set`) and its table's name as
file metadata (`undertow.table`), so a file says what it holds wherever it goes. A column named with `<...>`
stands for several, named by the world or the file (a factor's label, a method's name).

Record sets: **truth** is the model's simulated ground truth, which no agency ever holds; **observed** is what an
agency's own records would hold; **estimate** is computed from observed records alone; **setting** is an input
(a factor level, a prior, a decision variable); **key** identifies a row. Every figure is a model estimate from a
fictional world, not a count of real people. An agency's own extract of the observed tables takes the form in
[observed_records.md](observed_records.md).

{contents}
"""


def _anchor(name: str) -> str:
    return name.replace("/", "").replace("_", "-").lower()


def _section(t: Table) -> str:
    lines = [f"### {t.name}", "", f"`{t.file}` in a {t.folder}; record set: {t.record_set}. {t.description}", "",
             "| column | kind | unit | record set | meaning |", "| --- | --- | --- | --- | --- |"]
    for c in t.columns:
        meaning = c.description.replace("|", "\\|")
        lines.append(f"| `{c.name}` | {c.kind} | {c.unit or '—'} | {t.record_set_of(c)} | {meaning} |")
    return "\n".join(lines) + "\n"


def tables_page() -> str:
    """The whole of docs/tables.md."""
    declared = list(tables().values())
    folders = list(dict.fromkeys(t.folder for t in declared))
    contents = "\n".join(f"- {folder}: " + ", ".join(f"[{t.name}](#{_anchor(t.name)})" for t in declared
                                                      if t.folder == folder) for folder in folders)
    parts = [INTRO.format(contents=contents)]
    for folder in folders:
        parts.append(f"## In a {folder}\n")
        parts += [_section(t) for t in declared if t.folder == folder]
    return "\n".join(parts).rstrip("\n") + "\n"
