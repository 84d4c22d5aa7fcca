"""Continuous-time Markov chains on a finite set: transition matrices exp(τQ).

A chain on n states is given by its rate matrix Q (off-diagonal entries are
jump rates, rows sum to 0). Its transition matrix after operational time τ is

    P(τ) = exp(τ Q),    P(τ)[i, j] = Pr(X_τ = j | X_0 = i),

the heat kernel of the weighted graph whose Laplacian is -Q. Three ways of
evaluating it, chosen once when the chain is built:

- ``"uniform"`` closed form, Q = β((1/n) 1 1ᵀ - I):
  P(τ) = e^{-βτ} I + (1 - e^{-βτ}) (1/n) 1 1ᵀ.
- ``"absorbing"`` closed form, n - 1 data states and a last (mask) state that
  every data state jumps to at rate β: P(τ)[i, i] = e^{-βτ},
  P(τ)[i, mask] = 1 - e^{-βτ} for data states i, P(τ)[mask, mask] = 1.
- any other valid Q: if Q is reversible with respect to a strictly positive
  stationary law π (π_i Q_ij = π_j Q_ji), the symmetric matrix
  S = D^{1/2} Q D^{-1/2} (D = diag π) is diagonalised once, S = U Λ Uᵀ, and
  P(τ) = D^{-1/2} U e^{τΛ} Uᵀ D^{1/2}  (``"eigen"``); otherwise the matrix
  exponential is computed by Padé scaling and squaring (``"expm"``;
  ``torch.linalg.matrix_exp``, batched over τ — the same algorithm as
  ``scipy.linalg.expm``, against which and mpmath it is tested), with results
  for repeated times (sampling grids) cached and the last batch remembered
  (one training step asks for the same times several times).

τ = inf is allowed and gives the limit 1 πᵀ. Everything is float64 torch.
"""

from __future__ import annotations

import math
from collections import OrderedDict

import numpy as np
import scipy.linalg
import torch

from heatwalk.checks import check_int, check_positive_number
from heatwalk.errors import InputError

DTYPE = torch.float64
EPS = float(np.finfo(np.float64).eps)
#: how many distinct scalar times the expm path remembers
CACHE_SIZE = 1024
#: calls with more distinct times than this are not cached (random training times)
CACHE_MAX_BATCH = 64


def check_rate_matrix(rates) -> np.ndarray:
    """Return ``rates`` as a float64 (n, n) array after checking it is a rate matrix.

    Off-diagonal entries must be finite and >= 0 and each row must sum to 0
    within 64·n·eps·(largest |diagonal entry|) — a few rounding errors of
    summing n entries of that size. Raises :class:`InputError` naming the
    offending entry or row.
    """
    try:
        q = np.array(rates, dtype=np.float64)
    except (TypeError, ValueError) as e:
        raise InputError(f"rate matrix: cannot be read as a square array of numbers ({e})", field="rates") from None
    if q.ndim != 2 or q.shape[0] != q.shape[1] or q.shape[0] < 2:
        raise InputError(f"rate matrix: expected a square (n, n) array with n >= 2, got shape {q.shape}",
                         field="rates")
    n = q.shape[0]
    bad = ~np.isfinite(q)
    if bad.any():
        i, j = map(int, np.argwhere(bad)[0])
        raise InputError(f"rate matrix: entry ({i}, {j}) is {q[i, j]} (must be finite)", row=i, field="rates")
    off = q - np.diag(np.diag(q))
    if (off < 0).any():
        i, j = map(int, np.argwhere(off < 0)[0])
        raise InputError(f"rate matrix: off-diagonal entry ({i}, {j}) = {q[i, j]:g} is negative "
                         "(jump rates must be >= 0)", row=i, field="rates")
    scale = max(float(np.abs(np.diag(q)).max()), float(off.sum(1).max()))
    if scale == 0:
        raise InputError("rate matrix: all rates are zero (the chain never moves)", field="rates")
    sums = q.sum(1)
    tol = 64 * n * EPS * scale
    bad_rows = np.abs(sums) > tol
    if bad_rows.any():
        i = int(np.argmax(bad_rows))
        raise InputError(f"rate matrix: row {i} sums to {sums[i]:.3g}, expected 0 (within {tol:.1e}); "
                         "set the diagonal to minus the sum of the row's off-diagonal rates", row=i, field="rates")
    return q


