"""The one training loop shared by every space.

``fit`` validates the data on the space, builds the space's objective and its
default network, and runs Adam on ``objective.loss`` with an exponential moving
average (EMA) of the weights. It never looks at which space it has: what
differs between spaces lives in the space and its objective.

Reproducibility: all randomness (network initialisation, batches, diffusion
times and noise) comes from ``seed``. A checkpoint stores the network, EMA,
optimiser and generator states and the losses so far, so a run resumed from it
ends with exactly the weights (and training record) of an uninterrupted run.
A checkpoint also stores the run's settings and a fingerprint of its data (the
number of points and a SHA-256 hash of the validated points and labels):
resuming with other settings or other data is refused.

Interruption: SIGINT and SIGTERM stop the loop at the end of the current step
(:mod:`heatwalk.core.interrupts`); with checkpoints on, a checkpoint of that
step is written first, then :class:`~heatwalk.core.interrupts.Interrupted`
(a ``KeyboardInterrupt``) is raised.

Scale: ``device`` chooses where the run happens (:mod:`heatwalk.core.devices`);
started by torchrun, ``fit`` trains data-parallel with DistributedDataParallel,
``batch_size`` being the global batch, and gives the same model for any number
of processes up to floating-point summation order (:mod:`heatwalk.core.parallel`
says how); data larger than memory is read batch by batch from a memory-mapped
array, a Dataset or a DataLoader (:mod:`heatwalk.core.data_source`).
"""

from __future__ import annotations

import gc
import hashlib
import json
import math
import time
from dataclasses import dataclass, replace
from pathlib import Path

import torch
from tqdm.auto import tqdm

from heatwalk.checks import check_number, check_positive_int
from heatwalk.core import parallel, sizing
from heatwalk.core.data_source import data_source
from heatwalk.core.devices import make_generator, resolve_device, set_threads
from heatwalk.core.interrupts import Interrupted, stop_requests
from heatwalk.core.labels import encode_labels
from heatwalk.core.model import Model
from heatwalk.core.model_files import check_parameter_count, load_plain_tensors
from heatwalk.core.networks import network_name
from heatwalk.core.objectives import make_objective
from heatwalk.core.result_checks import check_finite_loss
from heatwalk.core.validation import VALIDATION_MAX_POINTS, VALIDATION_SEED_OFFSET, Validation
from heatwalk.errors import InputError
from heatwalk.io.atomic import atomic_path, remove_stale_temporaries
from heatwalk.notices import warn

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
    #: what the loss calls: the network, or its DistributedDataParallel wrapper in a data-parallel run
    forward: torch.nn.Module | None = None
    #: this process's share of every global batch
    share: parallel.Share = parallel.WHOLE


@dataclass
class _Settings:
    """The arguments of :func:`fit` that the run itself uses."""

    steps: int
    batch_size: int
    lr: float
    ema_decay: float
    seed: int
    network: dict | None
    time_range: tuple | None
    checkpoint_dir: object
    checkpoint_every: int
    resume: bool
    progress: bool
    labels: object
    label_dropout: float
    inpainting: bool
    size_rule: bool = True
    lr_warmup: int | float = 0
    lr_floor: float = 0.1
    time_tilt: float = 0.0
    validation_fraction: float = 0.0
    validation_every: int = 100


