"""Run a calibration file: ABC over the port model through the batch executors, into a store folder.

:func:`calibrate` validates the file (:func:`abm.calibration.config.load_calibration`),
opens the store (new, or resumed), runs the method, then the posterior
predictive runs, and writes the tables, the text summary and the figures.
:func:`calibrate_command` is ``undertow calibrate``.
"""

from __future__ import annotations

import sys
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from ..errors import InputError, refuse_unwritable
from ..experiment.budget import SHOWN_VEHICLE_DAYS
from ..experiment.executors import Executor, Placement, make_executor
from ..atomic import write_atomically
from ..records import write_json, write_parquet
from .abc.posterior import ABCPosterior
from .abc.predictive import PredictiveCheck, predictive_check
from .abc.smc import abc_smc
from .config import LATENT, LATENT_MEANING, CalibrationPlan, describe_calibration, load_calibration
from .figures import write_figures
from .priors import PriorSet
from .abc.rejection import kept_count, posterior_of, rejection_abc
from .self_check import SelfCheck, cross_validate, reliability_warnings
from .simulator import CalibrationStore, ModelSimulator

SELF_CHECK_TABLE = "self_check.parquet"
RELIABILITY_FILE = "reliability.json"  # what a briefing needs beside the tables: window, method, checks, warnings

CAUTION = (
    "Model estimates, not counts: the posterior says which inflows and behaviours let this model reproduce the "
    "observed records; crossings come from the simulated truth of the runs that matched. People hidden in vehicles "
    "risk their lives; defer to law, safeguarding duties and the agencies' own practice."
)


@dataclass(frozen=True, eq=False)
class CalibrationResult:
    """A finished calibration: the posterior, the latent quantities, the predictive check and what it took."""

    name: str
    source: Path
    observed_path: Path
    first_day: int
    days: int
    warmup_days: int
    priors: PriorSet
    posterior: ABCPosterior
    predictive: PredictiveCheck | None
    out: Path | None
    ran: int  # candidate runs simulated by this invocation
    reused: int  # candidate runs found complete in the store (a resumed calibration)
    self_check: SelfCheck | None = None
    warnings: tuple[str, ...] = ()

    def to_frame(self) -> pd.DataFrame:
        """Posterior mean, SD and credible interval of each unknown and latent quantity, with its prior or meaning."""
        frame = self.posterior.to_frame()
        about = {p.name: p.describe() for p in self.priors.priors}
        about.update({k: f"{v} (truth of the matching runs)" for k, v in LATENT_MEANING.items()})
        frame["about"] = [about.get(q, "") for q in frame["quantity"]]
        return frame

    def reliability_record(self) -> dict[str, object]:
        """The window, the method, how it checked itself and its warnings, as plain data for briefings."""
        return {
            "name": self.name,
            "method": self.posterior.method,
            "level": self.posterior.level,
            "observed_path": str(Path(self.observed_path).resolve()),
            "first_day": self.first_day,
            "days": self.days,
            "warmup_days": self.warmup_days,
            "self_check": self.self_check.how if self.self_check is not None else None,
            "warnings": list(self.warnings),
        }

    def answer_lines(self) -> list[str]:
        """The latent quantities in words, each with its interval and the self-check's measured coverage."""
        post = self.to_frame().set_index("quantity")
        coverage = self.self_check.to_frame().set_index("quantity") if self.self_check is not None else None
        lines = []
        for key in LATENT:
            if key not in post.index:
                continue
            row = post.loc[key]
            measured = "not measured (no self-check)"
            if coverage is not None and key in coverage.index:
                c = coverage.loc[key]
                measured = f"held the truth in {c['coverage']:.0%} of {int(c['trials'])} self-check trials"
            lines.append(
                f"  {LATENT_MEANING[key]}: {row['mean']:,.0f} (posterior mean), {self.posterior.level:.0%} interval "
                f"{row['low']:,.0f}-{row['high']:,.0f}; such intervals {measured}"
            )
        return lines

    def summary(self) -> str:
        """The result in words: the answer first, then warnings, the posterior and the checks."""
        last = self.first_day + self.days - 1
        lines = [
            f"Calibration: {self.name}",
            f"Observed records: {self.observed_path} (days {self.first_day}-{last}, observed part only); "
            f"candidate runs simulate {self.warmup_days} warm-up days first.",
            "",
            f"In the {self.days} days of the window (model estimates from the simulated truth of the runs whose "
            "observed summaries matched):",
            *self.answer_lines(),
        ]
        if self.warnings:
            lines += ["", *self.warnings]
        lines += [
            "",
            f"Candidate runs: {self.ran} simulated now, {self.reused} taken from the store.",
            "",
            self.posterior.summary(),
        ]
        if self.self_check is not None:
            lines += ["", self.self_check.summary()]
        if self.predictive is not None:
            lines += ["", self.predictive.summary()]
            fresh = self.predictive.latent_frame()
            if len(fresh):
                lines.append("  In a new period like this one (fresh runs at posterior draws):")
                for row in fresh.itertuples():
                    lines.append(f"    {row.quantity}: {row.mean:,.0f} [{row.low:,.0f}, {row.high:,.0f}]")
        lines += ["", CAUTION]
        return "\n".join(lines)


