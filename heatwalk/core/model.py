"""A fitted model: space + objective + network weights, saved as plain tensors and JSON.

Folder layout written by :meth:`Model.save`::

    MODEL_DIR/
      model.json           space, objective and network configs, training record
      weights.safetensors  network state dict in the safetensors format (no pickle)
      losses.csv           the training loss of every step (columns step, loss), when known

:func:`load` also reads folders of earlier versions, whose weights are
``weights.pt`` (read with ``torch.load(..., weights_only=True)``, which accepts
only tensors and plain containers). Loading never runs code from the files and
checks everything before it allocates the network (see
:mod:`heatwalk.core.model_files`).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import torch
from torch import nn

from heatwalk.checks import check_choice, check_positive_int
from heatwalk.core.conditioning import GIVEN_METHODS, Conditioning, check_weight
from heatwalk.core.devices import make_generator, resolve_device, to_device
from heatwalk.core.labels import indices_for
from heatwalk.core.model_files import meta_network, read_model_config, read_weights, weights_path, write_weights
from heatwalk.core.networks import network_name
from heatwalk.core.objectives import make_objective
from heatwalk.core.result_checks import (arithmetic_failures_as_input_errors, check_finite_log_prob,
                                         check_finite_samples)
from heatwalk.errors import InputError
from heatwalk.io.atomic import WEIGHT_FILES, atomic_dir
from heatwalk.samplers import SAMPLERS
from heatwalk.spaces import from_config
from heatwalk.spaces.base import CAPABILITIES, Space

FORMAT_VERSION = 1
#: the per-step training losses in a model folder
LOSSES_NAME = "losses.csv"


class Model:
    """A trained generative model on ``space``.

    Attributes
    ----------
    space : the state space
    objective : the training objective (holds the time schedule)
    network : the denoiser, with exponential-moving-average weights
    record : dict of training facts (steps, seed, loss, timings)
    losses : float64 tensor of the training loss at every step run by ``fit`` (the first is step
        ``record["resumed_from_step"] + 1``), or None (not known)
    """

    def __init__(self, space: Space, objective, network: nn.Module, record: dict | None = None,
                 losses: torch.Tensor | None = None):
        self.space = space
        self.objective = objective
        self.network = network.eval()
        self.record = dict(record or {})
        # cpu: the loss history is a record, kept on the CPU
        self.losses = None if losses is None else torch.as_tensor(losses, dtype=torch.float64).cpu().reshape(-1)

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
               guide_scale: float = 1.0, check_finite: bool = True, device=None, **options) -> torch.Tensor:
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
        check_finite : refuse (:class:`~heatwalk.core.result_checks.NonFiniteResult`, an InputError) samples
            with a NaN or infinite coordinate, naming the likely causes; False returns them as drawn, for
            diagnosing a sampler.
        """
        check_positive_int("n", n)
        entry = self.sampler(sampler)
        cond = self.conditioning(n, label=label, guidance=guidance, given=given, given_method=given_method,
                                 guide=guide, guide_scale=guide_scale)
        device = self._on(device)
        generator = _generator_for(generator, seed, device)
        cond = cond.to(device)
        field = self.objective.field(self.network, None if cond.empty else cond)
        with torch.no_grad(), arithmetic_failures_as_input_errors("sampling"):
            x = entry.function(field, n, steps=steps, generator=generator, progress=progress, **options)
        if not check_finite:
            return x
        name = sampler or self.objective.default_sampler
        others = sorted(k for k, s in SAMPLERS.items() if k != name
                        and s.applies_to(self.objective.field_kind, self.space.capabilities))
        return check_finite_samples(x, n, name, steps, others)

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
            est = self.objective.elbo(self.network, x, generator, n_time_samples, labels=labels, **options)
        check_finite_log_prob({"log_prob": est.nats}, what="ELBO")
        return est

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
        if label is not None:
            x = self.space.validate(x)
            options["labels"] = _labels_on(indices_for(self.classes, label, self.space.n_points(x)), device)
        with arithmetic_failures_as_input_errors("log-likelihood"):
            return check_finite_log_prob(self.objective.log_prob(self.network, x, **options))

    # ----- persistence ---------------------------------------------------------------------
    def config(self) -> dict:
        return {
            "format_version": FORMAT_VERSION,
            "space": self.space.config(),
            "objective": self.objective.config(),
            "network": {"name": network_name(self.network), "config": self.network.config()},
            "record": self.record,
        }

    def save(self, path, *, overwrite: bool = False, extra_files: dict[str, str] | None = None) -> Path:
        """Write the model folder atomically (model.json, weights.safetensors).

        ``overwrite`` replaces an existing model folder, report folder or empty folder, nothing else
        (:func:`heatwalk.io.atomic.atomic_dir`). ``extra_files`` ({name: text}) are written into the
        folder too (e.g. the CLI's resolved config).
        """
        path = Path(path)
        with atomic_dir(path, overwrite=overwrite) as tmp:
            (tmp / "model.json").write_text(json.dumps(self.config(), indent=2, sort_keys=True) + "\n")
            write_weights(tmp, self.network)
            if self.losses is not None:
                first = int(self.record.get("resumed_from_step", 0)) + 1
                rows = "".join(f"{first + k},{v!r}\n" for k, v in enumerate(self.losses.tolist()))
                (tmp / LOSSES_NAME).write_text("step,loss\n" + rows)
            for name, text in (extra_files or {}).items():
                if Path(name).name != name or name in ("model.json", *WEIGHT_FILES, LOSSES_NAME):
                    raise InputError(f"extra file name {name!r} must be a plain file name", field="extra_files")
                (tmp / name).write_text(text)
        return path

    def __repr__(self) -> str:
        r = self.record
        parts = [f"space={self.space!r}", f"objective={self.objective.name}"]
        if "n_data" in r:
            parts.append(f"n_data={r['n_data']}")
        if "steps" in r:
            parts.append(f"steps={r['steps']}")
        if r.get("mean_loss_last_100_steps") is not None:
            parts.append(f"loss={r['mean_loss_last_100_steps']:.4g}")
        if self.classes is not None:
            parts.append(f"classes={len(self.classes)}")
        return f"Model({', '.join(parts)})"


