"""The factored network of a product space: one residual network per factor, plus one coupling network.

Registered in :data:`heatwalk.core.networks.NETWORKS` as ``"factored"``; the product objective builds it with
``network={"factored": True}`` and the size rule chooses it for products (:mod:`heatwalk.core.sizing`).

For a product of F factors with features f_1, ..., f_F (each factor's embedding of its noised state) and the
condition c (clock features of τ, label code, role flags), the output is

    out(f, c) = [own_1(f_1, c), ..., own_F(f_F, c)] + coupling(f_1, ..., f_F, c),

where own_i is a :class:`heatwalk.core.networks.residual.ResidualDenoiser` that reads only factor i's
features and writes only factor i's outputs, and coupling is one that reads all features and writes all
outputs, its output layer started at zero. At the start the model is therefore a product of independent
factor models, each with a whole network of its own; the coupling learns the dependence between the
factors on top. One network on all the features side by side has to learn the same split from the data, and
on the cities of ``benchmarks/product_gap_screen.py`` (S² x R¹, weak dependence) it did not: the factored
network closed a 0.23 nats/point gap to the factors fitted alone (README, Products).

The condition c goes to every part, so each factor's own network still knows the time and which factors are
known or dropped. ``time_skips[i]``: give own_i the residual network's time skip (a linear map of its features
whose matrix is a function of the time; the product objective turns it on for the factors whose features are
unbounded, as the size rule does for a single space).
"""

from __future__ import annotations

import torch
from torch import nn

from heatwalk.checks import check_positive_int
from heatwalk.core.networks.residual import ResidualDenoiser
from heatwalk.errors import InputError

#: most factors a factored network accepts (each is a module; a product of more factors is not one we build)
MAX_FACTORS = 64


def _dims(name: str, value) -> list[int]:
    if not isinstance(value, (list, tuple)) or not 1 <= len(value) <= MAX_FACTORS:
        raise InputError(f"factored network: {name} must be a list of 1 to {MAX_FACTORS} sizes, got {value!r}",
                         field="network")
    return [check_positive_int(f"factored network: {name}[{i}]", v) for i, v in enumerate(value)]


class FactoredDenoiser(nn.Module):
    """Per-factor residual networks on their own features plus a zero-started coupling network on all of them,
    outputs summed (module docstring). ``in_dims`` / ``out_dims``: each factor's feature and output sizes, in
    the order the features and outputs lie side by side; ``hidden`` / ``depth``: the size of every part."""

    def __init__(self, in_dims, time_dim: int, out_dims, hidden: int = 256, depth: int = 3, time_skips=None):
        super().__init__()
        in_dims, out_dims = _dims("in_dims", in_dims), _dims("out_dims", out_dims)
        if len(in_dims) != len(out_dims):
            raise InputError(f"factored network: {len(in_dims)} feature sizes but {len(out_dims)} output sizes; "
                             f"one of each per factor", field="network")
        time_skips = [False] * len(in_dims) if time_skips is None else time_skips
        if not isinstance(time_skips, (list, tuple)) or len(time_skips) != len(in_dims) or \
                not all(isinstance(s, bool) for s in time_skips):
            raise InputError(f"factored network: time_skips must be a list of {len(in_dims)} true/false values, "
                             f"one per factor, got {time_skips!r}", field="network")
        for name, value in (("time_dim", time_dim), ("hidden", hidden), ("depth", depth)):
            check_positive_int(f"factored network: {name}", value)
        self._config = dict(in_dims=list(in_dims), time_dim=time_dim, out_dims=list(out_dims), hidden=hidden,
                            depth=depth, time_skips=list(time_skips))
        self.in_dims = list(in_dims)
        self.own = nn.ModuleList(ResidualDenoiser(i, time_dim, o, hidden, depth, time_skip=s)
                                 for i, o, s in zip(in_dims, out_dims, time_skips))
        self.coupling = ResidualDenoiser(sum(in_dims), time_dim, sum(out_dims), hidden, depth)
        nn.init.zeros_(self.coupling.outlet.weight)   # the coupling starts silent: independent factors
        nn.init.zeros_(self.coupling.outlet.bias)

    def config(self) -> dict:
        return {k: list(v) if isinstance(v, list) else v for k, v in self._config.items()}

    def forward(self, features: torch.Tensor, time_features: torch.Tensor) -> torch.Tensor:
        parts = torch.split(features, self.in_dims, dim=-1)
        own = torch.cat([net(p, time_features) for net, p in zip(self.own, parts)], dim=-1)
        return own + self.coupling(features, time_features)
