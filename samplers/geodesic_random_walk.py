"""Reverse-time geodesic random walk (Euler–Maruyama on a manifold).

The forward process dX = f(X, t) dt + dB_M (B_M Brownian motion, generator
(1/2)Δ; f = 0 for a pure heat flow) has the time reversal
dY = [∇ log p_{T-s}(Y) - f(Y, T-s)] ds + dB_M. One step from time t to t - h
draws a standard Gaussian tangent vector z at x and moves along the geodesic

    x  <-  exp_x( h · (s(x, t) - f(x, t)) + sqrt(h) · z ).

Times follow the schedule's geometric grid from t_max to t_min; the last step
adds no noise (common practice: it removes a noise of scale sqrt(t_min)).
"""

from __future__ import annotations

import torch
from tqdm.auto import tqdm


def reverse_step(field, x: torch.Tensor, t: torch.Tensor, t_next: torch.Tensor,
                 generator: torch.Generator | None, noise: bool = True) -> torch.Tensor:
    """One reverse geodesic random-walk step from time t to t_next < t (without noise if ``noise`` is False)."""
    space = field.space
    h = t - t_next
    v = h * (field.score(x, t) - space.drift(x, t))
    if noise:
        v = v + h.sqrt() * space.random_tangent(x, generator)
    return space.exp(x, v)


def geodesic_random_walk(field, n: int, steps: int = 500, generator: torch.Generator | None = None,
                         progress: bool = True, x_init: torch.Tensor | None = None) -> torch.Tensor:
    """Draw n samples by the reverse geodesic random walk with ``steps`` steps.

    ``field`` is a :class:`heatwalk.core.objectives.ScoreField`. ``x_init`` (optional)
    replaces the draw from the prior at t_max.
    """
    space = field.space
    times = field.schedule.grid(steps)
    x = space.prior_sample(n, generator) if x_init is None else x_init.clone()
    with torch.no_grad():
        for i in tqdm(range(steps), desc="sampling (random walk)", disable=not progress, leave=False):
            x = reverse_step(field, x, times[i], times[i + 1], generator, noise=i < steps - 1)
    return x
