"""The calibration reads only the observed part of the records it is fitted to.

Two guards, as for the estimators (tests/estimate/test_firewall.py): the module that loads the target
imports nothing from the package but the observed-record schema and the error type (so never
abm.records.read_truth), and the summary statistics import nothing of the package at all; and a
calibration runs on a target whose truth/ folder (and every other file but observed/) is gone
(tests/calibration/test_model_calibration.py runs every calibration that way).
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import abm.calibration
from abm.calibration.summaries import SummarySpec
from abm.calibration.target import load_target
from abm.observed import ObservedRecordsError, read_observed

PACKAGE = Path(abm.calibration.__file__).parent


def abm_imports(path: Path) -> list[str]:
    """Absolute names of what a module of abm.calibration imports from abm (relative imports resolved)."""
    package = ["abm", "calibration"]
    if path.is_relative_to(PACKAGE):  # a module of a subpackage (abm.calibration.abc); a probe elsewhere is top level
        package += list(path.parent.relative_to(PACKAGE).parts)
    names = []
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            names += [alias.name for alias in node.names if alias.name.startswith("abm")]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                stem = ".".join(package[: len(package) + 1 - node.level] + ([node.module] if node.module else []))
            else:
                stem = node.module or ""
            if stem == "abm" or stem.startswith("abm."):
                names += [f"{stem}.{alias.name}" for alias in node.names]
    return names


def names_used(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    words = {n.id for n in ast.walk(tree) if isinstance(n, ast.Name)}
    words |= {n.attr for n in ast.walk(tree) if isinstance(n, ast.Attribute)}
    words |= {a.name.rpartition(".")[2] for n in ast.walk(tree) if isinstance(n, (ast.Import, ast.ImportFrom)) for a in n.names}
    return words


def test_the_target_loader_imports_only_the_observed_schema():
    imports = abm_imports(PACKAGE / "target.py")
    assert imports, "the loader imports the observed schema"
    assert all(re.match(r"^abm\.(observed|errors)\.", name) for name in imports), imports
    assert "read_truth" not in names_used(PACKAGE / "target.py")
    assert "TRUTH_DIR" not in names_used(PACKAGE / "target.py")


def test_the_summaries_import_nothing_of_the_model_or_the_records():
    assert all(name.startswith("abm.errors.") for name in abm_imports(PACKAGE / "summaries.py"))


def test_the_checker_resolves_relative_imports(tmp_path):
    probe = tmp_path / "probe.py"  # read as if it were a module of abm.calibration
    probe.write_text("from ..records import read_truth\nfrom . import abc\nimport abm.model\n", encoding="utf-8")
    assert abm_imports(probe) == ["abm.records.read_truth", "abm.calibration.abc", "abm.model"]


def test_a_target_without_truth_loads_and_matches_the_run(static_target):
    _, target, _ = static_target
    tables = load_target(target)
    assert set(tables) == {"stations", "checks", "encounters", "false_alarms"}
    pd.testing.assert_frame_equal(tables["encounters"], read_observed(target)["encounters"])


def test_a_folder_of_csv_tables_gives_the_same_summaries(tmp_path, static_target):
    _, target, _ = static_target
    observed = read_observed(target)
    for name in ("stations", "checks", "encounters"):  # false_alarms may be left out
        observed[name].to_csv(tmp_path / f"{name}.csv", index=False)
    tables = load_target(tmp_path)
    assert tables["false_alarms"].empty
    spec = SummarySpec(("detections_by_station_week", "checks_by_station", "repeat_frequencies"), 28, ("gate", "quay"), ())
    np.testing.assert_array_equal(spec.compute(tables, 7), spec.compute(observed, 7))


def test_a_folder_without_the_tables_is_refused(tmp_path):
    with pytest.raises(ObservedRecordsError, match="no observed table 'stations'"):
        load_target(tmp_path)
    with pytest.raises(ObservedRecordsError, match="no run directory"):
        load_target(tmp_path / "nowhere")


def test_the_self_check_and_rejection_see_no_records_at_all():
    # The self-check's pseudo-observed data are rows of the reference table: summaries the candidate runs'
    # observed tables gave (simulator.py reads them through abm.observed.conform) and the candidate runs' own
    # latent truth. The modules that fit them import neither records nor the model.
    for module in ("self_check.py", *sorted(str(p.relative_to(PACKAGE)) for p in (PACKAGE / "abc").glob("*.py"))):
        imports = abm_imports(PACKAGE / module)
        assert not [n for n in imports if re.match(r"^abm\.(records|model|port|agents)\b", n)], (module, imports)
        assert "read_truth" not in names_used(PACKAGE / module)
    simulator = abm_imports(PACKAGE / "simulator.py")
    assert "abm.observed.conform" in simulator and not any(n.startswith("abm.records.read_truth") for n in simulator)
