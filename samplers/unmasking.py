"""Unmasking sampler for the absorbing (mask) chain with a chosen unmasking schedule.

Starting from the all-mask sequence, step k unmasks a fixed number of
positions so that after step k a fraction g(k / steps) of the L positions
remain masked:

- ``schedule="linear"``: g(u) = 1 - u (the same number of tokens every step);
- ``schedule="cosine"``: g(u) = cos(π u / 2) (few tokens first, more later; Chang et al. 2022).

Which positions: ``order="random"`` picks them uniformly among the masked ones
(with ``steps = L`` and one token per step this samples the model's own
random-order factorisation exactly, Shi et al. 2024); ``order="confidence"``
picks those whose most likely token has the highest probability (greedy,
biased towards likely sequences). The chosen tokens are drawn from
p_θ(x_0 | x_t) evaluated at t = (masked fraction), which is the time at which
that fraction is masked in expectation under the forward chain.

Needs the space capability ``"absorbing"`` (declared in the sampler registry).
The step count, not the field's time grid, drives the schedule; the loop is
the shared :func:`heatwalk.samplers.reverse_loop.reverse_loop` started from
the all-mask sequence.
"""

from __future__ import annotations

import math

import torch

from heatwalk.checks import check_choice, check_positive_int
from heatwalk.errors import InputError
from heatwalk.kernels.ctmc import sample_categorical
from heatwalk.samplers.reverse_loop import reverse_loop
from heatwalk.spaces.base import generator_device

SCHEDULES = {"linear": lambda u: 1.0 - u, "cosine": lambda u: math.cos(0.5 * math.pi * u)}
ORDERS = ("random", "confidence")


def unmasking(field, n: int, steps: int = 100, generator: torch.Generator | None = None,
              progress: bool = True, schedule: str = "linear", order: str = "random") -> torch.Tensor:
    """Draw n sequences (n, L) int64 by unmasking over ``steps`` steps (absorbing chain only)."""
    space = field.space
    if "absorbing" not in space.capabilities:
        raise InputError("the unmasking sampler needs the absorbing chain (process='absorbing')", field="sampler")
    check_choice("unmasking schedule", schedule, sorted(SCHEDULES))
    check_choice("unmasking order", order, ORDERS)
    check_positive_int("steps", steps)
    L, mask = space.L, space.mask_state
    t_min, t_max = field.schedule.t_min, field.schedule.t_max
    masked_after = [L] + [int(round(L * SCHEDULES[schedule](k / steps))) for k in range(1, steps + 1)]
    masked_after[-1] = 0

    def step(x, k, t_grid, s_grid):
        n_unmask = masked_after[k] - masked_after[k + 1]
        if n_unmask <= 0:
            return x
        t = min(max(masked_after[k] / L, t_min), t_max)
        probs = field.x0_probs(x, t)                                   # (n, L, K)
        if order == "random":
            score = torch.rand(n, L, dtype=torch.float64, device=x.device, generator=generator)
        else:
            score = probs.max(-1).values
        score = score.masked_fill(x != mask, -math.inf)
        pick = score.topk(n_unmask, dim=-1).indices                    # (n, n_unmask)
        draw = sample_categorical(probs, generator)
        return x.scatter(1, pick, torch.gather(draw, 1, pick))

    start = torch.full((n, L), mask, dtype=torch.int64, device=generator_device(generator))
    return reverse_loop(field, n, steps, step, generator=generator, progress=progress, x_init=start,
                        desc="sampling (unmasking)")
