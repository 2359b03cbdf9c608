"""`undertow check` on invalid world files: exit 2, one stderr line naming file, key path and expectation.

Each invalid world is the demo world with exactly one thing broken, so a test
fails for the reason it names and not for some other problem in the file.
"""

from __future__ import annotations

import copy
import subprocess
import sys
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pytest
import yaml

from abm.cli import main

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "worlds" / "kestrel_quay" / "world.yaml"
DEMO_TEXT = DEMO.read_text(encoding="utf-8")
DEMO_DATA: dict[str, Any] = yaml.safe_load(DEMO_TEXT)
ALL_WORLDS = sorted((ROOT / "worlds").glob("**/world.yaml"))


# ---------------------------------------------------------------- helpers


def write_world(directory: Path, data: Any, name: str = "world.yaml") -> Path:
    """Dump ``data`` as YAML into ``directory`` and return the file."""
    path = directory / name
    path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return path


def write_text(directory: Path, text: str | bytes, name: str = "world.yaml") -> Path:
    """Write raw text or bytes (for files YAML-dumping cannot produce) and return the file."""
    path = directory / name
    if isinstance(text, bytes):
        path.write_bytes(text)
    else:
        path.write_text(text, encoding="utf-8")
    return path


def demo_text_with(old: str, new: str) -> str:
    """The demo file's text with one exact snippet replaced (it must occur)."""
    assert old in DEMO_TEXT, f"the demo world no longer contains {old!r}"
    return DEMO_TEXT.replace(old, new, 1)


def run_in_process(capsys: pytest.CaptureFixture[str], *paths: Path | str) -> tuple[int, str, str]:
    """Run ``undertow check`` through ``abm.cli.main``; return (exit code, stdout, stderr)."""
    code = main(["check", *map(str, paths)])
    out, err = capsys.readouterr()
    return code, out, err


def run_subprocess(*paths: Path | str) -> subprocess.CompletedProcess[str]:
    """Run ``undertow check`` as a separate interpreter, as a user would."""
    return subprocess.run(
        [sys.executable, "-m", "abm.cli", "check", *map(str, paths)],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=60,
        check=False,
    )


def assert_one_line_error(code: int, err: str, file: Path | str, key_path: str, *fragments: str) -> str:
    """Exit 2 and exactly one stderr line ``undertow check: FILE: KEY.PATH: message`` with ``fragments``."""
    assert code == 2, err
    assert "Traceback" not in err
    lines = err.splitlines()
    assert len(lines) == 1, err
    assert err.endswith("\n")
    line = lines[0]
    prefix = f"undertow check: {file}: " + (f"{key_path}: " if key_path else "")
    assert line.startswith(prefix), f"expected prefix {prefix!r} in {line!r}"
    for fragment in fragments:
        assert fragment in line, f"expected {fragment!r} in {line!r}"
    return line


# ---------------------------------------------------------------- invalid worlds built from the demo dict


@dataclass(frozen=True)
class Case:
    """One broken world: how to break the demo, the key path to blame, words the message must hold."""

    id: str
    mutate: Callable[[dict[str, Any]], Any]
    path: str
    fragments: tuple[str, ...] = field(default=())


def _rename(mapping: dict[str, Any], old: str, new: str) -> None:
    mapping[new] = mapping.pop(old)


def _move_secondary_upstream(w: dict[str, Any]) -> None:
    # manual_search moves between gate_imaging and yard_dogs: yard_dogs then refers upstream.
    secondary = w["stations"].pop(3)
    w["stations"].insert(1, secondary)


def _off_by(w: dict[str, Any], delta: float) -> None:
    w["adversary"]["static"]["band_shares"]["night"] += delta


