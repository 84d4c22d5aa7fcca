"""Evaluation of a fitted model against data: the report behind ``heatwalk evaluate`` and the demo.

The data are shuffled with the seed and split into two halves A and B. The
model draws |B| samples. Reported:

- held-out mean log-likelihood (nats per point, w.r.t. the space's reference
  measure) on up to ``likelihood_points`` points of the data, with its standard
  error; for discrete models this is the negative ELBO, a lower bound, and is labelled so;
- sample metrics (:data:`SAMPLE_METRICS`), each applied where the space declares
  what it needs: MMD² (Gaussian kernel in the space's distance, median-heuristic
  bandwidth on A) on every space; the circular Wasserstein-1 distance per angle
  on spaces of angles; k-mer spectrum total-variation distances on sequences.
  Each comes with its noise floor: the same statistic for B against A;
- counts, seeds and timings.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import torch

from heatwalk.errors import InputError
from heatwalk.frontend.metrics import circular_wasserstein, kmer_spectrum_distance, mean_log_likelihood, mmd_with_floor
from heatwalk.io.atomic import atomic_path, write_json


def _mmd(space, samples, half_a, half_b, bandwidth=None) -> dict:
    m = mmd_with_floor(space, samples, half_a, half_b, bandwidth=bandwidth)
    return {"model_vs_a": m["mmd2"], "noise_floor_b_vs_a": m["floor"], "bandwidth": m["bandwidth"], "n": m["n"],
            "kernel": "exp(-d^2 / (2 h^2)), d the space's distance, h median of A"}


def _circular_w1(space, samples, half_a, half_b, bandwidth=None) -> dict:
    return {"model_vs_a": circular_wasserstein(samples, half_a),
            "noise_floor_b_vs_a": circular_wasserstein(half_b, half_a)}


def _kmers(space, samples, half_a, half_b, bandwidth=None) -> dict:
    ks = [k for k in (1, 2, 3) if k <= space.L]
    return {str(k): {"model_vs_a": kmer_spectrum_distance(samples, half_a, space.K, k),
                     "noise_floor_b_vs_a": kmer_spectrum_distance(half_b, half_a, space.K, k)} for k in ks}


def _lengths(space, samples, half_a, half_b, bandwidth=None) -> dict:
    def hist(x):
        return torch.bincount(space.lengths(x), minlength=space.L + 1).double() / x.shape[0]

    a = hist(half_a)
    la, lb, ls = (float(space.lengths(z).double().mean()) for z in (half_a, half_b, samples))
    return {"tv_model_vs_a": float(0.5 * (hist(samples) - a).abs().sum()),
            "tv_noise_floor_b_vs_a": float(0.5 * (hist(half_b) - a).abs().sum()),
            "mean_length": {"samples": ls, "a": la, "b": lb}}


@dataclass(frozen=True)
class SampleMetric:
    """A two-sample metric: its report key, the space capabilities it needs, and how to compute it."""

    key: str
    requires: frozenset
    compute: Callable


SAMPLE_METRICS = (
    SampleMetric("mmd2", frozenset(), _mmd),
    SampleMetric("wasserstein1_per_angle_rad", frozenset({"angles"}), _circular_w1),
    SampleMetric("kmer_tv_distance", frozenset({"sequences"}), _kmers),
    SampleMetric("length_distribution", frozenset({"variable_length"}), _lengths),
)


def sample_metrics(space, samples, half_a, half_b, bandwidth: float | None = None) -> dict:
    """Every metric of :data:`SAMPLE_METRICS` that applies to ``space``, samples against A with B as floor."""
    return {m.key: m.compute(space, samples, half_a, half_b, bandwidth)
            for m in SAMPLE_METRICS if m.requires <= space.capabilities}


def split_halves(space, data, seed: int):
    """(permutation, half A, half B) of the data shuffled with ``seed``."""
    n = space.n_points(data)
    if n < 4:
        raise InputError(f"need at least 4 data points to evaluate, got {n}", field="data")
    perm = torch.randperm(n, generator=torch.Generator().manual_seed(seed))
    return perm, space.take(data, perm[: n // 2]), space.take(data, perm[n // 2: 2 * (n // 2)])


def likelihood_section(model, points: torch.Tensor, device=None) -> tuple[dict, torch.Tensor]:
    """(mean held-out log-likelihood of ``points`` with its standard error and what kind it is, the
    log-likelihood of each point in nats on the CPU); computed on ``device`` (None: the model's)."""
    out = model.log_prob(points, device=device)
    per_point = out["log_prob"].detach().cpu()
    ll = mean_log_likelihood(per_point)
    bound = bool(out.get("bound", False))
    section = {"mean_nats": ll["mean"], "stderr_nats": ll["stderr"], "n": ll["n"], "is_bound": bound,
               "what": "lower bound (negative ELBO)" if bound else "probability-flow ODE"}
    if "bits_per_token" in out:
        section["bits_per_token"] = out["bits_per_token"]
    return section, per_point


def evaluate(model, data: torch.Tensor, *, seed: int = 0, sample_steps: int = 300, sampler: str | None = None,
             likelihood_points: int = 500, progress: bool = False, device=None) -> tuple[dict, torch.Tensor]:
    """Evaluate ``model`` on validated points ``data``; returns (report dict, the samples drawn, on the CPU).

    Sampling and log-likelihoods run on ``device`` (None: the model's); metrics on the CPU. With
    ``likelihood_points`` > 0 the report's ``"log_likelihood"`` section also holds ``"rows"`` (0-based
    row numbers of the points in ``data``) and ``"per_point_nats"`` (their log-likelihoods), which
    :func:`write_per_point` writes as a table and :func:`write_report` leaves out of evaluation.json.
    """
    from heatwalk.core.devices import to_device

    space = model.space
    perm, half_a, half_b = split_halves(space, data, seed)
    n_b = space.n_points(half_b)
    report: dict = {"space": space.config(), "n_data": space.n_points(data), "n_half_a": space.n_points(half_a),
                    "n_half_b": n_b, "seed": seed, "timings_s": {}}
    t0 = time.perf_counter()
    samples = to_device(model.sample(n_b, steps=sample_steps, sampler=sampler, seed=seed + 1, progress=progress,
                                     device=device), torch.device("cpu"))
    report["timings_s"]["sampling"] = time.perf_counter() - t0
    report["sampler"] = sampler or model.objective.default_sampler
    report["sample_steps"] = sample_steps
    t0 = time.perf_counter()
    report.update(sample_metrics(space, samples, half_a, half_b))
    report["timings_s"]["metrics"] = time.perf_counter() - t0
    if likelihood_points > 0:
        t0 = time.perf_counter()
        rows = perm[:likelihood_points]
        section, per_point = likelihood_section(model, space.take(data, rows), device=device)
        report["log_likelihood"] = {**section, "rows": rows.tolist(), "per_point_nats": per_point.tolist()}
        report["timings_s"]["log_likelihood"] = time.perf_counter() - t0
    return report, samples


def format_table(report: dict) -> str:
    """A short plain-text table of the report."""
    lines = [f"evaluation of a model on {report['space']}",
             f"  data points: {report['n_data']} (half A {report['n_half_a']}, half B {report['n_half_b']}), "
             f"seed {report['seed']}"]
    if "log_likelihood" in report:
        ll = report["log_likelihood"]
        lines.append(f"  mean log-likelihood: {ll['mean_nats']:.4f} ± {ll['stderr_nats']:.4f} nats/point "
                     f"({ll['what']}, n={ll['n']})")
        if "bits_per_token" in ll:
            lines.append(f"  bits per token: {ll['bits_per_token']:.4f}")
    m = report["mmd2"]
    lines.append(f"  MMD^2 samples vs A: {m['model_vs_a']:.5f}   noise floor (B vs A): {m['noise_floor_b_vs_a']:.5f}"
                 f"   bandwidth {m['bandwidth']:.4f}, n={m['n']}")
    if "wasserstein1_per_angle_rad" in report:
        w = report["wasserstein1_per_angle_rad"]
        lines.append("  W1 per angle (rad): samples vs A " + ", ".join(f"{v:.4f}" for v in w["model_vs_a"])
                     + "   floor " + ", ".join(f"{v:.4f}" for v in w["noise_floor_b_vs_a"]))
    for k, v in report.get("kmer_tv_distance", {}).items():
        lines.append(f"  {k}-mer spectrum TV distance: samples vs A {v['model_vs_a']:.4f}   "
                     f"floor {v['noise_floor_b_vs_a']:.4f}")
    if "length_distribution" in report:
        d = report["length_distribution"]
        lines.append(f"  length distribution TV distance: samples vs A {d['tv_model_vs_a']:.4f}   floor "
                     f"{d['tv_noise_floor_b_vs_a']:.4f}   mean length samples {d['mean_length']['samples']:.1f}, "
                     f"data {d['mean_length']['a']:.1f}")
    lines.append("  timings (s): " + ", ".join(f"{k} {v:.1f}" for k, v in report["timings_s"].items()))
    return "\n".join(lines)


#: per-point entries of the report written by write_per_point, not to evaluation.json
PER_POINT_KEYS = ("rows", "per_point_nats")


def write_report(out_dir, report: dict) -> tuple[Path, Path]:
    """evaluation.json and evaluation.txt in ``out_dir`` (each written atomically; the command writes them into
    a temporary folder renamed into place as a whole)."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    j, t = out_dir / "evaluation.json", out_dir / "evaluation.txt"
    if "log_likelihood" in report:
        ll = {k: v for k, v in report["log_likelihood"].items() if k not in PER_POINT_KEYS}
        report = {**report, "log_likelihood": ll}
    write_json(j, report)
    with atomic_path(t) as tmp:
        tmp.write_text(format_table(report) + "\n")
    return j, t


def write_per_point(path, report: dict, *, overwrite: bool = False) -> Path:
    """A table (.csv, .tsv, .parquet) of each evaluated point's log-likelihood: ``row`` (1-based row of the data
    file's points) and ``log_likelihood_nats``; written atomically."""
    import numpy as np

    from heatwalk.io.tables import write_table

    ll = report["log_likelihood"]
    values = np.stack([np.asarray(ll["rows"], dtype=np.float64) + 1, np.asarray(ll["per_point_nats"])], axis=1)
    return write_table(path, values, ["row", "log_likelihood_nats"], overwrite=overwrite)
