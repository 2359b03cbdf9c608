"""``undertow export``: a run's or a batch's tables as CSV files or one xlsx workbook.

What is exported
----------------
From a run directory (:mod:`abm.experiment.single`): every Parquet table in
it, named by where it lies (``truth_attempts``, ``observed_checks``,
``daily``, ``methods``, ...), and the run's headline figures
(``summary.json``) as the table ``summary``: one row per figure with its
value and its record set (truth or observed).

From a batch folder (:mod:`abm.experiment.store`): the batch's own tables as
they are (``summary``, ``failures``, and ``briefing_runs`` and
``estimator_check`` once a briefing was written), the design points from
``experiment.json`` (``design``), and each per-run table of every complete
run stacked into one table led by ``run_id``, ``design_point`` and
``replication``, so runs can be combined without parsing folder names. (The
summary calls the design point ``point``; in the per-run tables that name is
already the boarding point's.) A run's own ``summary.json`` is not repeated:
the batch's ``summary`` holds it.

Where it goes
-------------
``FOLDER`` (default ``DIR/export``, beside what it describes, as a briefing's
figures are) gets ``TABLE.csv`` per table, or one workbook ``DIRNAME.xlsx``
with a ``contents`` sheet and a sheet per table, and ``export.json``: what was
exported from where, and the SHA-256 of every file an export wrote there. An
export replaces only files that ``export.json`` names and that are unchanged
since; anything else in the way is refused before anything is written.
"""

from __future__ import annotations

import json
import re
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from ..errors import InputError, refuse_unwritable
from ..atomic import write_atomically
from ..records import write_json
from ..run_files import FILES_RECORD, require_whole, sha256_of
from .lock import check_unlocked
from .single import SUMMARY_SOURCES
from .store import EXPERIMENT_FILE, RUNS_DIR, SUMMARY_TABLE
from .worker import SUMMARY_FILE

FORMATS = ("csv", "xlsx")
DEFAULT_OUT = "export"
EXPORT_RECORD = "export.json"
WRITER = "undertow export"  # marks export.json as this command's own
MANIFEST = "manifest.json"
KEY_COLUMNS = ("run_id", "design_point", "replication")
CONTENTS_SHEET = "contents"
SHEET_NAME_MAX = 31  # the xlsx format's limit
SHEET_ROWS_MAX = 1_048_576  # the xlsx format's rows per sheet, the header row included
SHEET_COLUMNS_MAX = 16_384
XLSX_HINT = "pip install 'undertow[xlsx]' (or pip install openpyxl)"
# A few words per known table, for the workbook's contents sheet and export.json.
ABOUT = {
    "summary": "headline figures (one row per run in a batch); each figure is truth or observed",
    "failures": "runs that raised, with their errors",
    "design": "design points: factor values, the point each is compared with, the world changes",
    "briefing_runs": "per-run figures a briefing used",
    "estimator_check": "each estimator against the truth it targets, per run",
    "daily": "daily figures; truth_ columns are simulated truth",
    "methods": "checks per day, method and cargo; truth_ columns are simulated truth",
    "queues": "waits, queue lengths and lane use per day, hour and station (observed)",
    "queue_hours": "waits, queue lengths and lane use per station and hour of day, after the warm-up (observed)",
    "departures": "each departure: vehicles booked, left and missed, room left, delay, cancellation (observed)",
}


class ExportError(InputError):
    """A folder that cannot be exported, or an --out that cannot take the files."""


@dataclass(frozen=True)
class Part:
    """One piece of a table: a Parquet file (or a frame built here), with key values to lead its rows."""

    path: Path | None = None
    frame: pd.DataFrame | None = None
    keys: dict[str, Any] = field(default_factory=dict)

    def _file(self) -> Path:
        assert self.path is not None, "a part is a file or a frame"
        return self.path

    def columns(self) -> list[str]:
        return list(self.frame.columns) if self.frame is not None else pq.read_schema(self._file()).names

    def rows(self) -> int:
        return len(self.frame) if self.frame is not None else pq.ParquetFile(self._file()).metadata.num_rows

    def read(self, columns: Sequence[str]) -> pd.DataFrame:
        """The part's rows under the table's columns (a column this part lacks is empty)."""
        frame = self.frame if self.frame is not None else pd.read_parquet(self._file())
        body = [c for c in columns if c not in self.keys]
        frame = frame.reindex(columns=body)
        for position, (key, value) in enumerate(self.keys.items()):
            frame.insert(position, key, pd.Series([value] * len(frame), dtype=_key_dtype(value)))
        return frame


