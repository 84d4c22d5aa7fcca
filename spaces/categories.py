"""Sequences of L symbols from a finite alphabet of K states, noised by a continuous-time Markov chain.

Time schedule
-------------
Diffusion time runs over t in [0, 1]. Each position moves independently by
the chain with rate matrix Q (:mod:`heatwalk.kernels.ctmc`) run at the
time-dependent rate β(t) = 1 / ((1 - t)·gap), so the operational time is

    τ(t) = -log(1 - t) / gap,    P_t = exp(τ(t) Q),

where ``gap`` is Q's spectral gap. The slowest mode of the chain then decays
exactly as (1 - t): for the uniform and absorbing chains (gap 1)

    P_t = (1 - t) I + t · 1 πᵀ,

the "linear schedule" of masked diffusion (Sahoo et al. 2024, Shi et al.
2024), and at t = 1 every position has exactly the stationary law π, which is
the prior: uniform over the K states for ``process="uniform"``, the mask
state for ``process="absorbing"``, the stationary law of the given rates for
``process="rates"``. So the prior term of the ELBO vanishes at t_max = 1.

Measure: counting measure on the K^L sequences; ``log_kernel`` and
``prior_log_prob`` are natural-log probabilities (nats).

A finite set has no geometry (exp, log, tangent vectors, score): ``Categories``
is a :class:`~heatwalk.spaces.finite.FiniteStateSpace`, not a manifold, and its
"score" role is played by the network's x_0 probabilities through the reverse
rates. ``dist`` is the Hamming distance.
"""

from __future__ import annotations

import math

import torch

from heatwalk.errors import InputError
from heatwalk.checks import check_choice, check_int, check_positive_int
from heatwalk.kernels.ctmc import CTMC, DTYPE, check_rate_matrix, sample_categorical
from heatwalk.spaces.alphabet import (check_alphabet, check_state_names, encode_strings, shown_states,
                                      sorted_state_names)
from heatwalk.spaces.base import GivenPart, Option, generator_device, real_tensor
from heatwalk.spaces.finite import FiniteStateSpace

PROCESSES = ("uniform", "absorbing", "rates")
#: most states a space takes: the chain keeps dense K x K matrices (128 MB of float64 at this K), and each
#: sequence position costs the network K inputs and outputs
MAX_STATES = 4096
SEQUENCE_FORMATS = ("auto", "fasta", "text")


def _holds_text(x) -> bool:
    """Whether ``x`` is a name, or a (nested) list / array of names, rather than numbers."""
    while isinstance(x, (list, tuple)) and x:
        x = x[0]
    if hasattr(x, "dtype") and not isinstance(x, torch.Tensor):
        return x.dtype.kind in "OUS" and (x.size == 0 or isinstance(x.flat[0], str))
    return isinstance(x, str)