def _posterior_from_store(plan: CalibrationPlan, store: CalibrationStore) -> ABCPosterior | None:
    """A rejection calibration whose one generation is already in the store."""
    done = store.load()
    if not done:
        return None
    return posterior_of(
        done[0], plan.priors, plan.observed, plan.setting("regression"), plan.summary_spec.names(), LATENT, plan.spec.level
    )


def self_check(plan: CalibrationPlan, posterior: ABCPosterior) -> SelfCheck | None:
    """The coverage self-check of a finished calibration over its generation-0 prior draws (none when skipped)."""
    trials = plan.spec.self_check
    first = posterior.generations[0]
    if not trials or first.reference is None:
        return None
    table = first.reference
    source = "Csilléry, François & Blum 2012"
    if plan.method == "rejection":
        keep, regression = kept_count(plan.setting("accept"), table.size - 1), plan.setting("regression")
        how = (
            f"leave-one-out cross-validation of this very rejection calibration ({source}): {trials} of its "
            f"{table.size} prior draws, each calibrated as if observed on the other {table.size - 1}"
        )
    else:
        keep, regression = plan.setting("particles"), True
        how = (
            f"leave-one-out rejection pass over the {table.size} prior draws of generation 0 ({source}): {trials} of "
            f"them, each calibrated as if observed by keeping the {keep} nearest others with the regression "
            "adjustment; it checks that pass, not the SMC generations after it"
        )
    return cross_validate(
        table, plan.priors, first.scale, keep=keep, regression=regression, trials=trials, seed=plan.spec.seed,
        level=plan.spec.level, latent_names=LATENT, how=how,
    )


def run_calibration(
    plan: CalibrationPlan,
    out: str | Path,
    executor: Executor,
    resume: bool = False,
    command: Sequence[str] = (),
    figures: bool = True,
    keep_runs: bool = False,
) -> CalibrationResult:
    """Run a validated calibration with an executor the caller has entered (so several calibrations can share one).

    ``keep_runs`` keeps every candidate's run directory; by default only its figures are kept.
    """
    out = Path(out)
    store = CalibrationStore(out, plan)
    store.open(command, resume)
    try:  # the folder is locked from open to close: one writer at a time
        return _calibrate(plan, out, executor, store, command, figures, keep_runs)
    finally:
        store.close()


