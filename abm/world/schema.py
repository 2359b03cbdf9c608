"""The typed schema of a world file.

A world describes one fictional freight crossing: vehicle classes, traffic,
boarding points, check methods, stations in route order, departures, the
inspection roster and the population of would-be crossers. Every model forbids
unknown keys so a misspelt key is an error, not a silently ignored default.
Cross-references between sections are checked in :mod:`abm.world.references`.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field, field_validator, model_validator


def _number_only(value: Any) -> Any:
    """Refuse true/false and text where a number belongs (lax mode would read ``true`` as 1)."""
    if isinstance(value, bool):
        raise ValueError(f"expected a number, got {str(value).lower()}")
    if isinstance(value, str):
        raise ValueError(f"expected a number, got the text {value!r}")
    return value


NumberOnly = BeforeValidator(_number_only)  # shared by every file schema of the project
# No quantity of a world reaches a billion in its unit (minutes, vehicles, people, utility); a larger number is a
# typo, and one near the float or integer limits would overflow the engine's arithmetic (common practice, no source).
LARGEST = 1e9
Probability = Annotated[float, Field(ge=0.0, le=1.0), NumberOnly]
NonNegative = Annotated[float, Field(ge=0.0, le=LARGEST), NumberOnly]
Positive = Annotated[float, Field(gt=0.0, le=LARGEST), NumberOnly]
Count = Annotated[int, Field(ge=0, le=int(LARGEST)), NumberOnly]
Hour = Annotated[int, Field(ge=0, le=24), NumberOnly]
NAME_PATTERN = r"^[A-Za-z0-9_\-]+$"
CLOCK_PATTERN = r"^([01]\d|2[0-3]):[0-5]\d$"
Name = Annotated[str, Field(min_length=1, max_length=80, pattern=NAME_PATTERN)]

SHARE_TOLERANCE = 1e-6
DEFAULT_KEY = "default"
MONTHS = ("jan", "feb", "mar", "apr", "may", "jun", "jul", "aug", "sep", "oct", "nov", "dec")


def covers_no_hour(span: tuple[int, int]) -> bool:
    """True for a [start, end) span with no hour in it: equal ends, or [24, 0] (24 wraps to 0)."""
    return span[0] % 24 == span[1] % 24 and not (span[0] == 0 and span[1] == 24)


class Strict(BaseModel):
    """Base for every section: unknown keys are errors, values are not coerced loosely."""

    # Not strict=True: YAML gives lists where tuples are declared. Infinity and NaN are refused
    # because no count, time or chance in a world can be infinite.
    model_config = ConfigDict(extra="forbid", frozen=True, strict=False, allow_inf_nan=False)


def _check_shares(values: dict[str, float], what: str) -> dict[str, float]:
    total = sum(values.values())
    if values and abs(total - 1.0) > SHARE_TOLERANCE:
        raise ValueError(f"{what} must sum to 1 (within 1e-6), got {total:.6g}")
    return values


class VehicleClass(Strict):
    """A kind of vehicle: its share of traffic and how many people can hide in one."""

    name: Name
    share: Probability
    capacity: Count = Field(description="people who can hide in one vehicle")
    risk_weight: Positive = Field(1.0, description="relative risk score used by targeted selection")
    cargo: dict[Name, Probability] = Field(
        default_factory=dict, description="share of this class's vehicles carrying each cargo type; empty: unstated"
    )
    length_metres: Positive | None = Field(
        None, description="length one vehicle takes on a departure measured in metres (departures.length_metres)"
    )

    @field_validator("cargo")
    @classmethod
    def _cargo_shares(cls, v: dict[str, float]) -> dict[str, float]:
        return _check_shares(v, "cargo shares")


class Traffic(Strict):
    """Vehicle arrivals: a non-homogeneous Poisson stream by hour and weekday."""

    vehicles_per_day: NonNegative
    hourly_profile: list[NonNegative] = Field(min_length=24, max_length=24)
    weekday_factors: list[NonNegative] = Field(
        default=[1.0] * 7, min_length=7, max_length=7, description="arrival multiplier per weekday, Monday first"
    )

    @field_validator("hourly_profile")
    @classmethod
    def _profile_not_all_zero(cls, v: list[float]) -> list[float]:
        if sum(v) <= 0:
            raise ValueError("hourly_profile needs at least one positive hour")
        return v


class ServiceTime(Strict):
    """Distribution of a check's duration in minutes."""

    dist: Literal["exponential", "deterministic", "lognormal", "gamma", "uniform"]
    mean: Positive
    cv: NonNegative = Field(0.0, description="coefficient of variation (lognormal, gamma)")
    spread: NonNegative = Field(0.0, description="half-width as a share of the mean (uniform)")
    class_factor: dict[str, Positive] = Field(
        default_factory=dict, description="duration multiplier per vehicle class or 'default' (e.g. unloading)"
    )
    cargo_factor: dict[str, Positive] = Field(
        default_factory=dict, description="duration multiplier per cargo type or 'default'"
    )

    @model_validator(mode="after")
    def _shape_given(self) -> "ServiceTime":
        if self.dist in ("lognormal", "gamma") and self.cv <= 0:
            raise ValueError(f"a {self.dist} service time needs cv > 0")
        if self.dist == "uniform" and not 0 < self.spread <= 1:
            raise ValueError("a uniform service time needs 0 < spread <= 1")
        return self


