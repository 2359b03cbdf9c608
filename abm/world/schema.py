"""The typed schema of a world file.

A world describes one fictional freight crossing: vehicle classes, traffic,
boarding points, check methods, stations in route order, departures, the
inspection roster and the population of would-be crossers. Every model forbids
unknown keys so a misspelt key is an error, not a silently ignored default.
Cross-references between sections are checked in :mod:`abm.world.references`.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import Field, field_validator, model_validator

from .fields import (
    Chance, Count, Days, Duration, HourOfDay, Lanes, Minutes, Multiplier, Name, NonNegative, NumberOnly, Payoff,
    Positive, PositiveMinutes, Probability, PseudoCount, Share, Strict, Utility, Weight, unit,
)
from .timetable import Departures, Metres

SHARE_TOLERANCE = 1e-6
DEFAULT_KEY = "default"
MONTHS = ("jan", "feb", "mar", "apr", "may", "jun", "jul", "aug", "sep", "oct", "nov", "dec")


def covers_no_hour(span: tuple[int, int]) -> bool:
    """True for a [start, end) span with no hour in it: equal ends, or [24, 0] (24 wraps to 0)."""
    return span[0] % 24 == span[1] % 24 and not (span[0] == 0 and span[1] == 24)


def _check_shares(values: dict[str, float], what: str) -> dict[str, float]:
    total = sum(values.values())
    if values and abs(total - 1.0) > SHARE_TOLERANCE:
        raise ValueError(f"{what} must sum to 1 (within 1e-6), got {total:.6g}")
    return values


class VehicleClass(Strict):
    """A kind of vehicle: its share of traffic and how many people can hide in one."""

    name: Name = Field(description="the class's name, the key other sections use for it")
    share: Share = Field(description="share of all vehicles in this class; the classes' shares sum to 1")
    capacity: Annotated[Count, unit("people")] = Field(description="people who can hide in one vehicle")
    risk_weight: Annotated[Positive, unit("relative weight")] = Field(
        1.0, description="relative risk score used by targeted selection (its logarithm is the score)"
    )
    cargo: dict[Name, Share] = Field(
        default_factory=dict, description="share of this class's vehicles carrying each cargo type; empty: unstated"
    )
    length_metres: Metres | None = Field(
        None, description="length one vehicle takes on a departure measured in metres (departures.length_metres)"
    )

    @field_validator("cargo")
    @classmethod
    def _cargo_shares(cls, v: dict[str, float]) -> dict[str, float]:
        return _check_shares(v, "cargo shares")


class Traffic(Strict):
    """Vehicle arrivals: a non-homogeneous Poisson stream by hour and weekday."""

    vehicles_per_day: Annotated[NonNegative, unit("vehicles per day")] = Field(
        description="mean vehicles arriving on a day whose weekday factor is 1"
    )
    hourly_profile: list[Weight] = Field(
        min_length=24, max_length=24, description="relative arrivals in each hour 00..23 (only ratios matter)"
    )
    weekday_factors: list[Annotated[NonNegative, unit("multiplier")]] = Field(
        default=[1.0] * 7, min_length=7, max_length=7, description="arrival multiplier per weekday, Monday first"
    )

    @field_validator("hourly_profile")
    @classmethod
    def _profile_not_all_zero(cls, v: list[float]) -> list[float]:
        if sum(v) <= 0:
            raise ValueError("hourly_profile needs at least one positive hour")
        return v


class ServiceTime(Duration):
    """Distribution of a check's duration in minutes."""

    class_factor: dict[str, Annotated[Positive, unit("multiplier")]] = Field(
        default_factory=dict, description="duration multiplier per vehicle class or 'default' (e.g. unloading)"
    )
    cargo_factor: dict[str, Annotated[Positive, unit("multiplier")]] = Field(
        default_factory=dict, description="duration multiplier per cargo type or 'default'"
    )


class CargoEffect(Strict):
    """How a cargo type confounds a method (e.g. gases given off or absorbed by produce, timber, paper)."""

    detection_factor: Multiplier = Field(1.0, description="multiplies the detection chance (capped at 1)")
    false_alarm_factor: Multiplier = Field(1.0, description="multiplies the false-alarm chance (capped at 1)")


