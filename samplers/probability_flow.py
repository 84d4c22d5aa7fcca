"""Deterministic sampling by the probability-flow ODE (engine: :mod:`heatwalk.samplers.flow_ode`).

Draw x from the prior at t_max (or take ``x_init``) and integrate
dx/dt = f(x, t) - (1/2) s(x, t) from t_max down to t_min, by fixed-step RK4
(``steps`` steps uniform in log t) or adaptive Dormand–Prince (``rtol``, ``atol``)
in tangent charts. The ODE solver is its own loop: an adaptive step does not
fit a fixed grid, so this sampler shares only the start with
:func:`heatwalk.samplers.reverse_loop.reverse_loop`.
"""

from __future__ import annotations

import torch

from heatwalk.errors import InputError
from heatwalk.samplers.flow_ode import FlowField, integrate
from heatwalk.samplers.reverse_loop import initial_state


def probability_flow(field, n: int, steps: int = 100, generator: torch.Generator | None = None,
                     progress: bool = True, method: str = "rk4", rtol: float = 1e-5, atol: float = 1e-6,
                     x_init: torch.Tensor | None = None) -> torch.Tensor:
    """Sample by drawing from the prior at t_max and integrating the probability-flow ODE down to t_min."""
    if field.fixes_coordinates:
        raise InputError("the probability-flow sampler is deterministic and cannot keep coordinates fixed by "
                         "replacement; use geodesic_random_walk or predictor_corrector with given=",
                         field="sampler")
    x = initial_state(field, n, generator, x_init)
    x, _, _, _ = integrate(FlowField(field), x, field.schedule.t_max, field.schedule.t_min, method=method,
                           steps=steps, rtol=rtol, atol=atol, with_div=False, progress=progress)
    return x
