"""Denoiser networks. Each is rebuilt from a JSON config, so checkpoints hold only tensors.

``NETWORKS`` maps a name to a class with ``__init__(**config)`` and a
``config()`` method returning the same keyword arguments.
"""

from __future__ import annotations

from torch import nn

from heatwalk.errors import InputError
from heatwalk.core.networks.mlp import MLPDenoiser
from heatwalk.core.networks.residual import ResidualDenoiser
from heatwalk.core.networks.transformer import TransformerDenoiser

NETWORKS: dict[str, type] = {"mlp": MLPDenoiser, "residual": ResidualDenoiser, "transformer": TransformerDenoiser}


def build_network(name: str, config: dict) -> nn.Module:
    if name not in NETWORKS:
        raise InputError(f"unknown network {name!r}; known: {sorted(NETWORKS)}", field="network")
    return NETWORKS[name](**config)


def network_name(net: nn.Module) -> str:
    for name, cls in NETWORKS.items():
        if type(net) is cls:
            return name
    raise InputError(f"network class {type(net).__name__} is not registered in heatwalk.core.networks.NETWORKS")
