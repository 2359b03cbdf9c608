"""Where a policy pushes attempts, and whether its effect is real.

People react to checking: a policy that finds more at one place may only move
attempts to other hours, other vehicle classes, more dangerous boarding points
or out of the modelled crossing. This package compares two windows of records:

* within one run, the days before an intervention day against the days from it
  (:func:`displacement_within_run`);
* between two runs, a baseline (run A) against a policy (run B), ideally with
  common random numbers (same seed), after an optional warm-up
  (:func:`displacement_between_runs`).

Throughout, "before" means the first window (before the day, or run A) and
"after" the second. Every figure is labelled with the record set it comes from:
``truth`` (simulated ground truth) or ``observed`` (what an agency holds). All
people counts are persons.

Measures
--------
Attempt shares
    Persons attempting per option (point x band x vehicle class), per boarding
    point, per time band, per vehicle class and per concealment depth, as
    shares of all attempts in the window (truth), with the total-variation
    distance ``0.5 * sum |p - q|`` and
    the Jensen-Shannon distance (base 2, so both lie in [0, 1]) between the two
    share vectors.
Weighted displacement quotient (Bowers & Johnson 2003; Guerette 2009, tool guide 10)
    Counts R, D, C are truth attempts (persons) in the response, buffer and
    control options before (b) and after (a)::

        gross effect       GE  = Rb - Ra
        net effect         NE  = Rb/Cb - Ra/Ca             (= - success measure)
        success measure        = Ra/Ca - Rb/Cb             (WDQ denominator)
        buffer displacement    = Da/Ca - Db/Cb             (WDQ numerator)
        WDQ                    = buffer displacement / success measure
        total net effect   TNE = [Rb*(Ca/Cb) - Ra] + [Db*(Ca/Cb) - Da]

    NE is Guerette's appendix B eq. (2); it reproduces the guide's worked
    example (net effect 0.326), which the relative form 1 - (Ra/Ca)/(Rb/Cb)
    (0.485) does not. Raw counts are right even when the windows differ in
    length: every ratio divides by the control count of the same window, and
    TNE rescales the before counts by the control's growth, so the window
    length cancels.
    A figure whose divisor is zero is ``None`` with a flag and a note, never NaN;
    WDQ is only read when the success measure is negative (the response area
    fell relative to control), as Bowers & Johnson prescribe.
Crossings against detections
    Crossings per day (truth: attempts whose outcome is ``crossed``) against
    detections per day (observed: encounter rows of kind ``detection``), each
    as a relative change ``after / before - 1`` (rates per day, so windows of
    unequal length compare), each with the interval of its difference from a
    t-test on weekly means (paired between runs of the same seed); see
    :mod:`abm.analysis.net_effect` for the test and the verdict's rule.
Out of the system and hazard
    Persons leaving for a route outside the model per day (truth exits with
    state ``displaced_out``), and the hazard-weighted share of attempts
    ``sum(persons x hazard) / sum(persons)`` (truth), an attempt's hazard being
    its boarding point's plus its depth's, at most 1
    (:func:`abm.analysis.policy_table.hazard_weighted_share`). Hazards come from the
    first window's world for both windows, so a change reflects where and how
    deep people hide, not a re-scored hazard.

Laid out as: :mod:`.result` (the result and its pieces), :mod:`.measures`
(the measures on their own), :mod:`.runs` (reading a run directory) and
:mod:`.comparison` (the two comparisons and :func:`write_displacement`).
"""

from .comparison import (
    DISPLACEMENT_FILE,
    displacement_between_runs,
    displacement_within_run,
    write_displacement,
)
from .measures import (
    jensen_shannon,
    total_variation,
    weighted_displacement,
)
from .result import (
    AREAS,
    BeforeAfter,
    DIMENSIONS,
    DIMENSION_WORDS,
    OBSERVED,
    TRUTH,
    DisplacementResult,
    ShareShift,
    WEIGHTED_FIGURES,
    WeightedDisplacement,
    Window,
)
from .runs import (
    DAILY_FILE,
    DisplacementInputError,
    MANIFEST_FILE,
)

__all__ = [
    "AREAS",
    "BeforeAfter",
    "DAILY_FILE",
    "DIMENSIONS",
    "DIMENSION_WORDS",
    "DISPLACEMENT_FILE",
    "DisplacementInputError",
    "DisplacementResult",
    "MANIFEST_FILE",
    "OBSERVED",
    "ShareShift",
    "TRUTH",
    "WEIGHTED_FIGURES",
    "WeightedDisplacement",
    "Window",
    "displacement_between_runs",
    "displacement_within_run",
    "jensen_shannon",
    "total_variation",
    "weighted_displacement",
    "write_displacement",
]