class CargoEffect(Strict):
    """How a cargo type confounds a method (e.g. gases given off or absorbed by produce, timber, paper)."""

    detection_factor: NonNegative = Field(1.0, description="multiplies the detection chance (capped at 1)")
    false_alarm_factor: NonNegative = Field(1.0, description="multiplies the false-alarm chance (capped at 1)")


class WeatherEffect(Strict):
    """How one weather state changes a method (wind shakes a vehicle a motion sensor listens to)."""

    false_alarm: Probability = Field(description="false-alarm chance in this weather, replacing the method's own")


class Fatigue(Strict):
    """A team that tires: sensitivity decays with minutes worked since its last rest, and rest is enforced.

    A check starting after w minutes of work since the lane's last rest finds
    people with the method's chance times exp(-w / decay_minutes). A lane that
    has worked work_minutes or more when a check ends rests rest_minutes before
    its next check; any gap of rest_minutes or more between checks (idle or off
    duty) also counts as a rest.
    """

    decay_minutes: Positive = Field(description="time constant of the exponential decay of sensitivity")
    work_minutes: Positive = Field(description="work after which a lane must rest")
    rest_minutes: Positive = Field(description="length of a rest")


class CheckMethod(Strict):
    """A way of checking a vehicle: imaging, motion sensing, gas probe, dog team, manual search."""

    name: Name
    service: ServiceTime
    detection: dict[str, Probability] = Field(
        description="chance that a check finds people hidden in a vehicle, per class or 'default'"
    )
    false_alarm: Probability = Field(0.0, description="chance of an alarm on a vehicle when nobody is found")
    outdoor: bool = Field(False, description="suspended in the weather states listed in weather.suspend_outdoor")
    weather: dict[Name, WeatherEffect] = Field(default_factory=dict, description="effect per weather state")
    cargo: dict[Name, CargoEffect] = Field(default_factory=dict, description="effect per cargo type")
    depth_factor: dict[Name, NonNegative] = Field(
        default_factory=dict, description="detection multiplier per concealment depth level (default 1)"
    )
    fatigue: Fatigue | None = None


