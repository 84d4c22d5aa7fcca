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
"""

from __future__ import annotations

import math

import torch
from tqdm.auto import tqdm

from heatwalk.errors import InputError
from heatwalk.spaces.categories import sample_categorical

SCHEDULES = {"linear": lambda u: 1.0 - u, "cosine": lambda u: math.cos(0.5 * math.pi * u)}


def unmasking(field, n: int, steps: int = 100, generator: torch.Generator | None = None,
              progress: bool = True, schedule: str = "linear", order: str = "random") -> torch.Tensor:
    """Draw n sequences (n, L) int64 by unmasking over ``steps`` steps (absorbing chain only)."""
    space = field.space
    if getattr(space, "mask_state", None) is None:
        raise InputError("the unmasking sampler needs the absorbing chain (process='absorbing')", field="sampler")
    if schedule not in SCHEDULES:
        raise InputError(f"unmasking schedule must be one of {sorted(SCHEDULES)}, got {schedule!r}", field="schedule")
    if order not in ("random", "confidence"):
        raise InputError(f"unmasking order must be 'random' or 'confidence', got {order!r}", field="order")
    if not isinstance(steps, int) or steps < 1:
        raise InputError(f"steps must be a positive integer, got {steps!r}", field="steps")
    L, mask = space.L, space.mask_state
    t_min, t_max = field.schedule.t_min, field.schedule.t_max
    masked_after = [L] + [int(round(L * SCHEDULES[schedule](k / steps))) for k in range(1, steps + 1)]
    masked_after[-1] = 0
    x = torch.full((n, L), mask, dtype=torch.int64)
    for k in tqdm(range(steps), desc="sampling (unmasking)", disable=not progress, leave=False):
        n_unmask = masked_after[k] - masked_after[k + 1]
        if n_unmask <= 0:
            continue
        t = min(max(masked_after[k] / L, t_min), t_max)
        probs = field.x0_probs(x, t)                                   # (n, L, K)
        is_masked = x == mask
        if order == "random":
            score = torch.rand(n, L, dtype=torch.float64, generator=generator)
        else:
            score = probs.max(-1).values
        score = score.masked_fill(~is_masked, -math.inf)
        pick = score.topk(n_unmask, dim=-1).indices                    # (n, n_unmask)
        draw = sample_categorical(probs, generator)
        x = x.scatter(1, pick, torch.gather(draw, 1, pick))
    return x
