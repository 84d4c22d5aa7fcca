"""Heat kernel of the circle: the wrapped normal law.

Brownian motion on the circle R / 2πZ (arc-length metric) with generator
(1/2) d²/dθ² has, at time t, the density w.r.t. arc length

    p_t(d) = Σ_{k∈Z} (2πt)^{-1/2} exp(-(d + 2πk)² / (2t))              (image sum)
           = (1/2π) [1 + 2 Σ_{k≥1} exp(-k² t / 2) cos(k d)]             (eigen / theta series)
           = (1/2π) θ₃(d/2, q),   q = exp(-t/2)                          (Jacobi theta function)

where d is the signed angular difference wrapped to [-π, π). Both series are
exact; we evaluate the image sum in log-sum-exp form for t ≤ ``SWITCH_TIME``
(each omitted image is below exp(-40) relative) and the eigen-series above it
(each omitted term below exp(-40) absolute), so neither branch cancels or
underflows anywhere in t ∈ [1e-8, ∞).

The score is d/dd log p_t(d).
"""

from __future__ import annotations

import math

import torch

TWO_PI = 2.0 * math.pi
LOG_TWO_PI = math.log(TWO_PI)

#: below this time the image sum, above it the eigen-series
SWITCH_TIME = 2.0
#: omitted terms are below exp(-TAIL_EXPONENT) (relative for images, absolute for the series)
TAIL_EXPONENT = 40.0
# images needed at t = SWITCH_TIME: (2K-1)π ≥ sqrt(2 t TAIL_EXPONENT)
N_IMAGES = math.ceil((math.sqrt(2 * SWITCH_TIME * TAIL_EXPONENT) / math.pi + 1) / 2)
# eigen-terms needed at t = SWITCH_TIME: k² t/2 ≥ TAIL_EXPONENT
N_MODES = math.ceil(math.sqrt(2 * TAIL_EXPONENT / SWITCH_TIME))


def wrap_angle(a: torch.Tensor) -> torch.Tensor:
    """Wrap angles (radians) to [-π, π)."""
    w = torch.remainder(a + math.pi, TWO_PI) - math.pi
    # remainder can round up to exactly 2π for tiny negative inputs
    return torch.where(w >= math.pi, w - TWO_PI, w)


# π as an unevaluated sum PI_HI + PI_LO (PI_LO = π - fl(π)), so d + kπ is exact near the seam
PI_HI = math.pi
PI_LO = 1.2246467991473532e-16


def _plus_k_pi(d: torch.Tensor, k) -> torch.Tensor:
    """d + kπ with the rounding of fl(π) removed (exact by Sterbenz's lemma when d ≈ -kπ)."""
    return (d + k * PI_HI) + k * PI_LO


def _images(d: torch.Tensor, t: torch.Tensor):
    # Exponents relative to the k = 0 image: -(d + 2πk)²/2t + d²/2t = -2πk (d + πk) / t, with d + πk
    # evaluated in two parts so the seam images (k = ±1 at d ≈ ∓π) keep full relative accuracy.
    k = torch.arange(-N_IMAGES, N_IMAGES + 1, dtype=d.dtype, device=d.device)
    tt = t.unsqueeze(-1)
    rel = -TWO_PI * k * _plus_k_pi(d.unsqueeze(-1), k) / tt  # (..., 2K+1)
    logp = torch.logsumexp(rel, dim=-1) - d.square() / (2 * t) - 0.5 * torch.log(TWO_PI * t)
    w = torch.softmax(rel, dim=-1)
    # score = -(d + 2π E[k]) / t, regrouped around the nearest seam c ∈ {-1, 0, 1} as
    # -((d - cπ) + π Σ_k w_k (2k + c)) / t so no two large terms cancel.
    c = torch.where(d < -0.5 * math.pi, -1.0, torch.where(d > 0.5 * math.pi, 1.0, 0.0)).to(d.dtype)
    score = -(_plus_k_pi(d, -c) + math.pi * (w * (2 * k + c.unsqueeze(-1))).sum(-1)) / t
    return logp, score


def _modes(d: torch.Tensor, t: torch.Tensor):
    k = torch.arange(1, N_MODES + 1, dtype=d.dtype, device=d.device)
    qk = torch.exp(-0.5 * t.unsqueeze(-1) * k.square())  # (..., K)
    kd = d.unsqueeze(-1) * k
    s = 2 * (qk * torch.cos(kd)).sum(-1)
    ds = -2 * (qk * k * torch.sin(kd)).sum(-1)
    return torch.log1p(s) - LOG_TWO_PI, ds / (1 + s)


def wrapped_normal_log_prob_and_score(d: torch.Tensor, t: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor]:
    """log p_t(d) and d/dd log p_t(d) for wrapped differences ``d`` and times ``t`` (same shape, float64).

    Density w.r.t. arc length, in nats.
    """
    d, t = torch.broadcast_tensors(d, t)
    small = t <= SWITCH_TIME
    # evaluate each branch only on safe inputs so no NaN leaks through torch.where gradients
    t_img = torch.where(small, t, torch.full_like(t, SWITCH_TIME))
    t_mod = torch.where(small, torch.full_like(t, SWITCH_TIME), t)
    lp_i, sc_i = _images(d, t_img)
    lp_m, sc_m = _modes(d, t_mod)
    return torch.where(small, lp_i, lp_m), torch.where(small, sc_i, sc_m)
