"""Where a policy pushes attempts, and whether its effect is real.

People react to checking: a policy that finds more at one place may only move
attempts to other hours, other vehicle classes, more dangerous boarding points
or out of the modelled crossing. This module compares two windows of records:

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
"""

from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy.spatial.distance import jensenshannon

from ..errors import InputError
from ..experiment.single import WORLD_FILE
from ..observed import read_observed
from ..records import TRUTH_COLUMNS, TRUTH_DIR, read_truth, write_json
from ..run_files import damage
from ..world import parse_world
from ..world.schema import AreaSelector, DisplacementAreas, World
from .net_effect import CrossingsVsDetections, net_effect
from .policy_table import hazard_weighted_share

TRUTH, OBSERVED = "truth", "observed"
MANIFEST_FILE = "manifest.json"
DAILY_FILE = "daily.parquet"
DISPLACEMENT_FILE = "displacement.json"
# Share tables, each named by the attempts column it counts by ("option" is point/band/vehicle_class).
DIMENSIONS = ("option", "point", "band", "vehicle_class", "depth")
AREAS = ("response", "buffer", "control")
DIMENSION_WORDS = {"option": "options (point, band and class)", "point": "boarding points", "band": "time bands",
                   "vehicle_class": "vehicle classes", "depth": "depths"}
WEIGHTED_FIGURES = (
    "gross_effect", "net_effect", "success_measure", "buffer_displacement_measure", "wdq", "total_net_effect"
)


class DisplacementInputError(InputError):
    """Run directories or settings a displacement comparison cannot use."""


# -- the pieces of a result ---------------------------------------------------------------
@dataclass(frozen=True)
class Window:
    """One side of the comparison: days ``start_day`` (inclusive) to ``end_day`` (exclusive) of a run."""

    run: str
    start_day: int
    end_day: int

    @property
    def days(self) -> int:
        return self.end_day - self.start_day

    def describe(self) -> str:
        return f"{self.run} days {self.start_day}-{self.end_day - 1} ({self.days} days)"

    def to_dict(self) -> dict[str, Any]:
        return {"run": self.run, "start_day": self.start_day, "end_day": self.end_day, "days": self.days}


@dataclass(frozen=True)
class ShareShift:
    """Attempt shares over one dimension in both windows, and the distance between them."""

    dimension: str
    keys: tuple[str, ...]
    before: tuple[float, ...]
    after: tuple[float, ...]
    total_variation: float
    jensen_shannon: float
    source: str = TRUTH

    def to_dict(self) -> dict[str, Any]:
        return {
            "dimension": self.dimension,
            "source": self.source,
            "total_variation": self.total_variation,
            "jensen_shannon": self.jensen_shannon,
            "shares": {k: {"before": b, "after": a} for k, b, a in zip(self.keys, self.before, self.after)},
        }


@dataclass(frozen=True)
class WeightedDisplacement:
    """Bowers & Johnson's measures for one response / buffer / control split (truth attempts, persons).

    ``flag`` is ``ok`` when WDQ could be read, otherwise why not: ``control_empty``
    (no control attempts in a window: no ratio is defined), ``no_buffer`` (no buffer
    options), ``no_success`` (the success measure is zero or positive, so the
    response area did not fall relative to control and WDQ has no reading).
    """

    response_before: int
    response_after: int
    buffer_before: int
    buffer_after: int
    control_before: int
    control_after: int
    gross_effect: int
    net_effect: float | None
    success_measure: float | None
    buffer_displacement_measure: float | None
    wdq: float | None
    total_net_effect: float | None
    flag: str
    note: str
    source: str = TRUTH

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


@dataclass(frozen=True)
class BeforeAfter:
    """One figure measured in both windows."""

    measure: str
    source: str
    before: float
    after: float

    @property
    def change(self) -> float:
        return self.after - self.before

    def to_dict(self) -> dict[str, Any]:
        return {"source": self.source, "before": self.before, "after": self.after, "change": self.change}


