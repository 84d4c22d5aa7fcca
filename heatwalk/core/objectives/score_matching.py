"""Denoising score matching on the exact conditional score of a manifold's heat kernel."""

from __future__ import annotations

import math

import torch
from torch import nn

from heatwalk.core.conditioning import Conditioning, combine_guidance, guide_gradient
from heatwalk.core.fields import ScoreField
from heatwalk.core.networks import point_denoiser
from heatwalk.core.objectives.base import Objective
from heatwalk.core.parallel import WHOLE, Share
from heatwalk.errors import InputError
from heatwalk.samplers.flow_ode import log_likelihood


class ScoreMatching(Objective):
    """Denoising score matching on the exact conditional score of the space's heat kernel.

    For a data batch x_0: draw t ~ log-uniform[t_min, t_max] (or from the schedule's tilted
    density q, each row then weighted by 1/q: the same objective, see
    :mod:`heatwalk.core.schedule`), x_t ~ p_t(· | x_0) exactly, and minimise

        E || sqrt(t) s_θ(x_t, t) - sqrt(t) ∇ log p_t(x_t | x_0) ||²_g / dim

    where ||·||_g is the metric norm at x_t. The network output is the scaled
    score: s_θ(x, t) = P_x[f_θ(embed(x), φ(t))] / sqrt(t), with P_x the tangent
    projection. The minimiser is the score of the time-t marginal (given the
    label, for a labelled model).
    """

    name = "score_matching"
    likelihood_method = "probability-flow ODE (exact divergence; Hutchinson's estimator above 3 dimensions)"
    field_kind = "score"
    default_sampler = "geodesic_random_walk"
    supports_time_tilt = True
    sized_by_data = True

    def __init__(self, space, schedule, classes=None, label_dropout: float = 0.1, inpainting: bool = False):
        super().__init__(space, schedule, classes, label_dropout, inpainting)
        self._out_dim = math.prod(space.ambient_shape)

    def default_network(self, **options) -> nn.Module:
        """The MLP (``residual=False``) or the residual network with time in every block
        (:class:`heatwalk.core.networks.residual.ResidualDenoiser`), same size options; ``time_skip`` (residual
        network only): its time-dependent linear map of the features added to the output
        (:func:`heatwalk.core.networks.point_denoiser`)."""
        return point_denoiser(self.space.embed_dim, self.condition_dim, self._out_dim, **options)

    def scaled_score(self, net: nn.Module, x: torch.Tensor, t: torch.Tensor, labels=None, known=None) -> torch.Tensor:
        """sqrt(t) s_θ(x, t) as a float64 tangent vector at x (``known``: coordinate flags of inpainting models)."""
        feats = self.space.embed(x).float()
        tf = self.condition_features(t, labels, known).float()
        raw = net(feats, tf).double().reshape(x.shape)
        return self.space.tangent_from_network(x, raw)

    def _time_column(self, t: torch.Tensor) -> torch.Tensor:
        return t.sqrt().reshape(-1, *([1] * len(self.space.ambient_shape)))

    def draw(self, x0: torch.Tensor, generator: torch.Generator | None = None,
             labels: torch.Tensor | None = None) -> dict:
        """Dropped labels, times t, exact draws x_t ~ p_t(· | x_0) and (inpainting) known-coordinate masks."""
        labels = self.drop_labels(labels, generator)
        t, weight = self.schedule.sample_weighted(x0.shape[0], generator)
        xt = self.space.sample_forward(x0, t, generator)
        known = None
        if self.inpainting:
            known = self.random_known(x0.shape[0], generator)
            xt = torch.where(known, x0, xt)
        return {"x0": x0, "labels": labels, "t": t, "xt": xt, "known": known, "weight": weight}

    def share_loss(self, net: nn.Module, drawn: dict, share: Share = WHOLE) -> torch.Tensor:
        """σ²-weighted squared score error per row (class docstring), averaged by ``share.mean``."""
        n = drawn["x0"].shape[0]
        x0, labels, t, xt, known = (share.take(drawn[k], n) for k in ("x0", "labels", "t", "xt", "known"))
        target = self._time_column(t) * self.space.score(xt, x0, t)
        diff = self.scaled_score(net, xt, t, labels, known) - target
        if known is not None:
            diff = torch.where(known, 0.0, diff)
        per_row = self.space.inner(xt, diff, diff)
        weight = drawn.get("weight")
        if weight is not None and self.schedule.tilt != 0.0:  # importance weights of a tilted time density
            per_row = per_row * share.take(weight, n).to(per_row.dtype)
        return share.mean(per_row, n) / self.space.dim

    def log_prob(self, net: nn.Module, x, labels: torch.Tensor | None = None, **options) -> dict:
        """Exact log-likelihood (nats, reference measure of the space) by the probability-flow ODE.

        Returns the dict of :func:`heatwalk.samplers.flow_ode.log_likelihood`, with ``bound = False``
        (an ODE log-likelihood, not a bound). ``labels``: class indices, one per point (conditional
        likelihood) or None (the unconditional model).
        """
        with torch.no_grad():
            if labels is None:
                out = log_likelihood(self.field(net), x, **options)
            else:  # one field per block of points, each with its own labels
                x = self.space.validate(x)
                size = options.pop("batch_size", 1024)
                parts = [log_likelihood(self.field(net, Conditioning(labels=labels[i:i + size])), x[i:i + size],
                                        batch_size=size, **options) for i in range(0, x.shape[0], size)]
                out = {"log_prob": torch.cat([p["log_prob"] for p in parts]),
                       "stderr": torch.cat([p["stderr"] for p in parts]), "divergence": parts[0]["divergence"],
                       "steps": [k for p in parts for k in p["steps"]]}
        out["bound"] = False
        return out

    def field(self, net: nn.Module, conditioning: Conditioning | None = None) -> ScoreField:
        c = conditioning or Conditioning()
        if c.given is not None and c.given_method == "reconstruction" and c.given.mask.dim() != 1:
            raise InputError("reconstruction guidance needs coordinates; use given_method='replacement'",
                             field="given_method")

        trained = c.given is not None and c.given_method == "trained"
        if trained and not self.inpainting:
            raise InputError("given_method 'trained' needs a model fitted with inpainting=True", field="given_method")
        known = c.given.mask if trained else None

        def network_score(x, t, labels):
            s = self.scaled_score(net, x, t, labels, known) / self._time_column(t)
            return s if known is None else torch.where(known, 0.0, s)

        def guided(x, t):
            uncond = network_score(x, t, None) if (c.labels is None or c.guidance != 1.0) else None
            cond = network_score(x, t, c.labels) if (c.labels is not None and c.guidance != 0.0) else None
            return combine_guidance(uncond, cond, c.guidance)

        needs_grad = c.guide is not None or (c.given is not None and c.given_method == "reconstruction")

        def score_fn(x, t):
            if not needs_grad:
                return guided(x, t)
            with torch.enable_grad():
                xr = x.detach().requires_grad_(True)
                s = guided(xr, t)
                extra = self._gradient_terms(xr, s, t, c)
            return (s + self.space.gradient_to_tangent(xr, extra)).detach()

        constrain = None
        if c.given is not None:
            def constrain(x, t, generator, final):
                return self.space.replace_given(x, c.given, t, generator, final=final or trained)

        return ScoreField(self.space, self.schedule, score_fn, constrain)

    def _gradient_terms(self, x, s, t, c: Conditioning) -> torch.Tensor:
        """User guide λ ∇ fn(x̂) plus reconstruction guidance for fixed coordinates (ambient vectors)."""
        sp = self.space
        x0_hat = sp.denoised_mean(x, s, t)
        total = torch.zeros_like(x)
        if c.given is not None and c.given_method == "reconstruction":
            total = total + _reconstruction_gradient(sp, x, x0_hat, t, c.given)
        if c.guide is not None:
            total = total + c.guide_scale * guide_gradient(c.guide, x0_hat, x, x.shape[0])
        return total


