"""Analyses over run directories and batch stores, each module or package one question:

* :mod:`.displacement`: where a policy pushes attempts, and whether its effect is real (within a run or between two);
* :mod:`.net_effect`: did crossings change, or only detections (a t-test on weekly means);
* :mod:`.estimator_check`: every estimator against the simulated truth it targets, per run and aggregated;
* :mod:`.sensitivity`: which assumptions drive the answer (PRCC);
* :mod:`.discovery`: where in the factor space an outcome happens (PRIM);
* :mod:`.policy_table`: policy comparison helpers for briefings (hazard, delay limits, frontiers);
* :mod:`.policy_search`: the search for the best policy within limits, on any evaluator;
* :mod:`.optimisation`: optimisation files run on the port model.

The displacement API is re-exported here.
"""

from .displacement import (
    DisplacementInputError,
    DisplacementResult,
    displacement_between_runs,
    displacement_within_run,
    write_displacement,
)

__all__ = [
    "DisplacementInputError",
    "DisplacementResult",
    "displacement_between_runs",
    "displacement_within_run",
    "write_displacement",
]
