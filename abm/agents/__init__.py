"""The deciders, as Mesa agents: groups who try to cross hidden in vehicles, and the inspection teams.

:mod:`~abm.agents.concealment` holds the groups (``ConcealmentAgent``: where,
when, on which vehicle class and how deep to hide, from what they perceive of
checking), choosing by :mod:`~abm.agents.behaviour`'s static, adaptive or
reinforcement model over :mod:`~abm.agents.options`' option space;
:mod:`~abm.agents.inspection` holds the teams (``InspectionTeam``) and the
command (fixed, randomised or reactive) that turns the roster into lanes and
patrols each day. Vehicles are not agents: they live in numpy arrays inside
the day engine (:mod:`abm.port`).
"""