def _key_dtype(value: Any) -> str:
    return "Int64" if isinstance(value, int) or value is None else "string"


@dataclass
class Table:
    """One exported table: its name (file stem and sheet), where it came from, and its parts in order."""

    name: str
    source: str
    parts: list[Part]
    columns: list[str] = field(default_factory=list)
    rows: int = 0

    def measure(self) -> None:
        """Columns (the union over parts, key columns first) and rows, from the files' metadata alone."""
        seen: dict[str, None] = {}
        for part in self.parts:
            for column in [*part.keys, *part.columns()]:
                seen.setdefault(column, None)
        self.columns = list(seen)
        self.rows = sum(part.rows() for part in self.parts)

    def frames(self) -> Iterator[pd.DataFrame]:
        """The table part by part, so a large batch never has to fit in memory at once."""
        for part in self.parts:
            yield part.read(self.columns)

    @property
    def about(self) -> str:
        if self.name.startswith("truth_"):
            return "simulated truth: no agency holds this"
        if self.name.startswith("observed_"):
            return "what an agency would hold"
        return ABOUT.get(self.name, "")


@dataclass(frozen=True)
class Export:
    """What an export wrote."""

    out: Path
    format: str
    kind: str  # "run" or "batch"
    tables: list[Table]
    files: list[str]  # written, relative to out (export.json last)
    warnings: list[str]


# -- reading the source ---------------------------------------------------------------------
def _damaged(path: Path, exc: Exception, folder: Path, kind: str) -> ExportError:
    cure = (f"rebuild it with undertow batch EXPERIMENT --out {folder} --resume" if kind == "batch"
            else "run it again")
    return ExportError(f"{path}: damaged ({' '.join(str(exc).split())[:120]}); {cure}")


def _parquet_files(folder: Path, recursive: bool) -> dict[str, Path]:
    """Parquet files under ``folder`` by relative path, sorted; temporary (dot) names left out."""
    found = {}
    for path in sorted(folder.rglob("*.parquet") if recursive else folder.glob("*.parquet")):
        relative = path.relative_to(folder)
        if any(piece.startswith(".") for piece in relative.parts):
            continue  # a writer's temporary file, never a table
        found[relative.as_posix()] = path
    return found


def table_name(relative: str) -> str:
    """``truth/attempts.parquet`` -> ``truth_attempts``: the record set stays in the name."""
    return relative.removesuffix(".parquet").replace("/", "_")


def _read_json(path: Path, folder: Path, kind: str) -> Any:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise _damaged(path, exc, folder, kind) from None


def _run_summary(run_dir: Path) -> Table | None:
    """summary.json as a table: figure, value, source (truth or observed; blank for the days)."""
    path = run_dir / SUMMARY_FILE
    if not path.is_file():
        return None
    summary = _read_json(path, run_dir, "run")
    sources = summary.get("sources", {})
    known = ["days", "warmup_days", *SUMMARY_SOURCES]  # the order the run prints them in, then the rest
    figures = [k for k in known if k in summary] + sorted(set(summary) - set(known) - {"sources"})
    frame = pd.DataFrame({
        "figure": figures,
        "value": pd.Series([summary[k] for k in figures], dtype=object),  # whole numbers stay whole
        "source": [sources.get(k, "") for k in figures],
    })
    return Table("summary", SUMMARY_FILE, [Part(frame=frame)])


def run_tables(run_dir: Path) -> list[Table]:
    """The tables of one run directory, after checking it is whole."""
    require_whole(run_dir)
    tables = [Table(table_name(rel), rel, [Part(path)]) for rel, path in _parquet_files(run_dir, True).items()]
    summary = _run_summary(run_dir)
    return ([summary] if summary is not None else []) + tables


