"""A residual denoiser: pre-norm residual blocks, each told the time, on point features.

Registered in :data:`heatwalk.core.networks.NETWORKS` as ``"residual"``. Chosen by score-matching fits with
``network={"residual": True}``.
"""

from __future__ import annotations

import torch
from torch import nn

from heatwalk.checks import check_number, check_positive_int
from heatwalk.errors import InputError


class ResidualBlock(nn.Module):
    """h -> h + W₂ SiLU(W₁ SiLU(LayerNorm(h)) + A c), with c the embedded time (and label) features.

    W₂ starts at zero, so each block starts as the identity and the network as its input projection
    (common practice for residual networks: it keeps the initial function simple at any depth).
    """

    def __init__(self, hidden: int):
        super().__init__()
        self.norm = nn.LayerNorm(hidden)
        self.inner = nn.Linear(hidden, hidden)
        self.condition = nn.Linear(hidden, hidden)
        self.outer = nn.Linear(hidden, hidden)
        nn.init.zeros_(self.outer.weight)
        nn.init.zeros_(self.outer.bias)

    def forward(self, h: torch.Tensor, c: torch.Tensor) -> torch.Tensor:
        y = self.inner(nn.functional.silu(self.norm(h))) + self.condition(c)
        return h + self.outer(nn.functional.silu(y))


class ResidualDenoiser(nn.Module):
    """[features(x), fourier(x)] -> Linear -> ``depth`` residual blocks, each given an embedding of the time
    features -> LayerNorm -> SiLU -> Linear -> output vector.

    Unlike :class:`heatwalk.core.networks.mlp.MLPDenoiser`, which reads the time features once at its input,
    every block here adds its own linear map of the embedded time, so how the output depends on the point can
    change with the noise level at every layer. Same constructor arguments as the MLP (``depth``: the number of
    blocks, two hidden layers each; ``fourier_features`` / ``fourier_scale``: random Fourier features of the
    point features, as there).

    ``time_skip``: also add M(t) · features to the output, a linear map of the point features whose
    out_dim x in_dim matrix M(t) is a linear function of the embedded time (zero at the start). The blocks'
    LayerNorms keep the direction of their input and drop its length, and the last one bounds the output; on
    unbounded features (R^d, the simplex's clr coordinates) the score grows linearly in the point far from the
    data, with a slope that changes with the noise level (−x / σ²(t) for a Gaussian marginal), and M(t) is
    that slope.
    """

    def __init__(self, in_dim: int, time_dim: int, out_dim: int, hidden: int = 256, depth: int = 3,
                 fourier_features: int = 0, fourier_scale: float = 1.0, time_skip: bool = False):
        super().__init__()
        for name, value in (("in_dim", in_dim), ("time_dim", time_dim), ("out_dim", out_dim), ("hidden", hidden),
                            ("depth", depth)):
            check_positive_int(f"residual network: {name}", value)
        if fourier_features != 0:
            check_positive_int("residual network: fourier_features", fourier_features)
        check_number("residual network: fourier_scale", fourier_scale, minimum=0, open_minimum=True)
        if not isinstance(time_skip, bool):
            raise InputError(f"residual network: time_skip must be true or false, got {time_skip!r}",
                             field="network")
        self._config = dict(in_dim=in_dim, time_dim=time_dim, out_dim=out_dim, hidden=hidden, depth=depth)
        if time_skip:  # stored only when on, so configs written before the option read as before
            self._config["time_skip"] = True
        if fourier_features:
            self._config.update(fourier_features=int(fourier_features), fourier_scale=float(fourier_scale))
            # cpu: networks are initialised on the CPU from the seed, then moved
            self.register_buffer("frequencies", fourier_scale * torch.randn(in_dim, fourier_features))
        else:
            self.frequencies = None
        self.inlet = nn.Linear(in_dim + 2 * fourier_features, hidden)
        self.time_embedding = nn.Sequential(nn.Linear(time_dim, hidden), nn.SiLU(), nn.Linear(hidden, hidden),
                                            nn.SiLU())
        self.blocks = nn.ModuleList(ResidualBlock(hidden) for _ in range(depth))
        self.norm = nn.LayerNorm(hidden)
        self.outlet = nn.Linear(hidden, out_dim)
        self.skip_matrix = None
        if time_skip:
            self.skip_matrix = nn.Linear(hidden, out_dim * in_dim)
            nn.init.zeros_(self.skip_matrix.weight)
            nn.init.zeros_(self.skip_matrix.bias)

    def config(self) -> dict:
        return dict(self._config)

    def forward(self, features: torch.Tensor, time_features: torch.Tensor) -> torch.Tensor:
        parts = [features]
        if self.frequencies is not None:
            z = features @ self.frequencies.to(features.dtype)
            parts += [torch.sin(z), torch.cos(z)]
        h = self.inlet(torch.cat(parts, dim=-1))
        c = self.time_embedding(time_features)
        for block in self.blocks:
            h = block(h, c)
        out = self.outlet(nn.functional.silu(self.norm(h)))
        if self.skip_matrix is not None:
            m = self.skip_matrix(c).reshape(*c.shape[:-1], out.shape[-1], features.shape[-1])
            out = out + (m @ features.unsqueeze(-1)).squeeze(-1)
        return out
