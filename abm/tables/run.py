"""The tables of a run directory (``undertow run``, and every run of a batch): truth, observed and daily figures."""

from __future__ import annotations

from . import Column as C
from . import Table, declare

RUN = "run directory"
DAY = C("day", "int", "day", "operating day of the run, from 0 (day 0 is a Monday)")
CALENDAR_DAY = C("day", "int", "day", "calendar day the event happened (a check past midnight is the next day's)")
HOUR = C("hour", "int", "hour of day", "clock hour, 0-23")
STATION = C("station", "text", "", "station name (the world's)")
METHOD = C("method", "text", "", "check method name (the world's)")
VEHICLE_CLASS = C("vehicle_class", "text", "", "vehicle class name (the world's)")

declare(
    Table("truth/attempts", "truth/attempts.parquet", RUN, "truth",
          "One row per attempt by a group to cross hidden in a vehicle, with where, when and how it ended.", (
              C("attempt_id", "int", "", "the attempt's number in the run"),
              DAY,
              C("agent_id", "int", "", "the group that tried (truth/arrivals.agent_id)"),
              C("persons", "int", "persons", "people in the group"),
              C("point", "text", "", "boarding point chosen"),
              C("band", "text", "", "time band chosen"),
              C("vehicle_class", "text", "", "vehicle class chosen"),
              C("depth", "text", "", "how deep in the load they hid (depth level)"),
              C("outcome", "text", "", "detected, interdicted, crossed or no_vehicle"),
              C("station", "text", "", "station that found them (detected), else empty"),
              C("method", "text", "", "method that found them (detected), else empty"),
              C("minute", "float", "minutes", "absolute minute of the outcome (day x 1440 + minute of day); NaN "
                "for no_vehicle"),
          )),
    Table("truth/arrivals", "truth/arrivals.parquet", RUN, "truth",
          "One row per group arriving in the area to try.", (
              C("agent_id", "int", "", "the group's id"), DAY, C("persons", "int", "persons", "people in the group"),
          )),
    Table("truth/exits", "truth/exits.parquet", RUN, "truth",
          "One row per group leaving the model: crossed, gave up, moved elsewhere or identified.", (
              C("agent_id", "int", "", "the group's id"), DAY,
              C("state", "text", "", "how it left: crossed, gave_up, displaced_out, identified"),
              C("persons", "int", "persons", "people in the group"),
              C("encounters", "int", "count", "times the group was found or stopped before it left"),
          )),
    Table("observed/stations", "observed/stations.parquet", RUN, "observed",
          "The stations in route order (docs/observed_records.md gives an agency extract's form).", (
              STATION, C("position", "int", "", "place on the route, from 0"),
              C("role", "text", "", "primary (checks vehicles passing) or secondary (searches after an alarm)"),
              C("method", "text", "", "the station's check method"),
          )),
    Table("observed/checks", "observed/checks.parquet", RUN, "observed",
          "Vehicles passing, checks and alarms per day, hour, station, vehicle class and method.", (
              DAY, C("hour", "int", "hour of day", "clock hour vehicles reached the station"), STATION,
              VEHICLE_CLASS, METHOD,
              C("vehicles", "int", "vehicles", "vehicles that reached the station"),
              C("checks", "int", "vehicles", "vehicles checked"), C("alarms", "int", "vehicles", "checks that alarmed"),
          )),
    Table("observed/encounters", "observed/encounters.parquet", RUN, "observed",
          "One row per person found in a check (detection) or stopped at a boarding point (interdiction).", (
              C("encounter_id", "int", "", "the encounter's number"), CALENDAR_DAY,
              C("minute", "float", "minutes", "minute of the day it happened"),
              C("kind", "text", "", "detection or interdiction"),
              C("place", "text", "", "station (detection) or boarding point (interdiction)"),
              C("place_kind", "text", "", "station or boarding_point"),
              C("vehicle_class", "text", "", "class of the vehicle searched (empty for an interdiction)"),
              C("method", "text", "", "method that found them (empty for an interdiction)"),
              C("person_ref", "text", "", "pseudonymous reference of an identified person; empty when not identified"),
              C("referred_by", "text", "", "station whose alarm sent the vehicle to a secondary search, else empty"),
          )),
    Table("observed/false_alarms", "observed/false_alarms.parquet", RUN, "observed",
          "One row per alarm after which nobody was found.", (
              CALENDAR_DAY, C("minute", "float", "minutes", "minute of the day the check ended"),
              C("station", "text", "", "station whose check alarmed"), METHOD, VEHICLE_CLASS,
          )),
    Table("daily", "daily.parquet", RUN, "observed",
          "One row per operating day: the day's figures; truth_ columns are simulated truth.", (
              DAY,
              C("vehicles", "int", "vehicles", "vehicles arriving"),
              C("checks", "int", "vehicles", "checks, at every station"),
              C("alarms", "int", "vehicles", "checks that alarmed"),
              C("detections", "int", "persons", "people found in checks"),
              C("interdictions", "int", "persons", "people stopped at boarding points"),
              C("false_alarms", "int", "vehicles", "alarms after which nobody was found"),
              C("time_in_port_p50_min", "float", "minutes", "median of the day's vehicles' time from arrival to "
                "leaving the crossing (NaN if none left)"),
              C("time_in_port_p95_min", "float", "minutes", "95th percentile of the same"),
              C("missed_departure_share", "float", "share", "share of the day's vehicles that left later than "
                "their booked departure (0 without departures)"),
              C("staff_hours", "float", "hours", "lane-hours the roster staffed"),
              C("truth_attempts", "int", "persons", "people who tried", "truth"),
              C("truth_crossings", "int", "persons", "people who crossed unfound", "truth"),
              C("truth_no_vehicle", "int", "persons", "people who found no vehicle to board", "truth"),
              C("truth_in_system", "int", "persons", "people still trying at the day's end", "truth"),
          )),
    Table("methods", "methods.parquet", RUN, "observed",
          "One row per day, method and cargo type: checks and alarms; truth_ columns are simulated truth.", (
              DAY, C("weather", "text", "", "the day's weather state (empty without weather)"), METHOD,
              C("cargo", "text", "", "cargo type (empty where the world states none)"),
              C("checks", "int", "vehicles", "vehicles checked"),
              C("alarms", "int", "vehicles", "checks that alarmed"),
              C("false_alarms", "int", "vehicles", "alarms logged false (nobody found after them)"),
              C("check_minutes", "float", "minutes", "minutes spent checking"),
              C("truth_occupied_checks", "int", "vehicles", "checks of vehicles with people hidden aboard", "truth"),
              C("truth_found", "int", "vehicles", "checks that found the people aboard", "truth"),
              C("truth_true_alarms", "int", "vehicles", "alarms on vehicles with people aboard", "truth"),
              C("truth_false_alarms", "int", "vehicles", "alarms on vehicles with nobody aboard", "truth"),
          )),
)