@dataclass(frozen=True)
class DisplacementResult:
    """Every displacement measure of one comparison; ``before`` is the first window, ``after`` the second."""

    design: str
    label: str
    before: Window
    after: Window
    shares: tuple[ShareShift, ...]
    weighted: WeightedDisplacement | None
    areas_from: str
    crossings_vs_detections: CrossingsVsDetections
    attempts_per_day: BeforeAfter
    displaced_out_per_day: BeforeAfter
    hazard_weighted_share: BeforeAfter
    notes: tuple[str, ...] = ()

    def share(self, dimension: str) -> ShareShift:
        """The share shift over ``dimension`` (one of DIMENSIONS)."""
        return next(s for s in self.shares if s.dimension == dimension)

    def to_dict(self) -> dict[str, Any]:
        """A JSON-safe nested dict (no NaN or infinity: undefined figures are None)."""
        data = {
            "design": self.design,
            "label": self.label,
            "before": self.before.to_dict(),
            "after": self.after.to_dict(),
            "shares": [s.to_dict() for s in self.shares],
            "weighted_displacement": self.weighted.to_dict() if self.weighted else None,
            "areas_from": self.areas_from,
            "crossings_vs_detections": self.crossings_vs_detections.to_dict(),
            "attempts_per_day": self.attempts_per_day.to_dict(),
            "displaced_out_per_day": self.displaced_out_per_day.to_dict(),
            "hazard_weighted_share": self.hazard_weighted_share.to_dict(),
            "notes": list(self.notes),
        }
        return _json_safe(data)

    def to_frame(self) -> pd.DataFrame:
        """One row per figure: section, measure, source, before, after, value, note.

        Paired figures fill before and after, and value holds after - before;
        single-valued figures (distances, WDQ measures, relative changes) fill value only.
        """
        rows: list[tuple[Any, ...]] = []

        def add(
            section: str, measure: str, source: str,
            before: Any = None, after: Any = None, value: Any = None, note: str = "",
        ) -> None:
            rows.append((section, measure, source, before, after, value, note))

        for s in self.shares:
            add(f"share.{s.dimension}", "total_variation", s.source, value=s.total_variation)
            add(f"share.{s.dimension}", "jensen_shannon", s.source, value=s.jensen_shannon)
            for key, b, a in zip(s.keys, s.before, s.after):
                add(f"share.{s.dimension}", key, s.source, b, a, a - b)
        if self.weighted is not None:
            w = self.weighted
            for area in AREAS:
                before, after = getattr(w, f"{area}_before"), getattr(w, f"{area}_after")
                add("weighted_displacement", f"{area}_persons", w.source, before, after)
            for name in WEIGHTED_FIGURES:
                flag = w.flag if name == "wdq" else ""
                add("weighted_displacement", name, w.source, value=getattr(w, name), note=flag)
        c = self.crossings_vs_detections
        for rate in (c.crossings, c.detections):
            add("net_effect", rate.measure, rate.source, rate.before, rate.after, rate.difference)
            add("net_effect", f"{rate.measure}_difference_low", rate.source, value=rate.low)
            add("net_effect", f"{rate.measure}_difference_high", rate.source, value=rate.high)
            add("net_effect", f"{rate.measure}_p_value", rate.source, value=rate.p_value)
            add("net_effect", f"{rate.measure}_relative_change", rate.source, value=rate.relative)
        add("net_effect", "verdict", f"{TRUTH}+{OBSERVED}", note=c.verdict)
        for figure in (self.attempts_per_day, self.displaced_out_per_day, self.hazard_weighted_share):
            add("context", figure.measure, figure.source, figure.before, figure.after, figure.change)
        return pd.DataFrame(rows, columns=["section", "measure", "source", "before", "after", "value", "note"])

    def summary(self) -> str:
        """A readable table; every line names its record set (truth / observed)."""
        lines = [
            self.label,
            f"  before: {self.before.describe()}",
            f"  after:  {self.after.describe()}",
            "  How far the pattern of attempts moved: TV (total variation) is the share of attempts that would have",
            "  to move to turn one pattern into the other (0 = the same, 1 = nothing in common); JS (Jensen-Shannon",
            "  distance, 0 to 1) is a smoother reading of the same, less moved by small options.",
            f"  {'attempt share shift':<44}{'TV':>8}{'JS':>8}",
        ]
        for s in self.shares:
            moved = f"{s.total_variation:.0%} of attempts moved to other {DIMENSION_WORDS[s.dimension]}"
            lines.append(f"    {s.dimension:<42}{s.total_variation:>8.3f}{s.jensen_shannon:>8.3f}  {s.source}"
                         f"  ({moved})")
        lines.append(f"  {'shares':<44}{'before':>8}{'after':>8}")
        for s in self.shares:
            if s.dimension == "option":
                continue  # point, band and class lines say where; the option vector is in to_frame()
            for key, b, a in zip(s.keys, s.before, s.after):
                lines.append(f"    {s.dimension + ' ' + key:<42}{b:>8.3f}{a:>8.3f}  {s.source}")
        for figure in (self.attempts_per_day, self.displaced_out_per_day, self.hazard_weighted_share):
            lines.append(_line(figure.measure.replace("_", " "), figure.before, figure.after, figure.source))
        c = self.crossings_vs_detections
        lines.append(_line("crossings per day", c.crossings.before, c.crossings.after, TRUTH))
        lines.append(_line("detections per day", c.detections.before, c.detections.after, OBSERVED))
        lines.append(f"  verdict: {c.verdict.replace('_', ' ')}: {c.reason}  {TRUTH}+{OBSERVED}")
        if self.weighted is None:
            lines.append(f"  weighted displacement quotient: not computed ({self.areas_from})  {TRUTH}")
        else:
            w = self.weighted
            lines.append(f"  weighted displacement ({self.areas_from})")
            for area in AREAS:
                before, after = getattr(w, f"{area}_before"), getattr(w, f"{area}_after")
                lines.append(f"    {area + ' persons':<42}{before:>8,}{after:>8,}  {w.source}")
            for name in WEIGHTED_FIGURES:
                value = getattr(w, name)
                shown = "n/a" if value is None else (f"{value:,}" if isinstance(value, int) else f"{value:,.3f}")
                lines.append(f"    {name.replace('_', ' '):<42}{shown:>16}  {w.source}")
            lines.append(f"    {w.note}")
        lines.extend(f"  note: {n}" for n in self.notes)
        lines.append("  (truth = simulated ground truth; observed = what an agency would hold. Model estimates, not counts.)")
        return "\n".join(lines)


