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

from heatwalk.checks import check_positive_int
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
    def field(self):
        """What the samplers consume (e.g. the learned score field)."""
        return self.objective.field(self.network)

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
               generator: torch.Generator | None = None, progress: bool = True, **options) -> torch.Tensor:
        """Draw ``n`` points with ``steps`` reverse steps of ``sampler`` (default: the objective's)."""
        check_positive_int("n", n)
        entry = self.sampler(sampler)
        if generator is None:
            generator = torch.Generator().manual_seed(0 if seed is None else seed)
        with torch.no_grad():
            return entry.function(self.field, n, steps=steps, generator=generator, progress=progress, **options)

    def elbo(self, x, n_time_samples: int = 32, seed: int | None = 0,
             generator: torch.Generator | None = None, **options):
        """Upper bound on -log p(x) per data point, from the objective's ELBO (nats; see the objective).

        Objectives without a likelihood bound raise :class:`InputError`.
        """
        if generator is None:
            generator = torch.Generator().manual_seed(0 if seed is None else seed)
        with torch.no_grad():
            return self.objective.elbo(self.network, self.space.validate(x), generator, n_time_samples, **options)

    def log_prob(self, x, **options) -> dict:
        """Log-likelihood of points ``x`` in nats, w.r.t. the space's reference measure.

        For score models: the probability-flow ODE (exact up to solver tolerance); for discrete
        models: the negative ELBO, a lower bound on log p, flagged by ``bound = True``.
        ``options`` go to the objective (e.g. ``method``, ``rtol``, ``divergence``, ``n_probes``).
        """
        return self.objective.log_prob(self.network, x, **options)

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
