"""The one training loop shared by every space.

``fit`` validates the data on the space, builds the space's objective and its
default network, and runs Adam on ``objective.loss`` with an exponential moving
average (EMA) of the weights. It never looks at which space it has: what
differs between spaces lives in the space and its objective.

Reproducibility: all randomness (network initialisation, batches, diffusion
times and noise) comes from ``seed``. A checkpoint stores the network, EMA,
optimiser and generator states, so a run resumed from it ends with exactly the
weights of an uninterrupted run.
"""

from __future__ import annotations

import json
import math
import time
from dataclasses import dataclass
from pathlib import Path

import torch
from tqdm.auto import tqdm

from heatwalk.checks import check_number, check_positive_int
from heatwalk.core.labels import encode_labels
from heatwalk.core.model import Model
from heatwalk.core.networks import network_name
from heatwalk.core.objectives import make_objective
from heatwalk.errors import InputError
from heatwalk.io.atomic import atomic_path

CHECKPOINT_NAME = "checkpoint.pt"
#: the training record's loss is the mean over this many last steps
LOSS_WINDOW = 100


@dataclass
class _Run:
    """Everything a training step changes: network, EMA weights, optimiser, schedule, generator."""

    net: torch.nn.Module
    ema: list
    opt: torch.optim.Optimizer
    sched: torch.optim.lr_scheduler.LRScheduler
    gen: torch.Generator


def fit(space, data, *, steps: int = 3000, batch_size: int = 512, lr: float = 2e-3,
        ema_decay: float = 0.999, seed: int = 0, network: dict | None = None,
        time_range: tuple[float, float] | None = None, checkpoint_dir=None, checkpoint_every: int = 1000,
        resume: bool = False, progress: bool = True, threads: int | None = None, labels=None,
        label_dropout: float = 0.1, inpainting: bool = False) -> Model:
    """Fit a diffusion model to ``data`` (points on ``space``) and return a :class:`Model`.

    Parameters
    ----------
    space : the state space; ``data`` is validated by ``space.validate``.
    steps, batch_size, lr : Adam steps, batch size, learning rate (cosine-decayed to lr/10).
    ema_decay : decay of the exponential moving average whose weights the model keeps
        (warmed up as min(ema_decay, (1+k)/(10+k)) at step k).
    seed : seeds network initialisation, batches and diffusion noise.
    network : options of the objective's default network (e.g. ``{"hidden": 256, "depth": 3}``).
    time_range : (t_min, t_max) overriding the space's default.
    checkpoint_dir : folder for periodic checkpoints (every ``checkpoint_every`` steps and at the end);
        with ``resume=True`` training continues from the checkpoint found there.
    threads : torch intra-op threads for the run (default: leave torch's setting).
    labels : one class name (int or string) per data point: the model learns the law given the class and,
        with each label dropped with probability ``label_dropout`` (default 0.1), the unconditional law,
        for classifier-free guidance (``Model.sample(label=..., guidance=...)``).
    inpainting : also train the network to condition on known coordinates (torus, R^d), so that
        ``Model.sample(given=...)`` is exact (see :mod:`heatwalk.core.conditioning`).
    """
    _check_settings(steps, batch_size, checkpoint_every, ema_decay, lr, threads)
    x_data = space.validate(data)
    n_data = space.n_points(x_data)
    if n_data < 2:
        raise InputError(f"need at least 2 data points to fit, got {n_data}", field="data")
    if threads is not None:
        torch.set_num_threads(threads)

    classes, label_idx = (None, None) if labels is None else encode_labels(labels, n_data)
    objective = make_objective(space, time_range=time_range, classes=classes, label_dropout=label_dropout,
                               inpainting=inpainting)
    run = _start(objective, network, lr, steps, seed)
    run_config = {
        "space": space.config(), "objective": objective.config(),
        "network": {"name": network_name(run.net), "config": run.net.config()},
        "steps": steps, "batch_size": batch_size, "lr": lr, "ema_decay": ema_decay, "seed": seed,
        "n_data": n_data,
    }
    ckpt_path = Path(checkpoint_dir) / CHECKPOINT_NAME if checkpoint_dir is not None else None
    start = 0
    if resume:
        if ckpt_path is None:
            raise InputError("resume=True needs a checkpoint_dir", field="resume")
        if ckpt_path.is_file():
            start = _restore(ckpt_path, run_config, run)

    t0 = time.perf_counter()
    losses = _train(objective, run, (x_data, label_idx), start, steps, batch_size, ema_decay, progress,
                    lambda step: _save_checkpoint(ckpt_path, run_config, step, run) if ckpt_path else None,
                    checkpoint_every)
    elapsed = time.perf_counter() - t0
    with torch.no_grad():
        for p, e in zip(run.net.parameters(), run.ema):
            p.copy_(e)
    tail = losses[-min(len(losses), LOSS_WINDOW):]
    record = {
        **{k: run_config[k] for k in ("steps", "batch_size", "lr", "ema_decay", "seed", "n_data")},
        "mean_loss_last_100_steps": (sum(tail) / len(tail)) if tail else None,
        "train_seconds": elapsed,
        "resumed_from_step": start,
    }
    # the loss of every step run here (step resumed_from_step + 1 onwards), saved as losses.csv by Model.save
    return Model(space, objective, run.net, record, losses=torch.tensor(losses, dtype=torch.float64))


