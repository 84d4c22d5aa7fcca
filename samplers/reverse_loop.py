"""The one reverse-time loop every grid sampler plugs its step into.

``reverse_loop(field, n, steps, step, ...)`` draws the start (the space's
prior at t_max, or a given ``x_init``), takes the field's time grid
``field.grid(steps)`` (steps + 1 times from t_max down to t_min), runs
``x = step(x, i, t_i, t_{i+1})`` for i = 0 … steps - 1 under a progress bar,
and applies an optional ``finish(x, t_min)`` (the discrete samplers' final
draw of x_0). After the start and after every step the field's
``constrain(x, t, generator, final)`` is applied (the identity unless
coordinates are fixed; ``final`` on the last state). All randomness comes from
the ``generator`` the step closes over.
"""

from __future__ import annotations

from collections.abc import Callable

import torch
from tqdm.auto import tqdm

from heatwalk.checks import check_positive_int
from heatwalk.errors import InputError


def initial_state(field, n: int, generator: torch.Generator | None, x_init: torch.Tensor | None) -> torch.Tensor:
    """n draws from the space's prior, or a copy of ``x_init`` (checked to be n points of the space)."""
    space = field.space
    if x_init is None:
        return space.prior_sample(n, generator)
    if not isinstance(x_init, torch.Tensor) or tuple(x_init.shape) != (n, *space.ambient_shape):
        got = tuple(x_init.shape) if isinstance(x_init, torch.Tensor) else type(x_init).__name__
        raise InputError(f"x_init: expected a tensor of shape {(n, *space.ambient_shape)}, got {got}",
                         field="x_init")
    return x_init.clone()


def reverse_loop(field, n: int, steps: int, step: Callable, *, generator: torch.Generator | None = None,
                 progress: bool = True, x_init: torch.Tensor | None = None, desc: str = "sampling",
                 finish: Callable | None = None) -> torch.Tensor:
    """Run ``step`` over the field's reverse-time grid from the prior (or ``x_init``); see the module docstring."""
    check_positive_int("steps", steps)
    x = initial_state(field, n, generator, x_init)
    times = field.grid(steps).to(x[0].device if isinstance(x, tuple) else x.device)
    x = field.constrain(x, times[0], generator)
    for i in tqdm(range(steps), desc=desc, disable=not progress, leave=False):
        x = field.constrain(step(x, i, times[i], times[i + 1]), times[i + 1], generator,
                            final=finish is None and i == steps - 1)
    if finish is None:
        return x
    return field.constrain(finish(x, times[-1]), times[-1], generator, final=True)
