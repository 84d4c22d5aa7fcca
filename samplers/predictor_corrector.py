"""Predictor–corrector sampling: a geodesic random-walk predictor and a Riemannian Langevin corrector.

After each predictor step to time t, ``corrector_steps`` Langevin moves
targeting the time-t marginal are taken:

    x  <-  exp_x( ε s(x, t) + sqrt(2ε) z ),   z standard Gaussian tangent,

with the step size set from a signal-to-noise ratio averaged over the batch
(common practice for score-based samplers): ε = 2 (snr · mean||z|| / mean||s(x, t)||)²,
capped by the predictor's step h. A per-sample ε would depend on the state and
bias the Langevin move, so one ε serves the whole batch.
"""

from __future__ import annotations

import torch
from tqdm.auto import tqdm

from heatwalk.samplers.geodesic_random_walk import reverse_step


def predictor_corrector(field, n: int, steps: int = 500, generator: torch.Generator | None = None,
                        progress: bool = True, corrector_steps: int = 1, snr: float = 0.1,
                        x_init: torch.Tensor | None = None) -> torch.Tensor:
    """Draw n samples: reverse geodesic random walk plus Langevin corrections at every time."""
    space = field.space
    times = field.schedule.grid(steps)
    x = space.prior_sample(n, generator) if x_init is None else x_init.clone()
    with torch.no_grad():
        for i in tqdm(range(steps), desc="sampling (predictor-corrector)", disable=not progress, leave=False):
            t, t_next = times[i], times[i + 1]
            h = t - t_next
            last = i == steps - 1
            x = reverse_step(field, x, t, t_next, generator, noise=not last)
            if last:
                break
            for _ in range(corrector_steps):
                s = field.score(x, t_next)
                z = space.random_tangent(x, generator)
                ratio = space.norm(x, z).mean() / space.norm(x, s).mean().clamp_min(1e-12)
                eps = torch.minimum(2 * (snr * ratio) ** 2, h)  # never move further than the predictor did
                x = space.exp(x, eps * s + (2 * eps).sqrt() * z)
    return x