def fit(space, data, *, steps: int | None = None, batch_size: int = 512, lr: float = 2e-3,
        ema_decay: float = 0.999, seed: int = 0, network: dict | None = None,
        time_range: tuple[float, float] | None = None, checkpoint_dir=None, checkpoint_every: int = 1000,
        resume: bool = False, progress: bool = True, threads: int | None = None, labels=None,
        label_dropout: float = 0.1, inpainting: bool = False, device=None, size_rule: bool = True,
        lr_warmup: int | float = 0, lr_floor: float = 0.1, time_tilt: float = 0.0, validation_fraction: float = 0.0,
        validation_every: int = 100) -> Model:
    """Fit a diffusion model to ``data`` (points on ``space``) and return a :class:`Model`.

    Parameters
    ----------
    space : the state space; ``data`` is validated by ``space.validate``.
    data : points in memory (tensor, array, list; a tuple per factor for a product), a numpy memory-mapped
        array or a map-style torch Dataset (rows read batch by batch), or an iterable of batches such as a
        DataLoader (each item one global batch); see :mod:`heatwalk.core.data_source`.
    steps, batch_size, lr : Adam steps (default: the size rule's, 3000 up to 1,000 points; 3000 when the rule is
        off or the data size is unknown), batch size, learning rate. In a
        data-parallel run ``batch_size`` is the global batch, split between the processes.
    lr_warmup, lr_floor : the learning rate rises linearly over the first ``lr_warmup`` steps (default 0: none;
        a float in (0, 1) is a share of the steps, rounded up),
        then follows a cosine from lr down to ``lr_floor`` · lr at the last step (default 0.1).
    ema_decay : decay of the exponential moving average whose weights the model keeps
        (warmed up as min(ema_decay, (1+k)/(10+k)) at step k).
    seed : seeds network initialisation, batches and diffusion noise.
    network : options of the objective's default network (e.g. ``{"hidden": 256, "depth": 3}``).
    time_range : (t_min, t_max) overriding the space's default.
    checkpoint_dir : folder for periodic checkpoints (every ``checkpoint_every`` steps, at the end, and when
        stopped by SIGINT / SIGTERM); with ``resume=True`` training continues from the checkpoint found
        there, which must come from the same settings and data. With no checkpoint there, training starts
        from step 0 with a warning (so a job that always passes ``resume=True`` works on its first run).
        A finished run resumed returns the finished model at once.
    threads : torch intra-op threads during the run (restored afterwards; default: torch's own setting, the
        number of physical cores or ``OMP_NUM_THREADS``; torchrun sets 1 per process).
    labels : one class name (int or string) per data point: the model learns the law given the class and,
        with each label dropped with probability ``label_dropout`` (default 0.1), the unconditional law,
        for classifier-free guidance (``Model.sample(label=..., guidance=...)``).
    inpainting : also train the network to condition on known coordinates (torus, R^d), so that
        ``Model.sample(given=...)`` is exact (see :mod:`heatwalk.core.conditioning`).
    device : "cpu" (default), "cuda", "cuda:N" or "auto" (:func:`heatwalk.core.devices.resolve_device`).
    size_rule : choose ``steps`` and the network from the number of data points (default on;
        :func:`heatwalk.core.sizing.size_rule`: 3000 steps up to 1,000 points, more above; for score matching
        and products the residual network of width 128, 256 from 8,000 points, with its time skip where the space's features
        are unbounded); an explicit ``steps`` or ``network`` entry wins over the rule. With an iterable of batches (size unknown) the rule cannot apply
        and the fixed defaults are used; the record's "size_rule" entry says which happened.
    time_tilt : tilt a ∈ (-1, 1) of the training-time density with importance weights that keep the objective
        unchanged (:mod:`heatwalk.core.schedule`; a > 0 draws more small times). Score-matching objectives only.
    validation_fraction : share of the data points (drawn with ``seed``) held out of training; every
        ``validation_every`` steps and at the end the EMA weights' denoising loss on fixed draws (times and
        noise drawn once) of up to 4,096 of them is measured, and the model keeps the EMA weights of the
        lowest one (early model choice; the record's "validation" entry has the curve). Needs the points in
        memory or memory-mapped, and no ``checkpoint_dir``.
    network : options of the objective's default network; with ``fourier_features`` but no ``fourier_scale``
        the scale comes from the data's size and spread (:func:`heatwalk.core.sizing.fourier_scale`). A
        product also takes ``factored`` (a residual network per factor plus a coupling network,
        :class:`heatwalk.core.networks.factored.FactoredDenoiser`).

    Data-parallel runs
    ------------------
    Under torchrun (or with a process group already initialised) every process runs ``fit`` with the same
    arguments; the process group is started here when needed (gloo on the CPU, nccl on CUDA) and destroyed
    at the end if it was started here. Each step every rank draws the global batch's indices, times and noise
    from the one seeded generator and evaluates its slice (:mod:`heatwalk.core.parallel`), so the result does
    not depend on the number of processes (up to floating-point summation order). Rank 0 alone writes
    checkpoints; every rank can resume from the same checkpoint, whatever the number of processes that wrote
    it. The returned model is the same on every rank: save it from one only
    (``if heatwalk.core.parallel.is_main_process(): model.save(...)``).
    """
    _check_settings(steps, batch_size, checkpoint_every, ema_decay, lr, threads)
    _check_levers(lr_warmup, lr_floor, validation_fraction, validation_every, checkpoint_dir)
    device = resolve_device(device)
    before = set_threads(threads)
    started = not parallel.is_distributed() and parallel.launched()
    try:
        share = parallel.ensure_started(device)
        settings = _Settings(steps, batch_size, lr, ema_decay, seed, network, time_range, checkpoint_dir,
                             checkpoint_every, resume, progress, labels, label_dropout, inpainting, bool(size_rule),
                             lr_warmup, float(lr_floor), float(time_tilt), float(validation_fraction),
                             int(validation_every))
        return _fit(space, data, share, device, settings)
    finally:
        torch.set_num_threads(before)
        if started:
            # the DistributedDataParallel wrapper must be gone before its process group is destroyed: a reducer
            # freed afterwards holds the group's last reference, and its destructor can deadlock on the GIL
            gc.collect()
            parallel.shutdown()


