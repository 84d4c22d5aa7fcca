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

from heatwalk.kernels.constants import on

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


def _images(d: torch.Tensor, t: torch.Tensor, n_images: int = N_IMAGES):
    # Exponents relative to the k = 0 image: -(d + 2πk)²/2t + d²/2t = -2πk (d + πk) / t, with d + πk
    # evaluated in two parts so the seam images (k = ±1 at d ≈ ∓π) keep full relative accuracy.
    # Loops over the few images on contiguous 1-D tensors (much faster than reductions over a short axis).
    ks = range(-n_images, n_images + 1)
    rel = [(-TWO_PI * k) * _plus_k_pi(d, k) / t for k in ks]
    m = rel[0]
    for r in rel[1:]:
        m = torch.maximum(m, r)
    e = [torch.exp(r - m) for r in rel]
    total = e[0]
    for ei in e[1:]:
        total = total + ei
    logp = m + torch.log(total) - d.square() / (2 * t) - 0.5 * torch.log(TWO_PI * t)
    # score = -(d + 2π E[k]) / t, regrouped around the nearest seam c ∈ {-1, 0, 1} as
    # -((d - cπ) + π Σ_k w_k (2k + c)) / t so no two large terms cancel.
    c = torch.where(d < -0.5 * math.pi, -1.0, torch.where(d > 0.5 * math.pi, 1.0, 0.0)).to(d.dtype)
    acc = torch.zeros_like(d)
    for k, ei in zip(ks, e):
        acc = acc + ei * (2 * k + c)
    score = -(_plus_k_pi(d, -c) + math.pi * acc / total) / t
    return logp, score


def _modes(d: torch.Tensor, t: torch.Tensor, n_modes: int = N_MODES):
    # cos(kd), sin(kd) by the angle-addition recurrence and q^{k²} by q^{(k+1)²} = q^{k²} q^{2k+1}:
    # a few multiplications per term instead of transcendental calls (relative error grows by ~k ulps).
    c1, s1 = torch.cos(d), torch.sin(d)
    q = torch.exp(-0.5 * t)
    q2 = q * q
    ck, sk = c1, s1
    qk = q          # q^{k²} at k = 1
    step = q * q2   # q^{2k+1} at k = 1
    s = torch.zeros_like(d)
    ds = torch.zeros_like(d)
    for k in range(1, n_modes + 1):
        s = s + qk * ck
        ds = ds - k * (qk * sk)
        ck, sk = ck * c1 - sk * s1, sk * c1 + ck * s1
        qk = qk * step
        step = step * q2
    s, ds = 2 * s, 2 * ds
    return torch.log1p(s) - LOG_TWO_PI, ds / (1 + s)


def wrapped_normal_log_prob_and_score(d: torch.Tensor, t: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor]:
    """log p_t(d) and d/dd log p_t(d) for wrapped differences ``d`` and times ``t`` (same shape, float64).

    Density w.r.t. arc length, in nats.
    """
    d, t = torch.broadcast_tensors(d, t)
    shape = d.shape
    d, t = d.reshape(-1).contiguous(), t.reshape(-1).contiguous()
    # one pass assigns each point to the cheapest exact group (see _GROUPS), then each group is evaluated
    bucket = torch.bucketize(t, on(_GROUP_BOUNDS, t.device), right=False)
    logp = torch.empty_like(d)
    score = torch.empty_like(d)
    for g, (branch, count) in enumerate(_GROUPS):
        mask = bucket == g
        if not bool(mask.any()):
            continue
        fn = _images if branch == "images" else _modes
        if bool(mask.all()):
            logp, score = fn(d, t, count)
            break
        idx = mask.nonzero().squeeze(-1)
        lp, sc = fn(d[idx], t[idx], count)
        logp[idx], score[idx] = lp, sc
    return logp.reshape(shape), score.reshape(shape)


def _image_time_limit(k: int) -> float:
    """Largest t for which the images |j| <= k suffice.

    The first omitted image is at distance >= (2k+1)π - π from d ∈ [-π, π); we require, conservatively,
    ((2k-1)π)² / 2t >= TAIL_EXPONENT — the rule that also fixes N_IMAGES at SWITCH_TIME.
    """
    return ((2 * k - 1) * math.pi) ** 2 / (2 * TAIL_EXPONENT)


def _mode_time_limit(k: int) -> float:
    """Smallest t for which k eigen-modes suffice with one spare: exp(-k² t / 2) <= exp(-TAIL_EXPONENT)."""
    return 2 * TAIL_EXPONENT / k**2


# (branch, images or modes) per time bucket; bounds are the right ends of the buckets (t <= bound)
_GROUPS = (("images", 1), ("images", 2), ("images", N_IMAGES), ("modes", N_MODES), ("modes", 4), ("modes", 2))
_GROUP_BOUNDS = torch.tensor([_image_time_limit(1), _image_time_limit(2), SWITCH_TIME,
                              _mode_time_limit(4), _mode_time_limit(2)], dtype=torch.float64)