class WeatherEffect(Strict):
    """How one weather state changes a method (wind shakes a vehicle a motion sensor listens to)."""

    false_alarm: Chance = Field(description="false-alarm chance in this weather, replacing the method's own")


class Fatigue(Strict):
    """A team that tires: sensitivity decays with minutes worked since its last rest, and rest is enforced.

    A check starting after w minutes of work since the lane's last rest finds
    people with the method's chance times exp(-w / decay_minutes). A lane that
    has worked work_minutes or more when a check ends rests rest_minutes before
    its next check; any gap of rest_minutes or more between checks (idle or off
    duty) also counts as a rest.
    """

    decay_minutes: PositiveMinutes = Field(description="time constant of the exponential decay of sensitivity")
    work_minutes: PositiveMinutes = Field(description="work after which a lane must rest")
    rest_minutes: PositiveMinutes = Field(description="length of a rest")


class CheckMethod(Strict):
    """A way of checking a vehicle: imaging, motion sensing, gas probe, dog team, manual search."""

    name: Name = Field(description="the method's name, which stations and fallbacks use")
    service: ServiceTime = Field(description="how long one check takes")
    detection: dict[str, Chance] = Field(
        description="chance that a check finds people hidden in a vehicle, per class or 'default'"
    )
    false_alarm: Chance = Field(0.0, description="chance of an alarm on a vehicle when nobody is found")
    outdoor: bool = Field(False, description="suspended in the weather states listed in weather.suspend_outdoor")
    weather: dict[Name, WeatherEffect] = Field(default_factory=dict, description="effect per weather state")
    cargo: dict[Name, CargoEffect] = Field(default_factory=dict, description="effect per cargo type")
    depth_factor: dict[Name, Multiplier] = Field(
        default_factory=dict, description="detection multiplier per concealment depth level (default 1)"
    )
    fatigue: Fatigue | None = Field(None, description="the team tires and must rest; null: it never tires")


class Selection(Strict):
    """Which arriving vehicles a primary station checks (a secondary one checks every vehicle referred to it).

    ``fraction`` and ``queue_aware`` select each vehicle with the share of its
    hour's band times its class factor (at most 1); ``targeted`` checks a vehicle
    when log(its class's ``risk_weight``) plus normal noise exceeds ``threshold``.
    """

    rule: Literal["all", "fraction", "targeted", "queue_aware"] = Field(
        "all", description="all vehicles; a share of them; targeted by risk score; a share that changes while busy"
    )
    fraction: Share = Field(1.0, description="fraction, queue_aware: share of vehicles selected")
    fraction_by_band: dict[str, Share] = Field(default_factory=dict, description="fraction per time band, "
                                               "replacing `fraction` in that band")
    class_factor: dict[str, Multiplier] = Field(default_factory=dict, description="multiplies the selected share "
                                                "per vehicle class (default 1)")
    threshold: Annotated[float, unit("log risk score")] = Field(
        0.0, description="targeted: check when log(risk_weight) + noise exceeds this; other rules ignore it"
    )
    noise_sd: Annotated[NonNegative, unit("log risk score")] = Field(
        1.0, description="targeted: standard deviation of the normal risk-score noise"
    )
    queue_threshold: Annotated[Count, unit("vehicles")] = Field(
        0, description="queue_aware: vehicles queueing on arrival from which the station is busy (at least 1)"
    )
    busy_fraction: Share = Field(1.0, description="queue_aware: share selected while busy, instead of `fraction`")
    fallback_method: Name | None = Field(
        None, description="queue_aware: faster method used while busy; null: the station's own"
    )

    @model_validator(mode="after")
    def _rule_has_its_keys(self) -> "Selection":
        if self.rule == "queue_aware" and self.queue_threshold < 1:
            raise ValueError("a queue_aware selection needs queue_threshold >= 1")
        return self


