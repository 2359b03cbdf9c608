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

from ..errors import InputError
from ..experiment.executors import Executor, choose_executor, make_executor
from ..records import write_atomically, write_parquet
from .abc import REJECTION, REJECTION_PLAIN, ABCPosterior, PredictiveCheck, abc_smc, predictive_check, rejection_abc
from .config import LATENT, LATENT_MEANING, CalibrationPlan, describe_calibration, load_calibration
from .figures import write_figures
from .priors import PriorSet
from .simulator import CalibrationStore, ModelSimulator

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

    def to_frame(self) -> pd.DataFrame:
        """Posterior mean, SD and credible interval of each unknown and latent quantity, with its prior or meaning."""
        frame = self.posterior.to_frame()
        about = {p.name: p.describe() for p in self.priors.priors}
        about.update({k: f"{v} (truth of the matching runs)" for k, v in LATENT_MEANING.items()})
        frame["about"] = [about.get(q, "") for q in frame["quantity"]]
        return frame

    def summary(self) -> str:
        """The result in words, for the briefing."""
        last = self.first_day + self.days - 1
        lines = [
            f"Calibration: {self.name}",
            f"Observed records: {self.observed_path} (days {self.first_day}-{last}, observed part only); "
            f"candidate runs simulate {self.warmup_days} warm-up days first.",
            f"Candidate runs: {self.ran} simulated now, {self.reused} taken from the store.",
            "",
            self.posterior.summary(),
        ]
        post = self.to_frame()
        crossings = post[post["quantity"] == "crossings"]
        if len(crossings):
            row = crossings.iloc[0]
            lines += [
                "",
                f"Undetected crossings in the window: {row['mean']:,.0f} (posterior mean), {self.posterior.level:.0%} "
                f"credible interval {row['low']:,.0f}-{row['high']:,.0f}, from the simulated truth of the runs whose "
                "observed summaries matched.",
            ]
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
    return ABCPosterior(
        method=REJECTION if plan.setting("regression") else REJECTION_PLAIN,
        names=plan.priors.names,
        summary_names=plan.summary_spec.names(),
        latent_names=LATENT,
        observed=plan.observed,
        generations=(done[0],),
        level=plan.spec.level,
    )


def run_calibration(
    plan: CalibrationPlan,
    out: str | Path,
    executor: Executor,
    resume: bool = False,
    command: Sequence[str] = (),
    figures: bool = True,
) -> CalibrationResult:
    """Run a validated calibration with an executor the caller has entered (so several calibrations can share one)."""
    out = Path(out)
    store = CalibrationStore(out, plan)
    store.open(command, resume)
    simulate = ModelSimulator(plan, out, executor, command)
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
    )
    _write_outputs(result, out, figures)
    return result


def _write_outputs(result: CalibrationResult, out: Path, figures: bool) -> None:
    write_parquet(result.posterior.sample_frame(), out / "posterior.parquet")
    write_parquet(result.to_frame(), out / "posterior_summary.parquet")
    write_parquet(result.posterior.diagnostics(), out / "diagnostics.parquet")
    if result.predictive is not None:
        write_parquet(result.predictive.to_frame(), out / "predictive_check.parquet")
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
) -> CalibrationResult:
    """Validate and run the calibration file at ``path`` into ``out`` (``resume`` takes up an interrupted one)."""
    plan = load_calibration(path)
    with make_executor(executor, workers, scheduler) as runner:
        return run_calibration(plan, out, runner, resume, command, figures)


def calibrate_command(
    path: str | Path,
    out: str | Path | None,
    executor: str | None,
    workers: int | None,
    scheduler: str | None,
    resume: bool,
    check: bool,
    command: Sequence[str],
) -> None:
    """``undertow calibrate``: validate (``check``) or run, and print the summary."""
    if check:
        print(describe_calibration(path))
        return
    if out is None:
        raise InputError("--out: a calibration needs an output folder (or pass --check to only validate the file)")
    executor = choose_executor(executor, workers, scheduler)
    result = calibrate(path, out, executor, workers, scheduler, resume, command)
    print(result.summary())
    print(f"\nTables, summary.txt and figures in {out}", file=sys.stderr)
