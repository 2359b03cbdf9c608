"""Calibration files: every kind of bad file is one line naming the key, exit code 2; good files validate."""

from __future__ import annotations


import pytest
import yaml

from abm.calibration import CalibrationFileError, describe_calibration, load_calibration
from abm.cli import EXIT_INPUT, EXIT_OK, main

from .helpers import ROOT, write_yaml

PRIOR = {"path": "adversary.arrivals_per_day", "dist": "uniform", "low": 1, "high": 20}


def with_prior(**changes):
    prior = dict(PRIOR)
    for key, value in changes.items():
        if value is None:
            prior.pop(key, None)
        else:
            prior[key] = value
    return [prior]


BAD = [
    ({"methd": {}}, "methd", "unknown key 'methd'; did you mean 'method'?"),
    ({"priors": []}, "priors", "at least 1 item"),
    ({"days": 0}, "days", "greater than or equal to 1"),
    ({"priors": with_prior(dist="gamma", low=None, high=None, shape=2)}, "priors[0].rate", "required for a gamma prior"),
    ({"priors": with_prior(rate=2)}, "priors[0].rate", "not a parameter of a uniform prior"),
    ({"priors": with_prior(dist="lognormal")}, "priors[0].dist", "Input should be"),
    ({"priors": with_prior(low=5, high=2)}, "priors[0]", "low < high"),
    ({"priors": with_prior(bounds=[30, 40])}, "priors[0].bounds", "hold none of the"),
    ({"priors": with_prior(path="adversary.arrivals_per_dya")}, "priors[0].path", "did you mean 'arrivals_per_day'?"),
    ({"priors": with_prior(path="stations.wharf.lanes")}, "priors[0].path", "no item named 'wharf'"),
    ({"priors": with_prior(path="adversary.attempt_chance", low=0.5, high=1.5)}, "priors[0]",
     "at the high end of the prior (1.5), in the world, adversary.attempt_chance"),
    ({"priors": with_prior(path="adversary.behaviour", multiply=True, low=0.5, high=2)}, "priors[0].path",
     "a multiplier needs numbers"),
    ({"priors": with_prior(name="crossings")}, "priors[0].name", "names a column of the results"),
    ({"priors": with_prior() + with_prior(name="again")}, "priors[1].path", "priors[0] already calibrates"),
    ({"method": {"name": "rejection", "particles": 10}}, "method.particles", "is a setting of method smc"),
    ({"method": {"name": "smc", "particles": 50, "initial_draws": 10}}, "method.initial_draws", "at least particles"),
    # Settings the method or its self-check cannot work with are refused before any run (6 summaries here).
    ({"method": {"name": "rejection", "draws": 20, "accept": 0.3}}, "method.accept",
     "keeps 6 of 20 draws, but the regression adjustment needs more than summaries + 1 (7); use accept >= 0.421"),
    ({"method": {"name": "smc", "particles": 10}}, "method.particles", "10 particles for 6 summaries; use at least 12"),
    ({"self_check": 10}, "self_check", "at least 50 pseudo-observed data sets"),
    ({"self_check": 50}, "self_check", "50 trials need more prior draws than 12; lower it or raise method.draws to 51"),
    ({"summaries": ["detections_by_stations"]}, "summaries[0]", "did you mean 'detections_by_station'?"),
    ({"observed": {"path": "nowhere"}}, "observed.path", "no run directory or folder of observed tables"),
    ({"days": 60}, "days", "runs past their last day"),
    ({"world": "missing.yaml"}, "world", "no world file"),
]


@pytest.mark.parametrize(("changes", "key", "message"), BAD, ids=[b[1] for b in BAD])
def test_bad_calibration_files_name_the_key(calibration_file, changes, key, message):
    path = calibration_file(**changes)
    with pytest.raises(CalibrationFileError) as info:
        load_calibration(path)
    text = str(info.value)
    assert "\n" not in text and text.startswith(f"{path}: ")
    assert info.value.path == key, text
    assert message in text


def test_the_records_must_name_the_worlds_stations(calibration_file, static_target, tmp_path):
    world, _, _ = static_target
    data = yaml.safe_load(world.read_text())
    data["stations"][1]["name"] = "wharf"
    data["roster"]["teams"][0]["lanes"] = {"gate": 2, "wharf": 2}
    data["boarding_points"][1]["before_station"] = "wharf"
    other = write_yaml(tmp_path / "other_world.yaml", data)
    with pytest.raises(CalibrationFileError, match=r"column 'station', data row 2 .*'quay' is not one of the world's stations: gate, wharf"):
        load_calibration(calibration_file(world=str(other)))


def test_the_command_line_checks_a_file_and_reports_bad_input_in_one_line(calibration_file, capsys):
    good = calibration_file()
    assert main(["calibrate", str(good), "--check"]) == EXIT_OK
    assert capsys.readouterr().out.startswith(f"{good}: ok (calibration")
    assert main(["calibrate", str(good)]) == EXIT_INPUT
    assert capsys.readouterr().err.strip() == (
        "undertow calibrate: --out: a calibration needs an output folder (or pass --check to only validate the file)"
    )
    bad = calibration_file(priors=with_prior(sd=1))
    assert main(["calibrate", str(bad), "--check"]) == EXIT_INPUT
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "priors[0].sd: is not a parameter of a uniform prior" in err[0]


def test_the_shipped_example_validates_against_its_agency_extract():
    example = ROOT / "worlds" / "kestrel_quay" / "calibration.yaml"
    plan = load_calibration(example)
    assert plan.observed_path.name == "observed_extract" and plan.observed_path.is_dir()
    assert plan.priors.names == ("adversary.arrivals_per_day", "adversary.adaptive.rationality", "probe_sensitivity")
    assert "3 unknowns" in describe_calibration(example) and "self-check over 100" in describe_calibration(example)
    # The multiplier scales every detection chance of the gas probe.
    theta = [10.0, 2.0, 1.1]
    changed = plan.world_for(__import__("numpy").array(theta))
    probe = next(m for m in changed["methods"] if m["name"] == "gas_probe")
    original = next(m for m in plan.world_data["methods"] if m["name"] == "gas_probe")
    assert probe["detection"] == {k: pytest.approx(v * 1.1) for k, v in original["detection"].items()}
    assert changed["adversary"]["arrivals_per_day"] == 10.0
