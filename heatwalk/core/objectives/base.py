"""What every training objective offers the fit loop, the Model and the samplers.

An objective knows its space and time schedule, builds its default network,
computes a batch loss, turns a trained network into the *field* a sampler
consumes (``field_kind`` names it: ``"score"`` or ``"x0_probabilities"``), and
evaluates a log-likelihood (exact, or a bound: ``likelihood_is_bound``).

Class labels (classifier-free guidance): an objective built with ``classes``
(the class names, in index order) feeds the network, besides the time
features, a one-hot code of the label with one extra "no label" slot
(index ``n_classes``). Training replaces each label by "no label" with
probability ``label_dropout`` (common practice: 0.1), so the one network is also
the unconditional model. :meth:`condition_features` builds that input.

Trained inpainting (``inpainting=True``, spaces of coordinates): half of the
training rows keep a random non-empty, proper subset of their coordinates
clean (each coordinate w.p. 1/2), the network is told which by one flag per
coordinate, and the loss covers only the noised coordinates. The network then
also gives the score of the conditional law of the free coordinates given the
known ones, so ``Model.sample(given=...)`` is exact (up to training error) by
holding the known coordinates at their values.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from typing import ClassVar

import torch
from torch import nn

from heatwalk.checks import check_number
from heatwalk.core.parallel import WHOLE, Share
from heatwalk.core.schedule import TimeSchedule
from heatwalk.errors import InputError
from heatwalk.spaces.base import generator_device


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
    #: how ``log_prob`` is computed, in words (reports print it)
    likelihood_method: ClassVar[str] = ""
    #: True when the loss applies the importance weights of a tilted time density (``TimeSchedule.tilt``)
    supports_time_tilt: ClassVar[bool] = False
    #: True when the size rule of ``heatwalk.fit`` sets the default network's ``hidden`` and ``depth``
    sized_by_data: ClassVar[bool] = False

    def __init__(self, space, schedule: TimeSchedule, classes: list | None = None, label_dropout: float = 0.1,
                 inpainting: bool = False):
        if getattr(schedule, "tilt", 0.0) != 0.0 and not self.supports_time_tilt:
            raise InputError(f"time_tilt: the {self.name} objective draws its times without importance weights; "
                             f"time_tilt must be 0 for it, got {schedule.tilt}", field="time_tilt")
        self.space = space
        self.schedule = schedule
        self.classes = None if classes is None else list(classes)
        self.label_dropout = check_number("label_dropout", label_dropout, minimum=0, maximum=1, open_maximum=True)
        if self.classes is not None and len(self.classes) < 1:
            raise InputError("classes: a labelled model needs at least one class", field="labels")
        if inpainting and "coordinates" not in space.capabilities:
            raise InputError(f"inpainting training needs a space of coordinates (torus, R^d); {space!r} fixes its "
                             f"known part by replacement at sampling time", field="inpainting")
        self.inpainting = bool(inpainting)

    @classmethod
    def schedule_config(cls, space, time_range: tuple[float, float] | None) -> dict:
        """The schedule config of a new objective: the space's time range unless one is given."""
        t_min, t_max = time_range if time_range is not None else space.time_range
        return {"t_min": t_min, "t_max": t_max}

    @classmethod
    def from_config(cls, space, config: dict) -> "Objective":
        """Rebuild from :meth:`config` (``schedule`` holds the TimeSchedule's config)."""
        return cls(space, TimeSchedule(**config["schedule"]), **cls._label_config(config))

    @staticmethod
    def _label_config(config: dict) -> dict:
        return {k: config[k] for k in ("classes", "label_dropout", "inpainting") if k in config}

    def config(self) -> dict:
        out = {"name": self.name, "schedule": self.schedule.config()}
        if self.classes is not None:
            out.update(classes=self.classes, label_dropout=self.label_dropout)
        if self.inpainting:
            out["inpainting"] = True
        return out

    @property
    def default_given_method(self) -> str:
        """How ``given`` fixes coordinates by default (see :mod:`heatwalk.core.conditioning`)."""
        if self.inpainting:
            return "trained"
        return "reconstruction" if "coordinates" in self.space.capabilities else "replacement"

    # ----- labels ------------------------------------------------------------------------------
    @property
    def n_classes(self) -> int:
        """Number of classes (0 for a model without labels)."""
        return 0 if self.classes is None else len(self.classes)

    @property
    def condition_dim(self) -> int:
        """Length of :meth:`condition_features`: time features, the label code, the known-coordinate flags."""
        return (self.schedule.n_features + (self.n_classes + 1 if self.classes is not None else 0)
                + (self.space.ambient_shape[0] if self.inpainting else 0))

    def condition_features(self, t: torch.Tensor, labels: torch.Tensor | None,
                           known: torch.Tensor | None = None) -> torch.Tensor:
        """Network conditioning input: time features; the one-hot label ("no label" = n_classes) of a labelled
        model; one flag per coordinate (1 = known, clean) of a model trained for inpainting."""
        parts = [self.schedule.features(t)]
        if self.classes is None:
            if labels is not None:
                raise InputError("this model was fitted without labels", field="label")
        else:
            if labels is None:
                labels = torch.full(t.shape, self.n_classes, dtype=torch.int64, device=t.device)
            parts.append(torch.nn.functional.one_hot(labels, self.n_classes + 1).to(parts[0].dtype))
        if self.inpainting:
            if known is None:
                flags = torch.zeros(t.shape[0], self.space.ambient_shape[0], dtype=parts[0].dtype, device=t.device)
            else:
                flags = known.to(parts[0].dtype).expand(t.shape[0], -1)
            parts.append(flags)
        elif known is not None:
            raise InputError("this model was not trained for inpainting", field="given_method")
        return parts[0] if len(parts) == 1 else torch.cat(parts, dim=-1)

    def random_known(self, n: int, generator) -> torch.Tensor:
        """Training masks (n, d) of known coordinates: half the rows get a random non-empty proper subset."""
        d, dev = self.space.ambient_shape[0], generator_device(generator)
        rows = torch.rand(n, generator=generator, dtype=torch.float64, device=dev) < 0.5
        known = (torch.rand(n, d, generator=generator, dtype=torch.float64, device=dev) < 0.5) & rows.unsqueeze(-1)
        full = known.all(-1)
        free = torch.randint(d, (n,), generator=generator, device=dev)
        known[full, free[full]] = False
        return known

    def drop_labels(self, labels: torch.Tensor | None, generator) -> torch.Tensor | None:
        """Training labels with each replaced by "no label" with probability ``label_dropout``."""
        if labels is None or self.classes is None:
            if labels is not None:
                raise InputError("labels given to a model built without classes", field="labels")
            return None
        drop = torch.rand(labels.shape, dtype=torch.float64, device=labels.device, generator=generator) \
            < self.label_dropout
        return torch.where(drop, torch.full_like(labels, self.n_classes), labels)

    @abstractmethod
    def default_network(self, **options) -> nn.Module:
        """The objective's default denoiser for its space (``options``: width, depth, …)."""

    def loss(self, net: nn.Module, x0: torch.Tensor, generator: torch.Generator | None = None,
             labels: torch.Tensor | None = None) -> torch.Tensor:
        """Scalar batch loss on data points ``x0`` (with class indices ``labels`` for a labelled model).

        The same as ``share_loss(net, draw(x0, generator, labels))``: the randomness of the batch, then the loss.
        """
        return self.share_loss(net, self.draw(x0, generator, labels))

    @abstractmethod
    def draw(self, x0, generator: torch.Generator | None = None, labels: torch.Tensor | None = None) -> dict:
        """Everything random about a training batch ``x0``, drawn from ``generator`` (times, noised points, …).

        A data-parallel run draws this for the *global* batch on every rank (the same draws as one process
        would make, in the same order), and each rank evaluates its slice with :meth:`share_loss`.
        """

    @abstractmethod
    def share_loss(self, net: nn.Module, drawn: dict, share: Share = WHOLE) -> torch.Tensor:
        """The loss of the rows of ``share`` (:class:`heatwalk.core.parallel.Share`) of a :meth:`draw`.

        Per-row terms are weighted by ``share.mean`` so that the average over ranks is the global batch's loss
        (and its gradient); for the whole batch (one process) the value is the batch loss.
        """

    @abstractmethod
    def field(self, net: nn.Module, conditioning=None):
        """What a sampler consumes (has ``kind``, ``space``, ``schedule`` and ``grid(steps)``).

        ``conditioning`` (a :class:`heatwalk.core.conditioning.Conditioning`) adds labels with
        guidance, fixed coordinates and a user guide.
        """

    @abstractmethod
    def log_prob(self, net: nn.Module, x, **options) -> dict:
        """Per-point log-likelihood in nats (``"log_prob"``) and ``"bound"`` (True for an ELBO)."""

    def elbo(self, net: nn.Module, x, generator=None, n_time_samples: int = 32, **options):
        """Monte Carlo ELBO; objectives without one refuse."""
        raise InputError(f"the {type(self).__name__} objective has no ELBO", field="objective")
