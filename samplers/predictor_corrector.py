"""Predictor–corrector sampling: a geodesic random-walk predictor and a Riemannian Langevin corrector.

After each predictor step to time t, ``corrector_steps`` Langevin moves
targeting the time-t marginal are taken:

    x  <-  exp_x( ε s(x, t) + sqrt(2ε) z ),   z standard Gaussian tangent,

with the step size set from a signal-to-noise ratio averaged over the batch
(common practice for score-based samplers): ε = 2 (snr · mean||z|| / mean||s(x, t)||)²,
capped by the predictor's step h. A per-sample ε would depend on the state and
bias the Langevin move, so one ε serves the whole batch. The last step is the
predictor alone, without noise.
"""

from __future__ import annotations

import torch

from heatwalk.checks import check_int, check_positive_number
from heatwalk.samplers.geodesic_random_walk import reverse_step
from heatwalk.samplers.reverse_loop import reverse_loop


def langevin_corrector(field, x: torch.Tensor, t: torch.Tensor, h: torch.Tensor, generator, snr: float):
    """One Langevin move at time t with the batch-averaged step size ε (capped by h)."""
    space = field.space
    s = field.score(x, t)
    z = space.random_tangent(x, generator)
    ratio = space.norm(x, z).mean() / space.norm(x, s).mean().clamp_min(1e-12)
    eps = torch.minimum(2 * (snr * ratio) ** 2, h)  # never move further than the predictor did
    return space.exp(x, eps * s + (2 * eps).sqrt() * z)


def predictor_corrector(field, n: int, steps: int = 500, generator: torch.Generator | None = None,
                        progress: bool = True, corrector_steps: int = 1, snr: float = 0.1,
                        x_init: torch.Tensor | None = None) -> torch.Tensor:
    """Draw n samples: reverse geodesic random walk plus Langevin corrections at every time."""
    check_int("corrector_steps", corrector_steps, minimum=0)
    check_positive_number("snr", snr)

    def step(x, i, t, t_next):
        last = i == steps - 1
        x = reverse_step(field, x, t, t_next, generator, noise=not last)
        if not last:
            for _ in range(corrector_steps):
                x = langevin_corrector(field, x, t_next, t - t_next, generator, snr)
        return x

    return reverse_loop(field, n, steps, step, generator=generator, progress=progress, x_init=x_init,
                        desc="sampling (predictor-corrector)")
