"""Cache of the real-data benchmark's mixture baseline, so that a run which changes only heatwalk reuses it.

One file, ``benchmarks/results/real_data_baselines.json``, holds per data set the mixture's
per-point held-out log-density (nats, the space's reference measure), its BIC choice and table,
its fit seconds and its MMD result. An entry is keyed by a SHA-256 of everything the mixture's
result depends on: the data set name, the bytes of the training and held-out points (so the
split and any subsampling), the mode's settings that the baseline reads (k_max, restarts,
n_mmd, n_perm), the seed, and the source text of ``mixtures.py``. Any change to one of them gives
another key, so a stale entry is never used.

Filling an entry from a saved full run (``replay_chosen_k``): ``mixtures.fit_by_bic`` draws the
initial components of every EM run from one generator seeded once, and EM uses that generator
only in ``family.init``. Replaying those draws for k < k* (without running EM) and running EM
only at the k* that BIC chose reproduces the chosen fit exactly; the replay is checked against
the total log-likelihood that the saved run recorded for k* (relative tolerance 1e-9, float64
sums of the same terms in the same order) and refused when it differs.
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path

import numpy as np

import mixtures

CACHE = Path(__file__).resolve().parent / "results" / "real_data_baselines.json"
#: the settings of a mode that the mixture baseline reads
BASELINE_SETTINGS = ("k_max", "restarts", "n_mmd", "n_perm")
#: relative agreement required between a replayed k* fit and the saved run's log-likelihood
REPLAY_RTOL = 1e-9


def _tensor_bytes(t) -> bytes:
    a = np.ascontiguousarray(t.detach().cpu().numpy() if hasattr(t, "detach") else np.asarray(t))
    return f"{a.dtype}{a.shape};".encode() + a.tobytes()


def baseline_key(name: str, train, held, cfg: dict, seed: int) -> str:
    """SHA-256 of the data set, its points, the baseline's settings, the seed and mixtures.py."""
    h = hashlib.sha256()
    h.update(name.encode())
    h.update(_tensor_bytes(train))
    h.update(_tensor_bytes(held))
    h.update(json.dumps({k: cfg[k] for k in BASELINE_SETTINGS} | {"seed": seed}, sort_keys=True).encode())
    h.update(Path(mixtures.__file__).read_bytes())
    return h.hexdigest()


def load(path: Path = CACHE) -> dict:
    return json.loads(path.read_text()) if path.is_file() else {}


def store(key: str, entry: dict, path: Path = CACHE) -> None:
    """Add one entry (atomic rewrite of the file)."""
    table = load(path)
    table[key] = entry
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(json.dumps(table) + "\n")
    os.replace(tmp, path)


def replay_chosen_k(family, x, k_max: int, seed: int, restarts: int, k_star: int, saved_loglik: float) -> dict:
    """The fit ``mixtures.fit_by_bic(family, x, k_max, seed, restarts)`` kept at ``k_star`` (module docstring)."""
    if not 1 <= k_star <= k_max:
        raise ValueError(f"chosen k {k_star} is outside 1..{k_max}")
    rng = np.random.default_rng(seed)
    for k in range(1, k_star):
        for _ in range(restarts if k > 1 else 1):
            family.init(x, k, rng)  # the only draws EM makes
    fits = [mixtures.em(family, x, k_star, rng) for _ in range(restarts if k_star > 1 else 1)]
    p, logw, ll = max(fits, key=lambda f: f[2])
    if abs(ll - saved_loglik) > REPLAY_RTOL * abs(saved_loglik):
        raise RuntimeError(f"replayed k = {k_star} fit has log-likelihood {ll!r}, the saved run {saved_loglik!r}: "
                           f"not the same fit (data or code differ); run the full BIC search instead")
    return {"k": k_star, "params": p, "logw": logw, "loglik": ll}