def _design_table(record: dict[str, Any]) -> Table:
    """The design points of experiment.json: point, factor values, compare_to and the world changes (JSON)."""
    labels = [factor["label"] for factor in record.get("factors", [])]
    rows = []
    for point in record.get("design", []):
        row: dict[str, Any] = {"point": point["point"]}
        for label in labels:
            value = point.get("values", {}).get(label)
            row[label] = value if value is None or isinstance(value, (str, int, float)) else json.dumps(value)
        row.setdefault("compare_to", point.get("compare_to"))
        row.setdefault("changes", json.dumps(point.get("changes", {}), sort_keys=True))
        rows.append(row)
    frame = pd.DataFrame(rows, columns=list(rows[0]) if rows else ["point", *labels, "compare_to", "changes"])
    if "compare_to" in frame:
        frame["compare_to"] = frame["compare_to"].astype("Int64")  # the baselines have none
    return Table("design", f"{EXPERIMENT_FILE} (design)", [Part(frame=frame)])


def _run_keys(run_dir: Path, listed: dict[str, tuple[int, int]], folder: Path) -> dict[str, Any]:
    """run_id, design_point and replication of a batch's run: from its manifest, else the summary."""
    manifest = _read_json(run_dir / MANIFEST, folder, "batch") if (run_dir / MANIFEST).is_file() else {}
    recorded = manifest.get("experiment_run") or {}
    point, replication = listed.get(run_dir.name, (None, None))
    return {
        "run_id": run_dir.name,
        "design_point": recorded.get("point", point),
        "replication": recorded.get("replication", replication),
    }


def batch_tables(folder: Path) -> tuple[list[Table], list[str]]:
    """The tables of a batch folder (the batch's own, the design, each per-run table stacked), and warnings."""
    check_unlocked(folder)  # a batch being written has no settled tables yet
    record = _read_json(folder / EXPERIMENT_FILE, folder, "batch")
    if not isinstance(record, dict):
        raise _damaged(folder / EXPERIMENT_FILE, ValueError("not a JSON object"), folder, "batch")
    own = _parquet_files(folder, False)
    order = sorted(own, key=lambda rel: (rel != SUMMARY_TABLE, rel))  # the summary first
    tables = [Table(table_name(rel), rel, [Part(own[rel])]) for rel in order]
    tables.insert(1 if SUMMARY_TABLE in own else 0, _design_table(record))
    listed: dict[str, tuple[int, int]] = {}
    warnings = []
    if SUMMARY_TABLE in own:
        try:
            summary = pd.read_parquet(own[SUMMARY_TABLE], columns=["run_id", "point", "replication"])
        except (OSError, ValueError, pa.ArrowException) as exc:
            raise _damaged(own[SUMMARY_TABLE], exc, folder, "batch") from None
        listed = {str(r): (int(p), int(q)) for r, p, q in summary.itertuples(index=False, name=None)}
    else:
        warnings.append(f"warning: {folder / SUMMARY_TABLE} is missing (the batch never finished): "
                        f"undertow batch EXPERIMENT --out {folder} --resume writes it")
    runs_dir = folder / RUNS_DIR
    run_dirs = sorted(d for d in runs_dir.iterdir() if d.is_dir() and not d.name.startswith(".")) \
        if runs_dir.is_dir() else []
    run_dirs = [d for d in run_dirs if (d / MANIFEST).is_file() or (d / FILES_RECORD).is_file()]
    missing = sorted(set(listed) - {d.name for d in run_dirs})
    if missing:  # a run the summary counts is gone: its tables would be silently short
        raise ExportError(f"{runs_dir / missing[0]}: missing, though {SUMMARY_TABLE} lists it; undertow batch "
                          f"EXPERIMENT --out {folder} --resume runs it again")
    unlisted = [d.name for d in run_dirs if d.name not in listed]
    if unlisted and listed:
        warnings.append(f"warning: {len(unlisted)} complete runs are not in {SUMMARY_TABLE} yet (first: "
                        f"{unlisted[0]}); undertow batch EXPERIMENT --out {folder} --resume brings it up to date")
    per_run: dict[str, list[Part]] = {}
    for run_dir in run_dirs:
        require_whole(run_dir)  # names the damaged file and how to redo the run
        keys = _run_keys(run_dir, listed, folder)
        for rel, path in _parquet_files(run_dir, True).items():
            per_run.setdefault(rel, []).append(Part(path, keys=keys))
    tables += [Table(table_name(rel), f"{RUNS_DIR}/*/{rel}", parts) for rel, parts in sorted(per_run.items())]
    return tables, warnings


