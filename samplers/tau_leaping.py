"""Tau-leaping for the reverse-time chain (Campbell et al. 2022, Section 4.1).

Over a step from t to s = t - h every possible jump (position l, new state v)
fires a Poisson(h · r_θ(l, v)) number of times, with the reverse rates held
fixed over the step. The state space is categorical (no order to add jumps
in), so a position moves to v only when exactly one jump fires there; with two
or more, or none, it stays (the rejection rule of Campbell et al. for
non-ordinal data). Rates are evaluated at the midpoint (t + s)/2 of each step,
which keeps them finite on the first step (the schedule's rate β(t) diverges
at t = 1). The last step draws x_0 ~ p_θ(x_0 | x_{t_min}).
"""

from __future__ import annotations

import torch

from heatwalk.kernels.ctmc import sample_categorical
from heatwalk.samplers.reverse_loop import reverse_loop


def tau_leaping(field, n: int, steps: int = 100, generator: torch.Generator | None = None,
                progress: bool = True, x_init: torch.Tensor | None = None) -> torch.Tensor:
    """Draw n sequences (n, L) int64 with ``steps`` tau-leaping steps."""
    def step(x, i, t, s):
        rates = field.log_reverse_rates(x, 0.5 * (t + s)).exp()          # (n, L, S), 0 where no jump
        counts = torch.poisson((t - s) * rates, generator=generator)
        one = counts.sum(-1) == 1
        return torch.where(one, counts.argmax(-1), x)

    def finish(x, t_min):
        return sample_categorical(field.x0_probs(x, t_min), generator)

    return reverse_loop(field, n, steps, step, generator=generator, progress=progress, x_init=x_init,
                        desc="sampling (tau-leaping)", finish=finish)
