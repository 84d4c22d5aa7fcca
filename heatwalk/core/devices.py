"""Devices and threads: where tensors live and how many intra-op threads torch uses.

Every public entry point (``fit``, ``Model.sample``, ``Model.log_prob``, ``Model.elbo``) takes ``device``.
Kernels, samplers and the likelihood ODE run on the device of their inputs, and
every ``torch.Generator`` is made on that device, so nothing is copied back and
forth during a run. Kernels stay float64 on every device.

- ``"cpu"`` (the default), ``"cuda"``, ``"cuda:N"``; ``"auto"`` picks CUDA when a
  GPU is present, else the CPU. Under torchrun ``"cuda"`` means this process's
  GPU, ``cuda:LOCAL_RANK``.
- ``"mps"`` (Apple GPUs) is refused: MPS has no float64, and heatwalk's heat
  kernels and scores are float64 by design (their series lose their stated
  accuracy in float32).

The same seed gives the same numbers on the same kind of device; CPU and CUDA
generators produce different random streams, so a CUDA run is reproducible on
CUDA, not bit-equal to a CPU run.

Threads: ``set_threads(n)`` sets torch's intra-op threads. torch's own default
is the number of physical cores (or ``OMP_NUM_THREADS`` when set); torchrun sets
``OMP_NUM_THREADS=1`` in each process when it starts more than one per machine,
so give ``threads`` to use more.
"""

from __future__ import annotations

import torch

from heatwalk.checks import check_positive_int
from heatwalk.errors import InputError

#: the names ``resolve_device`` accepts besides ``cuda:N``
DEVICE_NAMES = ("cpu", "cuda", "mps", "auto")


def resolve_device(name=None) -> torch.device:
    """The torch device for ``name``: "cpu", "cuda", "cuda:N", "mps", "auto", a torch.device, or None (CPU).

    Raises :class:`InputError` for an unknown name, a device this machine does not have, or MPS (no float64).
    Under a launcher (torchrun) "cuda" and "auto" pick ``cuda:LOCAL_RANK``.
    """
    from heatwalk.core.parallel import launched, local_rank

    if name is None:
        return torch.device("cpu")
    text = str(name)
    try:
        device = torch.device(text) if text != "auto" else None
    except RuntimeError:
        device = False
    if device is False or (device is not None and device.type not in ("cpu", "cuda", "mps")):
        raise InputError(f"device must be one of {', '.join(DEVICE_NAMES)} or cuda:N, got {text!r}", field="device")
    if device is None:
        device = torch.device("cuda") if torch.cuda.is_available() else torch.device("cpu")
    if device.type == "mps":
        raise InputError("device 'mps': Apple's MPS has no float64, and heatwalk's heat kernels are float64; "
                         "use cpu", field="device")
    if device.type == "cuda":
        if not torch.cuda.is_available():
            raise InputError(f"device {text!r}: no CUDA GPU is available to this torch "
                             f"(torch.cuda.is_available() is False); use cpu", field="device")
        index = device.index if device.index is not None else (local_rank() if launched() else 0)
        if index >= torch.cuda.device_count():
            raise InputError(f"device {text!r}: this machine has {torch.cuda.device_count()} CUDA device(s) "
                             f"(cuda:0 … cuda:{torch.cuda.device_count() - 1})", field="device")
        device = torch.device("cuda", index)
    return device


def device_of(x) -> torch.device:
    """The device of a tensor, of the first tensor of a tuple (product points), or of a generator."""
    if isinstance(x, (tuple, list)):
        return device_of(x[0])
    return x.device


def input_device(x) -> torch.device:
    """The device of input points: that of a tensor (or of a tuple's first tensor), else the CPU."""
    if isinstance(x, (tuple, list)) and x and isinstance(x[0], torch.Tensor):
        return x[0].device
    return x.device if isinstance(x, torch.Tensor) else torch.device("cpu")


def make_generator(seed: int, device) -> torch.Generator:
    """A ``torch.Generator`` on ``device`` seeded with ``seed``."""
    return torch.Generator(device=device).manual_seed(seed)


def to_device(x, device: torch.device):
    """A tensor or a tuple of tensors (product points) on ``device`` (no copy when already there)."""
    if isinstance(x, tuple):
        return tuple(xi.to(device) for xi in x)
    return x.to(device)


def set_threads(n: int | None) -> int:
    """Set torch's intra-op threads to ``n`` (None: leave them); returns the number in force before.

    The command line's ``--threads N`` calls this. Default (no call): torch's own, the number of physical
    cores or ``OMP_NUM_THREADS``.
    """
    before = torch.get_num_threads()
    if n is not None:
        torch.set_num_threads(check_positive_int("threads", n))
    return before
