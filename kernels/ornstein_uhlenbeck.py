"""Transition kernel of the standard Ornstein–Uhlenbeck process on R^d.

The process dY = -(1/2) Y dt + dB (B a standard Brownian motion; generator
(1/2)Δ - (1/2) y·∇) has the Gaussian transition law

    Y_t | Y_0 = y0  ~  N( e^{-t/2} y0,  (1 - e^{-t}) I_d )

(solve the linear SDE: Y_t = e^{-t/2} y0 + ∫_0^t e^{-(t-s)/2} dB_s, whose
variance is ∫_0^t e^{-(t-s)} ds = 1 - e^{-t}), and the stationary law N(0, I_d).
Everything here is closed form: exact sampling, log-density w.r.t. Lebesgue
measure on R^d in nats, and its gradient (the score). 1 - e^{-t} is evaluated
as -expm1(-t) so it keeps full relative precision for small t.

Used by :class:`heatwalk.spaces.Simplex` in isometric log-ratio coordinates.
"""

from __future__ import annotations

import math

import torch

LOG_TWO_PI = math.log(2.0 * math.pi)


def ou_mean_scale_and_variance(t: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor]:
    """(e^{-t/2}, 1 - e^{-t}) for float64 times ``t``."""
    return torch.exp(-0.5 * t), -torch.expm1(-t)


def ou_sample(y0: torch.Tensor, t: torch.Tensor, generator: torch.Generator | None = None) -> torch.Tensor:
    """Exact draw of Y_t given Y_0 = y0; ``y0`` (..., d), ``t`` broadcastable to (...)."""
    a, v = ou_mean_scale_and_variance(t)
    z = torch.randn(y0.shape, dtype=y0.dtype, device=y0.device, generator=generator)
    return a.unsqueeze(-1) * y0 + v.sqrt().unsqueeze(-1) * z


def ou_log_prob_and_score(y: torch.Tensor, y0: torch.Tensor, t: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor]:
    """log p_t(y | y0) (w.r.t. Lebesgue on R^d, nats) and its gradient in y.

    ``y``, ``y0`` have shape (..., d); ``t`` broadcastable to (...).
    """
    a, v = ou_mean_scale_and_variance(t)
    d = y.shape[-1]
    r = y - a.unsqueeze(-1) * y0
    log_p = -0.5 * r.square().sum(-1) / v - 0.5 * d * (LOG_TWO_PI + torch.log(v))
    return log_p, -r / v.unsqueeze(-1)


def standard_normal_log_prob(y: torch.Tensor) -> torch.Tensor:
    """log N(y; 0, I_d) in nats: the stationary law's log-density w.r.t. Lebesgue on R^d."""
    d = y.shape[-1]
    return -0.5 * y.square().sum(-1) - 0.5 * d * LOG_TWO_PI