def _fit(space, data, share: parallel.Share, device: torch.device, o: _Settings) -> Model:
    """``fit`` once the device and the processes are settled."""
    if o.batch_size < share.world:
        raise InputError(f"batch_size {o.batch_size} is smaller than the number of processes {share.world}: "
                         f"every process needs at least one row of the global batch", field="batch_size")
    source = data_source(space, data, device)
    n_data = source.n
    if n_data is not None and n_data < 2:
        raise InputError(f"need at least 2 data points to fit, got {n_data}", field="data")
    space = _fitted_space(space, source, n_data)
    classes, label_idx = (None, None) if o.labels is None else _labels(o.labels, n_data, source, device)
    objective = make_objective(space, time_range=o.time_range, classes=classes, label_dropout=o.label_dropout,
                               inpainting=o.inpainting, time_tilt=o.time_tilt)
    o = _apply_size_rule(o, n_data, space, source, objective)
    rows, validation = _validation_split(o, source, label_idx, objective, device)
    if o.resume and o.checkpoint_dir is None:
        raise InputError("resume=True needs a checkpoint_dir", field="resume")
    ckpt_path = _checkpoint_path(o.checkpoint_dir) if share.rank == 0 else _checkpoint_file(o.checkpoint_dir)
    run = _start(objective, o.network, o.lr, o.steps, o.seed, device, share, o.lr_warmup, o.lr_floor)
    run_config = {
        "space": space.config(), "objective": objective.config(),
        "network": {"name": network_name(run.net), "config": run.net.config()},
        "steps": o.steps, "batch_size": o.batch_size, "lr": o.lr, "ema_decay": o.ema_decay, "seed": o.seed,
        "n_data": n_data, "data": source_fingerprint(source, label_idx),
    }
    # the levers enter the run's settings only when they differ from their defaults, so checkpoints made before
    # they existed still resume
    for key, default in (("lr_warmup", 0), ("lr_floor", 0.1), ("validation_fraction", 0.0)):
        if getattr(o, key) != default:
            run_config[key] = getattr(o, key)
    start, losses = 0, []
    if o.resume:
        if ckpt_path.is_file():
            start, losses = _restore(ckpt_path, run_config, run)
        elif share.rank == 0:
            warn(f"nothing to resume: no checkpoint in {o.checkpoint_dir}; training starts from step 0")
        start = parallel.agree(start, share, "the checkpoint step to resume from")
    if source.streams:
        source.skip(start)

    t0 = time.perf_counter()
    try:
        _train(objective, run, (source, label_idx, rows, validation), start, o.steps, o.batch_size, o.ema_decay,
               o.progress and share.rank == 0,
               lambda step: _checkpoint(ckpt_path, run_config, step, run, losses) if ckpt_path else None,
               o.checkpoint_every, losses)
    finally:
        run.forward = None  # drop the DistributedDataParallel wrapper (see fit)
    elapsed = time.perf_counter() - t0
    kept = run.ema if validation is None else validation.best_weights
    with torch.no_grad():
        for p, e in zip(run.net.parameters(), kept):
            p.copy_(e)
    tail = losses[-min(len(losses), LOSS_WINDOW):]
    record = {
        **{k: run_config[k] for k in ("steps", "batch_size", "lr", "ema_decay", "seed", "n_data")},
        "mean_loss_last_100_steps": (sum(tail) / len(tail)) if tail else None,
        "train_seconds": elapsed,
        "resumed_from_step": start,
        "processes": share.world,
        "device": str(device),
    }
    record["size_rule"] = ("off" if not o.size_rule else "applied" if n_data is not None
                           else "not applied: the data size of an iterable of batches is unknown")
    if o.lr_warmup or o.lr_floor != 0.1 or o.time_tilt:
        record["levers"] = {"lr_warmup": o.lr_warmup, "lr_floor": o.lr_floor, "time_tilt": o.time_tilt}
    if validation is not None:
        record["validation"] = validation.summary()
    # the loss of every step run here (step resumed_from_step + 1 onwards), saved as losses.csv by Model.save
    return Model(space, objective, run.net, record, losses=torch.tensor(losses, dtype=torch.float64))  # cpu: a record


