"""An agency's own extract (CSV or Parquet tables) reads as the run it came from; every bad extract is one line.

A real run of the demo world is written out as an extract. (a) The CSV extract, the Parquet extract and
the run directory give the same tables, the same `undertow estimate` files and the same calibration
summaries. (b) Each kind of bad extract gives one ObservedRecordsError line naming the file, the column
and the first bad data row (counted from 1 below the header), exit code 2 from `undertow estimate`,
and nothing written. CSV as in RFC 4180 (header row, comma separated); that an agency's extract has one
header row and one file per table is common practice, no source.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

from abm.calibration import CalibrationFileError, load_calibration
from abm.calibration.summaries import SUMMARY_GROUPS, SummarySpec
from abm.calibration.target import load_target
from abm.cli import EXIT_INPUT, EXIT_OK, main
from abm.errors import InputError
from abm.experiment.single import run_to_directory
from abm.observed import OBSERVED_COLUMNS, ObservedRecordsError, RecordNames, read_observed, read_records
from abm.world import file_hash, load_world

Tables = dict[str, pd.DataFrame]  # an extract's tables by name

WORLD = Path(__file__).resolve().parents[1] / "worlds" / "kestrel_quay" / "world.yaml"
DAYS = 14  # long enough for repeat encounters, interdictions and false alarms


@pytest.fixture(scope="module")
def run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A two-week run of the demo world (seed 3)."""
    out = tmp_path_factory.mktemp("extract-run") / "run"
    run_to_directory(load_world(WORLD), file_hash(WORLD), DAYS, 3, out)
    return out


@pytest.fixture(scope="module")
def names() -> RecordNames:
    return RecordNames.of_world(load_world(WORLD))


def write_extract(run: Path, folder: Path, suffix: str, tables: tuple[str, ...] = tuple(OBSERVED_COLUMNS)) -> Path:
    """The run's observed tables written as an extract: one .csv or .parquet file per table."""
    folder.mkdir(parents=True, exist_ok=True)
    for name, frame in read_observed(run).items():
        if name in tables:
            path = folder / f"{name}{suffix}"
            frame.to_csv(path, index=False) if suffix == ".csv" else frame.to_parquet(path)
    return folder


def folder_state(folder: Path) -> dict[str, bytes]:
    """Every file under ``folder`` and its bytes (to show that nothing was written)."""
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


# -- (a) one extract, three forms, the same results -----------------------------------------


def test_the_run_has_what_the_checks_need(run):
    tables = read_observed(run)
    encounters = tables["encounters"]
    assert {"detection", "interdiction"} <= set(encounters["kind"])
    assert (encounters["person_ref"] == "").any() and (encounters["person_ref"] != "").any()
    assert len(tables["false_alarms"]) > 5 and len(tables["checks"]) > 5


def test_names_come_from_the_world():
    world = load_world(WORLD)
    names = RecordNames.of_world(world)
    assert names.stations == tuple(world.station_names) and names.methods == tuple(world.method_names)
    assert names.vehicle_classes == tuple(world.class_names) and names.boarding_points == tuple(world.point_names)


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_an_extract_reads_as_the_run(tmp_path, run, names, suffix):
    extract = write_extract(run, tmp_path / "extract", suffix)
    before = folder_state(extract)
    tables = read_records(extract, names)
    expected = read_records(run, names)
    for name in OBSERVED_COLUMNS:
        pd.testing.assert_frame_equal(tables[name], expected[name])
        assert dict(tables[name].dtypes.astype(str)) == dict(expected[name].dtypes.astype(str))
    # Empty text stays "" (not NaN), and whole numbers stay int64.
    assert (tables["encounters"]["person_ref"] == "").any() and not tables["encounters"]["person_ref"].isna().any()
    assert tables["checks"]["vehicles"].dtype == np.int64
    assert folder_state(extract) == before  # the reader writes nothing


def test_false_alarms_may_be_left_out(tmp_path, run):
    extract = write_extract(run, tmp_path, ".csv", ("stations", "checks", "encounters"))
    false_alarms = read_records(extract)["false_alarms"]
    assert false_alarms.empty and list(false_alarms.columns) == list(OBSERVED_COLUMNS["false_alarms"])