class Station(Strict):
    """A place on the route where vehicles may be checked.

    At every hour the lanes the teams on duty staff here may not add up to more
    than ``lanes`` (``check`` names the teams and the hour); lanes that command
    adds on a given day (a randomised posting, a reactive move) are capped at it.
    """

    name: Name = Field(description="the station's name, the key other sections use for it")
    role: Literal["primary", "secondary"] = Field(
        "primary", description="primary: on every vehicle's route; secondary: searches vehicles referred after an alarm"
    )
    method: Name = Field(description="check method used here, a name in `methods`")
    lanes: Lanes = Field(description="physical lanes or bays: the most servers the roster can use")
    travel_minutes: Minutes = Field(0.0, description="driving time from the previous point on the route")
    selection: Selection = Field(default_factory=Selection, description="which vehicles the station checks")
    refer_to: Name | None = Field(None, description="secondary station that searches vehicles after an alarm")
    suspended_method: Name | None = Field(
        None, description="method used while the station's outdoor method is suspended; none: vehicles pass unchecked"
    )


class Stop(Strict):
    """How a vehicle class uses a boarding point."""

    share: Chance = Field(description="chance that a vehicle of this class stops at the point")
    dwell_minutes: Minutes = Field(
        0.0, description="how long a stopping vehicle stands there; read but not yet used: it changes no result"
    )


class BoardingPoint(Strict):
    """A place where a person can get onto a vehicle."""

    name: Name = Field(description="the point's name, the key other sections use for it")
    before_station: Name = Field(description="first primary station downstream, or 'departure' after every station")
    lead_minutes: Minutes = Field(0.0, description=(
        "how long before the vehicle reaches `before_station` it passes the point; people board only vehicles "
        "passing while they wait, so this shifts which hour's traffic (and time band) an attempt meets"))
    stops: dict[str, Stop] = Field(description="how each vehicle class stops here; a class not listed never stops")
    interdiction: dict[str, Chance] = Field(default_factory=dict, description=(
        "chance an attempt here is stopped before boarding (the operator's own security, fences, patrols outside "
        "the roster), per time band or 'default'; teams' patrols add to it. Observed as an encounter, not a detection"))
    hazard: Annotated[Probability, unit("hazard score")] = Field(0.0, description=(
        "how dangerous boarding here is for the person; adaptive people weigh it by hazard_aversion, and every "
        "briefing reports the hazard of where attempts move"))
    effort: Utility = Field(0.0, description=(
        "cost of reaching this point, subtracted from its utility under adaptive behaviour (static ignores it)"))


