"""The tables of a calibration folder (``undertow calibrate``): the posterior, its checks and each generation.

A column named after an unknown (``<parameter>``) holds its value: the prior's
name, by default its world path; a multiplier prior's value multiplies the
world's. The latent quantities are what a candidate run counts in its own
truth over the calibration's window (abm.calibration.config.LATENT): each row
of a generation's tables is one candidate run, so there they are marked truth;
the posterior's are the calibration's estimates for the observed records.
Summary statistics (``summary:<statistic>``) come from a candidate run's
observed tables, computed as for the observed records calibrated to.
"""

from __future__ import annotations

from . import Column as C
from . import Table, declare

CALIBRATION = "calibration folder"

# Latent quantity -> (unit, meaning), as abm.calibration.config.LATENT_MEANING says.
LATENT = {
    "attempts": ("persons", "person-attempts"),
    "persons": ("persons", "distinct persons who tried"),
    "crossings": ("persons", "persons who eventually crossed (some after earlier detections)"),
    "crossings_after_last_check": ("persons", "crossings by persons who boarded after every station (no record can "
                                   "show them)"),
}
REGRESSION = "; regression-adjusted toward the observed summaries in a regression-adjusted rejection"
SIMULATION = C("simulation", "text", "", "the candidate run's folder in the calibration folder, e.g. gen-0/p000012",
               "key")

# A statistic's name patterns (abm.calibration.summaries.SummarySpec.names); the weekly and station patterns of a
# group are listed before the plainer ones a weekly name would also match.
STATISTICS = (
    ("detections:<station>:week<week>", "persons", "persons detected at the station in the week (weeks of 7 days from "
     "the window's first, from 0)"),
    ("detections:week<week>", "persons", "persons detected in the week, all stations"),
    ("detections_per_1000_checks:<station>", "persons per 1000 vehicles", "persons detected at the station per 1000 "
     "vehicles it checked"),
    ("detections:<station>", "persons", "persons detected at the station over the window"),
    ("interdictions:week<week>", "persons", "persons interdicted in the week, all boarding points"),
    ("interdictions:<point>", "persons", "persons interdicted at the boarding point over the window"),
    ("checks:<station>:week<week>", "vehicles", "vehicles checked at the station in the week"),
    ("checks:<station>", "vehicles", "vehicles checked at the station over the window"),
    ("f1", "persons", "identified persons seen once"),
    ("f2", "persons", "identified persons seen twice"),
    ("f3plus", "persons", "identified persons seen three times or more"),
    ("share_seen_twice_or_more", "share", "share of identified persons seen at least twice"),
)


def _latent(record_set: str, about: str) -> tuple[C, ...]:
    return tuple(C(key, "float", unit, f"{meaning}: {about}", record_set) for key, (unit, meaning) in LATENT.items())


def _statistics() -> tuple[C, ...]:
    return tuple(C(f"summary:{name}", "float", unit, f"{meaning}, in the candidate run's observed records", "observed")
                 for name, unit, meaning in STATISTICS)


def _parameter(record_set: str, about: str) -> C:
    return C("<parameter>", "float", "prior's unit", f"the unknown of this name: {about}", record_set)


WEIGHT = C("weight", "float", "share", "the particle's normalised weight (the weights sum to 1)", "estimate")
DISTANCE = C("distance", "float", "scaled distance", "Euclidean distance of the run's summary statistics from the "
             "observed ones, each scaled by the generation's scale", "estimate")
PARTICLE_LATENT = _latent("truth", "the candidate run's simulated truth in the window" + REGRESSION)