def _line(label: str, before: float, after: float, source: str) -> str:
    """One summary row: label, before, after, record set."""
    return f"  {label:<44}{before:>8.3f}{after:>8.3f}  {source}"


# -- the measures, usable on their own ----------------------------------------------------------
def total_variation(p: ArrayLike, q: ArrayLike) -> float:
    """Total-variation distance between two share vectors: half the sum of absolute differences."""
    return float(0.5 * np.abs(np.asarray(p, float) - np.asarray(q, float)).sum())


def jensen_shannon(p: ArrayLike, q: ArrayLike) -> float:
    """Jensen-Shannon distance (square root of the divergence), base 2 so it lies in [0, 1]."""
    return float(jensenshannon(np.asarray(p, float), np.asarray(q, float), base=2))


def weighted_displacement(
    rb: int, ra: int, db: int, da: int, cb: int, ca: int, has_buffer: bool = True
) -> WeightedDisplacement:
    """Bowers & Johnson's gross / net effect, success and buffer measures, WDQ and total net effect.

    ``r``, ``d``, ``c``: response, buffer and control counts; ``b`` before, ``a`` after.
    Undefined figures are None and ``flag`` / ``note`` say why (see :class:`WeightedDisplacement`).
    """
    counts = dict(
        response_before=int(rb), response_after=int(ra), buffer_before=int(db),
        buffer_after=int(da), control_before=int(cb), control_after=int(ca),
    )
    gross = counts["response_before"] - counts["response_after"]
    if cb == 0 or ca == 0:
        empty = "before" if cb == 0 else "after"
        # TNE needs only Cb; with Ca = 0 the control fell to nothing, so every before count scales to 0.
        tne = None if cb == 0 else float((rb * ca / cb - ra) + (db * ca / cb - da))
        return WeightedDisplacement(
            **counts, gross_effect=gross, net_effect=None, success_measure=None, buffer_displacement_measure=None,
            wdq=None, total_net_effect=tne, flag="control_empty",
            note=f"no control attempts {empty}: ratios to control are undefined, so no WDQ",
        )
    success = ra / ca - rb / cb
    buffer_measure = da / ca - db / cb
    tne = float((rb * ca / cb - ra) + (db * ca / cb - da))
    if not has_buffer:
        flag, wdq, note = "no_buffer", None, "no buffer options: WDQ needs a buffer area"
    elif success >= 0:
        flag, wdq = "no_success", None
        note = f"success measure {success:+.3f} >= 0: the response area did not fall against control; WDQ has no reading"
    else:
        flag, wdq = "ok", buffer_measure / success
        note = _wdq_reading(wdq)
    return WeightedDisplacement(
        **counts, gross_effect=gross, net_effect=-success, success_measure=success,
        buffer_displacement_measure=buffer_measure, wdq=wdq, total_net_effect=tne, flag=flag, note=note,
    )