def test_estimates_are_the_same_from_a_csv_extract_and_the_run(tmp_path, run):
    extract = write_extract(run, tmp_path / "extract", ".csv")
    before = folder_state(extract)
    options = ["--window", f"2:{DAYS - 1}", "--seed", "7", "--sensitivity", "gate_imaging=8,2"]
    assert main(["estimate", str(run), "--out", str(tmp_path / "from_run"), *options]) == EXIT_OK
    assert main(["estimate", str(extract), "--out", str(tmp_path / "from_csv"), *options]) == EXIT_OK
    assert folder_state(extract) == before  # with --out nothing goes into the extract
    stem = f"estimates_days_2-{DAYS - 1}"
    for name in (f"{stem}.csv", f"{stem}.json"):  # the files hold no paths, so they compare whole
        assert (tmp_path / "from_csv" / name).read_bytes() == (tmp_path / "from_run" / name).read_bytes()
    assert json.loads((tmp_path / "from_csv" / f"{stem}.json").read_text())["estimates"]


def test_calibration_summaries_are_the_same_from_a_csv_extract_and_the_run(tmp_path, run, names):
    extract = write_extract(run, tmp_path, ".csv")
    spec = SummarySpec(tuple(SUMMARY_GROUPS), DAYS - 2, names.stations, names.boarding_points)
    from_csv, from_run = spec.compute(load_target(extract, names), 1), spec.compute(read_observed(run), 1)
    np.testing.assert_array_equal(from_csv, from_run)


def calibration_file(folder: Path, observed: Path) -> Path:
    """A calibration of the demo world's inflow to ``observed`` (only validated here, never run)."""
    data = {
        "kind": "calibration",
        "name": "extract check (test)",
        "world": str(WORLD),
        "observed": {"path": str(observed), "first_day": 0},
        "days": DAYS,
        "seed": 5,
        "summaries": ["detections_by_station"],
        "priors": [{"path": "adversary.arrivals_per_day", "dist": "uniform", "low": 1, "high": 30}],
        "method": {"name": "rejection", "draws": 12, "accept": 0.5, "regression": False},
        "self_check": 0,
    }
    path = folder / "calibration.yaml"
    path.write_text(yaml.safe_dump(data), encoding="utf-8")
    return path


def test_a_calibration_checks_the_extract_against_its_world(tmp_path, run):
    extract = write_extract(run, tmp_path / "extract", ".csv")
    assert load_calibration(calibration_file(tmp_path, extract)).observed.size
    checks = pd.read_csv(extract / "checks.csv", dtype=str, keep_default_na=False)
    checks.loc[2, "vehicle_class"] = "cargo_bike"  # not a class of the demo world
    checks.to_csv(extract / "checks.csv", index=False)
    expected = r"observed\.path.*column 'vehicle_class', data row 3 .*'cargo_bike'"
    with pytest.raises(CalibrationFileError, match=expected):
        load_calibration(calibration_file(tmp_path, extract))


# -- (b) every bad extract: one line naming file, column and row ----------------------------



def first_row(frame: pd.DataFrame, mask: pd.Series) -> int:
    """The index of the first row where ``mask`` holds (the cases below pick their rows from the data)."""
    return int(np.flatnonzero(mask.to_numpy())[0])


def set_cell(
    table: str,
    column: str,
    value: str | Callable[[pd.DataFrame, int], str],
    row: Callable[[pd.DataFrame], int] | int = 4,
) -> Callable[[Tables], int]:
    """A change that writes ``value`` into one cell; returns the data row (from 1) it changed."""

    def change(tables: Tables) -> int:
        frame = tables[table]
        index = row(frame) if callable(row) else row
        frame.loc[index, column] = value(frame, index) if callable(value) else value
        return index + 1

    return change


def interdiction(frame: pd.DataFrame) -> int:
    return first_row(frame, frame["kind"] == "interdiction")


def detection(frame: pd.DataFrame) -> int:
    return first_row(frame, frame["kind"] == "detection")


def plus_one(column: str) -> Callable[[pd.DataFrame, int], str]:
    return lambda frame, index: str(int(frame.loc[index, column]) + 1)


def busy_row(frame: pd.DataFrame) -> int:
    """A checks row where something was checked and an alarm could exceed it only by one."""
    return first_row(frame, frame["checks"].astype(int) > 0)


