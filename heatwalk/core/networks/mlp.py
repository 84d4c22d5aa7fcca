"""A multi-layer perceptron denoiser on point and time features, optionally with random Fourier features."""

from __future__ import annotations

import torch
from torch import nn

from heatwalk.checks import check_number, check_positive_int


class MLPDenoiser(nn.Module):
    """Multi-layer perceptron on [features(x), fourier(x), features(t)] -> output vector.

    Parameters
    ----------
    in_dim : length of the point features (``space.embed_dim``)
    time_dim : length of the time features (``TimeSchedule.n_features``)
    out_dim : length of the output (e.g. the flattened ambient shape)
    hidden, depth : width and number of hidden layers (SiLU activations)
    fourier_features : m >= 0 random Fourier features of the point features e ∈ R^in_dim, appended to them:
        sin(e Ω) and cos(e Ω) with a fixed matrix Ω ∈ R^(in_dim x m) of independent N(0, fourier_scale²)
        entries (drawn at construction from torch's generator, kept as a buffer, so saved with the weights and
        never trained). They let a small network resolve structure of length scale ~1/fourier_scale in
        embedding units (0: none, the plain MLP).
    fourier_scale : standard deviation of the frequencies Ω (inverse length, embedding units); ``heatwalk.fit``
        chooses it from the data size when not given (:func:`heatwalk.core.sizing.fourier_scale`).
    """

    def __init__(self, in_dim: int, time_dim: int, out_dim: int, hidden: int = 256, depth: int = 3,
                 fourier_features: int = 0, fourier_scale: float = 1.0):
        super().__init__()
        for name, value in (("in_dim", in_dim), ("time_dim", time_dim), ("out_dim", out_dim), ("hidden", hidden),
                            ("depth", depth)):
            check_positive_int(f"MLP network: {name}", value)
        if fourier_features != 0:
            check_positive_int("MLP network: fourier_features", fourier_features)
        check_number("MLP network: fourier_scale", fourier_scale, minimum=0, open_minimum=True)
        self._config = dict(in_dim=in_dim, time_dim=time_dim, out_dim=out_dim, hidden=hidden, depth=depth)
        if fourier_features:  # recorded only when used, so configs of plain MLPs are as before
            self._config.update(fourier_features=int(fourier_features), fourier_scale=float(fourier_scale))
        layers: list[nn.Module] = [nn.Linear(in_dim + 2 * fourier_features + time_dim, hidden), nn.SiLU()]
        for _ in range(depth - 1):
            layers += [nn.Linear(hidden, hidden), nn.SiLU()]
        layers.append(nn.Linear(hidden, out_dim))
        self.net = nn.Sequential(*layers)
        if fourier_features:
            # cpu: networks are initialised on the CPU from the seed, then moved
            self.register_buffer("frequencies", fourier_scale * torch.randn(in_dim, fourier_features))
        else:
            self.frequencies = None

    def config(self) -> dict:
        return dict(self._config)

    def forward(self, features: torch.Tensor, time_features: torch.Tensor) -> torch.Tensor:
        parts = [features]
        if self.frequencies is not None:
            z = features @ self.frequencies.to(features.dtype)
            parts += [torch.sin(z), torch.cos(z)]
        return self.net(torch.cat(parts + [time_features], dim=-1))