def _labels(labels, n_data, source, device):
    """Class names and the (n_data,) class index of every data point, on ``device``."""
    if source.streams:
        raise InputError("labels= needs the data points themselves (in memory, a memory-mapped array or a "
                         "Dataset), not an iterable of batches", field="labels")
    classes, label_idx = encode_labels(labels, n_data)
    return classes, label_idx.to(device)


def _check_settings(steps, batch_size, checkpoint_every, ema_decay, lr, threads) -> None:
    if steps is not None:
        check_positive_int("steps", steps)
    check_positive_int("batch_size", batch_size)
    check_positive_int("checkpoint_every", checkpoint_every)
    check_number("ema_decay", ema_decay, minimum=0, maximum=1, open_maximum=True)
    check_number("lr", lr, minimum=0, open_minimum=True)
    if threads is not None:
        check_positive_int("threads", threads)


def _check_levers(lr_warmup, lr_floor, validation_fraction, validation_every, checkpoint_dir) -> None:
    if isinstance(lr_warmup, float) and 0 < lr_warmup < 1:
        pass  # a share of the steps
    elif lr_warmup != 0:
        check_positive_int("lr_warmup", lr_warmup)
    check_number("lr_floor", lr_floor, minimum=0, maximum=1)
    check_number("validation_fraction", validation_fraction, minimum=0, maximum=0.5)
    check_positive_int("validation_every", validation_every)
    if validation_fraction > 0 and checkpoint_dir is not None:
        raise InputError("validation_fraction > 0 keeps the best weights in memory, which checkpoints do not hold; "
                         "use it without checkpoint_dir", field="validation_fraction")


#: the embedding spread of the Fourier-feature rule is measured on at most this many points (evenly spaced rows)
SPREAD_MAX_POINTS = 10000


def _spread(space, source, n_data):
    if source.streams or n_data is None:
        raise InputError("fourier_features without fourier_scale needs the data points to measure their spread; "
                         "give fourier_scale for an iterable of batches", field="network")
    idx = torch.linspace(0, n_data - 1, min(n_data, SPREAD_MAX_POINTS)).round().long()  # cpu: row ids
    x = source.batch(idx)
    return sizing.embedding_spread(space, x)


def _fitted_space(space, source, n_data):
    """The space adapted to the training data (:meth:`heatwalk.spaces.Space.fitted_to`; R^d takes the data's mean
    and standard deviation as its location and scale), from the data's rows (up to SPREAD_MAX_POINTS of them,
    spread evenly over the data); the space as given for an iterable of batches, whose size is unknown."""
    if n_data is None:
        return space
    idx = torch.linspace(0, n_data - 1, min(n_data, SPREAD_MAX_POINTS)).round().long()  # cpu: row ids
    return space.fitted_to(source.batch(idx))


def _apply_size_rule(o: _Settings, n_data, space, source, objective) -> _Settings:
    """Settings with ``steps`` (3000 unless the size rule gives it) and the network options resolved. The rule's
    network options apply to objectives that size their network by the data (``objective.sized_by_data``);
    an explicit entry wins over the rule's."""
    dim = getattr(space, "dim", 0) or space.embed_dim
    network = dict(o.network) if o.network else None
    steps = o.steps
    if o.size_rule and n_data is not None:
        rule = sizing.size_rule(n_data, dim, getattr(space, "bounded_embedding", False))
        steps = rule["steps"] if steps is None else steps
        if objective.sized_by_data:
            chosen = {**rule["network"], **(network or {})}
            if not chosen.get("residual") and "time_skip" not in (network or {}):
                chosen.pop("time_skip", None)  # the rule's skip belongs to its residual network, not to an MLP
            network = chosen
    network = sizing.resolve_network(network, n_data, dim, lambda: _spread(space, source, n_data))
    steps = sizing.BASE_STEPS if steps is None else steps
    warmup = int(math.ceil(o.lr_warmup * steps)) if isinstance(o.lr_warmup, float) else o.lr_warmup
    return replace(o, steps=steps, network=network, lr_warmup=warmup)


