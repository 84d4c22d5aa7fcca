"""Training objectives. The fit loop only calls ``objective.draw(x0, generator, labels)`` (the randomness of a
global batch) and ``objective.share_loss(net, drawn, share)`` (the loss of a process's rows; ``loss`` is both).

Which objective a space uses is named by ``space.objective_name`` and looked
up in ``OBJECTIVES``, so the loop never branches on the kind of space. Every
objective follows :class:`heatwalk.core.objectives.base.Objective`.
"""

from __future__ import annotations

from heatwalk.core.fields import ScoreField, X0ProbabilityField
from heatwalk.core.objectives.base import Objective
from heatwalk.core.objectives.discrete_elbo import DiscreteELBO
from heatwalk.core.objectives.product import ProductObjective
from heatwalk.core.objectives.score_matching import ScoreMatching
from heatwalk.errors import InputError

OBJECTIVES: dict[str, type[Objective]] = {cls.name: cls for cls in (ScoreMatching, DiscreteELBO, ProductObjective)}

__all__ = ["OBJECTIVES", "Objective", "ScoreMatching", "DiscreteELBO", "ProductObjective", "ScoreField", "X0ProbabilityField",
           "make_objective"]


def make_objective(space, config: dict | None = None, time_range: tuple[float, float] | None = None,
                   classes: list | None = None, label_dropout: float = 0.1, inpainting: bool = False,
                   time_tilt: float = 0.0) -> Objective:
    """Objective for ``space``: from a saved ``config`` or the space's defaults (with ``classes`` if labelled;
    ``time_tilt``: the tilt of the training-time density, see :mod:`heatwalk.core.schedule`)."""
    if config is None:
        name = space.objective_name
        if name not in OBJECTIVES:
            raise InputError(f"unknown objective {name!r}; known: {sorted(OBJECTIVES)}", field="objective")
        config = {"name": name, "schedule": OBJECTIVES[name].schedule_config(space, time_range)}
        if classes is not None:
            config.update(classes=list(classes), label_dropout=label_dropout)
        if inpainting:
            config["inpainting"] = True
        if time_tilt != 0.0:
            if not OBJECTIVES[name].supports_time_tilt:
                raise InputError(f"time_tilt: the {name} objective draws its times without importance weights; "
                                 f"time_tilt must be 0 for it, got {time_tilt}", field="time_tilt")
            config["schedule"] = {**config["schedule"], "tilt": time_tilt}
    name = config["name"]
    if name not in OBJECTIVES:
        raise InputError(f"unknown objective {name!r}; known: {sorted(OBJECTIVES)}", field="objective")
    return OBJECTIVES[name].from_config(space, config)
