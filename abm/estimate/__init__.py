"""Estimators of the unobserved flow, from observed records only.

Each estimator takes observed records (a run directory or a dict of observed
tables) and a window of days, and returns a frozen :class:`EstimateResult`;
one that cannot run raises :class:`EstimatorCannotRun`. :func:`run_all` runs
every estimator and reports which cannot run and why. This package imports
nothing from the model; ``tests/estimate/test_firewall.py`` guards that.
"""

from .expansion import expansion
from .frequency import (
    capture_frequencies,
    chao,
    chao_bias_corrected,
    chao_bias_corrected_from_frequencies,
    chao_from_frequencies,
    ztp,
    ztp_from_frequencies,
    ztp_regression,
    ztp_regression_from_counts,
    zelterman,
    zelterman_from_frequencies,
)
from .removal import (
    removal_carle_strub,
    removal_carle_strub_from_catches,
    removal_catches,
    removal_relative_sensitivity,
    removal_relative_sensitivity_from_catches,
    removal_two_pass,
    removal_two_pass_from_catches,
    removal_zippin,
    removal_zippin_from_catches,
)
from .report import run_all
from .results import EstimateResult, EstimatorCannotRun
from .twosample import chapman, chapman_from_counts
from .windows import Window, by_window, rolling_windows

__all__ = [
    "EstimateResult",
    "EstimatorCannotRun",
    "Window",
    "by_window",
    "capture_frequencies",
    "chao",
    "chao_bias_corrected",
    "chao_bias_corrected_from_frequencies",
    "chao_from_frequencies",
    "chapman",
    "chapman_from_counts",
    "expansion",
    "removal_carle_strub",
    "removal_carle_strub_from_catches",
    "removal_catches",
    "removal_relative_sensitivity",
    "removal_relative_sensitivity_from_catches",
    "removal_two_pass",
    "removal_two_pass_from_catches",
    "removal_zippin",
    "removal_zippin_from_catches",
    "rolling_windows",
    "run_all",
    "zelterman",
    "zelterman_from_frequencies",
    "ztp",
    "ztp_from_frequencies",
    "ztp_regression",
    "ztp_regression_from_counts",
]