# (case, table, change, column, needs the world's names, what the message says); column None: whole file or table
BAD = [
    ("missing table", "checks", None, None, False, "no observed table 'checks' (checks.csv or checks.parquet)"),
    ("missing column", "checks", "drop:vehicles", "vehicles", False, "no column 'vehicles'"),
    ("text in an integer column", "checks", set_cell("checks", "vehicles", "many"), "vehicles", False,
     "'many' is not a whole number"),
    ("decimal in an integer column", "checks", set_cell("checks", "vehicles", "3.5"), "vehicles", False,
     "'3.5' is not a whole number"),
    ("text in a number column", "encounters", set_cell("encounters", "minute", "noon"), "minute", False,
     "'noon' is not a number"),
    ("unknown station", "checks", set_cell("checks", "station", "north_gate"), "station", True,
     "'north_gate' is not one of the world's stations"),
    ("unknown vehicle class", "false_alarms", set_cell("false_alarms", "vehicle_class", "cargo_bike"), "vehicle_class",
     True, "'cargo_bike' is not one of the world's vehicle classes"),
    ("unknown boarding point", "encounters", set_cell("encounters", "place", "east_ramp", interdiction), "place", True,
     "'east_ramp' is not one of the world's boarding points"),
    ("unknown method", "stations", set_cell("stations", "method", "heat_camera", 1), "method", True,
     "'heat_camera' is not one of the world's methods"),
    ("checks out of day order", "checks", "order:day", "day", False, "comes after day 1"),
    ("false alarms out of day order", "false_alarms", "order:day", "day", False, "comes after day 1"),
    ("negative vehicles", "checks", set_cell("checks", "vehicles", "-1"), "vehicles", False, "-1 is negative"),
    ("negative alarms", "checks", set_cell("checks", "alarms", "-2"), "alarms", False, "-2 is negative"),
    ("negative day", "false_alarms", set_cell("false_alarms", "day", "-1", 0), "day", False, "-1 is negative"),
    ("negative minute", "encounters", set_cell("encounters", "minute", "-5"), "minute", False, "-5.0 is negative"),
    ("negative position", "stations", set_cell("stations", "position", "-1", 2), "position", False, "-1 is negative"),
    ("negative hour", "checks", set_cell("checks", "hour", "-3"), "hour", False, "-3 is negative"),
    ("hour past 23", "checks", set_cell("checks", "hour", "24"), "hour", False,
     "24 is not an hour of the day (0 to 23)"),
    ("more checks than vehicles", "checks", set_cell("checks", "checks", plus_one("vehicles")), "checks", False,
     "is more than the row's vehicles"),
    ("more alarms than checks", "checks", set_cell("checks", "alarms", plus_one("checks"), busy_row), "alarms", False,
     "is more than the row's checks"),
    ("unknown kind", "encounters", set_cell("encounters", "kind", "arrest", detection), "kind", False,
     "'arrest' is not one of detection, interdiction"),
    ("unknown place kind", "encounters", set_cell("encounters", "place_kind", "vehicle", detection), "place_kind",
     False, "'vehicle' is not one of station, boarding_point"),
    ("unknown role", "stations", set_cell("stations", "role", "tertiary", 0), "role", False,
     "'tertiary' is not one of primary, secondary"),
    ("missing station", "checks", set_cell("checks", "station", ""), "station", False,
     "empty, but a value is required"),
    ("missing day", "checks", set_cell("checks", "day", ""), "day", False, "empty, but a value is required"),
    ("missing minute", "false_alarms", set_cell("false_alarms", "minute", ""), "minute", False,
     "empty, but a value is required"),
    ("missing method of a detection", "encounters", set_cell("encounters", "method", "", detection), "method", False,
     "empty, but a value is required"),
]


def spoil(tables: Tables, table: str, change: object) -> int | None:
    """Apply one case's change to the text tables; the data row (from 1) expected in the message, if any."""
    if change is None:
        del tables[table]
        return None
    if callable(change):
        return change(tables)
    action, _, column = str(change).partition(":")
    frame = tables[table]
    if action == "drop":
        tables[table] = frame.drop(columns=column)
        return None
    # order: the row before the fourth gets a value above every other, so the fourth data row is out of order
    frame.loc[2, column] = str(int(frame[column].astype(int).max()) + 1)
    return 4


@pytest.fixture
def bad_extract(tmp_path, run) -> Callable[[str, object], tuple[Path, int | None]]:
    """Write the run as a CSV extract with one case's change; the folder and the expected data row."""

    def make(table: str, change: object) -> tuple[Path, int | None]:
        folder = tmp_path / "extract"
        folder.mkdir()
        tables = {name: frame.astype(str).replace("<NA>", "") for name, frame in read_observed(run).items()}
        expected_row = spoil(tables, table, change)
        for name, frame in tables.items():
            frame.to_csv(folder / f"{name}.csv", index=False)
        return folder, expected_row

    return make


