"""Fields: what a trained network offers the samplers.

Two kinds, named by ``kind`` (samplers state which kinds they accept):

- :class:`ScoreField` (``"score"``): s(x, t), a tangent vector at each point of
  a manifold, the learned (or an exact) score of the time-t marginal;
- :class:`X0ProbabilityField` (``"x0_probabilities"``): on a finite space, the
  network's probabilities of the data state of x_0 at every position given x_t,
  and the reverse jump rates they define.

Both carry their ``space`` and ``schedule`` and expose the sampling time grid
the same way: ``grid(steps)`` gives steps + 1 times from t_max down to t_min.
Both have ``constrain(x, t, generator, final)``, which the reverse loop applies
after every step: the identity, or — when coordinates are fixed by the
replacement method — the known part redrawn at time t (set to its values at
the end); see :mod:`heatwalk.core.conditioning`. ``fixes_coordinates`` says
whether it does anything (deterministic samplers refuse such fields).
"""

from __future__ import annotations

import torch

from heatwalk.core.schedule import TimeSchedule


def _batch_times(t, n: int, device) -> torch.Tensor:
    t = torch.as_tensor(t, dtype=torch.float64, device=device)
    return t.expand(n) if t.dim() == 0 else t


class ScoreField:
    """A (learned or exact) score field s(x, t) on a manifold, with its time schedule.

    ``score(x, t)`` returns a float64 tangent vector at each x (t a scalar or one
    time per point). The sampling grid is geometric in t.
    """

    kind = "score"

    def __init__(self, space, schedule: TimeSchedule, score_fn, constrain_fn=None):
        self.space = space
        self.schedule = schedule
        self._score_fn = score_fn
        self._constrain_fn = constrain_fn

    @property
    def fixes_coordinates(self) -> bool:
        return self._constrain_fn is not None

    def constrain(self, x, t, generator=None, final: bool = False):
        return x if self._constrain_fn is None else self._constrain_fn(x, t, generator, final)

    def score(self, x: torch.Tensor, t) -> torch.Tensor:
        return self._score_fn(x, _batch_times(t, x.shape[0], x.device))

    def grid(self, steps: int) -> torch.Tensor:
        """steps + 1 times, geometric from t_max down to t_min."""
        return self.schedule.grid(steps, "geometric")


class X0ProbabilityField:
    """x_0 probabilities of a denoiser on a finite space, and the reverse jump rates they define.

    ``log_x0_fn(xt, t) -> (n, L, K)`` is the network's log p_θ(x_0,l = a | x_t),
    -inf on states that cannot have produced x_t. The sampling grid is linear in t
    (the chain's schedule is linear in t).
    """

    kind = "x0_probabilities"

    def __init__(self, space, schedule: TimeSchedule, log_x0_fn, constrain_fn=None):
        self.space = space
        self.schedule = schedule
        self._log_x0_fn = log_x0_fn
        self._constrain_fn = constrain_fn

    @property
    def fixes_coordinates(self) -> bool:
        return self._constrain_fn is not None

    def constrain(self, x, t, generator=None, final: bool = False):
        return x if self._constrain_fn is None else self._constrain_fn(x, t, generator, final)

    def log_x0_probs(self, xt: torch.Tensor, t) -> torch.Tensor:
        """(n, L, K) log p_θ(x_0,l = a | x_t), -inf on states that cannot have produced x_t."""
        return self._log_x0_fn(xt, _batch_times(t, xt.shape[0], xt.device))

    def x0_probs(self, xt: torch.Tensor, t) -> torch.Tensor:
        return self.log_x0_probs(xt, t).exp()

    def log_reverse_rates(self, xt: torch.Tensor, t) -> torch.Tensor:
        """(n, L, n_states) log r_θ of jumping at position l to state v at time t."""
        t = _batch_times(t, xt.shape[0], xt.device)
        return self.space.log_reverse_rates(xt, self.log_x0_probs(xt, t), t)

    def grid(self, steps: int) -> torch.Tensor:
        """steps + 1 times, uniform from t_max down to t_min."""
        return self.schedule.grid(steps, "linear")


class ProductField:
    """What the product sampler consumes: per-factor outputs of one network on the shared clock.

    ``outputs(x, tau)`` returns, for every factor of the :class:`heatwalk.spaces.Product`, the score
    (a manifold factor) or the log x_0 probabilities (a finite factor) at the factor's time t_i(τ).
    The grid is uniform in the clock τ from 1 down to 0.
    """

    kind = "product"

    def __init__(self, space, schedule, outputs_fn, constrain_fn=None):
        self.space = space
        self.schedule = schedule
        self._outputs_fn = outputs_fn
        self._constrain_fn = constrain_fn

    def outputs(self, x, tau) -> list:
        return self._outputs_fn(x, tau)

    @property
    def fixes_coordinates(self) -> bool:
        return self._constrain_fn is not None

    def constrain(self, x, t, generator=None, final: bool = False):
        return x if self._constrain_fn is None else self._constrain_fn(x, t, generator, final)

    def grid(self, steps: int) -> torch.Tensor:
        """steps + 1 clock times from 1 down to 0."""
        return self.schedule.grid(steps)