def _check_settings(steps, batch_size, checkpoint_every, ema_decay, lr, threads) -> None:
    check_positive_int("steps", steps)
    check_positive_int("batch_size", batch_size)
    check_positive_int("checkpoint_every", checkpoint_every)
    check_number("ema_decay", ema_decay, minimum=0, maximum=1, open_maximum=True)
    check_number("lr", lr, minimum=0, open_minimum=True)
    if threads is not None:
        check_positive_int("threads", threads)


def _start(objective, network: dict | None, lr: float, steps: int, seed: int) -> _Run:
    """Network (initialised from ``seed``), EMA copy, Adam with a cosine schedule to lr/10, generator."""
    with torch.random.fork_rng(devices=[]):
        torch.manual_seed(seed)
        net = objective.default_network(**(network or {}))
    ema = [p.detach().clone() for p in net.parameters()]
    opt = torch.optim.Adam(list(net.parameters()), lr=lr)
    sched = torch.optim.lr_scheduler.LambdaLR(
        opt, lambda k: 0.1 + 0.9 * 0.5 * (1 + math.cos(math.pi * min(k, steps) / steps)))
    return _Run(net, ema, opt, sched, torch.Generator().manual_seed(seed))


def _train(objective, run: _Run, data, start, steps, batch_size, ema_decay, progress, save, every) -> list[float]:
    """Adam steps start … steps-1 with EMA updates; ``save(step)`` at checkpoint times. Returns the losses.

    ``data`` is (points, class indices or None).
    """
    x_data, label_idx = data
    space, n_data = objective.space, objective.space.n_points(data[0])
    losses: list[float] = []
    params = list(run.net.parameters())
    run.net.train()
    bar = tqdm(range(start, steps), desc="fitting", disable=not progress, initial=start, total=steps)
    running = None
    for step in bar:
        idx = torch.randint(n_data, (batch_size,), generator=run.gen)
        if label_idx is None:
            loss = objective.loss(run.net, space.take(x_data, idx), run.gen)
        else:
            loss = objective.loss(run.net, space.take(x_data, idx), run.gen, labels=label_idx[idx])
        run.opt.zero_grad(set_to_none=True)
        loss.backward()
        run.opt.step()
        run.sched.step()
        with torch.no_grad():
            # warm-up of the EMA decay, min(decay, (1+k)/(10+k)) (common practice): without it a short run
            # keeps a share decay^steps of the random initial weights in the average
            decay = min(ema_decay, (1.0 + step) / (10.0 + step))
            torch._foreach_lerp_(run.ema, [p.detach() for p in params], 1.0 - decay)
        value = float(loss.detach())
        if not math.isfinite(value):
            raise FloatingPointError(f"training loss became {value} at step {step + 1}; lower the learning rate")
        losses.append(value)
        running = value if running is None else 0.98 * running + 0.02 * value
        if progress and (step % 25 == 0 or step == steps - 1):
            bar.set_postfix(loss=f"{running:.4f}")
        if (step + 1) % every == 0 or step + 1 == steps:
            save(step + 1)
    bar.close()
    return losses


def _save_checkpoint(path: Path, run_config, step, run: _Run):
    state = {
        "run_config": json.dumps(run_config, sort_keys=True),
        "step": step,
        "network": run.net.state_dict(),
        "ema": run.ema,
        "optimizer": run.opt.state_dict(),
        "lr_schedule": run.sched.state_dict(),
        "generator": run.gen.get_state(),
    }
    with atomic_path(path) as tmp:
        torch.save(state, tmp)


def _restore(path: Path, run_config, run: _Run) -> int:
    try:
        state = torch.load(path, map_location="cpu", weights_only=True)
    except Exception as e:
        raise InputError(f"{path}: cannot be read as a checkpoint ({type(e).__name__}: {e})") from None
    saved = json.loads(state["run_config"])
    if saved != json.loads(json.dumps(run_config, sort_keys=True)):
        diff = sorted(k for k in set(saved) | set(run_config) if saved.get(k) != run_config.get(k))
        raise InputError(f"{path}: checkpoint was made by a different run (differs in {diff}); "
                         "resume with the same settings or use another checkpoint folder")
    run.net.load_state_dict(state["network"])
    with torch.no_grad():
        for e, s in zip(run.ema, state["ema"]):
            e.copy_(s)
    run.opt.load_state_dict(state["optimizer"])
    run.sched.load_state_dict(state["lr_schedule"])
    run.gen.set_state(state["generator"])
    return int(state["step"])
