"""A small transformer encoder over sequence positions, predicting per-position logits.

Registered in :data:`heatwalk.core.networks.NETWORKS` as ``"transformer"``; like every
heatwalk network it is rebuilt from the keyword arguments its ``config()``
returns, and its ``forward(features, time_features)`` takes the flat features
of :meth:`Space.embed` and the schedule's time features.
"""

from __future__ import annotations

import torch
from torch import nn

from heatwalk.checks import check_positive_int
from heatwalk.errors import InputError


class TransformerDenoiser(nn.Module):
    """Pre-norm transformer encoder on L positions with one-hot token inputs.

    Parameters
    ----------
    length : number of positions L
    n_inputs : states per input position (K, or K + 1 with a mask state); ``features`` has
        shape (B, length * n_inputs)
    n_outputs : logits per output position; the output has shape (B, length * n_outputs)
    time_dim : length of the time features, mapped by a small MLP and added to every position
    d_model, n_layers, n_heads : width, depth and attention heads (d_model divisible by n_heads)
    """

    def __init__(self, length: int, n_inputs: int, n_outputs: int, time_dim: int,
                 d_model: int = 64, n_layers: int = 2, n_heads: int = 4):
        super().__init__()
        for name, v in (("length", length), ("n_inputs", n_inputs), ("n_outputs", n_outputs),
                        ("time_dim", time_dim), ("d_model", d_model), ("n_layers", n_layers), ("n_heads", n_heads)):
            check_positive_int(f"transformer: {name}", v)
        if d_model % n_heads:
            raise InputError(f"transformer: d_model ({d_model}) must be divisible by n_heads ({n_heads})",
                             field="n_heads")
        self._config = dict(length=length, n_inputs=n_inputs, n_outputs=n_outputs, time_dim=time_dim,
                            d_model=d_model, n_layers=n_layers, n_heads=n_heads)
        self.token = nn.Linear(n_inputs, d_model)
        # cpu: networks are initialised on the CPU from the seed, then moved
        self.position = nn.Parameter(0.02 * torch.randn(length, d_model))
        self.time = nn.Sequential(nn.Linear(time_dim, d_model), nn.SiLU(), nn.Linear(d_model, d_model))
        layer = nn.TransformerEncoderLayer(d_model, n_heads, dim_feedforward=4 * d_model, dropout=0.0,
                                           activation="gelu", batch_first=True, norm_first=True)
        self.encoder = nn.TransformerEncoder(layer, n_layers, enable_nested_tensor=False)
        self.norm = nn.LayerNorm(d_model)
        self.out = nn.Linear(d_model, n_outputs)

    def config(self) -> dict:
        return dict(self._config)

    def forward(self, features: torch.Tensor, time_features: torch.Tensor) -> torch.Tensor:
        c = self._config
        tokens = features.reshape(features.shape[0], c["length"], c["n_inputs"])
        h = self.token(tokens) + self.position + self.time(time_features).unsqueeze(1)
        h = self.norm(self.encoder(h))
        return self.out(h).reshape(features.shape[0], c["length"] * c["n_outputs"])
