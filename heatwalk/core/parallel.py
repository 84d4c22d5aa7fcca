"""Data-parallel training: processes, ranks and each rank's share of a global batch.

How a run is split (the rule that makes results independent of the number of processes)
----------------------------------------------------------------------------------------
Every process ("rank") holds the same seeded ``torch.Generator``. At every step
each rank draws, from that one generator, everything random about the *global*
batch of ``batch_size`` rows exactly as a single process would: the batch's row
indices, and then — through the objective's :meth:`draw` — the diffusion times,
the noised points x_t, dropped labels and masks. Rank r of W then evaluates the
deterministic part (the exact score target, the network, the loss) on its
contiguous slice of rows ``[r n / W, (r + 1) n / W)`` only, with the per-row
terms weighted W / n, so that the gradient averaged over ranks by
``DistributedDataParallel`` is the gradient of the global batch's mean loss.
All ranks then take the same Adam step and keep identical weights.

So a run with W processes computes the same loss on the same rows, times and
noise as one process with the same ``batch_size`` and ``seed``; the weights
agree up to the order of floating-point sums (the gradient is summed slice by
slice and then across ranks instead of in one pass): in float32 networks a few
ulps per step. What is replicated on every rank is cheap (index draws, reading
the batch's rows, the exact forward draws); what is split is the expensive part
(the kernel's score, the network's forward and backward pass).

Starting processes
------------------
``torchrun --nproc_per_node N -m heatwalk fit ...`` (or any launcher that sets
the ``RANK``, ``WORLD_SIZE``, ``LOCAL_RANK``, ``MASTER_ADDR`` and
``MASTER_PORT`` environment variables) starts N processes; :func:`ensure_started`
then initialises the default process group (gloo for CPU tensors, nccl for
CUDA) unless the caller already did. Multi-machine runs use torchrun's own
rendezvous options.
"""

from __future__ import annotations

import os
from dataclasses import dataclass

import torch

from heatwalk.errors import InputError

#: the environment variables a launcher (torchrun) sets for every process
LAUNCHER_VARIABLES = ("RANK", "WORLD_SIZE", "LOCAL_RANK")


@dataclass(frozen=True)
class Share:
    """Rank ``rank`` of ``world`` processes: which rows of a global batch it evaluates and how it weighs them."""

    rank: int = 0
    world: int = 1

    @property
    def whole(self) -> bool:
        """True for a single process: it evaluates the whole batch."""
        return self.world == 1

    def rows(self, n: int) -> slice:
        """The contiguous slice [rank n / world, (rank + 1) n / world) of a batch of n rows."""
        return slice(self.rank * n // self.world, (self.rank + 1) * n // self.world)

    def take(self, x, n: int):
        """Rows :meth:`rows` of ``x`` (a tensor, a tuple of tensors or None); ``x`` itself for a whole share."""
        if x is None or self.whole:
            return x
        r = self.rows(n)
        return tuple(xi[r] for xi in x) if isinstance(x, tuple) else x[r]

    def mean(self, values: torch.Tensor, n: int) -> torch.Tensor:
        """This rank's part of the mean of n per-row values, of which it holds its slice ``values``.

        A single process returns ``values.mean()``; rank r returns ``values.sum() · world / n``, so that the
        average over ranks (what DistributedDataParallel does to gradients) is the mean over all n rows.
        """
        if self.whole:
            return values.mean()
        return values.sum() * (self.world / n)


WHOLE = Share()


def launched() -> bool:
    """True when a launcher such as torchrun started this process (its environment variables are set)."""
    return all(v in os.environ for v in LAUNCHER_VARIABLES)


def is_distributed() -> bool:
    """True when the default torch.distributed process group is initialised."""
    return torch.distributed.is_available() and torch.distributed.is_initialized()


def world() -> Share:
    """This process's rank and the number of processes (0 of 1 without a process group)."""
    if is_distributed():
        return Share(torch.distributed.get_rank(), torch.distributed.get_world_size())
    return WHOLE


def is_main_process() -> bool:
    """True on the process that writes files: rank 0, or the only process.

    Before the process group is started (e.g. before ``fit``) it reads the launcher's ``RANK`` variable.
    """
    if is_distributed():
        return torch.distributed.get_rank() == 0
    return int(os.environ.get("RANK", "0")) == 0


def local_rank() -> int:
    """Index of this process on its machine (torchrun's ``LOCAL_RANK``; 0 without a launcher)."""
    return int(os.environ.get("LOCAL_RANK", "0"))


def ensure_started(device: torch.device) -> Share:
    """Initialise the default process group when a launcher started this process; return this rank's share.

    The backend is nccl for CUDA devices and gloo otherwise. A process group the caller started is used
    as it is (its backend must suit ``device``). Without a launcher and without a group: one process.
    """
    if is_distributed():
        return world()
    if not launched():
        return WHOLE
    if not torch.distributed.is_available():
        raise InputError("this torch build has no torch.distributed; run one process", field="device")
    backend = "nccl" if device.type == "cuda" else "gloo"
    if device.type == "cuda":
        torch.cuda.set_device(device)
    torch.distributed.init_process_group(backend=backend)
    return world()


def shutdown() -> None:
    """Destroy the default process group if one exists (call once at the end of a launched program)."""
    if is_distributed():
        torch.distributed.destroy_process_group()


def all_mean(value: torch.Tensor, share: Share) -> torch.Tensor:
    """Mean over ranks of a tensor (every rank gets the result); ``value`` itself for one process."""
    if share.whole:
        return value
    out = value.detach().clone()
    torch.distributed.all_reduce(out)
    return out / share.world


def agree(value: int, share: Share, what: str) -> int:
    """Check that every rank holds the same integer ``value`` (e.g. the step a checkpoint resumes from)."""
    if share.whole:
        return value
    # cpu: gloo reduces CPU tensors; moved to the GPU for nccl below
    t = torch.tensor([value, -value], dtype=torch.int64)
    if torch.distributed.get_backend() == "nccl":
        t = t.cuda()
    torch.distributed.all_reduce(t, op=torch.distributed.ReduceOp.MAX)
    if int(t[0]) != value or -int(t[1]) != value:
        raise InputError(f"{what} differs between processes (from {-int(t[1])} to {int(t[0])}); every rank must "
                         f"see the same files", field=what)
    return value
