"""Sampling a product space: every factor takes its own reverse step on the shared clock.

On the clock grid τ = 1 → 0 (uniform), one network evaluation per step gives
every factor's output; a manifold factor then takes a geodesic random-walk step
from t_i(τ_k) to t_i(τ_{k+1}) (:func:`geodesic_step`, no noise on the last
step), a finite factor an ancestral step (:func:`ancestral_step`); at the end
finite factors draw x_0 from the network's x_0 probabilities at τ = 0
(their t_min). Factors fixed by ``given`` are held at their values.
"""

from __future__ import annotations

import torch

from heatwalk.kernels.ctmc import sample_categorical
from heatwalk.samplers.ancestral import ancestral_step
from heatwalk.samplers.geodesic_random_walk import geodesic_step
from heatwalk.samplers.reverse_loop import reverse_loop


def product_walk(field, n: int, steps: int = 500, generator: torch.Generator | None = None,
                 progress: bool = True) -> tuple:
    """Draw n points (a tuple of factor batches) of a product space with ``steps`` clock steps."""
    space = field.space

    def step(x, i, tau, tau_next):
        outs = field.outputs(x, tau)
        new = []
        for f, m, xi, o, t, s in zip(space.factors, space.is_manifold, x, outs, space.factor_times(tau),
                                     space.factor_times(tau_next)):
            if m:
                new.append(geodesic_step(f, xi, o, t, s, generator, noise=i < steps - 1))
            else:
                new.append(ancestral_step(f, xi, o.exp(), t, s, generator))
        return tuple(new)

    def finish(x, tau_min):
        outs = field.outputs(x, tau_min)
        return tuple(xi if m else sample_categorical(o.exp(), generator)
                     for m, xi, o in zip(space.is_manifold, x, outs))

    return reverse_loop(field, n, steps, step, generator=generator, progress=progress, desc="sampling (product)",
                        finish=finish)
