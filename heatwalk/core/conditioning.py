"""Conditioning at sampling time: class labels with guidance, fixed (known) coordinates, a user guide.

:class:`Conditioning` gathers what ``Model.sample`` was asked for; the
objective's ``field(net, conditioning)`` turns it into a field whose score (or
x_0 probabilities) and ``constrain`` step the samplers use unchanged.

Classifier-free guidance
    s_w = s_∅ + w (s_c − s_∅) on scores, and the same combination on the x_0
    logits of finite spaces (then renormalised over the states consistent with
    x_t). w = 0 is the unconditional model (returned as is, so it is the same
    computation bit for bit), w = 1 the conditional one, w > 1 sharpens.

Fixed coordinates (``given``), three methods:
    ``"trained"`` — for a model fitted with ``inpainting=True`` (spaces of
    coordinates): the known coordinates are held at their values, flagged to
    the network, which was trained to give the score of the free coordinates
    given them. Exact up to training error; the default for such models.
    ``"replacement"`` — after every step the known part is replaced by a draw
    from the exact forward kernel at the current time started at the given
    values (for the absorbing chain: the given tokens themselves, unmasked).
    Exact when the known and free parts are independent under the model, and
    on the absorbing chain (an unmasked token is a state the forward process
    produces, so the denoiser's posterior given it is the model's own
    conditional). Otherwise biased: it ignores what the free part's noisy
    state says about the known part (on a correlated law the conditional
    spread comes out too wide).
    ``"reconstruction"`` (manifolds with coordinates: torus, R^d) —
    reconstruction guidance: the score gains ∇_{x_t} log N(a; x̂_K, Σ_K), with
    x̂ = E[x_0 | x_t] the denoiser's (Tweedie) estimate, K the known
    coordinates, a their values and Σ = c_t ∂x̂/∂x_t the second-order Tweedie
    covariance (c_t = t for Brownian motion), so the gradient is
    J_K^T (c_t J_KK)^{-1} (a − x̂_K) with J = ∂x̂/∂x_t by autograd. Exact when the
    posterior of x_0 given x_t is Gaussian (a linear-Gaussian law); a moment
    approximation otherwise. The known coordinates are also redrawn by
    replacement at every step (given the known values, their noisy state is
    independent of the free part's, so this keeps the guidance exact where it
    is) and set to their values at the end. Default on those spaces for models
    fitted without inpainting; on compact coordinates (angles) the Tweedie mean
    is poor at large t, and a few percent of samples can end in low-density
    regions — fit with ``inpainting=True`` when conditionals matter.
    ``"replacement"`` is the default elsewhere.

User guide (``guide``, ``guide_scale`` = λ)
    Manifolds: the score gains λ ∇_{x_t} fn(x̂(x_t)), the gradient of the user's
    log-likelihood of the denoiser's estimate, by autograd, projected to the
    tangent space. Finite spaces: ``fn`` receives the predicted x_0
    probabilities (n, L, K) as a soft one-hot code and the probabilities are
    reweighted by exp(λ ∂fn/∂p) per position and state — exactly exp(λ·fn)
    over the states when fn is additive over positions (compositions, counts
    of a residue class), a first-order (linearised) reweighting otherwise.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import torch

from heatwalk.errors import InputError

GIVEN_METHODS = ("trained", "reconstruction", "replacement")


@dataclass
class Conditioning:
    """What a sample is conditioned on (see the module docstring).

    labels : (n,) int64 class indices, or None for the unconditional model
    guidance : classifier-free guidance weight w
    guide, guide_scale : user log-likelihood of the denoised estimate, and its weight λ
    given : the space's parsed fixed part (``space.given_part``), or None
    given_method : "replacement" or "reconstruction"
    """

    labels: torch.Tensor | None = None
    guidance: float = 1.0
    guide: Callable | None = None
    guide_scale: float = 1.0
    given: object | None = None
    given_method: str = "replacement"

    @property
    def empty(self) -> bool:
        return self.labels is None and self.guide is None and self.given is None

    def to(self, device) -> "Conditioning":
        """The same conditioning with its tensors (labels, fixed values and masks) on ``device``."""
        given = self.given
        if isinstance(given, dict):
            given = {i: v.to(device) for i, v in given.items()}
        elif given is not None:
            given = type(given)(mask=given.mask.to(device), values=given.values.to(device))
        labels = None if self.labels is None else self.labels.to(device)
        return Conditioning(labels=labels, guidance=self.guidance, guide=self.guide, guide_scale=self.guide_scale,
                            given=given, given_method=self.given_method)


def check_weight(name: str, value) -> float:
    """A finite real number (guidance weights and scales may be negative, never NaN or infinite)."""
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise InputError(f"{name} must be a finite number, got {value!r}", field=name)
    return float(value)


def combine_guidance(uncond: torch.Tensor, cond: torch.Tensor | None, weight: float) -> torch.Tensor:
    """u + w (c − u); u itself when there is no label or w = 0."""
    if cond is None or weight == 0.0:
        return uncond
    if weight == 1.0:
        return cond
    return uncond + weight * (cond - uncond)


def guide_gradient(fn: Callable, x0_hat: torch.Tensor, wrt: torch.Tensor, n: int) -> torch.Tensor:
    """∇_wrt Σ fn(x0_hat): fn must return one finite log-likelihood per sample."""
    value = fn(x0_hat)
    if not isinstance(value, torch.Tensor) or tuple(value.shape) != (n,):
        got = tuple(value.shape) if isinstance(value, torch.Tensor) else type(value).__name__
        raise InputError(f"guide: must return one log-likelihood per sample, shape ({n},); got {got}", field="guide")
    if not bool(torch.isfinite(value).all()):
        raise InputError("guide: returned a value that is NaN or infinite", field="guide")
    (grad,) = torch.autograd.grad(value.sum(), wrt, allow_unused=True)
    return torch.zeros_like(wrt) if grad is None else grad