def _wdq_reading(wdq: float) -> str:
    """Guerette (2009), appendix C: how to read a WDQ when the response succeeded."""
    if wdq > 1:
        return f"WDQ {wdq:.3f} > 1: diffusion of benefits into the buffer, larger than the direct effect"
    if wdq > 0:
        return f"WDQ {wdq:.3f} in (0, 1]: diffusion of benefits into the buffer"
    if wdq == 0:
        return "WDQ 0: neither displacement nor diffusion"
    if wdq >= -1:
        return f"WDQ {wdq:.3f} in [-1, 0): displacement into the buffer, smaller than the direct effect"
    return f"WDQ {wdq:.3f} < -1: displacement into the buffer outweighs the direct effect"


# -- reading runs ---------------------------------------------------------------------------------
@dataclass(frozen=True)
class _Run:
    """The records of one run directory that displacement needs."""

    path: Path
    world: World
    days: int
    seed: int | None
    warmup_days: int
    attempts: pd.DataFrame
    exits: pd.DataFrame
    detections: pd.DataFrame


def _read_run(run_dir: str | Path) -> _Run:
    path = Path(run_dir)
    if not path.is_dir():
        raise DisplacementInputError(f"{path}: no such run directory")
    problem = damage(path)
    if problem is not None:
        raise DisplacementInputError(f"{problem}; the run is damaged: rerun it")
    missing = [name for name in TRUTH_COLUMNS if not (path / TRUTH_DIR / f"{name}.parquet").is_file()]
    if missing:
        raise DisplacementInputError(
            f"{path}: no truth records ({TRUTH_DIR}/{missing[0]}.parquet missing); displacement needs a whole run directory"
        )
    daily_file = path / DAILY_FILE
    if not daily_file.is_file():
        raise DisplacementInputError(f"{daily_file}: missing; displacement needs a whole run directory")
    # The daily table has one row per simulated day, warm-up included, so it gives the span of the records.
    daily_days = pd.read_parquet(daily_file, columns=["day"])["day"]
    if daily_days.empty:
        raise DisplacementInputError(f"{daily_file}: no days recorded")
    manifest = _read_json(path / MANIFEST_FILE)
    if not isinstance(manifest, dict):
        raise DisplacementInputError(f"{path / MANIFEST_FILE}: expected a JSON object")
    world = parse_world(_read_json(path / WORLD_FILE), path / WORLD_FILE)
    truth = read_truth(path)
    encounters = read_observed(path)["encounters"]
    attempts = truth["attempts"].copy()
    attempts["option"] = attempts["point"] + "/" + attempts["band"] + "/" + attempts["vehicle_class"]
    if "depth" not in attempts:  # records from before depth was recorded: every attempt at the first level
        attempts["depth"] = world.depths[0].name
    seed, warmup = manifest.get("seed"), manifest.get("warmup_days", 0)
    return _Run(
        path=path,
        world=world,
        days=int(daily_days.max()) + 1,
        seed=seed if isinstance(seed, int) else None,
        warmup_days=warmup if isinstance(warmup, int) else 0,
        attempts=attempts,
        exits=truth["exits"],
        detections=encounters[encounters["kind"] == "detection"],
    )