class Categories(FiniteStateSpace):
    """Sequences of ``L`` tokens, each one of ``K`` states; stored as int64 tensors of shape (n, L).

    Parameters
    ----------
    K : number of data states (>= 2)
    L : sequence length (>= 1)
    process : "uniform" (jump to a uniformly drawn state), "absorbing" (jump to an extra mask state,
        index K; network inputs then have K + 1 states) or "rates" (the chain with rate matrix
        ``rates``). Default: "rates" if ``rates`` is given, else "absorbing".
    rates : (K, K) rate matrix for ``process="rates"`` (off-diagonals >= 0, rows sum to 0, a unique
        stationary law); saved in :meth:`config`.
    alphabet : optional K distinct one-character symbols naming the states (saved with the model so
        samples can be written as text); state k is ``alphabet[k]``.
    variable_length : sequences of lengths 1 … L (see below).
    state_names : optional K distinct names of the states as a table writes them (any text without
        surrounding spaces, delimiters or quotes, e.g. residue names ``ALA`` … ``VAL``); saved with the
        model. A product read from a table builds its categories factors with them
        (:meth:`from_named_columns`), and its table cells then hold names, not codes. Fixed lengths only.

    Variable lengths
    ----------------
    With ``variable_length=True`` a sequence shorter than L is padded to L with an extra *end* state,
    index ``end_state`` = the number of symbols, so the space has K + 1 data states (``self.K``
    counts it; ``n_symbols`` does not). A valid point has at least one symbol and, after its first
    end state, only end states. Why an end state rather than a separate law of the length: the
    length becomes part of the sequence, so the one chain, objective, network and samplers model it
    jointly with the symbols, with no extra machinery, and the likelihood is that of the sequence and
    its length together (the model may give some mass to padded sequences with a symbol after an end
    state; on valid sequences its likelihood is then a lower bound), but none to the empty sequence: the
    x_0 support (:meth:`x0_support`) leaves out the end state at position 0. ``decode`` reads a sample up
    to its first end state.
    """

    kind = "categories"
    plot_kind = "sequences"
    reference_measure = "counting measure on sequences"
    file_options = (
        Option("sequence_format", str, "FASTA or one sequence per line", default="auto", choices=SEQUENCE_FORMATS),
        Option("alphabet", str, "the states as a string of symbols (default: those that occur, sorted)"),
        Option("length", int, "required sequence length (default: the first record's)", minimum=1),
        Option("uppercase", bool, "fold symbols to upper case"),
        Option("unknown_symbols", str, "symbols outside --alphabet: reject (naming record and column), drop (the "
               "record) or replace:X (by the symbol X)", default="reject", metavar="POLICY"),
        Option("stop_symbol", str, "a symbol removed from the end of each record that ends with it (e.g. '*' of "
               "translated proteins)", metavar="CHAR"),
    )
    build_options = (
        Option("process", str, "the forward chain: absorbing (masking) or uniform", default="absorbing",
               choices=("absorbing", "uniform")),
    )

    #: a table column of this space can hold the states by name (:meth:`from_named_columns`): a product read
    #: from a table takes categories factors
    table_states = True

    def __init__(self, K: int, L: int, process: str | None = None, rates=None, alphabet=None,
                 variable_length: bool = False, state_names=None):
        check_int("Categories: K (number of states)", K, minimum=2, maximum=MAX_STATES)
        check_positive_int("Categories: L (sequence length)", L)
        if not isinstance(variable_length, bool):
            raise InputError(f"Categories: variable_length must be True or False, got {variable_length!r}",
                             field="variable_length")
        self.n_symbols, self.variable_length = K, variable_length
        self.end_state = K if variable_length else None
        alphabet = check_alphabet(alphabet, K)
        if state_names is not None and variable_length:
            raise InputError("Categories: state_names name the states of table columns, which have a fixed length; "
                             "pass variable_length=False", field="state_names")
        self.state_names = check_state_names(state_names, K)
        K = K + 1 if variable_length else K
        if process is None:
            # absorbing (masking) by default: on every source we measured its ELBO is far tighter than the
            # uniform chain's after the same training (benchmarks/discrete_elbo.py)
            process = "absorbing" if rates is None else "rates"
        check_choice("Categories: process", process, PROCESSES)
        if (process == "rates") != (rates is not None):
            raise InputError("Categories: pass rates exactly when process='rates' "
                             f"(got process={process!r}, rates {'given' if rates is not None else 'missing'})",
                             field="rates")
        self.K, self.L, self.process = K, L, process
        self.alphabet = alphabet
        self._rates = None
        if process == "uniform":
            self.chain = CTMC.uniform(K)
        elif process == "absorbing":
            self.chain = CTMC.absorbing(K)
        else:
            q = check_rate_matrix(rates)
            if q.shape != (K, K):
                raise InputError(f"Categories: rates must be a ({K}, {K}) matrix for K = {K}, got {q.shape}",
                                 field="rates")
            self._rates = q.tolist()
            self.chain = CTMC(q)
        self.n_states = self.chain.n_states          # K, or K + 1 with the mask state
        self.mask_state = K if process == "absorbing" else None
        self.stationary = self.chain.stationary      # the prior law of one position
        self.ambient_shape = (L,)

    @property
    def capabilities(self) -> frozenset[str]:
        return super().capabilities | ({"variable_length"} if self.variable_length else set())

    @classmethod
    def from_alphabet(cls, alphabet, length: int, variable_length: bool = False, **build_options) -> "Categories":
        """The space of sequences of (at most, with ``variable_length``) ``length`` symbols of ``alphabet``."""
        return cls(len(alphabet), length, alphabet="".join(alphabet), variable_length=variable_length,
                   **build_options)

    @classmethod
    def from_named_columns(cls, columns, **build_options) -> "Categories":
        """The space of the named states in ``columns`` (L sequences of text cells, one per table column, each
        of one length n): ``state_names`` the distinct names over all of them, sorted
        (:func:`~heatwalk.spaces.alphabet.sorted_state_names`), K their number (≥ 2), L the number of columns."""
        columns = [[str(v) for v in c] for c in columns]
        if not columns:
            raise InputError("categories: no columns of named states", field="factors")
        names = sorted_state_names(v for c in columns for v in c)
        if len(names) < 2:
            raise InputError(f"categories: the columns hold {len(names)} distinct state name(s) "
                             f"{', '.join(map(repr, names))}; a categorical factor needs at least 2", field="factors")
        return cls(len(names), len(columns), state_names=names, **build_options)

    def config(self) -> dict:
        out = {"kind": "categories", "K": self.n_symbols, "L": self.L, "process": self.process,
               "rates": self._rates, "alphabet": None if self.alphabet is None else "".join(self.alphabet)}
        if self.variable_length:
            out["variable_length"] = True
        if self.state_names is not None:
            out["state_names"] = list(self.state_names)
        return out

    def column_states(self, **options) -> dict[int, tuple[str, ...]]:
        """Every column holds a position's state by name when the space has ``state_names`` (else codes)."""
        self.check_file_options(options)
        return {} if self.state_names is None else {j: self.state_names for j in range(self.L)}

    def lengths(self, x: torch.Tensor) -> torch.Tensor:
        """Sequence lengths (n,): the position of the first end state, or L."""
        if self.end_state is None:
            return torch.full((x.shape[0],), self.L, dtype=torch.int64, device=x.device)
        end = x == self.end_state
        return torch.where(end.any(-1), end.int().argmax(-1), torch.full_like(x[:, 0], self.L)).long()

    # ----- text <-> codes ------------------------------------------------------------------------
    def encode(self, strings) -> torch.Tensor:
        """List of strings over ``alphabet`` -> validated codes (n, L) (padded with the end state if variable)."""
        if self.alphabet is None:
            raise InputError("Categories.encode needs an alphabet; pass alphabet=... to Categories", field="alphabet")
        return self.validate(encode_strings(list(strings), self.alphabet, length=self.L, end=self.end_state))

    def decode(self, x: torch.Tensor) -> list[str]:
        """Codes (n, L) -> strings over ``alphabet``, each read up to its first end state."""
        if self.alphabet is None:
            raise InputError("Categories.decode needs an alphabet; pass alphabet=... to Categories", field="alphabet")
        x = torch.as_tensor(x).cpu()  # cpu: decoded to text on the CPU
        if x.dim() != 2 or x.shape[1] != self.L or x.is_floating_point():
            raise InputError(f"sequences: expected integer codes of shape (n, {self.L}), got {tuple(x.shape)}")
        out = []
        for row, n in zip(x.tolist(), self.lengths(x).tolist()):
            bad = [k for k in row[:n] if not 0 <= k < self.n_symbols]
            if bad:
                raise InputError(f"sequences: code {bad[0]} is not a symbol of the alphabet", field="x")
            out.append("".join(self.alphabet[k] for k in row[:n]))
        return out

    # ----- validation, file rows -------------------------------------------------------------------
    def validate(self, x) -> torch.Tensor:
        """Return ``x`` as int64 codes (n, L) in [0, K); accepts integer-valued floats, and with ``state_names``
        the names themselves (:meth:`codes_of_names`).

        Raises :class:`InputError` naming the first bad row and position.
        """
        if self.state_names is not None and _holds_text(x):
            x = self.codes_of_names(x)
        # cpu: a tensor keeps its device; other input is read on the CPU
        t = real_tensor(x, "sequences", dtype=None, expected="integer state codes")
        if t.dim() == 1 and t.shape[0] == self.L:
            t = t.unsqueeze(0)
        if t.dim() != 2 or t.shape[1] != self.L:
            raise InputError(f"sequences: expected shape (n, {self.L}), got {tuple(t.shape)}")
        if t.shape[0] == 0:
            raise InputError(f"sequences: no points (an empty array of shape {tuple(t.shape)})")
        if t.is_floating_point():
            bad = ~torch.isfinite(t) | (t != torch.round(t))
            if bool(bad.any()):
                i, j = map(int, bad.nonzero()[0])
                raise InputError(f"row {i}, position {j}: {float(t[i, j])!r} is not an integer state code",
                                 row=i, field=str(j))
        # range checked in the input's own dtype, so a float 1e20 or an unsigned 2^63 is reported as itself
        bad = (t < 0) | (t >= self.K)
        if bool(bad.any()):
            i, j = map(int, bad.nonzero()[0])
            v = t[i, j].item()
            shown = int(v) if abs(v) < 2**53 else v
            raise InputError(f"row {i}, position {j}: state {shown} is outside [0, {self.K})",
                             row=i, field=str(j))
        t = t.to(torch.int64)
        if self.end_state is not None:
            self._check_ends(t)
        return t

    def codes_of_names(self, names) -> torch.Tensor:
        """Codes (n, L) of state names: rows of L names, or with L = 1 one name per point (a single name is one
        point); a name outside ``state_names`` is refused naming its row and position."""
        if self.state_names is None:
            raise InputError(f"{self!r} has no state_names: give integer state codes", field="x")
        if isinstance(names, str):
            names = [names]
        rows = [[v] if isinstance(v, str) and self.L == 1 else v for v in names]
        if self.L > 1 and rows and all(isinstance(v, str) for v in rows):
            rows = [rows]                                      # one point: L names
        index = {name: k for k, name in enumerate(self.state_names)}
        codes = []
        for i, row in enumerate(rows):
            if isinstance(row, str) or len(row) != self.L:
                raise InputError(f"row {i}: expected {self.L} state names, got {row!r}", row=i)
            for j, v in enumerate(row):
                if v not in index:
                    raise InputError(f"row {i}, position {j}: {v!r} is not one of the states "
                                     f"{shown_states(self.state_names)}", row=i, field=str(j))
            codes.append([index[v] for v in row])
        # cpu: names are parsed on the CPU
        return torch.tensor(codes, dtype=torch.int64)

    def _check_ends(self, t: torch.Tensor) -> None:
        end = t == self.end_state
        after = end.cumsum(-1) > 0                                   # at or after the first end state
        bad = after & ~end
        if bool(bad.any()):
            i, j = map(int, bad.nonzero()[0])
            raise InputError(f"row {i}, position {j}: a symbol after the end of the sequence", row=i, field=str(j))
        empty = end[:, 0]
        if bool(empty.any()):
            i = int(empty.nonzero()[0, 0])
            raise InputError(f"row {i}: an empty sequence (length 0)", row=i)

    def from_rows(self, rows, **options) -> torch.Tensor:
        """A table of integer state codes (n, L)."""
        self.check_file_options(options)
        return self.validate(rows)

    def to_rows(self, x, **options):
        self.check_file_options(options)
        return x

    def column_names(self, **options) -> list[str]:
        self.check_file_options(options)
        return [f"pos{i}" for i in range(self.L)]

    # ----- fixed positions -------------------------------------------------------------------------
    def given_part(self, given: dict, n: int):
        """``given={position: state}``: a state code in [0, K), a symbol of the alphabet or a name of
        ``state_names``, one or one per sample."""
        if not isinstance(given, dict) or not given:
            raise InputError(f"given: expected a non-empty dict {{position: state(s)}}, got {given!r}", field="given")
        # cpu: fixed values are parsed on the CPU; Conditioning.to moves them
        mask = torch.zeros(self.L, dtype=torch.bool)
        values = torch.zeros(n, self.L, dtype=torch.int64)  # cpu: as above
        for pos, value in given.items():
            if isinstance(pos, bool) or not isinstance(pos, int) or not 0 <= pos < self.L:
                raise InputError(f"given: position {pos!r} does not exist in {self!r} (positions 0 … {self.L - 1})",
                                 field="given")
            codes = self._given_codes(pos, value)
            if codes.numel() not in (1, n):
                raise InputError(f"given: position {pos} has {codes.numel()} states; give one or one per sample "
                                 f"({n})", field="given")
            mask[pos] = True
            values[:, pos] = codes.expand(n)
        if bool(mask.all()):
            raise InputError(f"given: every position of {self!r} is fixed; nothing is left to sample", field="given")
        return GivenPart(mask=mask, values=values)

    def _given_codes(self, pos: int, value) -> torch.Tensor:
        items = [value] if isinstance(value, (str, int)) or (isinstance(value, torch.Tensor) and value.dim() == 0) \
            else list(value)
        codes = []
        for v in items:
            if isinstance(v, str) and self.state_names is not None:
                if v not in self.state_names:
                    raise InputError(f"given: position {pos}: {v!r} is not one of the states "
                                     f"{shown_states(self.state_names)}", field="given")
                codes.append(self.state_names.index(v))
            elif isinstance(v, str):
                if self.alphabet is None or v not in self.alphabet:
                    raise InputError(f"given: position {pos}: symbol {v!r} is not in the alphabet "
                                     f"{''.join(self.alphabet or [])!r}", field="given")
                codes.append(self.alphabet.index(v))
            else:
                k = int(v) if not isinstance(v, bool) and float(v) == int(v) else -1
                if not 0 <= k < self.K:
                    raise InputError(f"given: position {pos}: state {v!r} is not a state code in [0, {self.K})",
                                     field="given")
                codes.append(k)
        # cpu: fixed values are parsed on the CPU; Conditioning.to moves them
        return torch.tensor(codes, dtype=torch.int64)

    def replace_given(self, x, part, t, generator=None, final: bool = False):
        """Absorbing chain: the given tokens stay unmasked at every time (exact); otherwise the forward redraw."""
        if final or self.mask_state is not None:
            return torch.where(part.mask, part.values, x)
        return super().replace_given(x, part, t, generator)

    def random_uniform(self, n, generator=None):
        """Uniform sequences: L uniform states (variable lengths: a length with probability ∝ K^l, then symbols)."""
        device = generator_device(generator)
        if self.end_state is None:
            return torch.randint(self.K, (n, self.L), generator=generator, device=device)
        k = self.n_symbols
        logw = torch.arange(1, self.L + 1, dtype=DTYPE, device=device) * math.log(k)
        length = 1 + torch.multinomial(torch.softmax(logw, 0), n, replacement=True, generator=generator)
        x = torch.randint(k, (n, self.L), generator=generator, device=device)
        return torch.where(torch.arange(self.L, device=device) < length.unsqueeze(-1), x, self.end_state)

    @property
    def log_volume(self) -> float:
        """log of the number of sequences: L log K, or log Σ_{l=1..L} K^l for variable lengths."""
        if self.end_state is None:
            return self.L * math.log(self.K)
        k = self.n_symbols
        return float(torch.logsumexp(torch.arange(1, self.L + 1, dtype=DTYPE) * math.log(k), 0))  # cpu: a number

    def dist(self, x, y):
        """Hamming distance: number of positions where the sequences differ."""
        return (x != y).sum(-1)

    # ----- network features ------------------------------------------------------------------------
    @property
    def embed_dim(self) -> int:
        return self.L * self.n_states

    def embed(self, x):
        """One-hot float64 features of shape (..., L * n_states) (n_states includes the mask state)."""
        return torch.nn.functional.one_hot(x, self.n_states).to(DTYPE).flatten(start_dim=-2)

    # ----- the forward chain --------------------------------------------------------------------------
    @property
    def time_range(self) -> tuple[float, float]:
        # t_max = 1: the law is exactly the prior. t_min = 1e-3: the reconstruction term of the ELBO
        # covers the last 0.1% of corruption (about L/1000 corrupted positions).
        return (1e-3, 1.0)

    def _time(self, t) -> torch.Tensor:
        # cpu: a tensor keeps its device; a plain number is a CPU scalar
        t = torch.as_tensor(t, dtype=DTYPE)
        if torch.isnan(t).any() or (t < 0).any() or (t > 1).any():
            bad = t[torch.isnan(t) | (t < 0) | (t > 1)].flatten()[0]
            raise InputError(f"Categories: diffusion time must lie in [0, 1], got {float(bad)}", field="t")
        return t

    def operational_time(self, t) -> torch.Tensor:
        """τ(t) = -log(1 - t) / gap (inf at t = 1)."""
        return -torch.log1p(-self._time(t)) / self.chain.spectral_gap

    def transition(self, t) -> torch.Tensor:
        """P_t = exp(τ(t) Q): shape (*t.shape, n_states, n_states); P_t[a, b] = Pr(x_t = b | x_0 = a)."""
        return self.chain.transition(self.operational_time(t))

    def transition_between(self, s, t) -> torch.Tensor:
        """Pr(x_t = b | x_s = a) for s <= t: exp((τ(t) - τ(s)) Q)."""
        ts, tt = self.operational_time(s), self.operational_time(t)
        if (ts > tt).any():
            raise InputError("Categories.transition_between: need s <= t", field="s")
        d = torch.where(torch.isinf(tt) & torch.isinf(ts), torch.zeros_like(tt), tt - ts)
        return self.chain.transition(d)

    def rates(self, t) -> torch.Tensor:
        """Forward rate matrix at time t, β(t) Q with β(t) = dτ/dt = 1 / ((1 - t) gap): (*t.shape, n, n)."""
        t = self._time(t)
        beta = 1.0 / ((1.0 - t) * self.chain.spectral_gap)
        return beta[..., None, None] * self.chain.on("rates", t.device)

    def _sample_forward(self, x0, t, generator=None):
        """Exact draw of x_t | x_0, independently at each position: (n, L) int64 in [0, n_states)."""
        p = self.transition(t)  # (n, S, S)
        probs = torch.gather(p, 1, x0.unsqueeze(-1).expand(-1, -1, self.n_states))  # (n, L, S)
        return sample_categorical(probs, generator)

    def _log_kernel(self, xt, x0, t):
        """log Pr(x_t | x_0) summed over positions, nats (counting measure); -inf where impossible."""
        p = self.transition(t)
        rows = torch.gather(p, 1, x0.unsqueeze(-1).expand(-1, -1, self.n_states))
        return torch.log(torch.gather(rows, 2, xt.unsqueeze(-1)).squeeze(-1)).sum(-1)

    def _x0_support(self, xt, t) -> torch.Tensor:
        """(n, L, K) bool: data states a with Pr(x_t | x_0 = a) > 0 at each position; with variable lengths
        never the end state at position 0 (a valid point has at least one symbol)."""
        p = self.transition(t)[:, : self.K, :]  # (n, K, S)
        support = torch.gather(p, 2, xt.unsqueeze(1).expand(-1, self.K, -1)).transpose(1, 2) > 0
        if self.end_state is not None:
            support[:, 0, self.end_state] = False
        return support

    def _posterior(self, xt, x0_probs, s, t) -> torch.Tensor:
        """q(x_s | x_t) = Σ_a p(a) q(x_s | x_t, x_0 = a) at each position, for s < t: (n, L, n_states).

        ``x0_probs`` (n, L, K) are probabilities of the data states of x_0 (e.g. a network's
        prediction); states inconsistent with x_t (Pr(x_t | a) = 0) must carry zero mass. By
        Bayes, q(x_s = v | x_t, a) = P_{s→t}[v, x_t] P_s[a, v] / P_t[a, x_t].
        """
        ps = self.transition(s)[:, : self.K, :]            # (n, K, S)
        pt = self.transition(t)[:, : self.K, :]            # (n, K, S)
        pst = self.transition_between(s, t)                # (n, S, S)
        pt_x = torch.gather(pt, 2, xt.unsqueeze(1).expand(-1, self.K, -1)).transpose(1, 2)  # (n, L, K)
        if bool(((x0_probs > 0) & (pt_x == 0)).any()):
            raise InputError("posterior: x0_probs put mass on states that cannot have produced x_t", field="x0_probs")
        w = torch.where(pt_x > 0, x0_probs / torch.where(pt_x > 0, pt_x, 1.0), 0.0)  # (n, L, K)
        back = torch.gather(pst, 2, xt.unsqueeze(1).expand(-1, self.n_states, -1)).transpose(1, 2)  # (n, L, S)
        return back * (w @ ps)

    def _log_reverse_rates(self, xt, log_x0_probs, t) -> torch.Tensor:
        """log of the reverse-time jump rates at time t, for each position and target state: (n, L, n_states).

        The time reversal of the chain jumps at position l from x_l to v at rate
        R_t(v → x_l) Σ_a p(a) P_t[a, v] / P_t[a, x_l] (Campbell et al. 2022, eq. 4, with the
        x_0-prediction parametrisation), where p = exp(log_x0_probs) over the K data states;
        states a with P_t[a, x_l] = 0 are excluded. -inf where no jump is possible (and at v = x_l).
        """
        tt = t
        lp = torch.log(self.transition(tt)[:, : self.K, :])                         # (n, K, S)
        lp_x = torch.gather(lp, 2, xt.unsqueeze(1).expand(-1, self.K, -1)).transpose(1, 2)  # (n, L, K)
        ninf = torch.tensor(-math.inf, dtype=DTYPE, device=xt.device)
        ok_a = torch.isfinite(lp_x) & torch.isfinite(log_x0_probs)                   # (n, L, K)
        base = torch.where(ok_a, log_x0_probs, 0.0) - torch.where(ok_a, lp_x, 0.0)   # finite everywhere
        ok_v = torch.isfinite(lp).unsqueeze(1) & ok_a.unsqueeze(-1)                   # (n, 1|L, K, S)
        terms = torch.where(ok_v, base.unsqueeze(-1) + torch.where(torch.isfinite(lp), lp, 0.0).unsqueeze(1), ninf)
        ratio = torch.logsumexp(terms, dim=2)                                        # (n, L, S)
        r = self.rates(tt)                                                           # (n, S, S): r[v, x]
        into = torch.gather(r, 2, xt.unsqueeze(1).expand(-1, self.n_states, -1)).transpose(1, 2)  # R(v -> x_l)
        jump = (into > 0) & torch.isfinite(ratio)
        jump = jump & (torch.arange(self.n_states, device=xt.device) != xt.unsqueeze(-1))
        return torch.where(jump, torch.log(torch.where(jump, into, 1.0)) + torch.where(jump, ratio, 0.0), ninf)

    def _closed_form_integrand(self, xt, x0, log_x0_probs, t):
        """Absorbing chain: (1/t) Σ_{l: x_t,l = mask} −log p_θ(x_0,l | x_t), nats per unit time; else None.

        With masking probability 1 − α_t = t (α_t = e^{−τ(t)} = 1 − t) a masked position jumps back
        to the data state v at the model rate r_θ = R_t(v → mask) p_θ(v) P_t[v, v] / P_t[v, mask]
        = p_θ(v) / t, the exact rate is 1[v = x_0,l] / t, and an unmasked position never jumps. Summed
        over v, r_θ − r + r log(r / r_θ) is then −log p_θ(x_0,l | x_t) / t at a masked position and
        0 elsewhere: the weight −α'_t / (1 − α_t) = 1/t times the cross-entropy on the masked
        positions (the masked-diffusion ELBO of Sahoo et al. 2024, eq. 10, and Shi et al. 2024,
        eq. 5, with the linear schedule). It equals the general rates expression for every x_t.
        """
        if self.mask_state is None:
            return None
        masked = xt == self.mask_state
        nll = -torch.gather(log_x0_probs, 2, x0.unsqueeze(-1)).squeeze(-1)          # (n, L)
        return torch.where(masked, nll, 0.0).sum(-1) / t

    def _prior_kl(self, x0, t) -> torch.Tensor:
        """Σ_l KL(P_t[x0_l, ·] || π) in nats: the prior term of the ELBO (0 at t = 1). Shape (n,)."""
        p = self.transition(t)
        rows = torch.gather(p, 1, x0.unsqueeze(-1).expand(-1, -1, self.n_states))  # (n, L, S)
        pi = self.chain.on("stationary", x0.device)
        with torch.no_grad():
            if bool(((rows > 0) & (pi == 0)).any()):
                return torch.full((x0.shape[0],), math.inf, dtype=DTYPE, device=x0.device)
        logratio = torch.where(rows > 0, torch.log(torch.where(rows > 0, rows, 1.0) / torch.where(pi > 0, pi, 1.0)), 0.0)
        return (rows * logratio).sum((-1, -2))

    def prior_sample(self, n, generator=None):
        """x_1 ~ π at each position (uniform states, or all mask for the absorbing chain)."""
        pi = self.chain.on("stationary", generator_device(generator))
        return sample_categorical(pi.expand(n, self.L, self.n_states), generator)

    def prior_log_prob(self, x):
        lp = torch.log(self.chain.on("stationary", x.device))
        return lp[x].sum(-1)
