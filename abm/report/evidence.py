"""What a briefing reads from the run directories, beyond summary.parquet.

The summary table carries every run's headline figures. Three things need the
run directories themselves:

* truth figures the summary lacks: the hazard-weighted boarding share and the
  crossings by people who boarded after the last check
  (:func:`abm.analysis.policy_table.run_truth_figures`), and the attempt
  shares by boarding point and time band for the displacement heat map;
* every estimator against the truth it targets over the summarised days
  (:func:`abm.analysis.estimator_check.per_run.check_runs`). The summary's ``est_``
  columns cover every recorded day, warm-up included; the briefing re-runs the
  estimators on the days the summary covers, so estimates, truth and the
  policy table all describe the same days;
* the daily series (``daily.parquet``).

:func:`gather` writes ``OUT/briefing_runs.parquet`` (one row per run: run_id,
point, replication, factors and the derived figures) and
``OUT/estimator_check.parquet`` (one row per run and estimator), so every
number in a briefing can be traced to those two tables or to summary.parquet.

Which estimator the briefing trusts
-----------------------------------
Each estimator is scored over the batch by ``|relative bias| + |coverage -
nominal level|`` (both shares; 0 is an unbiased estimator whose intervals
cover as often as they claim). Estimators that ran in fewer than half of the
runs (or fewer than two) are not eligible. Only an eligible estimator whose
measured coverage is close to nominal (0.80-0.97 of a nominal 0.90) is
reliable, and only a reliable one can be the trusted estimator: when none is,
the briefing says that no closed-form estimator is reliable here. Comparisons whose truth can only be
counted approximately (see :class:`abm.analysis.estimator_check.truth.Route`) are
ranked too, and flagged: the approximation (vehicles referred past a station
after a false alarm) moves the truth by a few people; an exact comparison wins
a tie. The trusted estimator is the best reliable one.

No estimator targets crossings: what records can see are people who reached a
check. The closest target is ``passed_unfound:<last primary station>``,
person-attempts that got past the last check unfound, estimated by the
expansion's undetected count there: crossings by people who boarded before the
last check (and any found later in secondary search). People boarding after
the last check are invisible to every record; the briefing counts them from
truth separately. The crossings estimate shown is the best eligible estimator
of that target, by the same score.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..analysis.estimator_check.per_run import check_runs
from ..analysis.estimator_check.summary import summarise_check
from ..analysis.estimator_check.truth import PASSED_UNFOUND
from ..calibration.self_check import within_nominal
from ..analysis.policy_table import attempt_shares, read_run_world, run_truth_figures
from ..records import read_truth, write_parquet
from .store_view import BatchView

RUNS_TABLE = "briefing_runs.parquet"
CHECK_TABLE = "estimator_check.parquet"
ALL_BEHAVIOURS = "all"
MIN_RUN_SHARE = 0.5  # an estimator must run in at least this share of the runs to be trusted


@dataclass(frozen=True)
class Evidence:
    """Per-run figures, the estimator check and the choices made from it."""

    per_run: pd.DataFrame  # one row per run: run_id, point, replication, factors, derived figures
    shares: dict[str, pd.DataFrame]  # run_id -> attempt shares (boarding point x time band)
    check: pd.DataFrame  # one row per run x compared estimator: run_id, point, replication, labels, PER_RUN_COLUMNS
    skipped: pd.DataFrame  # estimators that could not run or be compared, with why
    reliability: pd.DataFrame  # per estimator x behaviour (and "all"): bias, coverage, score, eligible
    trusted: pd.Series | None  # the pooled reliability row of the trusted estimator
    proxy: pd.Series | None  # the pooled reliability row of the crossings estimate
    last_station: str | None  # the last primary station on the route
    level: float  # the estimators' nominal interval level


def _plain(value: Any) -> Any:
    """A numpy scalar as the Python value it holds."""
    return value.item() if isinstance(value, np.generic) else value


def last_primary(world: dict[str, Any]) -> str | None:
    """The last primary station in route order."""
    names = [s["name"] for s in world["stations"] if s.get("role", "primary") == "primary"]
    return names[-1] if names else None


def score_reliability(summary: pd.DataFrame, runs: int) -> pd.DataFrame:
    """Add ``score`` (|relative bias| + |coverage - level|), ``eligible`` and ``reliable`` to a summarise_check table.

    ``reliable``: eligible, and its intervals held the truth about as often as
    they claim (:func:`abm.calibration.self_check.within_nominal`); only such
    an estimator may be called trusted.
    """
    table = summary.copy()
    table["score"] = table["relative_bias"].abs() + (table["coverage"] - table["level"]).abs()
    needed = max(2, math.ceil(MIN_RUN_SHARE * runs))
    table["eligible"] = (table["n"] >= needed) & np.isfinite(table["score"])
    near = [within_nominal(float(c), float(lvl)) for c, lvl in zip(table["coverage"], table["level"], strict=True)]
    table["reliable"] = table["eligible"] & pd.Series(near, index=table.index, dtype=bool)
    return table


def best_row(table: pd.DataFrame, among: str = "eligible") -> pd.Series | None:
    """The row of lowest score among those flagged ``among`` (an exact comparison wins a tie); None when none is."""
    chosen = table[table[among]]
    if chosen.empty:
        return None
    return chosen.sort_values(["score", "exact", "slug"], ascending=[True, False, True]).iloc[0]


def _reliability(check: pd.DataFrame, runs: int) -> pd.DataFrame:
    """summarise_check per behaviour and pooled over the batch, scored."""
    if check.empty:
        return pd.DataFrame()
    exact = check.groupby("slug")["exact"].all()
    by_behaviour = summarise_check(check, by=["behaviour"])
    pooled = summarise_check(check, by=[])
    pooled.insert(1, "behaviour", ALL_BEHAVIOURS)
    table = pd.concat([by_behaviour, pooled], ignore_index=True)
    table["exact"] = table["slug"].map(exact).astype(bool)
    return score_reliability(table, runs)


def gather(batch: BatchView) -> Evidence:
    """Read every run directory once; write briefing_runs.parquet and estimator_check.parquet."""
    rows: list[dict[str, Any]] = []
    shares: dict[str, pd.DataFrame] = {}
    labelled: list[tuple[Path, dict[str, Any]]] = []
    for _, run in batch.summary.sort_values("run_id").iterrows():
        run_dir = batch.run_dir(str(run["run_id"]))
        world = read_run_world(run_dir)
        attempts = read_truth(run_dir)["attempts"]
        attempts = attempts[attempts["day"] >= batch.start_day]
        labels = {label: _plain(run[label]) for label in batch.labels}
        rows.append(
            {
                "run_id": str(run["run_id"]),
                "point": int(run["point"]),
                "replication": int(run["replication"]),
                **labels,
                **run_truth_figures(attempts, world),
            }
        )
        bands = sorted(world["time_bands"], key=lambda band: world["time_bands"][band][0])  # by start hour
        shares[str(run["run_id"])] = attempt_shares(attempts, [p["name"] for p in world["boarding_points"]], bands)
        labelled.append((run_dir, labels))
    per_run = pd.DataFrame(rows)
    check, skipped = check_runs(labelled, window=(batch.start_day, batch.end_day), include_inexact=True)
    for frame in (check, skipped):
        frame.insert(0, "run_id", frame["run"].map(lambda p: Path(p).name))
    check, skipped = check.drop(columns="run"), skipped.drop(columns="run")
    for at, key in enumerate(("point", "replication"), start=1):  # each row's design point and replication
        check.insert(at, key, check["run_id"].map(per_run.set_index("run_id")[key]).astype("int64"))
    reliability = _reliability(check, len(per_run))
    pooled = reliability[reliability["behaviour"] == ALL_BEHAVIOURS] if len(reliability) else reliability
    trusted = best_row(pooled, among="reliable") if len(pooled) else None
    station = last_primary(batch.world)
    proxy = None
    if station is not None and len(pooled):
        proxy = best_row(pooled[pooled["quantity"] == f"{PASSED_UNFOUND}:{station}"])
    per_run = _with_proxy(per_run, check, proxy)
    # a persons count, null where the run has no such estimate (pandas reads it back as before: NaN where null)
    write_parquet(per_run.astype({"truth_past_checks": "Int64"}), batch.out / RUNS_TABLE, "batch/briefing_runs")
    write_parquet(check, batch.out / CHECK_TABLE, "batch/estimator_check")
    level = float(check["level"].iloc[0]) if len(check) else math.nan
    return Evidence(per_run, shares, check, skipped, reliability, trusted, proxy, station, level)


def _with_proxy(per_run: pd.DataFrame, check: pd.DataFrame, proxy: pd.Series | None) -> pd.DataFrame:
    """Add the crossings estimate (``est_crossings``, ``_lo``, ``_hi``) and its truth (``truth_past_checks``)."""
    columns = {"estimate": "est_crossings", "ci_low": "est_crossings_lo", "ci_high": "est_crossings_hi",
               "truth": "truth_past_checks"}
    if proxy is None:
        return per_run.assign(**{name: math.nan for name in columns.values()})
    rows = check.loc[check["slug"] == proxy["slug"], ["run_id", *columns]].rename(columns=columns)
    return per_run.merge(rows, on="run_id", how="left")


def daily_series(batch: BatchView, points: list[int], columns: tuple[str, ...]) -> pd.DataFrame:
    """The daily table of every run of the given points: run_id, point, replication, day, columns."""
    frames = []
    runs = batch.summary[batch.summary["point"].isin(points)]
    for _, run in runs.iterrows():
        daily = pd.read_parquet(batch.run_dir(str(run["run_id"])) / "daily.parquet", columns=["day", *columns])
        frames.append(daily.assign(run_id=str(run["run_id"]), point=int(run["point"]),
                                   replication=int(run["replication"])))
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=["day", *columns])
