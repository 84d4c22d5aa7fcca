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

from heatwalk.samplers.reverse_loop import reverse_loop


def geodesic_step(space, x: torch.Tensor, score: torch.Tensor, t: torch.Tensor, t_next: torch.Tensor,
                  generator: torch.Generator | None, noise: bool = True) -> torch.Tensor:
    """exp_x(h (s - f) + sqrt(h) z), h = t - t_next, given the score s at (x, t) (no z if ``noise`` is False)."""
    h = t - t_next
    v = h * (score - space.drift(x, t))
    if noise:
        v = v + h.sqrt() * space.random_tangent(x, generator)
    return space.exp(x, v)


def reverse_step(field, x: torch.Tensor, t: torch.Tensor, t_next: torch.Tensor,
                 generator: torch.Generator | None, noise: bool = True) -> torch.Tensor:
    """One reverse geodesic random-walk step from time t to t_next < t (without noise if ``noise`` is False)."""
    return geodesic_step(field.space, x, field.score(x, t), t, t_next, generator, noise)


def geodesic_random_walk(field, n: int, steps: int = 500, generator: torch.Generator | None = None,
                         progress: bool = True, x_init: torch.Tensor | None = None) -> torch.Tensor:
    """Draw n samples by the reverse geodesic random walk with ``steps`` steps.

    ``field`` is a :class:`heatwalk.core.fields.ScoreField`. ``x_init`` (optional)
    replaces the draw from the prior at t_max.
    """
    def step(x, i, t, t_next):
        return reverse_step(field, x, t, t_next, generator, noise=i < steps - 1)

    return reverse_loop(field, n, steps, step, generator=generator, progress=progress, x_init=x_init,
                        desc="sampling (random walk)")