def find_tables(folder: Path) -> tuple[str, list[Table], list[str]]:
    """What ``folder`` is ("run" or "batch"), its tables (measured, uniquely named) and warnings."""
    if not folder.exists():
        raise ExportError(f"{folder}: no such folder (DIR is a run directory from undertow run or a batch folder "
                          "from undertow batch)")
    if not folder.is_dir():
        raise ExportError(f"{folder}: is a file (DIR is a run directory from undertow run or a batch folder "
                          "from undertow batch)")
    if (folder / EXPERIMENT_FILE).is_file():
        kind, (tables, warnings) = "batch", batch_tables(folder)
    elif (folder / MANIFEST).is_file():
        kind, tables, warnings = "run", run_tables(folder), []
    else:
        raise ExportError(f"{folder}: holds no run ({MANIFEST}) and no batch ({EXPERIMENT_FILE}); DIR is a folder "
                          "written by undertow run or undertow batch")
    for table, name in zip(tables, unique_names([t.name for t in tables]), strict=True):
        table.name = name
        try:
            table.measure()
        except (OSError, ValueError, pa.ArrowException) as exc:
            bad = next((p.path for p in table.parts if p.path is not None and not _readable(p.path)), folder)
            raise _damaged(bad, exc, folder, kind) from None
    return kind, tables, warnings


def _readable(path: Path) -> bool:
    try:
        pq.read_metadata(path)
    except (OSError, ValueError, pa.ArrowException):
        return False
    return True


def unique_names(names: Sequence[str], reserved: Sequence[str] = (CONTENTS_SHEET,)) -> list[str]:
    """Names fit for a file and an xlsx sheet: safe characters, at most 31 of them, unique ignoring case.

    The same names serve CSV files and sheets, so a table is called alike in both formats.
    """
    taken = {name.casefold() for name in reserved}
    out = []
    for name in names:
        base = re.sub(r"[^A-Za-z0-9_.-]", "_", name).strip(".") or "table"
        candidate, number = base[:SHEET_NAME_MAX], 2
        while candidate.casefold() in taken:
            suffix = f"_{number}"
            candidate, number = base[: SHEET_NAME_MAX - len(suffix)] + suffix, number + 1
        taken.add(candidate.casefold())
        out.append(candidate)
    return out


# -- the output folder -------------------------------------------------------------------------
def _owned(out: Path) -> dict[str, dict[str, Any]]:
    """Files an earlier export wrote in ``out`` (name -> {"sha256", "format"}); refuses a foreign export.json."""
    path = out / EXPORT_RECORD
    if not path.exists():
        return {}
    try:
        record = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        record = None
    if not isinstance(record, dict) or record.get("written_by") != WRITER or not isinstance(record.get("files"), dict):
        raise ExportError(f"--out {out}: {EXPORT_RECORD} exists and was not written by undertow export; move it or "
                          "choose another --out (nothing was written)")
    return record["files"]


def check_out(out: Path, planned: Sequence[str]) -> dict[str, dict[str, Any]]:
    """Refuse when a file to be written exists and is not an earlier export's unchanged file; returns what is owned.

    A file recorded without a digest was being written when an earlier export stopped: it is still ours.
    """
    if out.exists() and not out.is_dir():
        raise ExportError(f"--out {out}: is a file; --out needs a folder")
    refuse_unwritable(out)
    owned = _owned(out) if out.is_dir() else {}
    for name in planned:
        path = out / name
        if not path.exists():
            continue
        if name not in owned:
            raise ExportError(f"--out {out}: {name} exists and was not written by undertow export; move it or choose "
                              "another --out (nothing was written)")
        digest = owned[name].get("sha256")
        if digest is not None and (not path.is_file() or sha256_of(path) != digest):
            raise ExportError(f"--out {out}: {name} changed since undertow export wrote it; move it or choose another "
                              "--out (nothing was written)")
    return owned


