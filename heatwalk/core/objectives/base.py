"""What every training objective offers the fit loop, the Model and the samplers.

An objective knows its space and time schedule, builds its default network,
computes a batch loss, turns a trained network into the *field* a sampler
consumes (``field_kind`` names it: ``"score"`` or ``"x0_probabilities"``), and
evaluates a log-likelihood (exact, or a bound: ``likelihood_is_bound``).
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from typing import ClassVar

import torch
from torch import nn

from heatwalk.core.schedule import TimeSchedule
from heatwalk.errors import InputError


class Objective(ABC):
    """A training objective on ``space`` with time schedule ``schedule``."""

    #: registry name in ``heatwalk.core.objectives.OBJECTIVES``
    name: ClassVar[str]
    #: the kind of field ``field()`` returns
    field_kind: ClassVar[str]
    #: sampler used when none is named
    default_sampler: ClassVar[str]
    #: True when ``log_prob`` returns a lower bound (an ELBO) rather than the log-likelihood
    likelihood_is_bound: ClassVar[bool] = False

    def __init__(self, space, schedule: TimeSchedule):
        self.space = space
        self.schedule = schedule

    @classmethod
    def from_config(cls, space, config: dict) -> "Objective":
        """Rebuild from :meth:`config` (``schedule`` holds the TimeSchedule's config)."""
        return cls(space, TimeSchedule(**config["schedule"]))

    def config(self) -> dict:
        return {"name": self.name, "schedule": self.schedule.config()}

    @abstractmethod
    def default_network(self, **options) -> nn.Module:
        """The objective's default denoiser for its space (``options``: width, depth, …)."""

    @abstractmethod
    def loss(self, net: nn.Module, x0: torch.Tensor, generator: torch.Generator | None = None) -> torch.Tensor:
        """Scalar batch loss on data points ``x0``."""

    @abstractmethod
    def field(self, net: nn.Module):
        """What a sampler consumes (has ``kind``, ``space``, ``schedule`` and ``grid(steps)``)."""

    @abstractmethod
    def log_prob(self, net: nn.Module, x, **options) -> dict:
        """Per-point log-likelihood in nats (``"log_prob"``) and ``"bound"`` (True for an ELBO)."""

    def elbo(self, net: nn.Module, x, generator=None, n_time_samples: int = 32, **options):
        """Monte Carlo ELBO; objectives without one refuse."""
        raise InputError(f"the {type(self).__name__} objective has no ELBO", field="objective")
