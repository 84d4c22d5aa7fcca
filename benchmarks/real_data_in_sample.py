"""In-sample against held-out: does heatwalk fit the real data's training points better than the mixture?

    python benchmarks/real_data_in_sample.py [--data torus] [--n-train 3000] [--out FILE] [--progress]

For one data set of ``benchmarks/real_data.py`` (full mode) this fits heatwalk as that benchmark does
(``heatwalk.fit(space, train, seed=0)``, defaults, one torch thread) and refits the benchmark's mixture by
replaying the BIC choice recorded in ``--replay-from`` (``baseline_cache.replay_chosen_k``, checked against
the recorded log-likelihood), then reports the paired heatwalk − mixture NLL per point on ``--n-train``
training points drawn at random (numpy seed 0) and on the whole held-out set. If heatwalk beats the mixture
on its own training points by much more than on held-out points it is over-fitting; if by about as little,
the data hold no structure that the flexible model finds and the mixture misses.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import time
from pathlib import Path

import numpy as np
import torch

sys.path.insert(0, str(Path(__file__).resolve().parent))

import baseline_cache  # noqa: E402
import heatwalk  # noqa: E402
import mixtures  # noqa: E402
import real_data  # noqa: E402
import real_datasets  # noqa: E402

CFG = real_data.MODES["full"]


def paired(a, b):
    d = np.asarray(a) - np.asarray(b)
    return {"mean": float(d.mean()), "se": float(d.std(ddof=1) / math.sqrt(len(d))), "n": int(len(d))}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--data", choices=real_data.ORDER, default="torus")
    ap.add_argument("--n-train", type=int, default=3000)
    ap.add_argument("--replay-from", type=Path,
                    default=real_data.RESULTS / "ablation" / "full_residual_rule.json")
    ap.add_argument("--out", type=Path, default=None, help="default: results/real_data_in_sample_DATA.json")
    ap.add_argument("--progress", action="store_true")
    a = ap.parse_args()
    torch.set_num_threads(1)
    out = a.out or real_data.RESULTS / f"real_data_in_sample_{a.data}.json"
    space = real_data.make_space(a.data)
    data = real_datasets.load(a.data, space)
    train, held = data["train"], data["heldout"]
    saved = {r["data"]: r for r in json.loads(a.replay_from.read_text())["rows"]}[a.data]["mixture"]

    fam, to, _, extra = real_data.mixture_family(a.data, space)
    k = saved["k"]
    fit = baseline_cache.replay_chosen_k(fam, to(train), CFG["k_max"], real_data.SEED, CFG["restarts"], k,
                                         saved["bic_table"][k - 1]["loglik"])
    t0 = time.perf_counter()
    model = heatwalk.fit(space, train, seed=real_data.SEED, progress=a.progress)
    fit_seconds = time.perf_counter() - t0

    idx = torch.as_tensor(np.sort(np.random.default_rng(0).choice(train.shape[0], a.n_train, replace=False)))
    rows = {}
    for what, x in (("training points", train[idx]), ("held-out points", held)):
        nll_hw = -model.log_prob(x, **real_data.LOG_PROB_OPTIONS.get(a.data, {}))["log_prob"].numpy()
        nll_mix = -(mixtures.mixture_log_prob(fam, fit, to(x)) + extra(x))
        rows[what] = {"heatwalk_nll": float(nll_hw.mean()), "mixture_nll": float(nll_mix.mean()),
                      "heatwalk_minus_mixture": paired(nll_hw, nll_mix)}
    result = {"data": a.data, "label": real_data.LABELS[a.data], "mixture_k": k, "fit_seconds": fit_seconds,
              "steps": model.record["steps"], "network": model.network.config(), "rows": rows,
              "versions": real_data.versions()}
    real_data.write_json(out, result)
    print(f"{result['label']}: heatwalk (defaults, {result['steps']} steps) against the {k}-component mixture")
    for what, r in rows.items():
        p = r["heatwalk_minus_mixture"]
        print(f"  {what:>16} ({p['n']}): NLL heatwalk {r['heatwalk_nll']:.3f}, mixture {r['mixture_nll']:.3f}, "
              f"hw − mix {p['mean']:+.3f} ± {p['se']:.3f}")
    print(f"written {out}")


if __name__ == "__main__":
    main()