# -- writing -------------------------------------------------------------------------------------
def write_csv(table: Table, path: Path) -> None:
    """One table as UTF-8 CSV: a header row, missing values as empty fields, floats to full precision."""

    def write(tmp: Path) -> None:
        with tmp.open("w", encoding="utf-8", newline="") as handle:
            header = True
            for frame in table.frames():
                frame.to_csv(handle, index=False, header=header, lineterminator="\n")
                header = False
            if header:  # no part at all: the header alone
                pd.DataFrame(columns=table.columns).to_csv(handle, index=False, lineterminator="\n")

    write_atomically(path, write)


def _openpyxl() -> Any:
    try:
        import openpyxl
    except ImportError:
        raise ExportError(f"--format xlsx needs openpyxl: {XLSX_HINT}") from None
    return openpyxl


def _cells(sheet: Any, frame: pd.DataFrame) -> Iterator[list[Any]]:
    """Rows for openpyxl: missing values as empty cells, text always text."""
    from openpyxl.cell import WriteOnlyCell
    from openpyxl.cell.cell import ILLEGAL_CHARACTERS_RE

    plain = frame.astype(object).where(frame.notna(), None)  # NaN is no value a spreadsheet cell can hold

    def cell(value: Any) -> Any:
        if not isinstance(value, str):
            return value
        value = ILLEGAL_CHARACTERS_RE.sub("", value)
        if value.startswith("="):  # text, never a formula: data must not run in someone's spreadsheet
            text = WriteOnlyCell(sheet, value=value)
            text.data_type = "s"
            return text
        return value

    for row in plain.itertuples(index=False, name=None):
        yield [cell(value) for value in row]


def write_xlsx(tables: Sequence[Table], path: Path, source: Path) -> None:
    """One workbook: a contents sheet, then a sheet per table (streamed, so memory stays flat)."""
    openpyxl = _openpyxl()

    def write(tmp: Path) -> None:
        book = openpyxl.Workbook(write_only=True)
        contents = book.create_sheet(CONTENTS_SHEET)
        contents.append(["sheet", "rows", "columns", "source", "about"])
        for table in tables:
            contents.append([table.name, table.rows, len(table.columns), f"{source}/{table.source}", table.about])
        for table in tables:
            sheet = book.create_sheet(table.name)
            sheet.append(table.columns)
            for frame in table.frames():
                for row in _cells(sheet, frame):
                    sheet.append(row)
        book.save(tmp)

    write_atomically(path, write)


def _too_big_for_a_sheet(tables: Sequence[Table]) -> None:
    for table in tables:
        if table.rows + 1 > SHEET_ROWS_MAX or len(table.columns) > SHEET_COLUMNS_MAX:
            raise ExportError(f"--format xlsx: table {table.name} has {table.rows:,} rows and {len(table.columns):,} "
                              f"columns, more than an xlsx sheet holds ({SHEET_ROWS_MAX - 1:,} rows, "
                              f"{SHEET_COLUMNS_MAX:,} columns); use --format csv")


def workbook_name(folder: Path) -> str:
    """The workbook is named after the folder it describes, so it says what it is once sent on."""
    return f"{unique_names([folder.resolve().name], reserved=())[0]}.xlsx"


