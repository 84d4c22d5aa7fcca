"""Finite state spaces: sequences of L positions, each in one of K data states, noised by a Markov chain.

The protocol the discrete objective and the discrete samplers use. Each
position moves independently by a continuous-time Markov chain on
``n_states`` states (the K data states, plus a mask state for an absorbing
chain); at time t its transition matrix is P_t = ``transition(t)``. On top of
the :class:`~heatwalk.spaces.base.Space` methods a finite space offers

- ``x0_support(xt, t)``: which data states can have produced x_t;
- ``posterior(xt, x0_probs, s, t)``: q(x_s | x_t) for a law of x_0 (ancestral steps);
- ``log_reverse_rates(xt, log_x0_probs, t)``: the reverse-time jump rates;
- ``prior_kl(x0, t)``: the prior term of the ELBO;
- ``closed_form_integrand(xt, x0, log_x0_probs, t)``: the ELBO's integrand in closed form, for a chain
  that has one (None otherwise: the objective then evaluates it from ``log_reverse_rates``).

Public methods check and broadcast (points (n, L) int64, times a scalar or
(n,)), then call the private ``_``-method of the subclass with times of
shape (n,). Measure: counting measure; log-probabilities in nats.
"""

from __future__ import annotations

from abc import abstractmethod
from typing import ClassVar

import torch

from heatwalk.errors import InputError
from heatwalk.spaces.base import Space


class FiniteStateSpace(Space):
    """Sequences of ``L`` positions with ``K`` data states each, noised by a CTMC (module docstring)."""

    objective_name: ClassVar[str] = "discrete_elbo"
    file_kind: ClassVar[str] = "sequences"
    max_time: ClassVar[float] = 1.0
    dim = 0

    #: number of data states
    K: int
    #: number of positions
    L: int
    #: states of the chain: K, or K + 1 with a mask state
    n_states: int
    #: index of the mask state of an absorbing chain, else None
    mask_state: int | None = None

    @property
    def capabilities(self) -> frozenset[str]:
        return frozenset({"sequences"} | ({"absorbing"} if self.mask_state is not None else set()))

    @abstractmethod
    def transition(self, t) -> torch.Tensor:
        """P_t: shape (*t.shape, n_states, n_states); P_t[a, b] = Pr(x_t = b | x_0 = a)."""

    def _times(self, t, xt: torch.Tensor) -> torch.Tensor:
        if not isinstance(xt, torch.Tensor) or xt.dim() != 2 or xt.shape[1] != self.L:
            got = tuple(xt.shape) if isinstance(xt, torch.Tensor) else type(xt).__name__
            raise InputError(f"sequences: expected a tensor of shape (n, {self.L}), got {got}", field="xt")
        return self.check_time(t, xt.shape[:1], device=xt.device)

    def x0_support(self, xt: torch.Tensor, t) -> torch.Tensor:
        """(n, L, K) bool: data states a with Pr(x_t | x_0 = a) > 0 at each position."""
        return self._x0_support(xt, self._times(t, xt))

    def posterior(self, xt: torch.Tensor, x0_probs: torch.Tensor, s, t) -> torch.Tensor:
        """q(x_s | x_t) = Σ_a p(a) q(x_s | x_t, x_0 = a) at each position, for s <= t: (n, L, n_states)."""
        return self._posterior(xt, x0_probs, self._times(s, xt), self._times(t, xt))

    def log_reverse_rates(self, xt: torch.Tensor, log_x0_probs: torch.Tensor, t) -> torch.Tensor:
        """log of the reverse-time jump rates for each position and target state: (n, L, n_states)."""
        return self._log_reverse_rates(xt, log_x0_probs, self._times(t, xt))

    def prior_kl(self, x0: torch.Tensor, t) -> torch.Tensor:
        """Σ_l KL(P_t[x0_l, ·] || π) in nats: the prior term of the ELBO. Shape (n,)."""
        return self._prior_kl(x0, self._times(t, x0))

    def closed_form_integrand(self, xt: torch.Tensor, x0: torch.Tensor, log_x0_probs: torch.Tensor, t):
        """Σ_l Σ_{v ≠ x_t,l} [r_θ − r + r log(r / r_θ)](x_t → v) per row (n,), in nats per unit time, or None.

        The integrand of the continuous-time ELBO (see :mod:`heatwalk.core.objectives.discrete_elbo`) at
        (x_t, t) for the sequence x_0, with model x_0 log-probabilities ``log_x0_probs`` (n, L, K) restricted
        to :meth:`x0_support`. A chain whose integrand has a closed form returns it (it must equal the
        general expression through :meth:`log_reverse_rates` for every x_t, not only in expectation);
        the default is None: no closed form, the objective uses the reverse rates.
        """
        return self._closed_form_integrand(xt, x0, log_x0_probs, self._times(t, xt))

    def _closed_form_integrand(self, xt, x0, log_x0_probs, t):
        return None

    @abstractmethod
    def _x0_support(self, xt, t): ...

    @abstractmethod
    def _posterior(self, xt, x0_probs, s, t): ...

    @abstractmethod
    def _log_reverse_rates(self, xt, log_x0_probs, t): ...

    @abstractmethod
    def _prior_kl(self, x0, t): ...
