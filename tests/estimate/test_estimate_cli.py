"""`undertow estimate RUN_DIR`: table printed, estimates.csv and estimates.json written, bad input in one line."""

import json

import pandas as pd

from abm.cli import main
from abm.observed import OBSERVED_DIR, conform, empty_table

from .synthetic import checks_table, encounters_from_frequencies, stations_table


def write_run(run_dir):
    encounters = encounters_from_frequencies([30, 9, 3], days=6)
    encounters["place"] = ["gate"] * 27 + ["yard"] * 18 + ["checkin"] * 12  # 57 encounters
    tables = {
        "stations": stations_table(),
        "checks": checks_table([{"station": s, "vehicles": 500, "checks": 100} for s in ("gate", "yard", "checkin")]),
        "encounters": encounters,
        "false_alarms": empty_table("false_alarms"),
    }
    folder = run_dir / OBSERVED_DIR
    folder.mkdir(parents=True)
    for name, frame in tables.items():
        conform(name, frame).to_parquet(folder / f"{name}.parquet")


def test_estimate_writes_files_and_prints_the_table(tmp_path, capsys):
    write_run(tmp_path)
    code = main(["estimate", str(tmp_path), "--window", "1:6", "--level", "0.8", "--sensitivity", "gate=8,2"])
    out = capsys.readouterr().out
    assert code == 0
    assert "Chao (1987) lower bound" in out and "80% interval" in out and "cannot run:" in out
    frame = pd.read_csv(tmp_path / "estimates_days_1-6.csv")  # a window's estimates keep their own files
    assert "Zippin (1956) removal MLE" in set(frame["method"])
    assert (frame["level"] == 0.8).all() and (frame["window_start"] == 1).all()
    document = json.loads((tmp_path / "estimates_days_1-6.json").read_text())
    assert document["window"] == [1, 6] and document["level"] == 0.8
    assert len(document["estimates"]) == len(frame)
    failed = {item["method"] for item in document["cannot_run"]}
    assert "Expansion by selection share and sensitivity at 'yard'" in failed
    assert "Expansion by selection share and sensitivity at 'gate'" not in failed
    assert not list(tmp_path.glob(".*.tmp"))  # no temporary file left behind


def test_run_directory_without_observed_records(tmp_path, capsys):
    code = main(["estimate", str(tmp_path)])
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and err.startswith("undertow estimate: ") and "observed" in err


def test_bad_window_is_one_line(tmp_path, capsys):
    write_run(tmp_path)
    assert main(["estimate", str(tmp_path), "--window", "6-1"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "--window must be START:END" in err


def test_estimate_refuses_what_the_records_do_not_hold(tmp_path, capsys):
    write_run(tmp_path)
    for options, needle in (
        (["--sensitivity", "nowhere=8,2"], "--sensitivity nowhere: no station or check method of that name"),
        (["--sensitivity", "gate=inf,2"], "finite a, b > 0"),
        (["--sensitivity", "gate=nan,2"], "finite a, b > 0"),
        (["--window", "1:400"], "ends after the records' last day"),
        (["--window", "300:400"], "the records hold days"),
    ):
        assert main(["estimate", str(tmp_path), *options]) == 2
        err = capsys.readouterr().err.strip()
        assert needle in err and "\n" not in err, err
    assert not list(tmp_path.glob("estimates*"))  # nothing written


def test_estimate_says_what_each_estimate_answers_and_what_none_can_see(tmp_path, capsys):
    write_run(tmp_path)
    assert main(["estimate", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    assert "What these estimates answer:" in out
    assert "how many distinct identifiable persons at risk: Chao (1987) lower bound" in out
    assert "No record can see people who board after the last check" in out