def _validation_split(o: _Settings, source, label_idx, objective, device):
    """(training row ids or None, the Validation of the held-out rows or None)."""
    if o.validation_fraction == 0:
        return None, None
    n = source.n
    if source.streams or n is None:
        raise InputError("validation_fraction needs the data points (in memory, memory-mapped or a Dataset), not an "
                         "iterable of batches", field="validation_fraction")
    n_val = int(round(o.validation_fraction * n))
    if n_val < 1 or n - n_val < 2:
        raise InputError(f"validation_fraction {o.validation_fraction} of {n} points leaves {n_val} for validation "
                         f"and {n - n_val} for training; need at least 1 and 2", field="validation_fraction")
    perm = torch.randperm(n, generator=torch.Generator().manual_seed(o.seed + VALIDATION_SEED_OFFSET))  # cpu: ids
    rows, held = perm[n_val:].sort().values.to(device), perm[:n_val].sort().values
    held = held[:VALIDATION_MAX_POINTS].to(device)
    x0 = source.batch(held)
    labels = None if label_idx is None else label_idx[held]
    drawn = objective.draw(x0, make_generator(o.seed + VALIDATION_SEED_OFFSET, device), labels)
    return rows, Validation(objective, drawn, n_val, o.validation_every, o.validation_fraction)


def data_fingerprint(x_data, label_idx=None) -> dict:
    """Number of points and SHA-256 of the validated points (each factor's dtype, shape and bytes) and labels."""
    h = hashlib.sha256()
    parts = list(x_data) if isinstance(x_data, (tuple, list)) else [x_data]
    for part in parts + ([label_idx] if label_idx is not None else []):
        t = part.detach().cpu().contiguous()
        h.update(f"{t.dtype}{tuple(t.shape)};".encode())
        h.update(t.reshape(-1).view(torch.uint8).numpy().data if t.numel() else b"")
    return {"n_points": int(parts[0].shape[0]), "sha256": h.hexdigest()}


def source_fingerprint(source, label_idx) -> dict:
    """The data fingerprint of points in memory; for memory-mapped arrays, Datasets and streams only their size
    (hashing them would read all of them)."""
    if getattr(source, "x", None) is not None:
        return data_fingerprint(source.x, label_idx)
    return {"n_points": source.n, "sha256": None}


def _checkpoint_file(checkpoint_dir) -> Path | None:
    return None if checkpoint_dir is None else Path(checkpoint_dir) / CHECKPOINT_NAME


def _checkpoint_path(checkpoint_dir) -> Path | None:
    """``checkpoint_dir / checkpoint.pt``, the folder made if needed, stale temporaries of earlier crashes removed."""
    if checkpoint_dir is None:
        return None
    folder = Path(checkpoint_dir)
    if folder.exists() and not folder.is_dir():
        raise InputError(f"checkpoint folder {folder} is a file, not a folder", field="checkpoint_dir")
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise InputError(f"checkpoint folder {folder} cannot be made ({e.strerror or e})",
                         field="checkpoint_dir") from None
    path = folder / CHECKPOINT_NAME
    if path.exists() and not path.is_file():
        raise InputError(f"{path} is not a file; remove it or use another checkpoint folder", field="checkpoint_dir")
    remove_stale_temporaries(path)
    return path


def _start(objective, network: dict | None, lr: float, steps: int, seed: int, device: torch.device,
           share: parallel.Share, warmup: int = 0, floor: float = 0.1) -> _Run:
    """Network (initialised from ``seed`` on the CPU, then moved to ``device``), EMA copy, Adam with a linear
    warm-up over ``warmup`` steps and a cosine schedule to ``floor`` · lr, the generator on ``device``, and the
    DistributedDataParallel wrapper of a multi-process run."""
    with torch.random.fork_rng(devices=[]), torch.device("meta"):
        check_parameter_count(objective.default_network(**(network or {})))
    with torch.random.fork_rng(devices=[]):
        torch.manual_seed(seed)
        net = objective.default_network(**(network or {}))
    net = net.to(device)
    ema = [p.detach().clone() for p in net.parameters()]
    opt = torch.optim.Adam(list(net.parameters()), lr=lr)
    sched = torch.optim.lr_scheduler.LambdaLR(opt, lambda k: lr_factor(k, steps, warmup, floor))
    forward = net
    if not share.whole:
        ids = [device.index] if device.type == "cuda" else None
        forward = torch.nn.parallel.DistributedDataParallel(net, device_ids=ids)
    return _Run(net, ema, opt, sched, make_generator(seed, device), forward, share)