_QUEUE = (
    C("vehicles", "int", "vehicles", "vehicles reaching the station in the hour"),
    C("checks", "int", "vehicles", "of them, vehicles checked"),
    C("wait_mean_min", "float", "minutes", "mean wait of checked vehicles, from reaching the station to the "
      "check's start"),
)
_LANES = (
    C("queue_mean", "float", "vehicles", "time-average number of vehicles waiting, measured from arrival and "
      "check-start times (not Little's law)"),
    C("busy_lane_minutes", "float", "lane-minutes", "lane-minutes spent checking"),
    C("staffed_lane_minutes", "float", "lane-minutes", "lane-minutes on duty"),
    C("utilisation", "float", "share", "busy over staffed lane-minutes (NaN with no lane on duty)"),
)
declare(
    Table("queues", "queues.parquet", RUN, "observed",
          "Waits, queue lengths and lane use per calendar day, hour and station.", (
              CALENDAR_DAY, HOUR, STATION, *_QUEUE,
              C("wait_p95_min", "float", "minutes", "95th percentile of the waits"),
              C("wait_max_min", "float", "minutes", "longest wait"), *_LANES,
          )),
    Table("queue_hours", "queue_hours.parquet", RUN, "observed",
          "The same per station and hour of the day, pooled over the days the run's summary covers.", (
              STATION, HOUR, C("first_day", "int", "day", "first day pooled (after any warm-up)"),
              C("last_day", "int", "day", "last day pooled"), *_QUEUE,
              C("wait_p50_min", "float", "minutes", "median wait"),
              C("wait_p95_min", "float", "minutes", "95th percentile of the waits"),
              C("wait_max_min", "float", "minutes", "longest wait"), *_LANES,
          )),
    Table("departures", "departures.parquet", RUN, "observed",
          "One row per departure (sailing, train, convoy or slot) up to the run's last day; empty without "
          "departures.", (
              C("day", "int", "day", "day it was timetabled"),
              C("time", "text", "", "timetabled clock time, HH:MM"),
              C("minute", "float", "minutes", "timetabled absolute minute (day x 1440 + minute of day)"),
              C("booked", "int", "vehicles", "vehicles booked on it: the first whose check-in they could make as "
                "planned"),
              C("left", "int", "vehicles", "vehicles that left on it"),
              C("missed", "int", "vehicles", "vehicles booked on it that left later or not at all"),
              C("places_left", "float", "vehicles", "places still free when it left (NaN where places do not "
                "count)"),
              C("metres_left", "float", "metres", "metres still free when it left (NaN where metres do not count)"),
              C("late_minutes", "float", "minutes", "minutes it left after its timetabled time"),
              C("cancelled", "bool", "", "true when it was cancelled (it took nobody)"),
              C("full", "bool", "", "true when no further vehicle could board"),
          )),
)
