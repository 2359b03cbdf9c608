"""Simulation-based inference: fit unknown inflow and behaviour to observed records by running the model.

The model itself is the estimator: approximate Bayesian computation finds the
parameter values under which simulated observed records look like the real
ones, and the simulated truth of those runs says what went undetected. The
algorithms (:mod:`abm.calibration.abc`: rejection with regression adjustment,
ABC-SMC, the posterior predictive check) are pure functions over any simulator
of summary statistics; :mod:`abm.calibration.simulator` plugs in the port
model through the batch executors, :mod:`abm.calibration.config` reads a
calibration file, :mod:`abm.calibration.run` runs one into an output folder
and :mod:`abm.calibration.self_check` checks the method's own intervals. Of
the records being calibrated only the observed part is read
(:mod:`abm.calibration.target`).
"""

from .abc.distance import mad_scale
from .abc.posterior import ABCPosterior, Generation
from .abc.predictive import PredictiveCheck, predictive_check
from .abc.rejection import regression_adjust, rejection_abc, rejection_from_table
from .abc.simulation import ABCError, BatchSimulator, Simulated, pointwise
from .abc.smc import abc_smc, kernel_covariance, smc_weights
from .abc.weighted import effective_sample_size, weighted_quantile
from .config import CalibrationFileError, CalibrationPlan, describe_calibration, load_calibration
from .priors import Prior, PriorError, PriorSet
from .run import CalibrationResult, calibrate, run_calibration
from .summaries import DEFAULT_GROUPS, SUMMARY_GROUPS, SummarySpec
from .target import load_target

__all__ = [
    "ABCError",
    "ABCPosterior",
    "BatchSimulator",
    "CalibrationFileError",
    "CalibrationPlan",
    "CalibrationResult",
    "DEFAULT_GROUPS",
    "Generation",
    "PredictiveCheck",
    "Prior",
    "PriorError",
    "PriorSet",
    "SUMMARY_GROUPS",
    "Simulated",
    "SummarySpec",
    "abc_smc",
    "calibrate",
    "describe_calibration",
    "effective_sample_size",
    "kernel_covariance",
    "load_calibration",
    "load_target",
    "mad_scale",
    "pointwise",
    "predictive_check",
    "regression_adjust",
    "rejection_abc",
    "rejection_from_table",
    "run_calibration",
    "smc_weights",
    "weighted_quantile",
]
