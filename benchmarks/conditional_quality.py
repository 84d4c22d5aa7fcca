"""Conditional fit quality on targets with exact conditionals: heatwalk vs per-condition EM mixtures.

    python benchmarks/conditional_quality.py [--quick] [--out benchmarks/results/conditional_quality.json]
                                             [--only NAME ...]

Targets (``benchmarks/conditional_targets.py``; each with exact samplers, log-densities and entropies):

1. ``torus_labels`` — three classes on T² (a banana, a product von Mises spot, a diagonal band with a
   wrapped-Cauchy first angle), class weights 0.4 / 0.35 / 0.25. heatwalk: ``fit(Torus(2), x,
   labels=names)`` (label dropout 0.1), then the conditional log-likelihood
   ``Model.log_prob(x, label=class)`` by the probability-flow ODE (Dormand–Prince, rtol 1e-5,
   atol 1e-6). Reported: -mean log q(x | class) - H(X | class) per class and over all held-out
   points (class-weighted), with the paired KL(p || q) = mean(log p - log q) over the same points.
   Baseline: a mixture of product von Mises laws fitted by EM to each class's training points,
   number of components by BIC (``benchmarks/mixtures.py``).
2. ``torus_inpainting`` — a banana φ ~ vM(0.5, 2), ψ | φ ~ vM(-1 + 2 sin φ, 4). heatwalk:
   ``fit(Torus(2), x, inpainting=True)`` and ``Model.sample(n, given={0: a})`` (the "trained" method,
   default reverse sampler) at the fixed angle-0 values a in ``GIVEN_ANGLES`` (chosen before any run;
   a = -2.6 lies near the antimode of φ, where data are scarce). Baseline: one product-von-Mises
   mixture fitted by EM to all training points (BIC); its conditional given φ = a is a von Mises
   mixture in ψ with reweighted components, w'_j ∝ w_j vM(a; m_j0, κ_j0), ψ | j ~ vM(m_j1, κ_j1)
   (Bayes' rule on the latent component: the φ factor of each component becomes a weight).
3. ``mixed_product`` — Product(Torus(1), Categories(3, 1)): c ~ (0.5, 0.3, 0.2), angle | c a von Mises,
   a wrapped Cauchy, a two-mode von Mises mixture. heatwalk: ``fit(Product(...), (angle, c))``; the
   joint ``Model.log_prob`` is a bound: the ODE of the angle's marginal plus the ELBO of c given the
   angle (both parts reported, against H(angle) by quadrature and H(c | angle) = H - H(angle)); and
   ``Model.sample(n, given={1: [[k]]})`` for each category. Baseline: category frequencies by counts
   and a von Mises mixture per category (EM, BIC); its likelihood is exact (no bound).

Conditional statistic (targets 2 and 3): the circular Wasserstein-1 distance (radians,
``heatwalk.frontend.metrics.circular_wasserstein``) between N_COND model samples of the free angle and
N_COND exact conditional draws (one reference sample shared by heatwalk and the mixture). Its noise
floor: W1 between two independent exact conditional samples of the same sizes, over R fresh pairs
(mean ± standard deviation). ratio = W1 / floor mean: about 1 (within the floor's spread) for a model
whose conditional is exact; a ratio of 3 is a W1 three times the sampling noise.

Budget: default mode about 20 minutes on 2 cores with one torch thread; ``--quick`` (fewer steps and
points) a few minutes. Fit settings per target are in ``SETTINGS``, sizes in ``SIZES`` (fixed before
any run, one seed for every draw and fit).
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import time
from pathlib import Path

import numpy as np
import scipy.special
import torch

sys.path.insert(0, str(Path(__file__).resolve().parent))

import conditional_targets as ct  # noqa: E402
import heatwalk  # noqa: E402
import mixtures  # noqa: E402
from heatwalk.frontend.metrics import circular_wasserstein  # noqa: E402
from heatwalk.io.atomic import atomic_path  # noqa: E402

SEED = 0
DEFAULT_OUT = Path(__file__).resolve().parent / "results" / "conditional_quality.json"
GIVEN_ANGLES = (-2.6, -1.0, 0.5, 2.0)
ODE = dict(method="dopri5", rtol=1e-5, atol=1e-6)
#: Model.log_prob(x, label=...) of a labelled score model fails on more points than the ODE's batch (1024):
#: the labels are not cut with the points' batches. The benchmark passes chunks of this many points.
LABEL_CHUNK = 1000

#: per target: heatwalk fit (``steps`` scaled in --quick mode) and the mixtures' largest component count
SETTINGS = {
    "torus_labels": dict(steps=5000, hidden=256, depth=3, time_range=(1e-3, 20.0), label_dropout=0.1, k_max=6),
    "torus_inpainting": dict(steps=5000, hidden=256, depth=3, time_range=(1e-3, 20.0), k_max=8),
    "mixed_product": dict(steps=4000, hidden=256, depth=3, k_max=6),
}
SIZES = {"default": dict(n_train=20000, n_nll=1500, n_cond=1000, n_floor=10, sample_steps=200, batch=512,
                         step_scale=1.0, elbo_times=16),
         "quick": dict(n_train=5000, n_nll=200, n_cond=300, n_floor=4, sample_steps=50, batch=256,
                       step_scale=0.1, elbo_times=4)}


# ----- shared figures ------------------------------------------------------------------------------
def nll_figure(logp, logq, entropy) -> dict:
    """-mean log q - H with its standard error, and the paired KL(p || q) = mean(log p - log q) with its."""
    logp, logq = np.asarray(logp, dtype=np.float64), np.asarray(logq, dtype=np.float64)
    n, d = len(logq), logp - logq
    return {"nll_minus_entropy": float(-logq.mean() - entropy), "nll_se": float(logq.std(ddof=1) / math.sqrt(n)),
            "paired_kl": float(d.mean()), "paired_kl_se": float(d.std(ddof=1) / math.sqrt(n)), "n": int(n)}


def w1(a, b) -> float:
    return circular_wasserstein(torch.as_tensor(a).reshape(-1, 1), torch.as_tensor(b).reshape(-1, 1))[0]


def reference_and_floor(law, n: int, n_floor: int, seed: int):
    """(n exact draws shared by the models, floor: W1 between two fresh exact samples over n_floor pairs)."""
    rng = np.random.default_rng(seed)
    ref = law.sample(n, rng)
    floor = [w1(law.sample(n, rng), law.sample(n, rng)) for _ in range(n_floor)]
    return ref, {"floor": floor, "floor_mean": float(np.mean(floor)), "floor_sd": float(np.std(floor, ddof=1))}


def w1_figure(samples, ref, floor: dict) -> dict:
    v = w1(np.asarray(samples, dtype=np.float64), ref)
    return {"w1": v, "ratio": v / floor["floor_mean"]}


def fit_settings(cfg, sz) -> dict:
    return dict(steps=max(50, int(cfg["steps"] * sz["step_scale"])), batch_size=sz["batch"], seed=SEED,
                network={"hidden": cfg["hidden"], "depth": cfg["depth"], "residual": False}, progress=False)


def fit_record(model, kw) -> dict:
    return {"steps": kw["steps"], "network": kw["network"], "batch_size": kw["batch_size"],
            "train_seconds": model.record["train_seconds"], "loss": model.record["mean_loss_last_100_steps"]}


# ----- EM mixtures -----------------------------------------------------------------------------------
def vm_mixture(train_angles, k_max: int) -> dict:
    """Product-von-Mises mixture by EM with BIC on (n, d) angles."""
    return mixtures.fit_by_bic(mixtures.VonMisesProduct(train_angles.shape[1]), train_angles, k_max, SEED)


def vm_mixture_log_prob(fit, x) -> np.ndarray:
    return mixtures.mixture_log_prob(mixtures.VonMisesProduct(x.shape[1]), fit, x)


def vm_mixture_sample(fit, n: int, seed: int) -> np.ndarray:
    return mixtures.mixture_sample(mixtures.VonMisesProduct(fit["params"]["m"].shape[1]), fit, n, seed)


def mixture_conditional(fit, phi0: float) -> ct.CircularMixture:
    """The T² mixture's law of ψ given φ = phi0: w'_j ∝ w_j vM(phi0; m_j0, κ_j0), ψ | j ~ vM(m_j1, κ_j1)."""
    m, kap = fit["params"]["m"], fit["params"]["kappa"]
    lw = fit["logw"] + kap[:, 0] * np.cos(phi0 - m[:, 0]) - np.log(2 * math.pi * scipy.special.i0e(kap[:, 0])) \
        - kap[:, 0]
    w = np.exp(lw - scipy.special.logsumexp(lw))
    return ct.CircularMixture(w, [ct.VonMises(m[j, 1], kap[j, 1]) for j in range(len(w))])


# ----- 1. labels on T² -----------------------------------------------------------------------------
def run_labels(target, cfg, sz) -> dict:
    x, names = target.sample(sz["n_train"], SEED + 1)
    test, test_names = target.sample(sz["n_nll"], SEED + 2)
    kw = fit_settings(cfg, sz)
    model = heatwalk.fit(target.space, x, labels=list(names), label_dropout=cfg["label_dropout"],
                         time_range=cfg["time_range"], **kw)
    logq_h = np.concatenate([model.log_prob(test[i:i + LABEL_CHUNK], label=list(test_names[i:i + LABEL_CHUNK]),
                                            **ODE)["log_prob"].numpy() for i in range(0, len(test), LABEL_CHUNK)])
    logp = target.log_prob(test, test_names)
    logq_m, ks = np.empty(len(test)), {}
    for c in target.classes:
        fit = vm_mixture(x.numpy()[names == c], cfg["k_max"])
        sel = test_names == c
        logq_m[sel], ks[c] = vm_mixture_log_prob(fit, test.numpy()[sel]), fit["k"]
    parts = []
    for c in target.classes:
        sel = test_names == c
        h = target.class_entropy(c)
        parts.append({"part": c, "entropy": h, "heatwalk": nll_figure(logp[sel], logq_h[sel], h),
                      "mixture": {**nll_figure(logp[sel], logq_m[sel], h), "k": ks[c]}})
    h = target.entropy()
    parts.append({"part": "all classes", "entropy": h, "heatwalk": nll_figure(logp, logq_h, h),
                  "mixture": {**nll_figure(logp, logq_m, h), "k": ks}})
    return {"likelihood": parts, "heatwalk_fit": fit_record(model, kw),
            "mixture_model": "product-von-Mises mixture per class (EM, BIC)"}


# ----- 2. inpainting on T² -------------------------------------------------------------------------
def run_inpainting(target, cfg, sz) -> dict:
    x = target.sample(sz["n_train"], SEED + 1)
    kw = fit_settings(cfg, sz)
    model = heatwalk.fit(target.space, x, inpainting=True, time_range=cfg["time_range"], **kw)
    fit = vm_mixture(x.numpy(), cfg["k_max"])
    rows = []
    for i, a in enumerate(GIVEN_ANGLES):
        law = target.conditional(a)
        ref, floor = reference_and_floor(law, sz["n_cond"], sz["n_floor"], SEED + 100 + i)
        s = model.sample(sz["n_cond"], steps=sz["sample_steps"], given={0: a}, seed=SEED + 10 + i, progress=False)
        m = mixture_conditional(fit, a).sample(sz["n_cond"], np.random.default_rng(SEED + 20 + i))
        rows.append({"condition": f"angle0 = {a:+.2f}", "given": a, "exact": repr(law),
                     "log_density_angle0": target.marginal_log_prob(a), **floor,
                     "heatwalk": w1_figure(s[:, 1].numpy(), ref, floor), "mixture": w1_figure(m, ref, floor)})
    return {"conditional": rows, "heatwalk_fit": fit_record(model, kw), "heatwalk_method": "trained (inpainting=True)",
            "mixture_model": f"product-von-Mises mixture, k={fit['k']} (BIC); conditional = reweighted components"}


# ----- 3. T¹ × Categories(3, 1) --------------------------------------------------------------------
def per_category_mixture(train, k_max: int) -> dict:
    ang, c = train[0].numpy(), train[1].numpy()[:, 0]
    freq = np.bincount(c, minlength=3) / len(c)
    return {"freq": freq, "fits": [vm_mixture(ang[c == k], k_max) for k in range(3)]}


def per_category_log_probs(mix, x):
    """(joint log q, log q(angle), log q(c | angle)) of the per-category mixture."""
    ang, c = x[0].numpy(), x[1].numpy()[:, 0]
    lc = np.stack([math.log(f) + vm_mixture_log_prob(fit, ang) for f, fit in zip(mix["freq"], mix["fits"])])
    joint = lc[c, np.arange(len(c))]
    marg = scipy.special.logsumexp(lc, axis=0)
    return joint, marg, joint - marg


def run_mixed(target, cfg, sz) -> dict:
    train = target.sample(sz["n_train"], SEED + 1)
    test = target.sample(sz["n_nll"], SEED + 2)
    kw = fit_settings(cfg, sz)
    model = heatwalk.fit(target.space, train, **kw)
    out = model.log_prob(test, n_time_samples=sz["elbo_times"], seed=SEED + 3, **ODE)
    mix = per_category_mixture(train, cfg["k_max"])
    q_joint, q_ang, q_cat = per_category_log_probs(mix, test)
    p_joint = target.log_prob(test)
    p_ang = target.marginal_angle_log_prob(test[0].numpy()[:, 0])
    h, h_ang = target.entropy(), target.angle_entropy()
    h_ode, h_elbo = out["parts"]["manifold_factors_ode"].numpy(), out["parts"]["finite_factors_given_manifold_elbo"]
    parts = [
        {"part": "joint (heatwalk: bound)", "entropy": h, "heatwalk": nll_figure(p_joint, out["log_prob"].numpy(), h),
         "mixture": nll_figure(p_joint, q_joint, h)},
        {"part": "angle marginal (ODE part)", "entropy": h_ang, "heatwalk": nll_figure(p_ang, h_ode, h_ang),
         "mixture": nll_figure(p_ang, q_ang, h_ang)},
        {"part": "category | angle (ELBO part)", "entropy": h - h_ang,
         "heatwalk": nll_figure(p_joint - p_ang, h_elbo.numpy(), h - h_ang),
         "mixture": nll_figure(p_joint - p_ang, q_cat, h - h_ang)},
    ]
    rows = []
    for k in range(3):
        law = target.conditional(k)
        ref, floor = reference_and_floor(law, sz["n_cond"], sz["n_floor"], SEED + 200 + k)
        s = model.sample(sz["n_cond"], steps=sz["sample_steps"], given={1: [[k]]}, seed=SEED + 30 + k,
                         progress=False)
        m = vm_mixture_sample(mix["fits"][k], sz["n_cond"], SEED + 40 + k)[:, 0]
        rows.append({"condition": f"category {k}", "exact": repr(law), **floor,
                     "heatwalk": w1_figure(s[0][:, 0].numpy(), ref, floor), "mixture": w1_figure(m, ref, floor)})
    return {"likelihood": parts, "conditional": rows, "heatwalk_fit": fit_record(model, kw),
            "heatwalk_likelihood": f"ODE + ELBO ({sz['elbo_times']} time samples), bound={out['bound']}",
            "mixture_model": f"frequencies {np.round(mix['freq'], 4).tolist()} + von Mises mixture per category, "
                             f"k={[f['k'] for f in mix['fits']]} (BIC)"}


RUNS = {"torus_labels": run_labels, "torus_inpainting": run_inpainting, "mixed_product": run_mixed}


# ----- report ----------------------------------------------------------------------------------------
WIDTH = 54


def nll_cells(f: dict) -> str:
    return f"{f['nll_minus_entropy']:>+8.3f}±{f['nll_se']:.3f} {f['paired_kl']:>+8.4f}±{f['paired_kl_se']:.4f}"


def likelihood_lines(rows) -> list[str]:
    head = (f"{'target / part':<{WIDTH}} {'H':>7} {'heatwalk NLL-H':>15} {'paired KL':>15} "
            f"{'mixture NLL-H':>15} {'paired KL':>15}")
    lines = ["Conditional likelihoods (nats)", head, "-" * len(head)]
    for r in rows:
        for p in r.get("likelihood", []):
            lines.append(f"{r['label'] + ': ' + p['part']:<{WIDTH}} {p['entropy']:>7.3f} "
                         f"{nll_cells(p['heatwalk'])} {nll_cells(p['mixture'])}")
    return lines


def sample_lines(rows) -> list[str]:
    head = (f"{'target / condition':<{WIDTH}} {'floor W1':>15} {'heatwalk W1':>12} {'ratio':>6} "
            f"{'mixture W1':>11} {'ratio':>6}")
    lines = ["Conditional samples (circular W1, radians)", head, "-" * len(head)]
    for r in rows:
        for c in r.get("conditional", []):
            h, m = c["heatwalk"], c["mixture"]
            lines.append(f"{r['label'] + ': ' + c['condition']:<{WIDTH}} {c['floor_mean']:>8.4f}±{c['floor_sd']:.4f} "
                         f"{h['w1']:>12.4f} {h['ratio']:>6.2f} {m['w1']:>11.4f} {m['ratio']:>6.2f}")
    return lines


def note_lines(rows) -> list[str]:
    lines = ["NLL-H: -mean log q - exact entropy, ± standard error of the held-out mean; paired KL = "
             "mean(log p - log q) over the same points.",
             "W1: model samples vs exact conditional draws; floor: W1 between two independent exact samples of "
             "the same sizes (mean ± sd over R pairs); ratio = W1 / floor mean."]
    for r in rows:
        extra = r.get("heatwalk_likelihood") or r.get("heatwalk_method", "")
        lines.append(f"  {r['label']}: heatwalk {r['heatwalk_fit']['steps']} steps, "
                     f"{r['heatwalk_fit']['train_seconds']:.0f} s training{'; ' + extra if extra else ''}; "
                     f"mixture: {r['mixture_model']}; row {r['seconds']:.0f} s")
        for c in r.get("conditional", []):
            where = f", log p(angle0) = {c['log_density_angle0']:+.2f}" if "log_density_angle0" in c else ""
            lines.append(f"    {c['condition']}: exact {c['exact']}{where}")
    return lines


def format_table(rows) -> str:
    return "\n".join(likelihood_lines(rows) + [""] + sample_lines(rows) + [""] + note_lines(rows))


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--quick", action="store_true", help="fewer steps and points (a few minutes)")
    ap.add_argument("--out", type=Path, default=DEFAULT_OUT, help="JSON file for the results")
    ap.add_argument("--only", nargs="*", default=None, help="run only these targets (names as in SETTINGS)")
    args = ap.parse_args(argv)
    torch.set_num_threads(1)
    mode = "quick" if args.quick else "default"
    sz = SIZES[mode]
    rows, t0 = [], time.perf_counter()
    for cls in ct.CONDITIONAL_TARGETS:
        if args.only and cls.name not in args.only:
            continue
        t_start = time.perf_counter()
        target = cls()
        row = {"target": cls.name, "label": cls.label, **RUNS[cls.name](target, SETTINGS[cls.name], sz)}
        row["seconds"] = time.perf_counter() - t_start
        rows.append(row)
        print(f"[{cls.name}] done in {row['seconds']:.0f} s", file=sys.stderr, flush=True)
    total = time.perf_counter() - t0
    print(f"conditional fit quality ({mode} mode, seed {SEED}, torch threads 1, total {total:.0f} s)")
    print(format_table(rows))
    args.out.parent.mkdir(parents=True, exist_ok=True)
    with atomic_path(args.out) as tmp:
        Path(tmp).write_text(json.dumps({"mode": mode, "sizes": sz, "settings": SETTINGS, "given_angles": GIVEN_ANGLES,
                                         "seed": SEED, "total_seconds": total, "rows": rows}, indent=2) + "\n")
    print(f"written {args.out}")


if __name__ == "__main__":
    main()