def stationary_distribution(q: np.ndarray) -> np.ndarray:
    """The unique π with πQ = 0, Σπ = 1; InputError if the chain has several closed classes."""
    n = q.shape[0]
    ns = scipy.linalg.null_space(q.T, rcond=1e3 * n * EPS)
    if ns.shape[1] != 1:
        raise InputError(f"rate matrix: the chain has {ns.shape[1]} stationary laws (several closed classes of "
                         "states); heatwalk needs a unique one to serve as the prior", field="rates")
    pi = ns[:, 0]
    pi = pi / pi.sum()
    if (pi < -1e3 * n * EPS).any():
        raise InputError("rate matrix: stationary law has negative entries (numerically ill-conditioned chain)",
                         field="rates")
    pi = np.clip(pi, 0.0, None)
    return pi / pi.sum()


class CTMC:
    """A continuous-time Markov chain on ``n_states`` states with rate matrix Q.

    Build with :meth:`uniform`, :meth:`absorbing` or ``CTMC(rates)`` for a
    user-given rate matrix (checked by :func:`check_rate_matrix`).

    Attributes
    ----------
    n_states : number of states n
    rates : (n, n) float64 tensor Q
    stationary : (n,) float64 tensor π, the unique stationary law (the limit of every row of P(τ))
    spectral_gap : -max Re λ over the eigenvalues λ ≠ 0 of Q: the slowest mode decays as e^{-gap·τ}
    method : "uniform", "absorbing", "eigen" or "expm"
    """

    def __init__(self, rates, *, _method: str | None = None, _rate: float | None = None):
        q = check_rate_matrix(rates)
        self.n_states = q.shape[0]
        # cpu: the chain's constants live on the CPU; CTMC.on serves them on other devices
        self.rates = torch.tensor(q, dtype=DTYPE)
        self._cache: OrderedDict[tuple[str, float], torch.Tensor] = OrderedDict()  # (device, τ) -> P(τ)
        self._last: tuple[torch.Tensor, torch.Tensor] | None = None  # the last batch of times and its matrices
        self._copies: dict[tuple[str, torch.device], torch.Tensor] = {}  # constant tensors on other devices
        n = self.n_states
        if _method in ("uniform", "absorbing"):
            self.method = _method
            self._beta = float(_rate)
            pi = np.full(n, 1.0 / n) if _method == "uniform" else np.eye(n)[n - 1]
            # cpu: the chain's constants live on the CPU; CTMC.on serves them on other devices
            self.stationary = torch.tensor(pi, dtype=DTYPE)
            self.spectral_gap = self._beta
            return
        pi = stationary_distribution(q)
        # cpu: the chain's constants live on the CPU; CTMC.on serves them on other devices
        self.stationary = torch.tensor(pi, dtype=DTYPE)
        eig = np.linalg.eigvals(q)
        order = np.argsort(-eig.real)
        self.spectral_gap = float(-eig[order[1]].real)
        if not self.spectral_gap > 0:
            raise InputError("rate matrix: spectral gap is zero (the chain does not mix)", field="rates")
        flux = pi[:, None] * q
        scale = float(np.abs(np.diag(q)).max())
        if (pi > 0).all() and np.abs(flux - flux.T).max() <= 1e3 * n * EPS * scale:
            self.method = "eigen"
            d = np.sqrt(pi)
            s = d[:, None] * q / d[None, :]
            lam, u = np.linalg.eigh(0.5 * (s + s.T))
            lam[np.argmax(lam)] = 0.0  # the stationary mode, exactly
            lam = np.minimum(lam, 0.0)
            # cpu: the chain's constants live on the CPU; CTMC.on serves them on other devices
            self._lam = torch.tensor(lam, dtype=DTYPE)
            # cpu: as above (D^{-1/2} U and Uᵀ D^{1/2})
            self._left = torch.tensor(u / d[:, None], dtype=DTYPE)
            self._right = torch.tensor(u.T * d[None, :], dtype=DTYPE)  # cpu: as above
        else:
            self.method = "expm"

    # ----- constructors ------------------------------------------------------------------------
    @classmethod
    def uniform(cls, n_states: int, rate: float = 1.0) -> "CTMC":
        """Uniform chain: jumps at total rate β·(n-1)/n to a uniformly chosen other state."""
        _check_n_rate(n_states, rate)
        q = rate * (np.full((n_states, n_states), 1.0 / n_states) - np.eye(n_states))
        return cls(q, _method="uniform", _rate=rate)

    @classmethod
    def absorbing(cls, n_data: int, rate: float = 1.0) -> "CTMC":
        """``n_data`` data states plus one absorbing mask state (index ``n_data``), entered at rate β."""
        _check_n_rate(n_data, rate, minimum=1)
        n = n_data + 1
        q = np.zeros((n, n))
        q[:n_data, n_data] = rate
        q[np.arange(n_data), np.arange(n_data)] = -rate
        return cls(q, _method="absorbing", _rate=rate)

    def on(self, name: str, device) -> torch.Tensor:
        """The constant tensor attribute ``name`` (``rates``, ``stationary``, …) on ``device`` (copied once)."""
        value = getattr(self, name)
        device = torch.device(device)
        if value.device == device:
            return value
        key = (name, device)
        if key not in self._copies:
            self._copies[key] = value.to(device)
        return self._copies[key]

    # ----- transition matrices -------------------------------------------------------------------
    def transition(self, tau) -> torch.Tensor:
        """P(τ) = exp(τQ) for every τ in ``tau`` (any shape, τ >= 0, inf allowed): shape (*tau.shape, n, n)."""
        # cpu: a tensor keeps its device; a plain number is a CPU scalar
        tau = torch.as_tensor(tau, dtype=DTYPE)
        if torch.isnan(tau).any() or (tau < 0).any():
            bad = tau[torch.isnan(tau) | (tau < 0)].flatten()[0]
            raise InputError(f"CTMC.transition: times must be >= 0, got {float(bad)}", field="tau")
        n, dev = self.n_states, tau.device
        if self.method in ("uniform", "absorbing"):
            decay = torch.exp(-self._beta * tau)[..., None, None]  # exp(-inf) = 0
            eye = torch.eye(n, dtype=DTYPE, device=dev)
            if self.method == "uniform":
                return decay * eye + (1 - decay) / n
            limit = torch.zeros(n, n, dtype=DTYPE, device=dev)
            limit[:, n - 1] = 1.0
            top = decay * eye + (1 - decay) * limit
            top[..., n - 1, :] = limit[n - 1]
            return top
        if self.method == "eigen":
            lam = self.on("_lam", dev)
            lt = torch.where(lam == 0, torch.zeros((), dtype=DTYPE, device=dev), tau[..., None] * lam)
            p = (self.on("_left", dev) * torch.exp(lt)[..., None, :]) @ self.on("_right", dev)
            return p.clamp_min(0.0)  # rounding can leave -1e-17 where the exact value is 0
        return self._transition_expm(tau)

    def _transition_expm(self, tau: torch.Tensor) -> torch.Tensor:
        last = self._last
        if last is not None and last[0].shape == tau.shape and last[0].device == tau.device \
                and torch.equal(last[0], tau):
            return last[1]
        out = self._transition_expm_uncached(tau)
        self._last = (tau.clone(), out)
        return out

    def _transition_expm_uncached(self, tau: torch.Tensor) -> torch.Tensor:
        flat = tau.reshape(-1)
        uniq, inverse = torch.unique(flat, return_inverse=True)
        use_cache = uniq.numel() <= CACHE_MAX_BATCH
        mats = [None] * uniq.numel()
        todo = []
        dev = str(tau.device)
        for k, v in enumerate(uniq.tolist()):
            if use_cache and (dev, v) in self._cache:
                self._cache.move_to_end((dev, v))
                mats[k] = self._cache[(dev, v)]
            else:
                todo.append(k)
        if todo:
            vals = uniq[todo]
            finite = torch.isfinite(vals)
            out = torch.empty(len(todo), self.n_states, self.n_states, dtype=DTYPE, device=tau.device)
            if bool(finite.any()):
                out[finite] = torch.linalg.matrix_exp(vals[finite][:, None, None] * self.on("rates", tau.device))
            out[~finite] = self.on("stationary", tau.device).expand(self.n_states, self.n_states)
            out = out.clamp_min(0.0)  # rounding can leave -1e-17 where the exact value is 0
            for j, k in enumerate(todo):
                mats[k] = out[j]
                if use_cache:
                    self._cache[(dev, float(uniq[k]))] = out[j]
                    if len(self._cache) > CACHE_SIZE:
                        self._cache.popitem(last=False)
        stacked = torch.stack(mats)
        return stacked[inverse].reshape(*tau.shape, self.n_states, self.n_states)


def _check_n_rate(n: int, rate: float, minimum: int = 2) -> None:
    check_int("number of states K", n, minimum=minimum)
    check_positive_number("rate", rate)


def sample_categorical(probs: torch.Tensor, generator: torch.Generator | None = None) -> torch.Tensor:
    """One draw per row of the last axis of ``probs`` (rows sum to 1): int64 of shape probs.shape[:-1].

    Inverse-CDF sampling with one uniform per row; rows need not be normalised exactly (the uniform
    is scaled by the row total). Used by the chains' exact forward draws and by the discrete samplers.
    """
    cdf = probs.cumsum(-1)
    u = torch.rand(probs.shape[:-1], dtype=probs.dtype, device=probs.device, generator=generator).unsqueeze(-1)
    u = u * cdf[..., -1:]
    return (cdf <= u).sum(-1).clamp_max(probs.shape[-1] - 1)