declare(
    Table("calibration/posterior", "posterior.parquet", CALIBRATION, "estimate",
          "The posterior: one row per particle of the last generation, with its weight.", (
              *_latent("estimate", "a posterior draw for the observed window (a candidate run's truth" + REGRESSION
                       + ")"),
              WEIGHT, DISTANCE, SIMULATION,
              _parameter("estimate", "a posterior draw (the candidate run's value" + REGRESSION + ")"),
          )),
    Table("calibration/posterior_summary", "posterior_summary.parquet", CALIBRATION, "estimate",
          "One row per unknown and latent quantity: posterior mean, SD and equal-tailed credible interval.", (
              C("quantity", "text", "", "the unknown's name or the latent quantity", "key"),
              C("kind", "text", "", "parameter (an unknown) or latent", "key"),
              C("mean", "float", "quantity's unit", "weighted posterior mean"),
              C("sd", "float", "quantity's unit", "weighted posterior standard deviation"),
              C("low", "float", "quantity's unit", "lower end of the credible interval"),
              C("high", "float", "quantity's unit", "upper end of the credible interval"),
              C("level", "float", "share", "the interval's credible level (the calibration file's level)", "setting"),
              C("about", "text", "", "the unknown's prior, or the latent quantity's meaning", "setting"),
          )),
    Table("calibration/diagnostics", "diagnostics.parquet", CALIBRATION, "estimate",
          "One row per generation (rejection has one): tolerance, simulations, particles kept and their spread.", (
              C("generation", "int", "", "the generation, from 0 (its folder is gen-<generation>)", "key"),
              C("epsilon", "float", "scaled distance", "the tolerance: the largest distance a kept particle may have"),
              C("simulations", "int", "runs", "candidate runs the generation simulated"),
              C("accepted", "int", "particles", "particles kept"),
              C("acceptance_rate", "float", "share", "accepted over simulations (NaN with no simulation)"),
              C("ess", "float", "particles", "effective sample size of the kept particles' weights"),
          )),
    Table("calibration/predictive_check", "predictive_check.parquet", CALIBRATION, "estimate",
          "One row per summary statistic: the observed value against fresh runs at posterior draws "
          "(predictive/p<i>/).", (
              C("summary", "text", "", "the summary statistic (as in summary:<statistic> of the particles)", "key"),
              C("observed", "float", "statistic's unit", "the statistic of the observed records calibrated to",
                "observed"),
              C("predictive_mean", "float", "statistic's unit", "its mean over the predictive runs"),
              C("low", "float", "statistic's unit", "lower end of the predictive runs' equal-tailed interval at the "
                "credible level"),
              C("high", "float", "statistic's unit", "upper end of that interval"),
              C("inside", "bool", "", "true when the observed value lies in the interval"),
              C("tail_p", "float", "share", "two-sided predictive tail share: twice the smaller share of runs at or "
                "beyond the observed value, at most 1"),
          )),
    Table("calibration/self_check", "self_check.parquet", CALIBRATION, "estimate",
          "One row per unknown and latent quantity: how often the calibration's intervals held a known truth, over "
          "prior draws of its own taken as pseudo-observed data (written only with self_check > 0).", (
              C("quantity", "text", "", "the unknown's name or the latent quantity", "key"),
              C("level", "float", "share", "the intervals' nominal level", "setting"),
              C("trials", "int", "data sets", "pseudo-observed data sets whose truth is known"),
              C("covered", "int", "data sets", "of them, those whose interval held the truth"),
              C("coverage", "float", "share", "covered over trials (NaN without trials)"),
              C("coverage_low", "float", "share", "lower end of the coverage's 95% Wilson interval"),
              C("coverage_high", "float", "share", "upper end of that interval"),
              C("mean_width", "float", "quantity's unit", "mean width of the intervals"),
              C("rmse", "float", "quantity's unit", "root mean squared error of the posterior means"),
          )),
    Table("calibration/generation/particles", "gen-<k>/particles.parquet", CALIBRATION, "estimate",
          "The particles generation k kept: one row per candidate run kept, with its weight, distance and summary "
          "statistics (the last generation's are the posterior).", (
              *PARTICLE_LATENT, WEIGHT, DISTANCE, SIMULATION,
              *(C(f"unadjusted:{key}", "float", unit, f"{meaning}: the candidate run's simulated truth before the "
                  "regression adjustment (regression-adjusted rejection only)", "truth")
                for key, (unit, meaning) in LATENT.items()),
              C("unadjusted:<parameter>", "float", "prior's unit", "the unknown's value the candidate run took, "
                "before the regression adjustment (regression-adjusted rejection only)", "setting"),
              *_statistics(),
              _parameter("estimate", "the particle's value (the candidate run's" + REGRESSION + ")"),
          )),
    Table("calibration/generation/reference", "gen-0/reference.parquet", CALIBRATION, "setting",
          "Every prior draw of generation 0, kept or not, with what its run gave (rejection and the self-check read "
          "it).", (
              *_latent("truth", "the candidate run's simulated truth in the window"), SIMULATION,
              *_statistics(),
              _parameter("setting", "the value the candidate run took, drawn from its prior"),
          )),
    Table("calibration/generation/simulations", "<stage>/simulations.parquet", CALIBRATION, "setting",
          "Every candidate simulation of a stage (gen-<k>, or predictive) as its worker sent it back: what "
          "--resume reads instead of running it again.", (
              SIMULATION,
              C("seed", "int", "", "the candidate run's seed"),
              C("summaries_sha256", "text", "", "SHA-256 of the summary statistics' settings the summaries were "
                "computed under (a change of them runs the candidate again)"),
              *_latent("truth", "the candidate run's simulated truth in the window"),
              *_statistics(),
              _parameter("setting", "the value the candidate run took"),
          )),
)