def lr_factor(k: int, steps: int, warmup: int = 0, floor: float = 0.1) -> float:
    """Learning-rate multiplier at step k: (k + 1) / warmup during the warm-up, then
    floor + (1 - floor) (1 + cos(π k / steps)) / 2 (with warmup = 0 and floor = 0.1 the schedule heatwalk always had)."""
    cosine = floor + (1.0 - floor) * 0.5 * (1 + math.cos(math.pi * min(k, steps) / steps))
    return cosine * min(1.0, (k + 1) / warmup) if warmup else cosine


def _batch(run: _Run, data, batch_size: int):
    """The next global batch and its class indices (None without labels).

    Row sources draw the batch's row indices from the run's generator; a stream gives its next batch.
    """
    source, label_idx, rows = data[:3]
    if source.streams:
        return source.next(), None
    if rows is None:
        idx = torch.randint(source.n, (batch_size,), generator=run.gen, device=run.gen.device)
    else:  # training rows only (validation_fraction > 0)
        idx = rows[torch.randint(rows.shape[0], (batch_size,), generator=run.gen, device=run.gen.device)]
    return source.batch(idx), (None if label_idx is None else label_idx[idx])


def _train(objective, run: _Run, data, start, steps, batch_size, ema_decay, progress, save, every, losses) -> None:
    """Adam steps start … steps-1 with EMA updates, each loss appended to ``losses``; ``save(step)`` at
    checkpoint times and, on SIGINT / SIGTERM, at the end of the current step before raising Interrupted.

    ``data`` is (the data source, class indices or None). Every rank draws the randomness of the whole global
    batch (``objective.draw``) and evaluates its share (``objective.share_loss``); the losses recorded are
    those of the global batch (averaged over ranks).
    """
    with stop_requests() as stop:
        _steps(objective, run, data, start, steps, batch_size, ema_decay, progress, save, every, losses, stop)


def _steps(objective, run, data, start, steps, batch_size, ema_decay, progress, save, every, losses, stop):
    params = list(run.net.parameters())
    lr = run.opt.param_groups[0].get("initial_lr", run.opt.param_groups[0]["lr"])
    run.net.train()
    bar = tqdm(range(start, steps), desc="fitting", disable=not progress, initial=start, total=steps)
    running = losses[-1] if losses else None
    for step in bar:
        x0, labels = _batch(run, data, batch_size)
        drawn = objective.draw(x0, run.gen, labels)
        loss = objective.share_loss(run.forward, drawn, run.share)
        run.opt.zero_grad(set_to_none=True)
        loss.backward()
        run.opt.step()
        run.sched.step()
        with torch.no_grad():
            # warm-up of the EMA decay, min(decay, (1+k)/(10+k)) (common practice): without it a short run
            # keeps a share decay^steps of the random initial weights in the average
            decay = min(ema_decay, (1.0 + step) / (10.0 + step))
            torch._foreach_lerp_(run.ema, [p.detach() for p in params], 1.0 - decay)
        value = check_finite_loss(float(parallel.all_mean(loss.detach(), run.share)), step + 1, lr)
        losses.append(value)
        running = value if running is None else 0.98 * running + 0.02 * value
        if progress and (step % 25 == 0 or step == steps - 1):
            bar.set_postfix(loss=f"{running:.4f}")
        validation = data[3]
        if validation is not None and ((step + 1) % validation.every == 0 or step + 1 == steps):
            validation.evaluate(run.net, run.ema, step + 1)
        periodic = (step + 1) % every == 0 or step + 1 == steps
        written = save(step + 1) if periodic else None
        if stop.requested:
            bar.close()
            raise Interrupted(stop.signum, step + 1, written if periodic else save(step + 1))
    bar.close()


