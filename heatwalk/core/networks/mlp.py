"""A multi-layer perceptron denoiser on point and time features."""

from __future__ import annotations

import torch
from torch import nn

from heatwalk.checks import check_positive_int


class MLPDenoiser(nn.Module):
    """Multi-layer perceptron on [features(x), features(t)] -> output vector.

    Parameters
    ----------
    in_dim : length of the point features (``space.embed_dim``)
    time_dim : length of the time features (``TimeSchedule.n_features``)
    out_dim : length of the output (e.g. the flattened ambient shape)
    hidden, depth : width and number of hidden layers (SiLU activations)
    """

    def __init__(self, in_dim: int, time_dim: int, out_dim: int, hidden: int = 256, depth: int = 3):
        super().__init__()
        for name, value in (("in_dim", in_dim), ("time_dim", time_dim), ("out_dim", out_dim), ("hidden", hidden),
                            ("depth", depth)):
            check_positive_int(f"MLP network: {name}", value)
        self._config = dict(in_dim=in_dim, time_dim=time_dim, out_dim=out_dim, hidden=hidden, depth=depth)
        layers: list[nn.Module] = [nn.Linear(in_dim + time_dim, hidden), nn.SiLU()]
        for _ in range(depth - 1):
            layers += [nn.Linear(hidden, hidden), nn.SiLU()]
        layers.append(nn.Linear(hidden, out_dim))
        self.net = nn.Sequential(*layers)

    def config(self) -> dict:
        return dict(self._config)

    def forward(self, features: torch.Tensor, time_features: torch.Tensor) -> torch.Tensor:
        return self.net(torch.cat([features, time_features], dim=-1))