def _rebuilt(where: Path, key: str, build):
    """``build()`` with its errors named after the model.json key they come from."""
    try:
        return build()
    except InputError as e:
        raise InputError(f"{where}: key {key!r}: {e.message}", field=key) from None
    except (TypeError, ValueError, KeyError, AttributeError) as e:
        raise InputError(f"{where}: key {key!r} does not describe a heatwalk {key} ({type(e).__name__}: {e})",
                         field=key) from None


def _check_network_fits(model: Model, where: Path) -> None:
    """One reverse step on 2 points: a network whose sizes do not fit the space and objective fails here."""
    field = model.objective.field(model.network)
    try:
        with torch.no_grad(), torch.random.fork_rng(devices=[]):
            # cpu: a loaded model is on the CPU
            model.sampler().function(field, 2, steps=1, generator=torch.Generator().manual_seed(0), progress=False)
    except (RuntimeError, IndexError) as e:
        raise InputError(f"{where}: the network does not fit the space {model.space!r} and its objective "
                         f"({str(e).splitlines()[0]})", field="network") from None


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
    """Load a model folder written by :meth:`Model.save` (or an earlier version). Never executes code from the files.

    Checked before any network memory is allocated: model.json's schema, the network's size, and the
    weights file's tensor names, shapes and dtypes; then the weights must be finite and the network must
    fit the space (one reverse step on two points).
    """
    path = Path(path)
    cfg_path, w_path = path / "model.json", weights_path(path)
    if not cfg_path.is_file() or w_path is None:
        raise InputError(f"{path}: not a heatwalk model folder (needs model.json and weights.safetensors)")
    cfg = read_model_config(cfg_path)
    if cfg["format_version"] != FORMAT_VERSION:
        raise InputError(f"{cfg_path}: format_version {cfg['format_version']!r}, expected {FORMAT_VERSION}",
                         field="format_version")
    space = _rebuilt(cfg_path, "space", lambda: from_config(cfg["space"]))
    objective = _rebuilt(cfg_path, "objective", lambda: make_objective(space, cfg["objective"]))
    net = meta_network(cfg["network"]["name"], cfg["network"]["config"], where=cfg_path)
    net.load_state_dict(read_weights(path, net), strict=True, assign=True)
    record = cfg.get("record") or {}
    losses_path = path / LOSSES_NAME
    losses = _read_losses(losses_path, int(record.get("resumed_from_step", 0)) + 1) if losses_path.is_file() else None
    model = Model(space, objective, net, record, losses=losses)
    _check_network_fits(model, cfg_path)
    return model


def _read_losses(path: Path, first_step: int) -> torch.Tensor:
    """The loss column of a ``losses.csv`` written by :meth:`Model.save`; steps must run first_step, +1, …"""
    lines = path.read_text().splitlines()
    if not lines or lines[0].strip() != "step,loss":
        raise InputError(f"{path}, line 1: expected the header 'step,loss', got {lines[0] if lines else ''!r}")
    values = []
    for lineno, line in enumerate(lines[1:], start=2):
        parts = line.split(",")
        try:
            step, value = int(parts[0]), float(parts[1])
            if len(parts) != 2 or not math.isfinite(value):
                raise ValueError
        except (ValueError, IndexError):
            raise InputError(f"{path}, line {lineno}: expected 'step,loss' (an integer and a finite number), "
                             f"got {line!r}", row=lineno - 2) from None
        expected = first_step + len(values)
        if step != expected:
            raise InputError(f"{path}, line {lineno}: step {step}, expected {expected} (steps run on from "
                             f"resumed_from_step + 1 = {first_step}, one per line)", row=lineno - 2, field="step")
        values.append(value)
    return torch.tensor(values, dtype=torch.float64)  # cpu: read from a file