def _checkpoint(path: Path, run_config, step, run: _Run, losses) -> Path:
    """Checkpoint at ``step``: rank 0 writes it, then every rank waits until it is on disk."""
    if run.share.rank == 0:
        _save_checkpoint(path, run_config, step, run, losses)
    if not run.share.whole:
        torch.distributed.barrier()
    return path


def _save_checkpoint(path: Path, run_config, step, run: _Run, losses) -> Path:
    state = {
        "run_config": json.dumps(run_config, sort_keys=True),
        "step": step,
        "network": run.net.state_dict(),
        "ema": run.ema,
        "optimizer": run.opt.state_dict(),
        "lr_schedule": run.sched.state_dict(),
        "generator": run.gen.get_state(),
        "generator_device": run.gen.device.type,
        "losses": torch.tensor(losses, dtype=torch.float64),  # cpu: a record
    }
    with atomic_path(path) as tmp:
        torch.save(state, tmp)
    return path


_CHECKPOINT_KEYS = {"run_config": str, "step": int, "network": dict, "ema": list, "optimizer": dict,
                    "lr_schedule": dict, "generator": torch.Tensor, "losses": torch.Tensor}


def _read_checkpoint(path: Path, run_config) -> dict:
    """The checkpoint's contents, checked for its keys and types and for coming from this run and data."""
    state = load_plain_tensors(path, "heatwalk checkpoint")
    if not isinstance(state, dict):
        raise InputError(f"{path}: not a heatwalk checkpoint (expected a table of named entries)")
    for key, kind in _CHECKPOINT_KEYS.items():
        if not isinstance(state.get(key), kind):
            raise InputError(f"{path}: not a heatwalk checkpoint of this version (entry {key!r} is missing or "
                             f"not a {kind.__name__}); use another checkpoint folder", field=key)
    try:
        saved = json.loads(state["run_config"])
    except json.JSONDecodeError:
        raise InputError(f"{path}: the checkpoint's settings are not valid JSON (a damaged file)") from None
    current = json.loads(json.dumps(run_config, sort_keys=True))
    if not isinstance(saved, dict) or saved != current:
        saved = saved if isinstance(saved, dict) else {}
        diff = sorted(k for k in set(saved) | set(current) if saved.get(k) != current.get(k))
        if diff == ["data"] and saved.get("n_data") == current["n_data"]:
            why = (f"it was made with different data ({current['n_data']} points in both, but their contents "
                   f"differ)" if "data" in saved else "it was made by an earlier heatwalk that did not record "
                   "which data it was fitted to")
        else:
            why = f"it was made by a different run (differs in {', '.join(diff)})"
        raise InputError(f"{path}: cannot resume: {why}; resume with the same settings and data, or use another "
                         f"checkpoint folder", field="resume")
    return state


def _restore(path: Path, run_config, run: _Run) -> tuple[int, list[float]]:
    """Load the checkpoint into ``run``; returns (steps done, losses so far)."""
    state = _read_checkpoint(path, run_config)
    try:
        run.net.load_state_dict(state["network"])
        if len(state["ema"]) != len(run.ema):
            raise RuntimeError(f"{len(state['ema'])} averaged tensors for {len(run.ema)} parameters")
        with torch.no_grad():
            for e, s in zip(run.ema, state["ema"]):
                e.copy_(s)
        run.opt.load_state_dict(state["optimizer"])
        run.sched.load_state_dict(state["lr_schedule"])
        made_on = state.get("generator_device", "cpu")
        if made_on != run.gen.device.type:
            raise InputError(f"{path}: checkpoint was made on a {made_on} device, whose random numbers differ "
                             f"from {run.gen.device.type}'s; resume on {made_on}", field="device")
        run.gen.set_state(state["generator"])
    except (RuntimeError, KeyError, ValueError, TypeError, IndexError) as e:
        raise InputError(f"{path}: the checkpoint's tensors do not fit this run's network or optimiser "
                         f"({str(e).splitlines()[0]}); it is damaged: use another checkpoint folder") from None
    step, losses = int(state["step"]), state["losses"].tolist()
    if not (0 <= step <= run_config["steps"] and len(losses) == step):
        raise InputError(f"{path}: the checkpoint's step {step} (with {len(losses)} losses) does not fit a run of "
                         f"{run_config['steps']} steps; it is damaged: use another checkpoint folder")
    return step, losses
