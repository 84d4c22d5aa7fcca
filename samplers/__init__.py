"""Reverse-time samplers written against the Space protocol only.

``SAMPLERS`` maps a sampler name to a :class:`Sampler`: its function, which
takes ``(field, n, steps=..., generator=..., progress=..., **options)``, the
kinds of field (``field.kind``) it consumes, and the space capabilities it
needs (``space.capabilities``), so ``Model.sample`` can refuse a sampler that
does not fit the model with a clear error instead of branching on the space.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

from heatwalk.samplers.ancestral import ancestral
from heatwalk.samplers.geodesic_random_walk import geodesic_random_walk
from heatwalk.samplers.predictor_corrector import predictor_corrector
from heatwalk.samplers.probability_flow import probability_flow
from heatwalk.samplers.product_walk import product_walk
from heatwalk.samplers.tau_leaping import tau_leaping
from heatwalk.samplers.unmasking import unmasking


@dataclass(frozen=True)
class Sampler:
    """A registered sampler: the function, the field kinds it consumes, the space capabilities it needs."""

    function: Callable
    field_kinds: tuple[str, ...]
    requires: frozenset[str] = field(default_factory=frozenset)

    def applies_to(self, field_kind: str, capabilities: frozenset[str]) -> bool:
        return field_kind in self.field_kinds and self.requires <= capabilities


SAMPLERS: dict[str, Sampler] = {
    "geodesic_random_walk": Sampler(geodesic_random_walk, ("score",)),
    "predictor_corrector": Sampler(predictor_corrector, ("score",)),
    "probability_flow": Sampler(probability_flow, ("score",)),
    "ancestral": Sampler(ancestral, ("x0_probabilities",)),
    "tau_leaping": Sampler(tau_leaping, ("x0_probabilities",)),
    "unmasking": Sampler(unmasking, ("x0_probabilities",), frozenset({"absorbing"})),
    "product_walk": Sampler(product_walk, ("product",)),
}

__all__ = ["SAMPLERS", "Sampler", "geodesic_random_walk", "predictor_corrector", "probability_flow", "ancestral",
           "tau_leaping", "unmasking", "product_walk"]