def _read_json(path: Path) -> Any:
    if not path.is_file():
        raise DisplacementInputError(f"{path}: missing; displacement needs a whole run directory")
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise DisplacementInputError(f"{path}: not valid JSON ({exc})") from None


def _in_window(frame: pd.DataFrame, window: Window) -> pd.DataFrame:
    return frame[(frame["day"] >= window.start_day) & (frame["day"] < window.end_day)]


def _option_keys(world: World, dimension: str) -> list[str]:
    """Every value of a dimension in the world's option space, in world order."""
    names = {"point": world.point_names, "band": world.band_names, "vehicle_class": world.class_names,
             "depth": world.depth_names}  # fmt: skip
    if dimension == "option":
        return [f"{p}/{b}/{c}" for p in names["point"] for b in names["band"] for c in names["vehicle_class"]]
    return list(names[dimension])


def _share_shift(dimension: str, base_keys: list[str], before: pd.DataFrame, after: pd.DataFrame) -> ShareShift:
    b = before.groupby(dimension)["persons"].sum()
    a = after.groupby(dimension)["persons"].sum()
    # Keys outside the world's option space cannot come from a valid run, but counting them keeps shares summing to 1.
    extra = sorted((set(b.index) | set(a.index)) - set(base_keys))
    keys = base_keys + extra
    p = b.reindex(keys, fill_value=0).to_numpy(float)
    q = a.reindex(keys, fill_value=0).to_numpy(float)
    p, q = p / p.sum(), q / q.sum()
    return ShareShift(
        dimension, tuple(keys), tuple(p.tolist()), tuple(q.tolist()), total_variation(p, q), jensen_shannon(p, q)
    )


def _area_of_options(world: World, areas: DisplacementAreas) -> dict[str, str]:
    """Option key -> the one area it belongs to; an option in two areas would count twice, so it is refused."""

    def matches(selector: AreaSelector, point: str, band: str, cls: str) -> bool:
        given = (selector.point, selector.band, selector.vehicle_class)
        return all(g is None or g == value for g, value in zip(given, (point, band, cls)))

    owner: dict[str, str] = {}
    for point in world.point_names:
        for band in world.band_names:
            for cls in world.class_names:
                key = f"{point}/{band}/{cls}"
                for area in AREAS:
                    if any(matches(s, point, band, cls) for s in getattr(areas, area)):
                        if key in owner:
                            raise DisplacementInputError(
                                f"displacement areas: option {key} is in both the {owner[key]} and the {area} area"
                            )
                        owner[key] = area
    return owner


def _weighted(
    world: World, areas: DisplacementAreas, before: pd.DataFrame, after: pd.DataFrame
) -> WeightedDisplacement:
    owner = _area_of_options(world, areas)

    def counts(frame: pd.DataFrame) -> dict[str, int]:
        by_area = frame.groupby(frame["option"].map(owner))["persons"].sum()
        return {area: int(by_area.get(area, 0)) for area in AREAS}

    b, a = counts(before), counts(after)
    return weighted_displacement(
        b["response"], a["response"], b["buffer"], a["buffer"], b["control"], a["control"],
        has_buffer=bool(areas.buffer),
    )