DICT_CASES = [
    # unknown keys, with the closest valid one suggested
    Case(
        "unknown-top-key",
        lambda w: w.update(stationz=[]),
        "stationz",
        ("unknown key 'stationz'", "did you mean 'stations'"),
    ),
    Case(
        "misspelt-key-in-list-item",
        lambda w: _rename(w["stations"][2]["selection"], "fraction", "fracton"),
        "stations[2].selection.fracton",
        ("unknown key 'fracton'", "did you mean 'fraction'"),
    ),
    # a misspelt *required* key must blame the typo, not report the real key as missing
    Case(
        "misspelt-required-key",
        lambda w: _rename(w["vehicle_classes"][1], "capacity", "capacty"),
        "vehicle_classes[1].capacty",
        ("did you mean 'capacity'",),
    ),
    Case(
        "misspelt-key-in-dict-of-models",
        lambda w: _rename(w["boarding_points"][0]["stops"]["box"], "dwell_minutes", "dwell_minute"),
        "boarding_points[0].stops.box.dwell_minute",
        ("did you mean 'dwell_minutes'",),
    ),
    Case(
        "missing-key",
        lambda w: w["traffic"].pop("vehicles_per_day"),
        "traffic.vehicles_per_day",
        ("required key is missing",),
    ),
    # wrong types
    Case(
        "text-for-count",
        lambda w: w["stations"][0].update(lanes="four"),
        "stations[0].lanes",
        ("expected a number", "'four'"),
    ),
    Case(
        "bool-for-count",
        lambda w: w["stations"][0].update(lanes=True),
        "stations[0].lanes",
        ("expected a number", "true"),
    ),
    Case(
        "fraction-for-count",
        lambda w: w["stations"][0].update(lanes=2.5),
        "stations[0].lanes",
        ("valid integer", "2.5"),
    ),
    Case(
        "text-for-bool",
        lambda w: w["methods"][3].update(outdoor="perhaps"),
        "methods[3].outdoor",
        ("valid boolean", "'perhaps'"),
    ),
    Case("mapping-for-list", lambda w: w.update(stations={"a": 1}), "stations", ("valid list", "got a mapping")),
    Case("null-for-list", lambda w: w.update(stations=None), "stations", ("valid list", "got nothing (null)")),
    Case("number-for-name", lambda w: w.update(name=5), "name", ("valid string", "5")),
    Case(
        "unknown-choice",
        lambda w: w["methods"][0]["service"].update(dist="lognorm"),
        "methods[0].service.dist",
        ("'lognormal'", "got 'lognorm'"),
    ),
    Case(
        "bad-name-characters",
        lambda w: w["stations"][0].update(name="gate imaging"),
        "stations[0].name",
        ("letters, digits", "'gate imaging'"),
    ),
    Case(
        "text-key-for-int-key",
        lambda w: w["adversary"].update(group_size={"one": 1.0}),
        "adversary.group_size.one",
        ("key should be a valid integer", "'one'"),
    ),
    Case(
        "short-hour-pair",
        lambda w: w["roster"]["teams"][0].update(hours=[6]),
        "roster.teams[0].hours",
        ("too few values", "[6]"),
    ),
    Case(
        "clock-time-out-of-range",
        lambda w: w["departures"]["timetable"][0].update(first="25:00"),
        "departures.timetable[0].first",
        ("clock time 'HH:MM'", "'25:00'"),
    ),
    # probabilities outside [0, 1]
    Case(
        "fraction-above-one",
        lambda w: w["stations"][2]["selection"].update(fraction=1.5),
        "stations[2].selection.fraction",
        ("less than or equal to 1", "1.5"),
    ),
    Case(
        "share-below-zero",
        lambda w: w["boarding_points"][0]["stops"]["box"].update(share=-0.1),
        "boarding_points[0].stops.box.share",
        ("greater than or equal to 0", "-0.1"),
    ),
    Case(
        "detection-above-one",
        lambda w: w["methods"][0]["detection"].update(box=2),
        "methods[0].detection.box",
        ("less than or equal to 1",),
    ),
    # an int mapping key is a key, not a list index
    Case(
        "group-size-chance-above-one",
        lambda w: w["adversary"]["group_size"].update({1: 1.5}),
        "adversary.group_size.1",
        ("less than or equal to 1",),
    ),
    Case(
        "nan-probability",
        lambda w: w["methods"][0].update(false_alarm=float("nan")),
        "methods[0].false_alarm",
        ("finite number", "nan"),
    ),
    # negative counts and times
    Case(
        "negative-lanes",
        lambda w: w["stations"][0].update(lanes=-1),
        "stations[0].lanes",
        ("greater than or equal to 0", "-1"),
    ),
    Case(
        "negative-capacity",
        lambda w: w["departures"].update(capacity=-260),
        "departures.capacity",
        ("greater than or equal to 0", "-260"),
    ),
    Case(
        "negative-travel-time",
        lambda w: w["stations"][1].update(travel_minutes=-2),
        "stations[1].travel_minutes",
        ("greater than or equal to 0", "-2"),
    ),
    Case(
        "negative-lead-time",
        lambda w: w["boarding_points"][0].update(lead_minutes=-5),
        "boarding_points[0].lead_minutes",
        ("greater than or equal to 0",),
    ),
    Case(
        "negative-cutoff",
        lambda w: w["departures"].update(cutoff_minutes=-1),
        "departures.cutoff_minutes",
        ("greater than or equal to 0",),
    ),
    Case(
        "infinite-traffic",
        lambda w: w["traffic"].update(vehicles_per_day=float("inf")),
        "traffic.vehicles_per_day",
        ("finite number", "inf"),
    ),
    # shares that do not sum to 1
    Case("class-shares", lambda w: w["vehicle_classes"][0].update(share=0.5), "vehicle_classes", ("sum to 1", "1.1")),
    Case(
        "point-shares",
        lambda w: w["adversary"]["static"]["point_shares"].update(north_lay_by=0.5),
        "adversary.static.point_shares",
        ("sum to 1", "1.2"),
    ),
    Case(
        "band-shares-just-outside-tolerance",
        lambda w: _off_by(w, 1e-5),
        "adversary.static.band_shares",
        ("sum to 1",),
    ),
    Case(
        "depth-shares",
        lambda w: w["adversary"]["static"]["depth_shares"].update(deep=0.5),
        "adversary.static.depth_shares",
        ("sum to 1", "1.3"),
    ),
    Case(
        "group-size-shares",
        lambda w: w["adversary"]["group_size"].update({1: 0.6}),
        "adversary.group_size",
        ("sum to 1",),
    ),
    # names referenced but not defined
    Case(
        "undefined-station-in-roster",
        lambda w: w["roster"]["teams"][0]["lanes"].update(gate_imagin=1),
        "roster.teams[0].lanes.gate_imagin",
        ("not a defined station", "did you mean 'gate_imaging'"),
    ),
    Case(
        "undefined-class-in-stops",
        lambda w: w["boarding_points"][0]["stops"].update(van={"share": 0.1}),
        "boarding_points[0].stops.van",
        ("'van' is not a defined vehicle class", "curtain_sided"),
    ),
    Case(
        "undefined-class-in-detection",
        lambda w: w["methods"][0]["detection"].update(van=0.1),
        "methods[0].detection.van",
        ("not a defined vehicle class",),
    ),
    Case(
        "undefined-class-in-shares",
        lambda w: _rename(w["adversary"]["static"]["class_shares"], "box", "boxx"),
        "adversary.static.class_shares.boxx",
        ("did you mean 'box'",),
    ),
    Case(
        "undefined-depth-in-shares",
        lambda w: _rename(w["adversary"]["static"]["depth_shares"], "deep", "deeep"),
        "adversary.static.depth_shares.deeep",
        ("not a defined depth level", "did you mean 'deep'"),
    ),
    Case(
        "undefined-method",
        lambda w: w["stations"][0].update(method="xray"),
        "stations[0].method",
        ("not a defined check method",),
    ),
    Case(
        "undefined-refer-to",
        lambda w: w["stations"][0].update(refer_to="nowhere"),
        "stations[0].refer_to",
        ("'nowhere' is not a defined station",),
    ),
    Case(
        "duplicate-station-name",
        lambda w: w["stations"][1].update(name="gate_imaging"),
        "stations[1].name",
        ("defined twice",),
    ),
    # route rules
    Case(
        "refer-to-primary",
        lambda w: w["stations"][0].update(refer_to="yard_dogs"),
        "stations[0].refer_to",
        ("expected a secondary station", "'yard_dogs' has role primary"),
    ),
    Case(
        "refer-to-upstream",
        _move_secondary_upstream,
        "stations[2].refer_to",
        ("'manual_search' must lie downstream of 'yard_dogs'",),
    ),
    Case(
        "boarding-before-undefined-station",
        lambda w: w["boarding_points"][0].update(before_station="nowhere"),
        "boarding_points[0].before_station",
        ("'nowhere' is not a defined primary station", "departure"),
    ),
    Case(
        "boarding-before-secondary-station",
        lambda w: w["boarding_points"][1].update(before_station="manual_search"),
        "boarding_points[1].before_station",
        ("expected a primary station or 'departure'", "secondary"),
    ),
    Case(
        "roster-exceeds-lanes",
        lambda w: w["roster"]["teams"][0]["lanes"].update(gate_imaging=5),
        "stations[0].lanes",
        ("day_shift", "staffs 5 lanes", "has 4"),
    ),
    Case(
        "bands-overlap",
        lambda w: w["time_bands"].update(morning=[5, 12]),
        "time_bands.morning",
        ("hour 5 is already in band 'night'",),
    ),
    Case(
        "bands-leave-hour-uncovered",
        lambda w: w["time_bands"].update(morning=[7, 12]),
        "time_bands",
        ("hour 6 is in none",),
    ),
    Case(
        "departure-listed-twice",
        lambda w: w["departures"].update(services=[{"time": "09:30", "days": ["tue"]}]),
        "departures",
        ("two departures at 09:30 on tue",),
    ),
    Case(
        "departure-without-capacity",
        lambda w: (w["departures"].pop("capacity"), w["departures"]["timetable"][0].update(capacity=None)),
        "departures",
        ("needs a capacity (vehicles) or length_metres",),
    ),
    Case(
        "metres-without-class-lengths",
        lambda w: w["departures"].update(length_metres=3000),
        "vehicle_classes[0].length_metres",
        ("needs its length_metres",),
    ),
    Case(
        "former-sailings-key",
        lambda w: w["departures"].update(sailings=[{"time": "09:30", "capacity": 10}]),
        "departures.sailings",
        ("services",),
    ),
]


