"""The library reproduces the fixed-seed golden values recorded before the protocol redesign.

Reference: ``tests/golden/golden.npz``, written by ``tests/golden/golden_values.py``
from the code as it stood before the redesign (commit history). Everything must
match within the rounding that differs between CPUs (the tolerances below, with the
figures they rest on), except where a stated reordering of floating-point operations
changed more (listed in ``ROUNDING`` with the reason and tolerance).

Regenerated since: the ``cat_absorbing/`` keys only (the fit and ELBO of the absorbing chain), when the
discrete objective stopped sending reconstruction rows whose x_0 is determined (no masked position)
through the network. Their term is 0 and their gradient 0 exactly, but the float32 network then sees a
different batch and rounds differently: weights moved by <= 6e-8, except the attention key bias, whose
exact gradient is 0 and whose rounding noise Adam scales up to steps of lr (moved by 8e-4); the ELBO
moved by 1.3e-7. (The closed-form masked integrand alone left the weights bit for bit and moved the
ELBO by 2e-15.) Every other key is as recorded before the redesign.
"""

import numpy as np
import pytest

from golden.golden_values import GOLDEN_FILE, compute_golden

#: Tolerances, relative to the largest magnitude of each recorded array (|got - want| <= tol * max |want|,
#: elementwise; NaN and infinities must match exactly; integer arrays exactly). Bit-for-bit equality held on
#: the machine that recorded the values but not across CPUs: on another Xeon (2026-12-02) the float64
#: closed forms came back within 1.3e-13 of that scale (libm's exp/log and BLAS kernels round differently),
#: the float32 network's weights after 40 Adam steps within 1.7e-7, its samples within 1.1e-6 and
#: log-likelihoods within 1.5e-7. The tolerances leave a margin of about 10x over those figures.
CLOSED_FORM_TOLERANCE = 1e-11
#: key parts that come through a trained float32 network: weights, samples, likelihoods, ELBOs
NETWORK_PARTS = ("/weights/", "/samples", "/log_prob_", "/elbo")
NETWORK_TOLERANCE = 1e-5
#: the key third of an attention layer's input bias: softmax is invariant to it, so its exact gradient is 0
#: and what Adam makes of the rounding noise differs by CPU (up to 19% of the bias's scale seen); the query
#: and value thirds are compared at NETWORK_TOLERANCE, the key third not at all
KEY_BIAS = "self_attn.in_proj_bias"

#: key prefix -> (tolerance, reason) where a change of the code moved values beyond the tolerances above
ROUNDING: dict[str, tuple[float, str]] = {
    # after the redesign: the S² kernel was rewritten for speed (fewer quadrature nodes chosen by t, grouped by
    # method); its values agree with the old ones to 3e-15, and the adaptive ODE then takes slightly different
    # steps (log-likelihoods differ by up to 1.5e-7, within its tolerance rtol=1e-4)
    "sphere2/": (1e-6, "S² kernel rewritten for speed"),
}


def tolerance(key: str) -> float:
    for prefix, (tol, _) in ROUNDING.items():
        if key.startswith(prefix):
            return max(tol, NETWORK_TOLERANCE if any(p in key for p in NETWORK_PARTS) else tol)
    return NETWORK_TOLERANCE if any(p in key for p in NETWORK_PARTS) else CLOSED_FORM_TOLERANCE


def compared(key: str, want: np.ndarray, got: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The parts of an array that are compared (all of it, except the key third of an attention bias)."""
    if KEY_BIAS in key:
        n = want.shape[0] // 3
        return np.concatenate([want[:n], want[2 * n:]]), np.concatenate([got[:n], got[2 * n:]])
    return want, got


def agrees(key: str, want: np.ndarray, got: np.ndarray) -> bool:
    if want.dtype.kind != "f":
        return np.array_equal(want, got)
    want, got = compared(key, want, got)
    if not np.array_equal(np.isfinite(want), np.isfinite(got)) or \
            not np.array_equal(want[~np.isfinite(want)], got[~np.isfinite(want)], equal_nan=True):
        return False
    fin = np.isfinite(want)
    if not fin.any():
        return True
    scale = np.abs(want[fin]).max()
    return bool(np.all(np.abs(got[fin] - want[fin]) <= tolerance(key) * scale))


@pytest.fixture(scope="module")
def values():
    return compute_golden()


def test_golden_values_unchanged(values):
    golden = np.load(GOLDEN_FILE)
    assert sorted(golden.files) == sorted(values), "the set of recorded values changed"
    mismatched = []
    for key in golden.files:
        want, got = golden[key], values[key]
        assert want.shape == got.shape, key
        if not agrees(key, want, got):
            w, g = compared(key, want, got)
            diff = np.nanmax(np.abs(np.where(np.isfinite(w), w - g, 0))) if w.dtype.kind == "f" else "int"
            mismatched.append(f"{key} (max abs diff {diff})")
    assert not mismatched, "changed: " + "; ".join(mismatched)


def test_the_comparison_notices_a_change_beyond_its_tolerance():
    """The tolerances are not so loose that a real change passes (a closed form moved by 1e-9 of its scale,
    a network weight by 1e-4, a NaN appearing)."""
    x = np.linspace(-2.0, 3.0, 11)
    assert agrees("so3/forward", x, x + 1e-13) and not agrees("so3/forward", x, x + 3e-9)
    assert agrees("so3/weights/net.0.weight", x, x * (1 + 1e-6)) and not agrees("so3/weights/net.0.weight", x, x + 3e-4)
    y = x.copy()
    y[3] = np.nan
    assert not agrees("so3/forward", x, y) and agrees("so3/forward", y, y.copy())
    b = np.arange(9, dtype=float)
    moved_key = b.copy()
    moved_key[3:6] += 0.5
    moved_value = b.copy()
    moved_value[7] += 0.5
    name = "cat_uniform/weights/encoder.layers.0.self_attn.in_proj_bias"
    assert agrees(name, b, moved_key) and not agrees(name, b, moved_value)
