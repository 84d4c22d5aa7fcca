"""Turn a stated failure rate into the threshold of a statistical check (common practice, as in torch's tests).

A statistical test of a correct implementation still fails with some probability. Each check states
that probability (its *failure rate*) and gets its threshold from it, so the rate is written down once:

- ``sigma_threshold(rate)``: z with P(|Z| > z) = rate for a standard normal Z (a two-sided check of
  an estimate against its standard error); ``sigma_threshold(2e-9)`` ≈ 6.0, ``(6e-7)`` ≈ 5.0,
  ``(6e-5)`` ≈ 4.0, ``(3e-3)`` ≈ 3.0. With ``checks=k`` the rate is shared by k checks (Bonferroni).
- ``p_value_threshold(rate)``: the p-value below which a test with exact p-values (scipy's kstest,
  chisquare) is declared failed, shared by ``checks`` checks.

Source of the normal quantile: scipy.stats.norm.isf.
"""

from __future__ import annotations

import scipy.stats


def sigma_threshold(failure_rate: float, checks: int = 1) -> float:
    """z with P(|Z| > z) = failure_rate / checks, Z standard normal."""
    if not 0 < failure_rate < 1 or checks < 1:
        raise ValueError(f"failure_rate must be in (0, 1) and checks >= 1, got {failure_rate}, {checks}")
    return float(scipy.stats.norm.isf(failure_rate / checks / 2))


def p_value_threshold(failure_rate: float, checks: int = 1) -> float:
    """p-value threshold giving a total failure rate ``failure_rate`` over ``checks`` exact tests."""
    if not 0 < failure_rate < 1 or checks < 1:
        raise ValueError(f"failure_rate must be in (0, 1) and checks >= 1, got {failure_rate}, {checks}")
    return failure_rate / checks