def _reconstruction_gradient(space, x, x0_hat, t, part) -> torch.Tensor:
    """J_K^T (c_t J_KK)^{-1} (a - x̂_K) with J = ∂x̂/∂x (see heatwalk.core.conditioning); vector coordinates."""
    known = part.indices
    residual = space.log(x0_hat, part.values)[:, known]                         # (n, k)
    rows = [torch.autograd.grad(x0_hat[:, i].sum(), x, retain_graph=True)[0] for i in known]
    jk = torch.stack(rows, dim=1)                                               # (n, k, d)
    jkk = jk[:, :, known]
    # Cov[x_0 | x_t] = J diag(c): c one value per row (scalar c_t) or one per coordinate (R^d scaled by S)
    c = space.denoised_scale(t)
    c = c.reshape(-1, 1).expand(-1, len(known)) if c.dim() == 1 else c[:, known]
    full = jkk * c.unsqueeze(1)
    cov = 0.5 * (full + full.transpose(-1, -2))
    # the Tweedie covariance estimate is kept positive definite: eigenvalues at least 1% of the smallest c
    evals, evecs = torch.linalg.eigh(cov)
    evals = torch.maximum(evals, 0.01 * c.amin(dim=1, keepdim=True))
    solved = evecs @ ((evecs.transpose(-1, -2) @ residual.unsqueeze(-1)) / evals.unsqueeze(-1))
    return (jk.transpose(-1, -2) @ solved).squeeze(-1).detach()
