"""Finite-result checks: a NaN or an infinity is never handed back as a sample, a likelihood or a loss.

Each check raises an :class:`InputError` subclass naming what was not finite,
how much of it, and the likely causes, so the command line reports it as one
line and writes nothing.
"""

from __future__ import annotations

from contextlib import contextmanager

import torch

from heatwalk.errors import InputError


class NonFiniteResult(InputError):
    """Samples or log-likelihoods came out NaN or infinite (an under-trained model, corrupted weights, …)."""


class TrainingDiverged(InputError, FloatingPointError):
    """The training loss became NaN or infinite; also a :class:`FloatingPointError`, as it was before."""


def _bad_rows(x, n: int) -> torch.Tensor:
    """Rows of a batch (a tensor or a tuple of factor tensors) with a NaN or infinite entry."""
    bad = torch.zeros(n, dtype=torch.bool)  # cpu: a flag per row, reduced on the CPU
    for part in x if isinstance(x, (tuple, list)) else (x,):
        if isinstance(part, torch.Tensor) and (part.is_floating_point() or part.is_complex()):
            bad |= ~torch.isfinite(part.reshape(n, -1)).all(dim=1).cpu()
    return bad


def check_finite_samples(x, n: int, sampler: str, steps: int, others: list[str] = ()):
    """Return samples ``x`` (n points) if every coordinate is finite, else raise :class:`NonFiniteResult`."""
    bad = _bad_rows(x, n)
    k = int(bad.sum())
    if k:
        alt = f" or another sampler ({', '.join(others)})" if others else ""
        raise NonFiniteResult(
            f"sampling gave {k} of {n} samples with NaN or infinite coordinates (sampler {sampler!r}, {steps} steps; "
            f"first bad sample {int(bad.nonzero()[0, 0])}); likely causes: an under-trained model (fit more steps), "
            f"corrupted weights, or a sampler unstable for this model (try more steps{alt})", field="samples")
    return x


def check_finite_log_prob(result: dict, what: str = "log-likelihood") -> dict:
    """Return ``result`` if its ``"log_prob"`` entries are all finite, else raise :class:`NonFiniteResult`."""
    lp = torch.as_tensor(result["log_prob"]).cpu()  # cpu: checked on the CPU
    bad = ~torch.isfinite(lp.reshape(-1))
    k = int(bad.sum())
    if k:
        i = int(bad.nonzero()[0, 0])
        raise NonFiniteResult(
            f"the {what} is NaN or infinite at {k} of {bad.numel()} points (first: point {i}, value "
            f"{float(lp.reshape(-1)[i])}); likely causes: an under-trained model, corrupted weights, or points far "
            f"outside the data the model was fitted to", row=i, field="log_prob")
    return result


@contextmanager
def arithmetic_failures_as_input_errors(what: str):
    """Turn a :class:`FloatingPointError` raised while computing ``what`` (e.g. by the ODE solver) into
    :class:`NonFiniteResult` naming the likely causes."""
    try:
        yield
    except NonFiniteResult:
        raise
    except FloatingPointError as e:
        raise NonFiniteResult(f"the {what} could not be computed ({e}); likely causes: an under-trained model, "
                              f"corrupted weights, or points far outside the data the model was fitted to") from None


def check_finite_loss(value: float, step: int, lr: float) -> float:
    """Return a finite training loss, else raise :class:`TrainingDiverged` naming the step and the learning rate."""
    if value != value or value in (float("inf"), float("-inf")):
        raise TrainingDiverged(
            f"training diverged: the loss became {value} at step {step}; the likely cause is too large a learning "
            f"rate (lr = {lr:g}): lower it, e.g. to {lr / 10:g}", field="lr")
    return value