class Selection(Strict):
    """Which arriving vehicles a station checks."""

    rule: Literal["all", "fraction", "targeted", "queue_aware"] = "all"
    fraction: Probability = 1.0
    fraction_by_band: dict[str, Probability] = Field(default_factory=dict)
    class_factor: dict[str, NonNegative] = Field(default_factory=dict)
    threshold: float = Field(0.0, description="targeted: check when log(risk_weight) + noise exceeds this")
    noise_sd: NonNegative = Field(1.0, description="targeted: spread of the risk-score noise")
    queue_threshold: Count = Field(0, description="queue_aware: queue length at which the station is busy")
    busy_fraction: Probability = Field(1.0, description="queue_aware: selection share while busy")
    fallback_method: Name | None = Field(None, description="queue_aware: faster method used while busy")

    @model_validator(mode="after")
    def _rule_has_its_keys(self) -> "Selection":
        if self.rule == "queue_aware" and self.queue_threshold < 1:
            raise ValueError("a queue_aware selection needs queue_threshold >= 1")
        return self


class Station(Strict):
    """A place on the route where vehicles may be checked."""

    name: Name
    role: Literal["primary", "secondary"] = "primary"
    method: Name
    lanes: Count = Field(description="physical lanes or bays: the most servers the roster can use")
    travel_minutes: NonNegative = Field(0.0, description="driving time from the previous point on the route")
    selection: Selection = Field(default_factory=Selection)
    refer_to: Name | None = Field(None, description="secondary station that searches vehicles after an alarm")
    suspended_method: Name | None = Field(
        None, description="method used while the station's outdoor method is suspended; none: vehicles pass unchecked"
    )


class Stop(Strict):
    """How a vehicle class uses a boarding point."""

    share: Probability
    dwell_minutes: NonNegative = 0.0


class BoardingPoint(Strict):
    """A place where a person can get onto a vehicle."""

    name: Name
    before_station: Name = Field(description="first station downstream, or 'departure' after every station")
    lead_minutes: NonNegative = Field(0.0, description="minutes before the vehicle reaches that station")
    stops: dict[str, Stop]
    interdiction: dict[str, Probability] = Field(
        default_factory=dict, description="chance an attempt is stopped here, per time band or 'default'"
    )
    hazard: Probability = Field(0.0, description="how dangerous boarding here is for the person (0-1)")
    effort: NonNegative = Field(0.0, description="cost of reaching this point, in utility units")


WEEKDAYS = ("mon", "tue", "wed", "thu", "fri", "sat", "sun")  # day 0 of a run is a Monday
Weekday = Literal["mon", "tue", "wed", "thu", "fri", "sat", "sun"]
SERVICE_KINDS = ("sailing", "train", "convoy", "slot")


def clock_minute(clock: str) -> int:
    """Minutes after midnight of an HH:MM clock time."""
    hours, minutes = clock.split(":")
    return int(hours) * 60 + int(minutes)


class Delay(Strict):
    """How late a departure leaves when it is late: a chance per departure and a distribution of minutes."""

    chance: Probability = Field(description="chance that a departure leaves late")
    dist: Literal["exponential", "deterministic", "lognormal", "gamma", "uniform"] = Field(
        "exponential", description="distribution of the minutes late, given late"
    )
    mean_minutes: Positive = Field(description="mean minutes late, given late")
    cv: NonNegative = Field(0.0, description="coefficient of variation of the minutes late (lognormal, gamma)")
    spread: NonNegative = Field(0.0, description="half-width as a share of the mean (uniform)")

    @model_validator(mode="after")
    def _shape_given(self) -> "Delay":
        if self.dist in ("lognormal", "gamma") and self.cv <= 0:
            raise ValueError(f"a {self.dist} delay needs cv > 0")
        if self.dist == "uniform" and not 0 < self.spread <= 1:
            raise ValueError("a uniform delay needs 0 < spread <= 1")
        return self


