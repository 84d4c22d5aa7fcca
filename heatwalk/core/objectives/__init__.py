"""Training objectives. The fit loop only calls ``objective.loss(net, x0, generator)``.

Which objective a space uses is named by ``space.objective_name`` and looked
up in ``OBJECTIVES``, so the loop never branches on the kind of space.

An objective also says how to build its default network, and turns a trained
network into the *field* a sampler consumes (for score matching: a score
field s(x, t) on the space); ``field_kind`` names the field so that a sampler
can state what it accepts.
"""

from __future__ import annotations

from heatwalk.errors import InputError
from heatwalk.core.objectives.discrete_elbo import DiscreteELBO
from heatwalk.core.objectives.score_matching import ScoreField, ScoreMatching
from heatwalk.core.schedule import TimeSchedule
from heatwalk.spaces.base import Space

OBJECTIVES: dict[str, type] = {"score_matching": ScoreMatching, "discrete_elbo": DiscreteELBO}


def make_objective(space: Space, config: dict | None = None, time_range: tuple[float, float] | None = None):
    """Objective for ``space``: from a saved ``config`` or the space's defaults."""
    if config is None:
        name = space.objective_name
        t_min, t_max = time_range if time_range is not None else space.time_range
        schedule_config = {"t_min": t_min, "t_max": t_max}
    else:
        name = config["name"]
        schedule_config = config["schedule"]
    if name not in OBJECTIVES:
        raise InputError(f"unknown objective {name!r}; known: {sorted(OBJECTIVES)}", field="objective")
    cls = OBJECTIVES[name]
    if hasattr(cls, "from_config"):
        return cls.from_config(space, {**(config or {}), "schedule": schedule_config})
    return cls(space, TimeSchedule(**schedule_config))