@pytest.mark.parametrize("case", DICT_CASES, ids=[c.id for c in DICT_CASES])
def test_broken_world_is_one_line_with_key_path(case: Case, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """Each single mutation of the demo exits 2 with one line blaming the right key."""
    data = copy.deepcopy(DEMO_DATA)
    case.mutate(data)
    path = write_world(tmp_path, data)
    code, out, err = run_in_process(capsys, path)
    assert out == ""
    assert_one_line_error(code, err, path, case.path, *case.fragments)


def test_shares_within_tolerance_are_accepted(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """A rounding error below 1e-6 is not a broken world."""
    data = copy.deepcopy(DEMO_DATA)
    _off_by(data, 1e-9)
    code, _, err = run_in_process(capsys, write_world(tmp_path, data))
    assert (code, err) == (0, "")


# ---------------------------------------------------------------- invalid files written as raw text

TAG_RUN = "!!python/object/apply:os.system"


@dataclass(frozen=True)
class TextCase:
    """A file no YAML dump can produce: its text, the key path to blame, words the message must hold."""

    id: str
    text: str | bytes
    path: str
    fragments: tuple[str, ...] = field(default=())


TEXT_CASES = [
    TextCase(
        "unclosed-bracket",
        demo_text_with("hourly_profile: [", "hourly_profile: [["),
        "",
        ("not valid YAML at line", "column"),
    ),
    TextCase("tab-indent", "name: x\n\tnote: y\n", "", ("not valid YAML at line 2", "'\\t'")),
    TextCase("two-documents", DEMO_TEXT + "---\nname: again\n", "", ("expected a single document",)),
    TextCase("empty", "", "", ("empty", "expected a mapping")),
    TextCase("comments-only", "# nothing here\n", "", ("empty",)),
    TextCase("top-level-list", "- name: a\n- name: b\n", "", ("expected a mapping of sections", "got a list")),
    TextCase("top-level-scalar", "hello\n", "", ("expected a mapping of sections", "got 'hello'")),
    TextCase(
        "duplicate-top-key",
        demo_text_with("traffic:\n", "name: again\ntraffic:\n"),
        "name",
        ("key 'name' appears twice", "lines 4 and"),
    ),
    TextCase(
        "duplicate-nested-key",
        demo_text_with("  vehicles_per_day: 3000\n", "  vehicles_per_day: 3000\n  vehicles_per_day: 10\n"),
        "traffic.vehicles_per_day",
        ("appears twice",),
    ),
    TextCase(
        "duplicate-key-in-list-item",
        demo_text_with("    lanes: 4\n    travel_minutes: 5\n", "    lanes: 4\n    lanes: 5\n    travel_minutes: 5\n"),
        "stations[1].lanes",
        ("key 'lanes' appears twice",),
    ),
    TextCase(
        "object-tag-at-top",
        f"{TAG_RUN} ['true']\n",
        "",
        ("YAML tag !!python/object/apply:os.system is not allowed", "plain data"),
    ),
    TextCase(
        "object-tag-in-value",
        demo_text_with("name: Kestrel Quay freight terminal (fictional)", f"name: {TAG_RUN} ['true']"),
        "name",
        ("YAML tag !!python/object/apply:os.system is not allowed", "line 4"),
    ),
    TextCase(
        "name-tag-in-list",
        demo_text_with("    lanes: 6\n", "    lanes: !!python/name:os.system\n"),
        "stations[3].lanes",
        ("YAML tag !!python/name:os.system is not allowed",),
    ),
    TextCase(
        "object-tag-on-key",
        f"name: x\n? {TAG_RUN} ['true']\n: 1\n",
        "",
        ("YAML tag !!python/object/apply:os.system",),
    ),
    TextCase("custom-tag", "name: !include other.yaml\n", "name", ("YAML tag !include is not allowed",)),
    TextCase(
        "unreadable-int-tag",
        demo_text_with("hazard: 0.3", "hazard: !!int ten"),
        "boarding_points[0].hazard",
        ("cannot read 'ten' as !!int",),
    ),
    TextCase(
        "unreadable-timestamp-tag",
        demo_text_with("hazard: 0.3", "hazard: !!timestamp soon"),
        "boarding_points[0].hazard",
        ("cannot read 'soon' as !!timestamp",),
    ),
    TextCase(
        "text-tag-for-number",
        demo_text_with("hazard: 0.3", "hazard: !!str 0.3"),
        "boarding_points[0].hazard",
        ("expected a number", "'0.3'"),
    ),
    TextCase("list-as-key", "? [a, b]\n: 1\n", "", ("expected a plain name as a key",)),
    # YAML 1.1 reads an unquoted 12:30 as 12*60+30 = 750 (06:30, with its leading zero, stays text).
    TextCase(
        "unquoted-sailing-time",
        demo_text_with('"23:00"', "23:00"),
        "departures.timetable[0].last",
        ("expected a quoted clock time like '23:00'", "got the number 1380"),
    ),
    TextCase(
        "unquoted-sailing-time-no-leading-zero",
        demo_text_with('first: "00:30"', "first: 9:30"),
        "departures.timetable[0].first",
        ("like '09:30'", "got the number 570"),
    ),
    TextCase("not-utf8", b"name: caf\xe9\n", "", ("not UTF-8 text", "0xe9")),
    TextCase("binary", bytes(range(256)) * 4, "", ("not UTF-8 text",)),
    TextCase("nul-byte", b"name: a\x00b\n", "", ("not valid YAML at line 1", "U+0000")),
    TextCase("nested-too-deeply", "a: " + "[" * 3000 + "]" * 3000 + "\n", "", ("nested too deeply",)),
]


@pytest.mark.parametrize("case", TEXT_CASES, ids=[c.id for c in TEXT_CASES])
def test_bad_file_is_one_line(case: TextCase, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """Files broken below the schema (syntax, encoding, tags, duplicates) exit 2 with one line."""
    path = write_text(tmp_path, case.text)
    code, out, err = run_in_process(capsys, path)
    assert out == ""
    assert_one_line_error(code, err, path, case.path, *case.fragments)


def test_file_not_found(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """A missing file is bad input, not an internal error."""
    path = tmp_path / "missing.yaml"
    code, _, err = run_in_process(capsys, path)
    assert_one_line_error(code, err, path, "", "file not found")


def test_directory_instead_of_file(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """A directory says so rather than naming an exception class."""
    code, _, err = run_in_process(capsys, tmp_path)
    assert_one_line_error(code, err, tmp_path, "", "is a directory", "expected a world YAML file")


def test_first_bad_file_of_several_is_named(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """With several files, the good ones pass and the bad one is the one named."""
    bad = write_text(tmp_path, "", "bad.yaml")
    code, out, err = run_in_process(capsys, DEMO, bad)
    assert f"{DEMO}: ok" in out
    assert_one_line_error(code, err, bad, "", "empty")


# ---------------------------------------------------------------- nothing in a file is executed


def _code_running_world(directory: Path) -> tuple[Path, list[Path]]:
    """A world whose tags would create marker files if any constructor ran them."""
    markers = [directory / "ran_os_system", directory / "ran_open", directory / "ran_new"]
    text = demo_text_with(
        "note: >-",
        f"x_system: !!python/object/apply:os.system ['touch {markers[0]}']\n"
        f"x_open: !!python/object/apply:builtins.open ['{markers[1]}', 'w']\n"
        f"x_new: !!python/object/new:pathlib.Path ['{markers[2]}']\n"
        "note: >-",
    )
    return write_text(directory, text), markers


def test_code_tags_do_not_execute(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """Tags that would run code are refused before any constructor sees them."""
    path, markers = _code_running_world(tmp_path)
    code, _, err = run_in_process(capsys, path)
    assert_one_line_error(code, err, path, "x_system", "is not allowed")
    assert not any(m.exists() for m in markers)


def test_code_tags_do_not_execute_in_subprocess(tmp_path: Path) -> None:
    """The same, through a real process: nothing appears on disk."""
    path, markers = _code_running_world(tmp_path)
    result = run_subprocess(path)
    assert_one_line_error(result.returncode, result.stderr, path, "x_system", "is not allowed")
    assert not any(m.exists() for m in markers)


def test_merge_keys_still_work(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """``<<: *anchor`` is plain YAML data: neither a forbidden tag nor a duplicate key when overridden."""
    text = demo_text_with(
        "service: {dist: lognormal, mean: 3.0, cv: 0.2}", "service: &portal {dist: lognormal, mean: 3.0, cv: 0.2}"
    ).replace("service: {dist: lognormal, mean: 4.0, cv: 0.3}", "service: {<<: *portal, mean: 4.0, cv: 0.3}", 1)
    code, out, err = run_in_process(capsys, write_text(tmp_path, text))
    assert (code, err) == (0, ""), err
    assert "ok" in out


# ---------------------------------------------------------------- a handful through a real process

SUBPROCESS_CASES = ["misspelt-key-in-list-item", "roster-exceeds-lanes"]
SUBPROCESS_TEXT_CASES = ["duplicate-nested-key", "unquoted-sailing-time", "not-utf8", "nested-too-deeply"]


@pytest.mark.parametrize("case", [c for c in DICT_CASES if c.id in SUBPROCESS_CASES], ids=SUBPROCESS_CASES)
def test_subprocess_broken_world(case: Case, tmp_path: Path) -> None:
    """The real entry point: exit 2, one stderr line, nothing on stdout."""
    data = copy.deepcopy(DEMO_DATA)
    case.mutate(data)
    path = write_world(tmp_path, data)
    result = run_subprocess(path)
    assert result.stdout == ""
    assert_one_line_error(result.returncode, result.stderr, path, case.path, *case.fragments)


@pytest.mark.parametrize(
    "case", [c for c in TEXT_CASES if c.id in SUBPROCESS_TEXT_CASES], ids=SUBPROCESS_TEXT_CASES
)
def test_subprocess_bad_file(case: TextCase, tmp_path: Path) -> None:
    """Syntax-level failures through the real entry point."""
    path = write_text(tmp_path, case.text)
    result = run_subprocess(path)
    assert result.stdout == ""
    assert_one_line_error(result.returncode, result.stderr, path, case.path, *case.fragments)


def test_subprocess_file_not_found_and_directory(tmp_path: Path) -> None:
    """Missing file and directory through the real entry point."""
    missing = tmp_path / "missing.yaml"
    result = run_subprocess(missing)
    assert_one_line_error(result.returncode, result.stderr, missing, "", "file not found")
    result = run_subprocess(tmp_path)
    assert_one_line_error(result.returncode, result.stderr, tmp_path, "", "is a directory")


# ---------------------------------------------------------------- shipped worlds are valid


def test_worlds_are_found() -> None:
    """Guard: the glob below must not silently match nothing."""
    assert DEMO in ALL_WORLDS


@pytest.mark.parametrize("world", ALL_WORLDS, ids=[str(p.relative_to(ROOT)) for p in ALL_WORLDS])
def test_shipped_world_validates(world: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """Every world under worlds/ passes ``undertow check``."""
    code, out, err = run_in_process(capsys, world)
    assert (code, err) == (0, ""), err
    assert out.startswith(f"{world}: ok")


def test_demo_world_validates_through_console_script() -> None:
    """The installed ``undertow`` script (or ``python -m abm.cli`` without one) accepts the demo."""
    script = Path(sys.executable).parent / "undertow"
    command = [str(script)] if script.exists() else [sys.executable, "-m", "abm.cli"]
    result = subprocess.run(
        [*command, "check", str(DEMO)], cwd=ROOT, capture_output=True, text=True, timeout=60, check=False
    )
    assert result.returncode == 0, result.stderr
    assert result.stderr == ""
    assert "ok" in result.stdout


@pytest.mark.parametrize("where, span", [("band", [24, 0]), ("shift", [24, 0]), ("shift", [7, 7])])
def test_hours_that_cover_nothing_are_refused_in_one_line(where: str, span: list[int], tmp_path: Path,
                                                         capsys: pytest.CaptureFixture[str]) -> None:
    # [24, 0] wraps to nothing: it used to pass validation and end in an internal error in the engine
    data = yaml.safe_load((ROOT / "worlds" / "reference" / "mmc" / "world.yaml").read_text(encoding="utf-8"))
    if where == "band":
        data["time_bands"] = {"all_day": [0, 24], "ghost": span}
        key = "time_bands.ghost"
    else:
        data["roster"]["teams"][0]["hours"] = span
        key = "roster.teams[0]"
    path = tmp_path / "world.yaml"
    path.write_text(yaml.safe_dump(data), encoding="utf-8")
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and key in err and f"{span} covers none" in err, err


def test_a_station_with_vehicles_to_check_and_no_lane_ever_is_refused(tmp_path: Path,
                                                                      capsys: pytest.CaptureFixture[str]) -> None:
    # It used to pass validation and stop the engine on day 0 ("selected a vehicle that no staffed lane can check").
    data = yaml.safe_load((ROOT / "worlds" / "reference" / "mmc" / "world.yaml").read_text(encoding="utf-8"))
    data["roster"]["teams"][0]["lanes"] = {}
    path = tmp_path / "world.yaml"
    path.write_text(yaml.safe_dump(data), encoding="utf-8")
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "stations[0]: 'only_station' will have vehicles to check but no team staffs" in err