class ServiceTerms(Strict):
    """What one departure (or a timetable's departures) carries; unset terms come from the departures section."""

    days: list[Weekday] = Field(
        default_factory=lambda: list(WEEKDAYS), min_length=1, description="weekdays it runs (day 0 is a Monday)"
    )
    capacity: Count | None = Field(None, description="vehicles it carries (unset: the departures section's)")
    length_metres: Positive | None = Field(
        None, description="metres of vehicles it carries, by the classes' length_metres (unset: the section's)"
    )
    cutoff_minutes: NonNegative | None = Field(
        None, description="check-in closes this many minutes before it leaves (unset: the section's)"
    )
    delay: Delay | None = Field(None, description="its chance and minutes of delay (unset: the section's)")
    cancellation: Probability | None = Field(None, description="chance it is cancelled on a day (unset: the section's)")


class Service(ServiceTerms):
    """One departure in the timetable, at a clock time on the weekdays it runs."""

    time: str = Field(pattern=CLOCK_PATTERN, description="departure time, HH:MM")

    @property
    def minute(self) -> int:
        return clock_minute(self.time)


class Pattern(ServiceTerms):
    """Departures generated from a first and last time and a headway, on the weekdays given.

    A pattern whose last time is before its first runs past midnight: its
    departures after midnight run on the next calendar day.
    """

    first: str = Field(pattern=CLOCK_PATTERN, description="first departure, HH:MM")
    last: str = Field(pattern=CLOCK_PATTERN, description="last departure at or before this time, HH:MM")
    headway_minutes: Annotated[float, Field(ge=1.0, le=1440.0), NumberOnly] = Field(
        description="minutes between departures"
    )

    def minutes(self) -> list[int]:
        """Minutes after midnight of the pattern's start day, ascending (past 1440 after midnight)."""
        first, last = clock_minute(self.first), clock_minute(self.last)
        if last < first:
            last += 1440
        count = int((last - first) // self.headway_minutes) + 1
        return [int(round(first + i * self.headway_minutes)) for i in range(count)]


class Departures(Strict):
    """Scheduled departures (sailings, trains, convoys or slots) that vehicles leave on, with a check-in cut-off.

    Departures are listed one by one (``services``), generated from patterns
    (``timetable``), or both. Each carries vehicles up to ``capacity``, metres of
    vehicles up to ``length_metres`` (using each class's ``length_metres``), or
    both; may leave late by ``delay``; and may be cancelled, its vehicles then
    leaving on the next departure with room.
    """

    service: Literal["sailing", "train", "convoy", "slot"] = Field(
        "sailing", description="the word for one departure, used in every output"
    )
    services: list[Service] = Field(default_factory=list, description="departures listed one by one")
    timetable: list[Pattern] = Field(default_factory=list, description="departures generated by headway")
    capacity: Count | None = Field(None, description="vehicles per departure, unless a departure sets its own")
    length_metres: Positive | None = Field(
        None, description="metres of vehicles per departure, unless a departure sets its own"
    )
    cutoff_minutes: NonNegative = Field(30.0, description="check-in closes this many minutes before departure")
    planned_minutes: NonNegative = Field(
        60.0, description="expected minutes from arrival to check-in, used to book a departure"
    )
    delay: Delay | None = Field(None, description="chance and minutes of delay of every departure; unset: none")
    cancellation: Probability = Field(0.0, description="chance a departure is cancelled on a day")

    @model_validator(mode="after")
    def _timetable_whole(self) -> "Departures":
        if not self.services and not self.timetable:
            raise ValueError("departures need at least one entry in services or timetable")
        for entry in [*self.services, *self.timetable]:
            if entry.capacity is None and entry.length_metres is None and self.capacity is None \
                    and self.length_metres is None:
                raise ValueError("every departure needs a capacity (vehicles) or length_metres: set one here or on it")
        seen: set[tuple[int, int]] = set()
        for weekday, minute, _ in self.week():
            if (weekday, minute) in seen:
                h, m = divmod(minute, 60)
                raise ValueError(f"two departures at {h:02d}:{m:02d} on {WEEKDAYS[weekday]}")
            seen.add((weekday, minute))
        return self

    def week(self) -> list[tuple[int, int, ServiceTerms]]:
        """Every departure of the week as (weekday 0-6, minute of day, its terms), in week order."""
        out = []
        for entry in self.services:
            out += [(WEEKDAYS.index(d), entry.minute, entry) for d in entry.days]
        for pattern in self.timetable:
            for d in pattern.days:
                for minute in pattern.minutes():
                    out.append(((WEEKDAYS.index(d) + minute // 1440) % 7, minute % 1440, pattern))
        return sorted(out, key=lambda row: (row[0], row[1]))


class Weather(Strict):
    """A daily weather state drawn from a distribution per calendar month.

    Day 0 is the first day of ``start_month``; the calendar has 365 days (no leap years).
    """

    states: list[Name] = Field(min_length=1)
    start_month: Annotated[int, Field(ge=1, le=12), NumberOnly] = 1
    months: dict[str, dict[str, Probability]] = Field(
        description="share of days in each state, per month (jan..dec) or 'default'"
    )
    suspend_outdoor: list[Name] = Field(default_factory=list, description="states in which outdoor methods stop")

    @field_validator("months")
    @classmethod
    def _month_shares(cls, v: dict[str, dict[str, float]]) -> dict[str, dict[str, float]]:
        for month, shares in v.items():
            _check_shares(shares, f"weather shares of '{month}'")
        return v


class DepthLevel(Strict):
    """How deep in the load people hide; deeper is harder to find and more dangerous."""

    name: Name
    hazard: NonNegative = Field(
        0.0, description="hazard added to the boarding point's for hiding this deep (their sum counts at most 1)"
    )


class Posting(Strict):
    """One alternative assignment of a flexible team; randomised command draws one a day."""

    weight: NonNegative
    hours: tuple[Hour, Hour]
    lanes: dict[str, Count] = Field(default_factory=dict)
    patrols: dict[str, Probability] = Field(default_factory=dict)

    @model_validator(mode="after")
    def _shift_not_empty(self) -> "Posting":
        if covers_no_hour(self.hours):
            raise ValueError(f"a posting needs hours to cover; {list(self.hours)} covers none")
        return self


class Team(Strict):
    """An inspection team on a daily shift: lanes it staffs and points it patrols."""

    name: Name
    hours: tuple[Hour, Hour] = Field(description="[start, end) hour; end < start wraps past midnight")
    lanes: dict[str, Count] = Field(default_factory=dict)
    patrols: dict[str, Probability] = Field(
        default_factory=dict, description="interdiction chance added at a boarding point while on duty"
    )
    flexible: bool = Field(False, description="command may move this team's capacity")
    postings: list[Posting] = Field(default_factory=list, description="alternatives for randomised command")

    @model_validator(mode="after")
    def _shift_not_empty(self) -> "Team":
        if covers_no_hour(self.hours):
            raise ValueError(f"a shift needs hours to cover; {list(self.hours)} covers none")
        return self


class Reactive(Strict):
    """Reactive command: move flexible capacity toward where detections were recent."""

    share: Probability = Field(0.3, description="share of flexible lane-hours and patrol moved each day")
    smoothing: Probability = Field(0.2, description="weight of the newest day in the smoothed detection score")


class Roster(Strict):
    """The inspection teams and how command allocates them."""

    teams: list[Team] = Field(min_length=1)
    command: Literal["fixed", "reactive", "randomised"] = "fixed"
    reactive: Reactive = Field(default_factory=Reactive)

    @model_validator(mode="after")
    def _command_has_what_it_moves(self) -> "Roster":
        flexible = [t for t in self.teams if t.flexible]
        if self.command in ("reactive", "randomised") and not flexible:
            raise ValueError(f"command '{self.command}' needs at least one team with flexible: true")
        if self.command == "randomised" and not any(t.postings for t in flexible):
            raise ValueError("command 'randomised' needs a flexible team with postings to draw from")
        return self


class StaticChoice(Strict):
    """Fixed option probabilities, factorised as point x band x class (x depth) shares."""

    point_shares: dict[str, Probability]
    band_shares: dict[str, Probability]
    class_shares: dict[str, Probability]
    depth_shares: dict[str, Probability] = Field(
        default_factory=dict, description="share of attempts hiding at each depth level; empty: all at the first"
    )

    @field_validator("point_shares", "band_shares", "class_shares", "depth_shares")
    @classmethod
    def _sum_to_one(cls, v: dict[str, float], info) -> dict[str, float]:
        return _check_shares(v, info.field_name)


class Learning(Strict):
    """Adaptive behaviour: Beta-Bernoulli beliefs about each option's risk, logit choice.

    Utility of an option = -(perceived risk x detection_cost) - effort
    - hazard_aversion x hazard - waiting (per band); choice probability is the
    logit (quantal response) with rationality lambda, mixed with a small uniform
    exploration share.
    """

    rationality: NonNegative = Field(2.0, description="lambda of the logit rule; 0 = uniform choice")
    exploration: Probability = Field(0.05, description="share of choices made uniformly at random")
    detection_cost: NonNegative = Field(5.0, description="utility lost when caught")
    hazard_aversion: NonNegative = 1.0
    band_waiting: dict[str, NonNegative] = Field(default_factory=dict, description="waiting cost per time band")
    prior_caught: Positive = Field(1.0, description="Beta prior pseudo-count of being caught")
    prior_crossed: Positive = Field(1.0, description="Beta prior pseudo-count of crossing")
    forgetting: Annotated[float, Field(gt=0.0, le=1.0)] = Field(
        0.98, description="daily decay of evidence; 1 = plain conjugate updating"
    )
    own_weight: NonNegative = 1.0
    peer_weight: NonNegative = 0.5
    peer_delay_days: Count = 1
    network_degree: Count = Field(4, description="peers each new group links to")
    rumour_weight: NonNegative = Field(0.5, description="weight of one rumoured outcome against one's own")
    rumour_delay_days: Count = 7
    rumour_noise: NonNegative = Field(0.2, description="log-normal spread of the rumoured counts")
    presence_weight: NonNegative = Field(0.0, description="weight of seen patrol presence as evidence of risk")
    presence_noise: NonNegative = 0.1


class Reinforcement(Strict):
    """Roth-Erev reinforcement learning (Erev & Roth 1998): propensities grow with payoffs."""

    recency: Probability = Field(0.1, description="forgetting of past propensity each attempt")
    experimentation: Probability = Field(0.2, description="share of payoff spread to other options")
    initial_propensity: Positive = 1.0
    payoff_crossed: NonNegative = 1.0
    payoff_caught: NonNegative = 0.0
    payoff_no_vehicle: NonNegative = 0.0


class Deterrence(Strict):
    """Give-up and move-elsewhere chances that grow with each earlier encounter."""

    give_up_step: Probability = 0.0
    move_elsewhere_step: Probability = 0.0


class Adversary(Strict):
    """The population of would-be crossers."""

    arrivals_per_day: NonNegative = Field(description="new groups arriving in the area each day")
    group_size: dict[int, Probability] = Field(default_factory=lambda: {1: 1.0})
    attempt_chance: Probability = Field(description="daily chance a waiting group attempts")
    return_delay_days: Count = 1
    give_up: Probability = Field(0.0, description="chance of giving up after an encounter")
    move_elsewhere: Probability = Field(0.0, description="chance of leaving for a route outside the model")
    identification: Probability = Field(0.0, description="chance a person is identified at an encounter")
    behaviour: Literal["static", "adaptive", "reinforcement"] = "static"
    static: StaticChoice
    adaptive: Learning = Field(default_factory=Learning)
    reinforcement: Reinforcement = Field(default_factory=Reinforcement)
    deterrence: Deterrence = Field(default_factory=Deterrence)

    @field_validator("group_size")
    @classmethod
    def _sizes(cls, v: dict[int, float]) -> dict[int, float]:
        if not v:
            raise ValueError("group_size needs at least one size")
        if min(v) < 1:
            raise ValueError("group sizes must be at least 1")
        return _check_shares(v, "group_size")

    @model_validator(mode="after")
    def _exits(self) -> "Adversary":
        if self.give_up + self.move_elsewhere > 1 + SHARE_TOLERANCE:
            raise ValueError("give_up + move_elsewhere must not exceed 1")
        return self


class Intervention(Strict):
    """A policy change from a given day: values set at dotted paths of the world."""

    day: Count
    name: str = Field(min_length=1, max_length=120)
    set: dict[str, Any] = Field(min_length=1, description="dotted path -> new value, e.g. stations.gate_imaging.lanes")


class AreaSelector(Strict):
    """Options matching every given field (an omitted field matches all)."""

    point: Name | None = None
    band: Name | None = None
    vehicle_class: Name | None = None


class DisplacementAreas(Strict):
    """Response, buffer and control areas of options for the weighted displacement quotient."""

    response: list[AreaSelector] = Field(min_length=1)
    buffer: list[AreaSelector] = Field(default_factory=list)
    control: list[AreaSelector] = Field(min_length=1)


class World(Strict):
    """A whole crossing."""

    name: str = Field(min_length=1, max_length=200)
    note: str = ""
    site: Literal["port", "terminal", "border", "crossing"] | None = Field(
        None, description="the word for the place in outputs; unset: port for sailings, terminal for other "
        "departures, border without departures"
    )
    time_bands: dict[str, tuple[Hour, Hour]]
    vehicle_classes: list[VehicleClass] = Field(min_length=1)
    traffic: Traffic
    methods: list[CheckMethod] = Field(min_length=1)
    stations: list[Station] = Field(min_length=1)
    boarding_points: list[BoardingPoint] = Field(min_length=1)
    departures: Departures | None = None
    roster: Roster
    adversary: Adversary
    interventions: list[Intervention] = Field(default_factory=list)
    displacement: DisplacementAreas | None = None
    weather: Weather | None = None
    depths: list[DepthLevel] = Field(
        default_factory=lambda: [DepthLevel(name="normal")],
        min_length=1,
        description="concealment depth levels, shallowest first; each attempt hides at one (chosen by the behaviour)",
    )

    @field_validator("interventions")
    @classmethod
    def _in_day_order(cls, v: list[Intervention]) -> list[Intervention]:
        days = [iv.day for iv in v]
        if days != sorted(set(days)):
            raise ValueError("interventions must be in day order, at most one a day")
        return v

    @field_validator("vehicle_classes")
    @classmethod
    def _class_shares(cls, v: list[VehicleClass]) -> list[VehicleClass]:
        _check_shares({c.name: c.share for c in v}, "vehicle class shares")
        return v

    # Convenience look-ups used by the engine; the schema stays the single source.
    @property
    def class_names(self) -> list[str]:
        return [c.name for c in self.vehicle_classes]

    @property
    def band_names(self) -> list[str]:
        return list(self.time_bands)

    @property
    def point_names(self) -> list[str]:
        return [p.name for p in self.boarding_points]

    @property
    def depth_names(self) -> list[str]:
        return [d.name for d in self.depths]

    @property
    def station_names(self) -> list[str]:
        return [s.name for s in self.stations]

    @property
    def method_names(self) -> list[str]:
        return [m.name for m in self.methods]

    @property
    def cargo_names(self) -> list[str]:
        """Cargo types in order of first mention across the vehicle classes."""
        return list(dict.fromkeys(k for c in self.vehicle_classes for k in c.cargo))