class Weather(Strict):
    """A daily weather state drawn from a distribution per calendar month.

    Day 0 is the first day of ``start_month``; the calendar has 365 days (no leap years).
    """

    states: list[Name] = Field(min_length=1, description="names of the weather states")
    start_month: Annotated[int, Field(ge=1, le=12), NumberOnly, unit("month")] = Field(
        1, description="calendar month of day 0 (1 = January)"
    )
    months: dict[str, dict[str, Share]] = Field(
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

    name: Name = Field(description="the level's name, which depth_factor and depth_shares use")
    hazard: Annotated[NonNegative, unit("hazard score")] = Field(
        0.0, description="hazard added to the boarding point's for hiding this deep (their sum counts at most 1)"
    )


class Posting(Strict):
    """One alternative assignment of a flexible team; randomised command draws one a day."""

    weight: Weight = Field(description="relative chance that command draws this posting on a day")
    hours: tuple[HourOfDay, HourOfDay] = Field(description="[start, end) hour; end < start wraps past midnight")
    lanes: dict[str, Lanes] = Field(default_factory=dict, description="lanes staffed at each station while on duty")
    patrols: dict[str, Chance] = Field(
        default_factory=dict, description="interdiction chance added at a boarding point while on duty"
    )

    @model_validator(mode="after")
    def _shift_not_empty(self) -> "Posting":
        if covers_no_hour(self.hours):
            raise ValueError(f"a posting needs hours to cover; {list(self.hours)} covers none")
        return self


class Team(Strict):
    """An inspection team on a daily shift: lanes it staffs and points it patrols."""

    name: Name = Field(description="the team's name")
    hours: tuple[HourOfDay, HourOfDay] = Field(description="[start, end) hour; end < start wraps past midnight")
    lanes: dict[str, Lanes] = Field(default_factory=dict, description="lanes staffed at each station while on duty")
    patrols: dict[str, Chance] = Field(
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

    share: Share = Field(0.3, description="share of flexible lane-hours and patrol moved each day")
    smoothing: Share = Field(0.2, description="weight of the newest day in the smoothed detection score")


class Roster(Strict):
    """The inspection teams and how command allocates them."""

    teams: list[Team] = Field(min_length=1, description="inspection teams, each on a daily shift")
    command: Literal["fixed", "reactive", "randomised"] = Field("fixed", description=(
        "fixed: as rostered; reactive: flexible capacity moves toward recent detections; randomised: each flexible "
        "team draws one of its postings a day"))
    reactive: Reactive = Field(default_factory=Reactive, description="settings of reactive command")

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

    point_shares: dict[str, Share] = Field(description="share of attempts at each boarding point")
    band_shares: dict[str, Share] = Field(description="share of attempts in each time band")
    class_shares: dict[str, Share] = Field(description="share of attempts aiming at each vehicle class")
    depth_shares: dict[str, Share] = Field(
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

    rationality: Annotated[NonNegative, unit("per utility unit")] = Field(
        2.0, description="lambda of the logit rule; 0 = uniform choice"
    )
    exploration: Share = Field(0.05, description="share of choices made uniformly at random")
    detection_cost: Utility = Field(5.0, description="utility lost when caught")
    hazard_aversion: Utility = Field(1.0, description="utility lost at hazard 1 (times the option's hazard)")
    band_waiting: dict[str, Utility] = Field(default_factory=dict, description="waiting cost per time band")
    prior_caught: PseudoCount = Field(1.0, description="Beta prior pseudo-count of being caught")
    prior_crossed: PseudoCount = Field(1.0, description="Beta prior pseudo-count of crossing")
    forgetting: Annotated[float, Field(gt=0.0, le=1.0), unit("factor per day")] = Field(
        0.98, description="daily decay of evidence; 1 = plain conjugate updating"
    )
    own_weight: Annotated[NonNegative, unit("pseudo-count")] = Field(1.0, description="evidence of one's own outcome")
    peer_weight: Annotated[NonNegative, unit("pseudo-count")] = Field(0.5, description="evidence of a peer's outcome")
    peer_delay_days: Days = Field(1, description="days until a group's outcome reaches its peers (at least 1)")
    network_degree: Annotated[Count, unit("groups")] = Field(4, description="peers each new group links to")
    rumour_weight: Weight = Field(0.5, description="weight of one rumoured outcome against one's own")
    rumour_delay_days: Days = Field(7, description="days until a day's outcomes circulate as rumour")
    rumour_noise: Annotated[NonNegative, unit("sd of log")] = Field(
        0.2, description="log-normal spread of the rumoured counts"
    )
    presence_weight: Multiplier = Field(0.0, description="weight of seen patrol presence as evidence of risk: "
                                        "this times the patrol's interdiction chance adds to perceived risk")
    presence_noise: Annotated[NonNegative, unit("chance")] = Field(
        0.1, description="sd of the normal noise on the patrol chance a group sees"
    )


class Reinforcement(Strict):
    """Roth-Erev reinforcement learning (Erev & Roth 1998): propensities grow with payoffs."""

    recency: Share = Field(0.1, description="share of every propensity forgotten at each attempt")
    experimentation: Share = Field(0.2, description="share of payoff spread to other options")
    initial_propensity: Annotated[Positive, unit("payoff units")] = Field(
        1.0, description="every valid option's propensity at the start"
    )
    payoff_crossed: Payoff = Field(1.0, description="payoff of crossing")
    payoff_caught: Payoff = Field(0.0, description="payoff of being detected or interdicted")
    payoff_no_vehicle: Payoff = Field(0.0, description="payoff of finding no vehicle to board")


class Deterrence(Strict):
    """Give-up and move-elsewhere chances that grow with each earlier encounter."""

    give_up_step: Chance = Field(0.0, description="added to give_up for each encounter after the first")
    move_elsewhere_step: Chance = Field(0.0, description="added to move_elsewhere for each encounter after the first")


class Adversary(Strict):
    """The population of would-be crossers."""

    arrivals_per_day: Annotated[NonNegative, unit("groups per day")] = Field(
        description="new groups arriving in the area each day"
    )
    group_size: dict[int, Share] = Field(
        default_factory=lambda: {1: 1.0}, description="share of groups of each size (people, at least 1)"
    )
    attempt_chance: Chance = Field(description="daily chance a waiting group attempts")
    return_delay_days: Days = Field(1, description="days after an encounter before a group tries again (at least 1)")
    give_up: Chance = Field(0.0, description="chance of giving up after an encounter")
    move_elsewhere: Chance = Field(0.0, description="chance of leaving for a route outside the model")
    identification: Chance = Field(0.0, description=(
        "chance that each person not yet identified is identified at an encounter (detection or interdiction) and "
        "keeps a stable pseudonym in the observed records; capture-recapture estimators count repeat encounters "
        "of identified people, so with 0 they have nothing to count"))
    behaviour: Literal["static", "adaptive", "reinforcement"] = Field(
        "static", description="how groups choose an option: fixed shares, learnt risk, or reinforcement"
    )
    static: StaticChoice = Field(description="option shares of static behaviour (given whatever the behaviour)")
    adaptive: Learning = Field(default_factory=Learning, description="settings of adaptive behaviour")
    reinforcement: Reinforcement = Field(default_factory=Reinforcement, description="settings of reinforcement")
    deterrence: Deterrence = Field(default_factory=Deterrence, description="exit chances that grow per encounter")

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

    day: Days = Field(description="day of the run from which the change holds (0 = the first, warm-up included)")
    name: str = Field(min_length=1, max_length=120, description="what outputs call the change")
    set: dict[str, Any] = Field(min_length=1, description="dotted path -> new value, e.g. stations.gate_imaging.lanes")


class AreaSelector(Strict):
    """Options matching every given field (an omitted field matches all)."""

    point: Name | None = Field(None, description="boarding point; null: every point")
    band: Name | None = Field(None, description="time band; null: every band")
    vehicle_class: Name | None = Field(None, description="vehicle class; null: every class")


class DisplacementAreas(Strict):
    """Response, buffer and control areas of options for the weighted displacement quotient."""

    response: list[AreaSelector] = Field(min_length=1, description="options the intervention targets")
    buffer: list[AreaSelector] = Field(default_factory=list, description="options attempts may be displaced to")
    control: list[AreaSelector] = Field(min_length=1, description="comparable options neither should touch")


class World(Strict):
    """A whole crossing."""

    name: str = Field(min_length=1, max_length=200, description="the crossing's name, shown in every output")
    note: str = Field("", description="free text: what the world is for, where its numbers come from")
    site: Literal["port", "terminal", "border", "crossing"] | None = Field(
        None, description="the word for the place in outputs; unset: port for sailings, terminal for other "
        "departures, border without departures"
    )
    time_bands: dict[str, tuple[HourOfDay, HourOfDay]] = Field(description=(
        "named parts of the day, each [start, end) hour (end < start wraps past midnight); every hour in one band"))
    vehicle_classes: list[VehicleClass] = Field(min_length=1, description="kinds of vehicle; shares sum to 1")
    traffic: Traffic = Field(description="how many vehicles arrive, and when")
    methods: list[CheckMethod] = Field(min_length=1, description="ways of checking a vehicle")
    stations: list[Station] = Field(min_length=1, description="places vehicles may be checked, in route order")
    boarding_points: list[BoardingPoint] = Field(min_length=1, description="places people can get onto vehicles")
    departures: Departures | None = Field(None, description=(
        "scheduled departures (sailings, trains, convoys or slots) that vehicles leave on; null: vehicles leave "
        "when cleared (a land border)"))
    roster: Roster = Field(description="inspection teams and how command allocates them")
    adversary: Adversary = Field(description="the would-be crossers and how they choose")
    interventions: list[Intervention] = Field(
        default_factory=list, description="policy changes from given days, in day order, at most one a day"
    )
    displacement: DisplacementAreas | None = Field(
        None, description="areas for the weighted displacement quotient; null: it is not computed"
    )
    weather: Weather | None = Field(None, description="daily weather; null: none, outdoor methods never stop")
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
