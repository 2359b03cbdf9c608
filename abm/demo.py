"""``undertow demo``: the whole job on the demo world, from an agency's records to a briefing.

It calibrates the shipped Kestrel Quay calibration to its agency extract,
compares the demo experiment's policies with the unknowns drawn from that
posterior, and briefs the batch. Its files are the shipped worlds' (package
data), so it runs from any folder. A demo's folder is marked (``demo.json``) so
a later demo may replace it, and nothing else is ever removed.
"""

from __future__ import annotations

import json
import shutil
import sys
from collections.abc import Callable, Sequence
from pathlib import Path

from .errors import InputError, refuse_unwritable

DEMO_EXPERIMENT = "kestrel_quay/demo_experiment.yaml"  # in the shipped worlds (abm.starter.shipped_worlds)
DEMO_CALIBRATION = "kestrel_quay/calibration.yaml"
DEMO_RECORD = "demo.json"  # marks a folder as a demo's, so a later demo may replace it


def run_demo(out: Path, resume: bool, workers: int | None, command: Sequence[str],
             report: Callable[[str], None]) -> int:
    """Run the demo's three stages into ``out``; ``report`` is told the briefing's stages. Returns failed runs."""
    from .starter import shipped_worlds

    with shipped_worlds() as worlds:
        return _stages(out, resume, workers, list(command), report, worlds / DEMO_EXPERIMENT,
                       worlds / DEMO_CALIBRATION)


def _stages(out: Path, resume: bool, workers: int | None, command: list[str], report: Callable[[str], None],
            experiment: Path, calibration_file: Path) -> int:
    """Calibrate, compare under the posterior, brief (printing each stage as it starts)."""
    from .analysis.estimator_check.cache import cached_estimates
    from .calibration.config import load_calibration
    from .calibration.run import run_calibration
    from .experiment.batch import print_warning, run_batch
    from .experiment.executors import make_executor
    from .records import write_json
    from .report.briefing import brief

    refuse_unwritable(out)
    calibration_out, batch_out = out / "calibration", out / "batch"
    plan = load_calibration(calibration_file)
    resume = resume and _is_earlier_demo_of(out, plan.digest())
    if not resume:
        _clear_previous_demo(out)
    out.mkdir(parents=True, exist_ok=True)
    write_json({"command": command, "calibration_sha256": plan.digest()}, out / DEMO_RECORD)
    print(f"undertow demo: 1/3 calibrating {plan.spec.name} to the agency extract {plan.observed_path} "
          f"({plan.setting('draws') if plan.method == 'rejection' else plan.setting('initial_draws')} candidate runs "
          f"first) -> {calibration_out}", flush=True)
    with make_executor("processes", workers) as pool:
        calibration = run_calibration(plan, calibration_out, pool, resume, command)
    print("\n".join(["", *calibration.answer_lines(), *calibration.warnings, ""]), flush=True)
    print(f"undertow demo: 2/3 comparing policies with the unknowns drawn from that posterior -> {batch_out}",
          flush=True)
    # cached_estimates adds the store's est_ columns, as undertow batch does
    result = run_batch(experiment, batch_out, "processes", workers, None, resume, command,
                       extensions=(cached_estimates,), calibration=calibration_out, on_warning=print_warning)
    print(f"{result.plan.spec.name}: {result.total - result.failed} of {result.total} runs complete "
          f"({result.ran} run now)")
    if result.failed:
        print(f"undertow demo: {result.failed} runs failed; the briefing covers the rest (errors in {batch_out})",
              file=sys.stderr)
    print("undertow demo: 3/3 writing the briefing", flush=True)
    briefing, paths = brief(batch_out, argv=["undertow", "brief", str(batch_out)], report=report)
    print(f"Briefing: {paths['html']}")
    print(f"          {paths['md']} (figures in {batch_out / 'figures'})")
    print(f"\nBottom line (model estimates, not counts). {briefing.document.bottom_line}")
    return result.failed


def recorded_command(out: Path) -> tuple[list, dict]:
    """The command an output folder was made with and its record: a demo's, a batch's or a run's."""
    for name in (DEMO_RECORD, "experiment.json", "manifest.json"):
        try:
            record = json.loads((out / name).read_text(encoding="utf-8"))
        except (OSError, ValueError):
            continue
        if isinstance(record, dict):
            return list(record.get("command") or []), record
    return [], {}


def _is_earlier_demo_of(out: Path, digest: str) -> bool:
    """True when ``out`` holds a demo of this very calibration, so its complete runs can be kept."""
    command, record = recorded_command(out)
    return command[:2] == ["undertow", "demo"] and record.get("calibration_sha256") == digest


def _clear_previous_demo(out: Path) -> None:
    """A fresh demo replaces the last demo's folder (a demo batch, or an older single-run demo), and nothing else."""
    if not out.exists():
        return
    command, _ = recorded_command(out) if out.is_dir() else ([], {})
    if command[:2] != ["undertow", "demo"]:
        raise InputError(f"{out}: exists and is not an earlier demo; choose another --out (nothing was removed)")
    shutil.rmtree(out)
