"""The crossing's day engine: vehicles in numpy arrays, from arrival through the stations' queues and checks,
the boarding points and the departures, to the day's records.

:mod:`~abm.port.layout` compiles a world into arrays once; each day
:mod:`~abm.port.traffic` draws the vehicles, :mod:`~abm.port.day` runs them
through the stations (:mod:`~abm.port.queues`, :mod:`~abm.port.checks`,
:mod:`~abm.port.station`), the boarding points (:mod:`~abm.port.boarding`) and
the departures (:mod:`~abm.port.departures`), and :mod:`~abm.port.tallies`
keeps the hourly queue figures. :mod:`~abm.port.load` is the offered-load
report ``undertow check`` prints, computed from the world without simulating.
"""