def export(
    folder: str | Path,
    fmt: str = "csv",
    out: str | Path | None = None,
    command: Sequence[str] = (),
    show_progress: bool | None = None,
) -> Export:
    """Export every table of a run directory or batch folder to ``out`` (default ``folder/export``).

    Everything is checked before the first file is written: the source (whole runs, no live writer), the
    format (openpyxl, sheet limits) and the target files (only an earlier export's unchanged files are replaced).
    """
    if fmt not in FORMATS:
        raise ExportError(f"--format {fmt}: expected one of {', '.join(FORMATS)}")
    if fmt == "xlsx":
        _openpyxl()
    folder = Path(folder)
    target = Path(out) if out is not None else folder / DEFAULT_OUT
    kind, tables, warnings = find_tables(folder)
    if fmt == "xlsx":
        _too_big_for_a_sheet(tables)
        planned = [workbook_name(folder)]
    else:
        planned = [f"{table.name}.csv" for table in tables]
    owned = check_out(target, planned)  # export.json itself: _owned refuses one not ours
    # export.json names the files before they are written: an export cut short leaves them ours to replace
    files = {**owned, **{name: {"sha256": None, "format": fmt} for name in planned}}
    record = {"written_by": WRITER, "source": str(folder.resolve()), "kind": kind, "format": fmt,
              "command": list(command), "tables": [], "files": files}
    target.mkdir(parents=True, exist_ok=True)
    write_json(record, target / EXPORT_RECORD)
    _write(tables, fmt, target, planned, folder, show_progress)
    for name in planned:
        files[name] = {"sha256": sha256_of(target / name), "format": fmt}
    _drop_stale(target, files, owned, planned, fmt)
    record["tables"] = [_describe(table, planned[i] if fmt == "csv" else planned[0], fmt)
                        for i, table in enumerate(tables)]
    write_json(record, target / EXPORT_RECORD)
    return Export(target, fmt, kind, tables, [*planned, EXPORT_RECORD], warnings)


def _write(tables: Sequence[Table], fmt: str, target: Path, planned: Sequence[str], folder: Path,
           show_progress: bool | None) -> None:
    from ..progress import progress

    if fmt == "xlsx":
        write_xlsx(tables, target / planned[0], folder)
        return
    parts = sum(len(table.parts) for table in tables)
    # a bar only when there is enough to wait for: a single run's few tables take a moment
    show = show_progress if show_progress is not None else (None if parts > 200 else False)
    with progress(len(tables), "tables", "export", show=show) as bar:
        for table, name in zip(tables, planned, strict=True):
            write_csv(table, target / name)
            bar.update(1)


def _drop_stale(target: Path, files: dict[str, dict[str, Any]], owned: dict[str, dict[str, Any]],
                planned: Sequence[str], fmt: str) -> None:
    """Remove an earlier export's files of this format that this one did not rewrite (a table since gone), when
    unchanged since: left, they would pass for this export's. A changed one is no longer ours and stays."""
    for name, entry in owned.items():
        if name in planned or entry.get("format") != fmt:
            continue
        path = target / name
        if path.is_file() and entry.get("sha256") in (None, sha256_of(path)):
            path.unlink()
        files.pop(name, None)


def _describe(table: Table, file: str, fmt: str) -> dict[str, Any]:
    where = {"file": file} if fmt == "csv" else {"file": file, "sheet": table.name}
    return {"name": table.name, **where, "source": table.source, "rows": table.rows,
            "columns": table.columns, "about": table.about}


def export_command(folder: str, fmt: str, out: str | None, command: Sequence[str],
                   warn: Callable[[str], None]) -> Export:
    """``undertow export``: export, then lead with the answer in plain words."""
    result = export(folder, fmt, out, command)
    for warning in result.warnings:
        warn(warning)
    written = result.out / result.files[0]
    if fmt == "xlsx":
        print(f"Wrote {len(result.tables)} tables to {written} (a sheet each, after a contents sheet)")
    else:
        print(f"Wrote {len(result.tables)} tables ({len(result.tables)} CSV files) to {result.out}")
    width = max((len(t.name) for t in result.tables), default=0) + 2
    for table in result.tables:
        print(f"  {table.name:<{width}}{table.rows:>12,} rows  from {table.source}")
    print(f"  what was exported from where: {result.out / EXPORT_RECORD}")
    print("  (truth_ tables are simulated ground truth; observed_ tables are what an agency would hold. "
          "Model estimates, not counts.)")
    return result