def assert_names_the_fault(message: str, folder: Path, table: str, column: str | None, row: int | None, says: str):
    assert "\n" not in message.strip()
    assert str(folder / (f"{table}.csv" if column else "")).rstrip("/") in message
    if column is not None:
        assert f"column '{column}'" in message
    if row is not None:
        assert f"data row {row} (first data row = 1)" in message
    assert says in message


@pytest.mark.parametrize(("case", "table", "change", "column", "needs_names", "says"), BAD, ids=[c[0] for c in BAD])
def test_the_reader_names_file_column_and_row(bad_extract, names, case, table, change, column, needs_names, says):
    folder, row = bad_extract(table, change)
    before = folder_state(folder)
    with pytest.raises(InputError) as info:
        read_records(folder, names)
    assert isinstance(info.value, ObservedRecordsError)
    assert_names_the_fault(str(info.value), folder, table, column, row, says)
    assert folder_state(folder) == before


WITHOUT_NAMES = [case for case in BAD if not case[4]]  # the estimators have no world to check names against


@pytest.mark.parametrize(
    ("case", "table", "change", "column", "needs_names", "says"), WITHOUT_NAMES, ids=[c[0] for c in WITHOUT_NAMES]
)
def test_estimate_reports_a_bad_extract_in_one_line(
    tmp_path, capsys, bad_extract, case, table, change, column, needs_names, says
):
    folder, row = bad_extract(table, change)
    before = folder_state(folder)
    out = tmp_path / "estimates"
    assert main(["estimate", str(folder), "--out", str(out)]) == EXIT_INPUT
    err = capsys.readouterr().err
    assert err.startswith("undertow estimate: ") and err.count("\n") == 1
    assert_names_the_fault(err, folder, table, column, row, says)
    assert not out.exists() and folder_state(folder) == before
    assert main(["estimate", str(folder)]) == EXIT_INPUT  # without --out, still nothing in the extract
    assert folder_state(folder) == before


def test_names_are_checked_only_when_given(bad_extract):
    folder, _ = bad_extract("checks", set_cell("checks", "station", "north_gate"))
    assert (read_records(folder)["checks"]["station"] == "north_gate").any()


def test_a_parquet_column_of_decimals_in_an_integer_column_is_a_type_error(tmp_path, run):
    extract = write_extract(run, tmp_path, ".parquet")
    checks = pd.read_parquet(extract / "checks.parquet")
    vehicles = checks["vehicles"].astype("float64")
    vehicles.iloc[5] = 3.5
    checks.assign(vehicles=vehicles).to_parquet(extract / "checks.parquet")
    expected = r"checks\.parquet: column 'vehicles', data row 1 .*'\d+\.0' is not a whole number"
    with pytest.raises(ObservedRecordsError, match=expected):
        read_records(extract)


def test_one_table_in_two_forms_is_refused(tmp_path, run):
    extract = write_extract(run, tmp_path, ".csv")
    read_observed(run)["checks"].to_parquet(extract / "checks.parquet")
    with pytest.raises(ObservedRecordsError, match="both checks.csv and checks.parquet; keep one"):
        read_records(extract)


def test_an_unreadable_file_is_one_line(tmp_path, run):
    extract = write_extract(run, tmp_path, ".csv")
    (extract / "stations.csv").write_bytes(b"\xff\xfe\x00bad")
    with pytest.raises(ObservedRecordsError, match=r"stations\.csv: cannot be read as csv") as info:
        read_records(extract)
    assert "\n" not in str(info.value)


def test_the_documented_example_extract_reads(tmp_path, names):
    page = (Path(__file__).resolve().parents[1] / "docs" / "observed_records.md").read_text(encoding="utf-8")
    example = page.split("## A small example extract")[1]
    for name in OBSERVED_COLUMNS:
        block = example.split(f"`{name}.csv`")[1].split("```")[1]
        (tmp_path / f"{name}.csv").write_text(block.lstrip("\n"), encoding="utf-8")
    tables = read_records(tmp_path, names)
    assert len(tables["encounters"]) == 6 and tables["encounters"]["referred_by"].tolist()[3] == "yard_dogs"