def _compare(
    design: str,
    label: str,
    first: _Run,
    second: _Run,
    before: Window,
    after: Window,
    areas: DisplacementAreas | None,
    areas_from: str,
    notes: list[str],
    paired: bool = False,
) -> DisplacementResult:
    """Every measure for two windows; ``first`` supplies the option space and hazards; ``paired`` days pair up."""
    att_b, att_a = _in_window(first.attempts, before), _in_window(second.attempts, after)
    for frame, window, side in ((att_b, before, "before"), (att_a, after, "after")):
        if frame["persons"].sum() == 0:
            raise DisplacementInputError(
                f"{window.run}: no attempts in {side} window (days {window.start_day}-{window.end_day - 1})"
            )
    shares = tuple(_share_shift(dim, _option_keys(first.world, dim), att_b, att_a) for dim in DIMENSIONS)
    weighted = _weighted(first.world, areas, att_b, att_a) if areas is not None else None

    def per_day(frame: pd.DataFrame, window: Window) -> float:
        return float(frame["persons"].sum()) / window.days

    def exits_per_day(run: _Run, window: Window) -> float:
        frame = _in_window(run.exits, window)
        return per_day(frame[frame["state"] == "displaced_out"], window)

    def daily(frame: pd.DataFrame, window: Window, count: str | None) -> np.ndarray:
        """Per day of the window: the sum of ``count`` (persons), or the number of rows when it is None."""
        values = frame[count] if count is not None else pd.Series(1, index=frame.index)
        per = values.groupby(frame["day"]).sum()
        return per.reindex(range(window.start_day, window.end_day), fill_value=0).to_numpy(float)

    crossed_b, crossed_a = att_b[att_b["outcome"] == "crossed"], att_a[att_a["outcome"] == "crossed"]
    # One encounter row is one person found, so the row count is persons.
    effect = net_effect(
        (daily(crossed_b, before, "persons"), daily(crossed_a, after, "persons")),
        (daily(_in_window(first.detections, before), before, None),
         daily(_in_window(second.detections, after), after, None)),
        paired=paired,
    )
    hazard = {p.name: p.hazard for p in first.world.boarding_points}
    depth_hazard = {d.name: d.hazard for d in first.world.depths}
    return DisplacementResult(
        design=design,
        label=label,
        before=before,
        after=after,
        shares=shares,
        weighted=weighted,
        areas_from=areas_from,
        crossings_vs_detections=effect,
        attempts_per_day=BeforeAfter("attempts_per_day", TRUTH, per_day(att_b, before), per_day(att_a, after)),
        displaced_out_per_day=BeforeAfter(
            "displaced_out_per_day", TRUTH, exits_per_day(first, before), exits_per_day(second, after)
        ),
        hazard_weighted_share=BeforeAfter(
            "hazard_weighted_share", TRUTH,
            hazard_weighted_share(att_b, hazard, depth_hazard), hazard_weighted_share(att_a, hazard, depth_hazard),
        ),
        notes=tuple(notes),
    )


def _json_safe(value: Any) -> Any:
    """Plain JSON types; any non-finite float (none is expected) becomes None rather than invalid JSON."""
    if isinstance(value, dict):
        return {str(k): _json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_json_safe(v) for v in value]
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(value) else None
    return value


