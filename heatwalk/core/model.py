"""A fitted model: space + objective + network weights, saved as plain tensors and JSON.

Folder layout written by :meth:`Model.save`::

    MODEL_DIR/
      model.json     space, objective and network configs, training record
      weights.pt     network state dict (tensors only; loaded with weights_only=True)

Loading never unpickles code: ``torch.load(..., weights_only=True)`` accepts
only tensors and plain containers.
"""

from __future__ import annotations

import json
from pathlib import Path

import torch
from torch import nn

from heatwalk.checks import check_choice, check_positive_int
from heatwalk.core.conditioning import GIVEN_METHODS, Conditioning, check_weight
from heatwalk.core.devices import make_generator, resolve_device, to_device
from heatwalk.core.labels import indices_for
from heatwalk.core.networks import build_network, network_name
from heatwalk.core.objectives import make_objective
from heatwalk.errors import InputError
from heatwalk.io.atomic import atomic_dir
from heatwalk.samplers import SAMPLERS
from heatwalk.spaces import from_config
from heatwalk.spaces.base import CAPABILITIES, Space

FORMAT_VERSION = 1


class Model:
    """A trained generative model on ``space``.

    Attributes
    ----------
    space : the state space
    objective : the training objective (holds the time schedule)
    network : the denoiser, with exponential-moving-average weights
    record : dict of training facts (steps, seed, loss, timings)
    """

    def __init__(self, space: Space, objective, network: nn.Module, record: dict | None = None):
        self.space = space
        self.objective = objective
        self.network = network.eval()
        self.record = dict(record or {})

    @property
    def device(self) -> torch.device:
        """The device the network's weights are on (where sampling and likelihoods run by default)."""
        # cpu: a network without weights runs on the CPU
        return next(iter(self.network.parameters()), torch.empty(0)).device

    def to(self, device) -> "Model":
        """Move the network to ``device`` ("cpu", "cuda", "cuda:N", "auto" or a torch.device); returns the model."""
        self.network.to(resolve_device(device))
        return self

    def _on(self, device) -> torch.device:
        """The device of a call: ``device`` (the network is moved there) or, for None, the network's."""
        if device is None:
            return self.device
        self.to(device)
        return self.device

    def _points_on(self, x, device: torch.device):
        """Points ``x`` on ``device``: tensors are moved as they are, other input is validated first."""
        if not (isinstance(x, torch.Tensor) or (isinstance(x, tuple) and all(isinstance(v, torch.Tensor) for v in x))):
            x = self.space.validate(x)
        return to_device(x, device)

    @property
    def field(self):
        """What the samplers consume (e.g. the learned score field), unconditioned."""
        return self.objective.field(self.network)

    @property
    def classes(self) -> list | None:
        """Class names of a model fitted with labels (index order), else None."""
        return self.objective.classes

    def sampler(self, name: str | None = None):
        """The registered sampler ``name`` (default: the objective's), checked against this model."""
        name = name or self.objective.default_sampler
        if name not in SAMPLERS:
            raise InputError(f"unknown sampler {name!r}; known: {sorted(SAMPLERS)}", field="sampler")
        entry = SAMPLERS[name]
        kind, caps = self.objective.field_kind, self.space.capabilities
        if kind not in entry.field_kinds:
            ok = sorted(k for k, s in SAMPLERS.items() if s.applies_to(kind, caps))
            raise InputError(f"sampler {name!r} does not apply to this model; use one of {ok}", field="sampler")
        missing = sorted(entry.requires - caps)
        if missing:
            needs = "; ".join(CAPABILITIES.get(c, c) for c in missing)
            raise InputError(f"sampler {name!r} needs {needs}; this model's space is {self.space!r}", field="sampler")
        return entry

    def sample(self, n: int, steps: int = 500, sampler: str | None = None, seed: int | None = 0,
               generator: torch.Generator | None = None, progress: bool = True, *, label=None,
               guidance: float = 1.0, given: dict | None = None, given_method: str | None = None, guide=None,
               guide_scale: float = 1.0, device=None, **options) -> torch.Tensor:
        """Draw ``n`` points with ``steps`` reverse steps of ``sampler`` (default: the objective's).

        device : where to sample ("cpu", "cuda", "cuda:N", "auto"); the network is moved there and the samples
            are returned there. Default: the network's device. The generator (made from ``seed`` on that
            device, or ``generator``, which must be on it) drives every draw: the same seed gives the same
            samples on the same kind of device.

        Conditioning (see :mod:`heatwalk.core.conditioning`):

        label, guidance : a class name (or one per sample) of a model fitted with labels, and the
            classifier-free guidance weight w (0: unconditional, 1: conditional, > 1: sharper).
        given, given_method : ``{index: value(s)}`` of fixed coordinates (torus angles, R^d coordinates,
            sequence positions, product factors), one value or one per sample; method "replacement" or
            "reconstruction" (default: reconstruction where the space supports it, else replacement).
        guide, guide_scale : ``fn(x0_hat) -> log-likelihood per sample`` steering samples, and its weight λ.
        """
        check_positive_int("n", n)
        entry = self.sampler(sampler)
        cond = self.conditioning(n, label=label, guidance=guidance, given=given, given_method=given_method,
                                 guide=guide, guide_scale=guide_scale)
        device = self._on(device)
        generator = _generator_for(generator, seed, device)
        cond = cond.to(device)
        field = self.objective.field(self.network, None if cond.empty else cond)
        with torch.no_grad():
            return entry.function(field, n, steps=steps, generator=generator, progress=progress, **options)

    def conditioning(self, n: int, *, label=None, guidance: float = 1.0, given=None, given_method=None, guide=None,
                     guide_scale: float = 1.0) -> Conditioning:
        """Check the conditioning arguments of :meth:`sample` (before any sampling) and gather them."""
        guidance = check_weight("guidance", guidance)
        guide_scale = check_weight("guide_scale", guide_scale)
        if guide is not None and not callable(guide):
            raise InputError(f"guide must be a function of the denoised estimate, got {type(guide).__name__}",
                             field="guide")
        part = None if given is None else self.space.given_part(given, n)
        if given_method is None:
            given_method = self.objective.default_given_method
        check_choice("given_method", given_method, GIVEN_METHODS)
        if given_method == "reconstruction" and part is not None and "coordinates" not in self.space.capabilities:
            raise InputError(f"given_method 'reconstruction' needs a space of coordinates (torus, R^d); "
                             f"{self.space!r} supports 'replacement'", field="given_method")
        labels = indices_for(self.classes, label, n)
        return Conditioning(labels=labels, guidance=guidance, guide=guide, guide_scale=guide_scale, given=part,
                            given_method=given_method)

    def elbo(self, x, n_time_samples: int = 32, seed: int | None = 0,
             generator: torch.Generator | None = None, label=None, device=None, **options):
        """Upper bound on -log p(x) per data point, from the objective's ELBO (nats; see the objective).

        Objectives without a likelihood bound raise :class:`InputError`. ``device``: as in :meth:`sample`
        (the points are moved there).
        """
        device = self._on(device)
        generator = _generator_for(generator, seed, device)
        x = self.space.validate(self._points_on(x, device))
        labels = _labels_on(indices_for(self.classes, label, x.shape[0]), device)
        with torch.no_grad():
            return self.objective.elbo(self.network, x, generator, n_time_samples, labels=labels, **options)

    def log_prob(self, x, label=None, device=None, **options) -> dict:
        """Log-likelihood of points ``x`` in nats, w.r.t. the space's reference measure.

        For score models: the probability-flow ODE (exact up to solver tolerance); for discrete
        models: the negative ELBO, a lower bound on log p, flagged by ``bound = True``.
        ``label`` (one class or one per point) gives the conditional likelihood of a labelled model.
        ``device``: as in :meth:`sample`; the points are moved there and the results are returned there.
        ``options`` go to the objective (e.g. ``method``, ``rtol``, ``divergence``, ``n_probes``).
        """
        device = self._on(device)
        x = self._points_on(x, device)
        if label is None:
            return self.objective.log_prob(self.network, x, **options)
        x = self.space.validate(x)
        labels = _labels_on(indices_for(self.classes, label, self.space.n_points(x)), device)
        return self.objective.log_prob(self.network, x, labels=labels, **options)

    # ----- persistence ---------------------------------------------------------------------
    def config(self) -> dict:
        return {
            "format_version": FORMAT_VERSION,
            "space": self.space.config(),
            "objective": self.objective.config(),
            "network": {"name": network_name(self.network), "config": self.network.config()},
            "record": self.record,
        }

    def save(self, path, *, overwrite: bool = False) -> Path:
        """Write the model folder atomically; refuses to replace an existing folder unless ``overwrite``."""
        path = Path(path)
        with atomic_dir(path, overwrite=overwrite) as tmp:
            (tmp / "model.json").write_text(json.dumps(self.config(), indent=2, sort_keys=True) + "\n")
            torch.save(self.network.state_dict(), tmp / "weights.pt")
        return path


