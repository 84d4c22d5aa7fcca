"""Reverse-time samplers written against the Space protocol only.

``SAMPLERS`` maps a sampler name to ``(function, field_kinds)``: the function
takes ``(field, n, steps=..., generator=..., progress=..., **options)`` and
``field_kinds`` lists the kinds of field (``field.kind``) it can consume, so
``Model.sample`` can refuse a sampler that does not fit the model with a clear
error instead of branching on the space.
"""

from heatwalk.samplers.geodesic_random_walk import geodesic_random_walk
from heatwalk.samplers.predictor_corrector import predictor_corrector
from heatwalk.samplers.probability_flow import probability_flow
from heatwalk.samplers.ancestral import ancestral
from heatwalk.samplers.tau_leaping import tau_leaping
from heatwalk.samplers.unmasking import unmasking

SAMPLERS: dict[str, tuple] = {
    "geodesic_random_walk": (geodesic_random_walk, ("score",)),
    "predictor_corrector": (predictor_corrector, ("score",)),
    "probability_flow": (probability_flow, ("score",)),
}
SAMPLERS["ancestral"] = (ancestral, ("x0_logits",))
SAMPLERS["tau_leaping"] = (tau_leaping, ("x0_logits",))
SAMPLERS["unmasking"] = (unmasking, ("x0_logits",))

__all__ = ["SAMPLERS", "geodesic_random_walk", "predictor_corrector", "probability_flow", "ancestral", "tau_leaping", "unmasking"]
