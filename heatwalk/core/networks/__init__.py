"""Denoiser networks. Each is rebuilt from a JSON config, so checkpoints hold only tensors.

``NETWORKS`` maps a name to a class with ``__init__(**config)`` and a
``config()`` method returning the same keyword arguments.
"""

from __future__ import annotations

from torch import nn

from heatwalk.errors import InputError
from heatwalk.core.networks.factored import FactoredDenoiser
from heatwalk.core.networks.mlp import MLPDenoiser
from heatwalk.core.networks.residual import ResidualDenoiser
from heatwalk.core.networks.transformer import TransformerDenoiser

NETWORKS: dict[str, type] = {"mlp": MLPDenoiser, "residual": ResidualDenoiser, "transformer": TransformerDenoiser,
                             "factored": FactoredDenoiser}


def build_network(name: str, config: dict) -> nn.Module:
    if name not in NETWORKS:
        raise InputError(f"unknown network {name!r}; known: {sorted(NETWORKS)}", field="network")
    return NETWORKS[name](**config)


def network_name(net: nn.Module) -> str:
    for name, cls in NETWORKS.items():
        if type(net) is cls:
            return name
    raise InputError(f"network class {type(net).__name__} is not registered in heatwalk.core.networks.NETWORKS")


def point_denoiser(in_dim: int, time_dim: int, out_dim: int, *, hidden: int = 256, depth: int = 3,
                   fourier_features: int = 0, fourier_scale: float = 1.0, residual: bool = False,
                   time_skip: bool = False, who: str = "score matching", **extra) -> nn.Module:
    """The network of an objective on point features: the MLP (``residual=False``) or the residual network with
    the time in every block (``residual=True``; ``time_skip`` belongs to it), same size options. ``who`` names
    the objective in the error an unknown option gets."""
    if extra:
        raise InputError(f"unknown network options for {who}: {sorted(extra)}; accepted: depth, fourier_features, "
                         f"fourier_scale, hidden, residual, time_skip", field="network")
    for key, value in (("residual", residual), ("time_skip", time_skip)):
        if not isinstance(value, bool):
            raise InputError(f"network option {key!r} must be true or false, got {value!r}", field="network")
    if not residual:
        if time_skip:
            raise InputError("network option 'time_skip' belongs to the residual network; add 'residual': true",
                             field="network")
        return MLPDenoiser(in_dim, time_dim, out_dim, hidden, depth, fourier_features, fourier_scale)
    return ResidualDenoiser(in_dim, time_dim, out_dim, hidden, depth, fourier_features, fourier_scale, time_skip)