def _generator_for(generator, seed, device: torch.device) -> torch.Generator:
    """``generator`` (checked to be on ``device``), or a new one on ``device`` seeded with ``seed`` (None: 0)."""
    if generator is None:
        return make_generator(0 if seed is None else seed, device)
    if generator.device.type != device.type:
        raise InputError(f"generator is on {generator.device} but the model runs on {device}; make it with "
                         f"torch.Generator(device={str(device)!r})", field="generator")
    return generator


def _labels_on(labels, device):
    return None if labels is None else labels.to(device)


def load(path) -> Model:
    """Load a model folder written by :meth:`Model.save`. Never executes code from the files."""
    path = Path(path)
    cfg_path, w_path = path / "model.json", path / "weights.pt"
    if not cfg_path.is_file() or not w_path.is_file():
        raise InputError(f"{path}: not a heatwalk model folder (needs model.json and weights.pt)")
    try:
        cfg = json.loads(cfg_path.read_text())
    except json.JSONDecodeError as e:
        raise InputError(f"{cfg_path}: not valid JSON ({e})") from None
    if cfg.get("format_version") != FORMAT_VERSION:
        raise InputError(f"{cfg_path}: format_version {cfg.get('format_version')!r}, expected {FORMAT_VERSION}")
    space = from_config(cfg["space"])
    objective = make_objective(space, cfg["objective"])
    net = build_network(cfg["network"]["name"], cfg["network"]["config"])
    try:
        state = torch.load(w_path, map_location="cpu", weights_only=True)
    except Exception as e:  # a file that is not a plain tensor archive
        raise InputError(f"{w_path}: cannot be read as plain tensors ({type(e).__name__}: {e})") from None
    net.load_state_dict(state, strict=True)
    return Model(space, objective, net, cfg.get("record"))
