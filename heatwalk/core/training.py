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
from pathlib import Path

import torch
from tqdm.auto import tqdm

from heatwalk.errors import InputError
from heatwalk.io.atomic import atomic_path
from heatwalk.core.model import Model
from heatwalk.core.networks import network_name
from heatwalk.core.objectives import make_objective
from heatwalk.spaces.base import Space

CHECKPOINT_NAME = "checkpoint.pt"


def _check_positive_int(name, value):
    if not isinstance(value, int) or isinstance(value, bool) or value < 1:
        raise InputError(f"{name} must be a positive integer, got {value!r}", field=name)


def fit(space: Space, data, *, steps: int = 3000, batch_size: int = 512, lr: float = 2e-3,
        ema_decay: float = 0.999, seed: int = 0, network: dict | None = None,
        time_range: tuple[float, float] | None = None, checkpoint_dir=None, checkpoint_every: int = 1000,
        resume: bool = False, progress: bool = True, threads: int | None = None) -> Model:
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
    """
    _check_positive_int("steps", steps)
    _check_positive_int("batch_size", batch_size)
    _check_positive_int("checkpoint_every", checkpoint_every)
    if not (0.0 <= ema_decay < 1.0):
        raise InputError(f"ema_decay must be in [0, 1), got {ema_decay}", field="ema_decay")
    if not (lr > 0 and math.isfinite(lr)):
        raise InputError(f"lr must be a positive number, got {lr}", field="lr")
    x_data = space.validate(data)
    if x_data.shape[0] < 2:
        raise InputError(f"need at least 2 data points to fit, got {x_data.shape[0]}", field="data")
    if threads is not None:
        torch.set_num_threads(threads)

    objective = make_objective(space, time_range=time_range)
    with torch.random.fork_rng(devices=[]):
        torch.manual_seed(seed)
        net = objective.default_network(**(network or {}))
    ema = [p.detach().clone() for p in net.parameters()]
    params = list(net.parameters())
    opt = torch.optim.Adam(params, lr=lr)
    sched = torch.optim.lr_scheduler.LambdaLR(
        opt, lambda k: 0.1 + 0.9 * 0.5 * (1 + math.cos(math.pi * min(k, steps) / steps)))
    gen = torch.Generator().manual_seed(seed)
    run_config = {
        "space": space.config(), "objective": objective.config(),
        "network": {"name": network_name(net), "config": net.config()},
        "steps": steps, "batch_size": batch_size, "lr": lr, "ema_decay": ema_decay, "seed": seed,
        "n_data": int(x_data.shape[0]),
    }

    start = 0
    ckpt_path = Path(checkpoint_dir) / CHECKPOINT_NAME if checkpoint_dir is not None else None
    if resume:
        if ckpt_path is None:
            raise InputError("resume=True needs a checkpoint_dir", field="resume")
        if ckpt_path.is_file():
            start = _restore(ckpt_path, run_config, net, ema, opt, sched, gen)

    losses: list[float] = []
    t0 = time.perf_counter()
    net.train()
    bar = tqdm(range(start, steps), desc="fitting", disable=not progress, initial=start, total=steps)
    running = None
    for step in bar:
        idx = torch.randint(x_data.shape[0], (batch_size,), generator=gen)
        loss = objective.loss(net, x_data[idx], gen)
        opt.zero_grad(set_to_none=True)
        loss.backward()
        opt.step()
        sched.step()
        with torch.no_grad():
            # warm-up of the EMA decay, min(decay, (1+k)/(10+k)) (common practice): without it a short run
            # keeps a share decay^steps of the random initial weights in the average
            decay = min(ema_decay, (1.0 + step) / (10.0 + step))
            torch._foreach_lerp_(ema, [p.detach() for p in params], 1.0 - decay)
        value = float(loss.detach())
        if not math.isfinite(value):
            raise FloatingPointError(f"training loss became {value} at step {step + 1}; lower the learning rate")
        losses.append(value)
        running = value if running is None else 0.98 * running + 0.02 * value
        if progress and (step % 25 == 0 or step == steps - 1):
            bar.set_postfix(loss=f"{running:.4f}")
        if ckpt_path is not None and ((step + 1) % checkpoint_every == 0 or step + 1 == steps):
            _save_checkpoint(ckpt_path, run_config, step + 1, net, ema, opt, sched, gen)
    bar.close()
    elapsed = time.perf_counter() - t0

    with torch.no_grad():
        for p, e in zip(params, ema):
            p.copy_(e)
    tail = losses[-min(len(losses), 100):]
    record = {
        **{k: run_config[k] for k in ("steps", "batch_size", "lr", "ema_decay", "seed", "n_data")},
        "final_loss": (sum(tail) / len(tail)) if tail else None,
        "train_seconds": elapsed,
        "resumed_from_step": start,
    }
    return Model(space, objective, net, record)


def _save_checkpoint(path: Path, run_config, step, net, ema, opt, sched, gen):
    state = {
        "run_config": json.dumps(run_config, sort_keys=True),
        "step": step,
        "network": net.state_dict(),
        "ema": ema,
        "optimizer": opt.state_dict(),
        "lr_schedule": sched.state_dict(),
        "generator": gen.get_state(),
    }
    with atomic_path(path) as tmp:
        torch.save(state, tmp)


def _restore(path: Path, run_config, net, ema, opt, sched, gen) -> int:
    try:
        state = torch.load(path, map_location="cpu", weights_only=True)
    except Exception as e:
        raise InputError(f"{path}: cannot be read as a checkpoint ({type(e).__name__}: {e})") from None
    saved = json.loads(state["run_config"])
    if saved != json.loads(json.dumps(run_config, sort_keys=True)):
        diff = sorted(k for k in set(saved) | set(run_config) if saved.get(k) != run_config.get(k))
        raise InputError(f"{path}: checkpoint was made by a different run (differs in {diff}); "
                         "resume with the same settings or use another checkpoint folder")
    net.load_state_dict(state["network"])
    with torch.no_grad():
        for e, s in zip(ema, state["ema"]):
            e.copy_(s)
    opt.load_state_dict(state["optimizer"])
    sched.load_state_dict(state["lr_schedule"])
    gen.set_state(state["generator"])
    return int(state["step"])