def _calibrate(
    plan: CalibrationPlan, out: Path, executor: Executor, store: CalibrationStore, command: Sequence[str], figures: bool,
    keep_runs: bool,
) -> CalibrationResult:
    """The body of :func:`run_calibration`, on an opened store."""
    simulate = ModelSimulator(plan, out, executor, command, keep_runs)
    spec = plan.spec
    names = dict(summary_names=plan.summary_spec.names(), latent_names=LATENT)
    if plan.method == "smc":
        posterior = abc_smc(
            simulate,
            plan.priors,
            plan.observed,
            particles=plan.setting("particles"),
            generations=plan.setting("generations"),
            initial_draws=plan.setting("initial_draws"),
            quantile=plan.setting("quantile"),
            max_simulations=plan.setting("max_simulations"),
            seed=spec.seed,
            checkpoint=store,
            level=spec.level,
            **names,
        )
    else:
        posterior = _posterior_from_store(plan, store)
        if posterior is None:
            posterior = rejection_abc(
                simulate,
                plan.priors,
                plan.observed,
                draws=plan.setting("draws"),
                accept=plan.setting("accept"),
                regression=plan.setting("regression"),
                seed=spec.seed,
                level=spec.level,
                **names,
            )
            store.save(posterior.final)
    predictive = predictive_check(simulate, posterior, spec.predictive_runs, seed=spec.seed) if spec.predictive_runs else None
    check = self_check(plan, posterior)
    result = CalibrationResult(
        name=spec.name,
        source=plan.source,
        observed_path=plan.observed_path,
        first_day=spec.observed.first_day,
        days=spec.days,
        warmup_days=spec.warmup_days,
        priors=plan.priors,
        posterior=posterior,
        predictive=predictive,
        out=out,
        ran=simulate.ran,
        reused=simulate.reused,
        self_check=check,
        warnings=tuple(reliability_warnings(posterior, plan.priors, check)),
    )
    _write_outputs(result, out, figures)
    return result


def _write_outputs(result: CalibrationResult, out: Path, figures: bool) -> None:
    write_parquet(result.posterior.sample_frame(), out / "posterior.parquet", "calibration/posterior")
    write_parquet(result.to_frame(), out / "posterior_summary.parquet", "calibration/posterior_summary")
    write_parquet(result.posterior.diagnostics(), out / "diagnostics.parquet", "calibration/diagnostics")
    if result.predictive is not None:
        write_parquet(result.predictive.to_frame(), out / "predictive_check.parquet", "calibration/predictive_check")
    if result.self_check is not None:
        write_parquet(result.self_check.to_frame(), out / SELF_CHECK_TABLE, "calibration/self_check")
    else:
        (out / SELF_CHECK_TABLE).unlink(missing_ok=True)  # a check from earlier settings is not this one's
    write_json(result.reliability_record(), out / RELIABILITY_FILE)
    write_atomically(out / "summary.txt", lambda tmp: tmp.write_text(result.summary() + "\n", encoding="utf-8"))
    if figures:
        write_figures(result, out / "figures")


def calibrate(
    path: str | Path,
    out: str | Path,
    executor: str = "serial",
    workers: int | None = None,
    scheduler: str | None = None,
    resume: bool = False,
    command: Sequence[str] = (),
    figures: bool = True,
    allow_large: bool = False,
    shared_output: bool = False,
    keep_runs: bool = False,
) -> CalibrationResult:
    """Validate and run the calibration file at ``path`` into ``out`` (``resume`` takes up an interrupted one).

    ``keep_runs`` keeps every candidate's run directory (by default only its figures are kept); ``shared_output``
    as for :func:`abm.experiment.batch.run_batch`.
    """
    refuse_unwritable(out)
    plan = load_calibration(path, allow_large, Path(out))
    if plan.size is not None and plan.size.vehicle_days > SHOWN_VEHICLE_DAYS:
        print(plan.size.describe(), file=sys.stderr)
    with make_executor(executor, workers, scheduler, shared_output=shared_output) as runner:
        return run_calibration(plan, out, runner, resume, command, figures, keep_runs)


def calibrate_command(
    path: str | Path, out: str | Path | None, place: Placement, resume: bool, check: bool, command: Sequence[str],
    allow_large: bool = False, keep_runs: bool = False,
) -> None:
    """``undertow calibrate``: validate (``check``) or run where ``place`` says, and print the summary."""
    if check:
        print(describe_calibration(path, allow_large))
        return
    if out is None:
        raise InputError("--out: a calibration needs an output folder (or pass --check to only validate the file)")
    result = calibrate(path, out, place.name(), place.workers, place.scheduler, resume, command,
                       allow_large=allow_large, shared_output=place.shared_output, keep_runs=keep_runs)
    print(result.summary())
    print(f"\nTables, summary.txt and figures in {out}", file=sys.stderr)