# -- the public entry points ----------------------------------------------------------------------------
def displacement_within_run(
    run_dir: str | Path,
    day: int | None = None,
    areas: DisplacementAreas | None = None,
) -> DisplacementResult:
    """Compare the days before ``day`` with the days from it, in one run.

    ``day`` defaults to the first intervention day in the run's world.json.
    Days count from the start of the records; the before window starts after
    the run's warm-up (manifest ``warmup_days``), as the run's own summary does.
    ``areas`` (response / buffer / control) default to the world's
    ``displacement`` section; with neither, the WDQ is not computed.
    """
    run = _read_run(run_dir)
    world = run.world
    notes: list[str] = []
    if day is None:
        if not world.interventions:
            raise DisplacementInputError(
                f"{run.path / WORLD_FILE}: interventions: none defined, so there is no day to compare around"
            )
        day = min(i.day for i in world.interventions)
    start = run.warmup_days
    if not start < day < run.days:
        raise DisplacementInputError(
            f"{run.path}: day {day} leaves no days on one side (the run has days {start}-{run.days - 1} after warm-up)"
        )
    at_day = [i.name for i in world.interventions if i.day == day]
    later = [f"day {i.day}: {i.name}" for i in world.interventions if i.day > day]
    if later:
        notes.append(f"later interventions also fall in the after window ({'; '.join(later)})")
    label = f"Displacement within {run.path}: before vs from day {day}" + (f" ({', '.join(at_day)})" if at_day else "")
    areas, areas_from = _choose_areas(areas, [run])
    return _compare(
        "within_run", label, run, run, Window(str(run.path), start, day), Window(str(run.path), day, run.days),
        areas, areas_from, notes,
    )


def displacement_between_runs(
    run_a: str | Path,
    run_b: str | Path,
    warmup: int | None = None,
    areas: DisplacementAreas | None = None,
) -> DisplacementResult:
    """Compare a baseline run (A, "before") with a policy run (B, "after"), dropping ``warmup`` days of each.

    ``warmup`` None drops the runs' own warm-up (the longer of the two, from
    their manifests). Use the same seed for both (common random numbers): the
    days then pair up and the test is paired; a note says when the seeds differ.
    ``areas`` default to run B's world ``displacement`` section, then run A's.
    """
    first, second = _read_run(run_a), _read_run(run_b)
    if warmup is None:
        warmup = max(first.warmup_days, second.warmup_days)
    if warmup < 0:
        raise DisplacementInputError(f"--warmup: expected 0 or more days, got {warmup}")
    for run in (first, second):
        if warmup >= run.days:
            raise DisplacementInputError(f"{run.path}: a warm-up of {warmup} days leaves none of its {run.days} days; "
                                         f"give a shorter --warmup")
    notes: list[str] = []
    for run in (first, second):
        if run.warmup_days > warmup:
            notes.append(f"{run.path} ran a {run.warmup_days}-day warm-up that this comparison includes")
    if first.seed != second.seed:
        notes.append(f"seeds differ ({first.seed} vs {second.seed}): differences include chance, not only the policy")
    for what, label in (("point_names", "boarding points"), ("band_names", "time bands"), ("class_names", "classes")):
        if getattr(first.world, what) != getattr(second.world, what):
            notes.append(f"the runs' worlds differ in their {label}; shares use run A's option space")
    areas, areas_from = _choose_areas(areas, [second, first])
    label = f"Displacement between runs: baseline {first.path} vs policy {second.path}"
    paired = first.seed is not None and first.seed == second.seed and first.days == second.days
    return _compare(
        "between_runs", label, first, second, Window(str(first.path), warmup, first.days),
        Window(str(second.path), warmup, second.days), areas, areas_from, notes, paired,
    )


def _choose_areas(areas: DisplacementAreas | None, runs: list[_Run]) -> tuple[DisplacementAreas | None, str]:
    """The areas passed in, else the first run's world that defines them; and where they came from."""
    if areas is not None:
        return areas, "areas passed in"
    for run in runs:
        if run.world.displacement is not None:
            return run.world.displacement, f"areas from {run.path / WORLD_FILE}"
    return None, "no displacement areas in world.json and none passed in"


def write_displacement(run_dir: str | Path, day: int | None = None) -> DisplacementResult:
    """Compute :func:`displacement_within_run` and write ``RUN_DIR/displacement.json`` atomically."""
    result = displacement_within_run(run_dir, day)
    write_json(result.to_dict(), Path(run_dir) / DISPLACEMENT_FILE)
    return result
