"""Denoising score matching on the exact conditional score of a manifold's heat kernel."""

from __future__ import annotations

import math

import torch
from torch import nn

from heatwalk.core.fields import ScoreField
from heatwalk.core.networks.mlp import MLPDenoiser
from heatwalk.core.objectives.base import Objective
from heatwalk.errors import InputError
from heatwalk.samplers.flow_ode import log_likelihood


class ScoreMatching(Objective):
    """Denoising score matching on the exact conditional score of the space's heat kernel.

    For a data batch x_0: draw t ~ log-uniform[t_min, t_max], x_t ~ p_t(· | x_0)
    exactly, and minimise

        E || sqrt(t) s_θ(x_t, t) - sqrt(t) ∇ log p_t(x_t | x_0) ||²_g / dim

    where ||·||_g is the metric norm at x_t. The network output is the scaled
    score: s_θ(x, t) = P_x[f_θ(embed(x), φ(t))] / sqrt(t), with P_x the tangent
    projection. The minimiser is the score of the time-t marginal.
    """

    name = "score_matching"
    field_kind = "score"
    default_sampler = "geodesic_random_walk"

    def __init__(self, space, schedule):
        super().__init__(space, schedule)
        self._out_dim = math.prod(space.ambient_shape)

    def default_network(self, hidden: int = 256, depth: int = 3, **extra) -> nn.Module:
        if extra:
            raise InputError(f"unknown network options for score matching: {sorted(extra)}; accepted: depth, hidden",
                             field="network")
        return MLPDenoiser(self.space.embed_dim, self.schedule.n_features, self._out_dim, hidden, depth)

    def scaled_score(self, net: nn.Module, x: torch.Tensor, t: torch.Tensor) -> torch.Tensor:
        """sqrt(t) s_θ(x, t) as a float64 tangent vector at x."""
        feats = self.space.embed(x).float()
        tf = self.schedule.features(t).float()
        raw = net(feats, tf).double().reshape(x.shape)
        return self.space.to_tangent(x, raw)

    def _time_column(self, t: torch.Tensor) -> torch.Tensor:
        return t.sqrt().reshape(-1, *([1] * len(self.space.ambient_shape)))

    def loss(self, net: nn.Module, x0: torch.Tensor, generator: torch.Generator | None = None) -> torch.Tensor:
        t = self.schedule.sample(x0.shape[0], generator)
        xt = self.space.sample_forward(x0, t, generator)
        target = self._time_column(t) * self.space.score(xt, x0, t)
        diff = self.scaled_score(net, xt, t) - target
        return self.space.inner(xt, diff, diff).mean() / self.space.dim

    def log_prob(self, net: nn.Module, x, **options) -> dict:
        """Exact log-likelihood (nats, reference measure of the space) by the probability-flow ODE.

        Returns the dict of :func:`heatwalk.samplers.flow_ode.log_likelihood`, with
        ``bound = False`` (an ODE log-likelihood, not a bound).
        """
        with torch.no_grad():
            out = log_likelihood(self.field(net), x, **options)
        out["bound"] = False
        return out

    def field(self, net: nn.Module) -> ScoreField:
        def score_fn(x, t):
            return self.scaled_score(net, x, t) / self._time_column(t)

        return ScoreField(self.space, self.schedule, score_fn)
