"""Ancestral sampling of a discrete diffusion on a time grid (D3PM-style, Austin et al. 2021).

From x_t, one step to s < t draws each position independently from

    p_θ(x_s | x_t) = Σ_a p_θ(x_0 = a | x_t) q(x_s | x_t, x_0 = a),

computed by the space's ``posterior`` with the network's x_0 probabilities.
The grid is uniform in t from t_max (the prior) to t_min; the last step draws
x_0 ~ p_θ(x_0 | x_{t_min}), the reconstruction model of the ELBO. For the
absorbing chain this is exactly "unmask each masked position with probability
(t - s)/t, filling it from the network's prediction".
"""

from __future__ import annotations

import torch

from heatwalk.kernels.ctmc import sample_categorical
from heatwalk.samplers.reverse_loop import reverse_loop


def ancestral_step(space, x: torch.Tensor, x0_probs: torch.Tensor, t, s, generator) -> torch.Tensor:
    """Draw x_s ~ Σ_a p(x_0 = a | x_t) q(x_s | x_t, x_0 = a) at every position (s < t)."""
    return sample_categorical(space.posterior(x, x0_probs, s, t), generator)


def ancestral(field, n: int, steps: int = 100, generator: torch.Generator | None = None,
              progress: bool = True, x_init: torch.Tensor | None = None) -> torch.Tensor:
    """Draw n sequences (n, L) int64 with ``steps`` ancestral steps. ``x_init`` replaces the prior draw at t_max."""
    space = field.space

    def step(x, i, t, s):
        return ancestral_step(space, x, field.x0_probs(x, t), t, s, generator)

    def finish(x, t_min):
        return sample_categorical(field.x0_probs(x, t_min), generator)

    return reverse_loop(field, n, steps, step, generator=generator, progress=progress, x_init=x_init,
                        desc="sampling (ancestral)", finish=finish)
