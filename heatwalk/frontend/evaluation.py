"""Evaluation of a fitted model against data: the one report of ``heatwalk evaluate`` and the demo.

The data are shuffled with the seed and split into two halves A and B. The
model draws |B| samples. Reported, in the sections of the one report schema
(:data:`heatwalk.frontend.report_schema.REPORT_SCHEMA`, checked before anything
is written):

- ``data``, ``model``, ``fit``: what was evaluated, how it was sampled and trained;
- ``likelihood``: held-out mean log-likelihood (nats per point, w.r.t. the space's
  ``reference_measure``) on up to ``likelihood_points`` points of the data, with its
  standard error. Where the model's ``log_prob`` is a lower bound (an ELBO: sequences,
  products with a finite factor), ``bound`` is true and the mean is reported as
  ``elbo_nats`` ≤ log p with ``nll_bound_nats`` = −ELBO, an upper bound on the NLL;
- ``sample_metrics`` (:data:`SAMPLE_METRICS`), each applied where the space declares
  what it needs: MMD² (Gaussian kernel in the space's distance, median-heuristic
  bandwidth on A) with its permutation z on every space; the circular Wasserstein-1
  distance per angle on spaces of angles; k-mer spectrum total-variation distances
  and the length distribution on sequences; on a product, all of these again on
  each factor's marginal (``per_factor``). Each comes with its noise floor: the
  same statistic for B against A;
- ``timings_seconds``.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import torch

from heatwalk.errors import InputError
from heatwalk.frontend.metrics import (
    circular_wasserstein, kmer_spectrum_distance, mean_log_likelihood, mmd_permutation_z, mmd_with_floor,
)
from heatwalk.frontend.report_schema import SCHEMA_ID, validate_report
from heatwalk.io.atomic import atomic_path, write_json


def _mmd(space, samples, half_a, half_b, bandwidth=None) -> dict:
    m = mmd_with_floor(space, samples, half_a, half_b, bandwidth=bandwidth)
    z = mmd_permutation_z(space, samples, half_a, m["bandwidth"], n_permutations=N_PERMUTATIONS)
    return {"samples_vs_half_a": m["mmd2"], "noise_floor_half_b_vs_half_a": m["floor"],
            "permutation_z": z["z"], "permutation_sigma": z["sigma_perm"], "permutation_p_value": z["p_value"],
            "permutation_points": min(z["n_x"], z["n_y"]), "n_permutations": N_PERMUTATIONS,
            "bandwidth": m["bandwidth"], "n": m["n"], "n_half_a": m["n_a"],
            "kernel": "exp(-d^2 / (2 h^2)), d the space's distance, h the median distance within half A"}


def _circular_w1(space, samples, half_a, half_b, bandwidth=None) -> dict:
    return {"samples_vs_half_a": circular_wasserstein(samples, half_a),
            "noise_floor_half_b_vs_half_a": circular_wasserstein(half_b, half_a)}


def _kmers(space, samples, half_a, half_b, bandwidth=None) -> dict:
    ks = [k for k in (1, 2, 3) if k <= space.L]
    return {str(k): {"samples_vs_half_a": kmer_spectrum_distance(samples, half_a, space.K, k),
                     "noise_floor_half_b_vs_half_a": kmer_spectrum_distance(half_b, half_a, space.K, k)} for k in ks}


def _lengths(space, samples, half_a, half_b, bandwidth=None) -> dict:
    def hist(x):
        return torch.bincount(space.lengths(x), minlength=space.L + 1).double() / x.shape[0]

    a = hist(half_a)
    la, lb, ls = (float(space.lengths(z).double().mean()) for z in (half_a, half_b, samples))
    return {"samples_vs_half_a": float(0.5 * (hist(samples) - a).abs().sum()),
            "noise_floor_half_b_vs_half_a": float(0.5 * (hist(half_b) - a).abs().sum()),
            "mean_length_samples": ls, "mean_length_half_a": la, "mean_length_half_b": lb}


def _per_factor(space, samples, half_a, half_b, bandwidth=None) -> dict:
    """Every metric that applies to each factor, on that factor's part of the points (its marginal); each
    factor's MMD² takes its own bandwidth (the median distance within its half A)."""
    return {str(i): sample_metrics(f, samples[i], half_a[i], half_b[i]) for i, f in enumerate(space.factors)}


@dataclass(frozen=True)
class SampleMetric:
    """A two-sample metric: its report key, the space capabilities it needs, and how to compute it."""

    key: str
    requires: frozenset
    compute: Callable


#: random relabellings behind the permutation z of MMD²
N_PERMUTATIONS = 100

SAMPLE_METRICS = (
    SampleMetric("mmd_squared", frozenset(), _mmd),
    SampleMetric("wasserstein1_per_angle_rad", frozenset({"angles"}), _circular_w1),
    SampleMetric("kmer_tv_distance", frozenset({"sequences"}), _kmers),
    SampleMetric("length_distribution", frozenset({"variable_length"}), _lengths),
    SampleMetric("per_factor", frozenset({"factors"}), _per_factor),
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


def likelihood_section(model, points, device=None) -> tuple[dict, dict]:
    """The ``likelihood`` section for ``points`` (schema in :mod:`heatwalk.frontend.report_schema`), and
    the output of ``Model.log_prob`` behind it (per-point values in ``"log_prob"``, on the CPU); computed on
    ``device`` (None: the model's)."""
    out = model.log_prob(points, device=device)
    out = {k: (v.detach().cpu() if isinstance(v, torch.Tensor) else v) for k, v in out.items()}
    ll = mean_log_likelihood(out["log_prob"])
    bound = bool(out.get("bound", False))
    section = {"mean_log_likelihood_nats": None if bound else ll["mean"],
               "elbo_nats": ll["mean"] if bound else None,
               "nll_bound_nats": -ll["mean"] if bound else None,
               "stderr_nats": ll["stderr"], "n": ll["n"], "bound": bound,
               "method": model.objective.likelihood_method or type(model.objective).__name__,
               "reference_measure": model.space.reference_measure}
    if "bits_per_token" in out:
        section["bits_per_token"] = float(out["bits_per_token"])
    return section, out


@dataclass
class Evaluation:
    """What :func:`evaluate` returns: the report, the samples drawn, and the per-point log-likelihoods.

    ``log_prob`` is the output of ``Model.log_prob`` on the points ``likelihood_index`` (indices into
    the data, in the order evaluated), or None when no likelihood was computed.
    """

    report: dict
    samples: object
    log_prob: dict | None = None
    likelihood_index: torch.Tensor | None = None


def _fit_section(record: dict) -> dict:
    def get(key, kind):
        v = record.get(key)
        return None if v is None else kind(v)

    return {"steps": get("steps", int), "batch_size": get("batch_size", int), "n_train": get("n_data", int),
            "final_loss": get("mean_loss_last_100_steps", float), "train_seconds": get("train_seconds", float)}


def evaluate(model, data, *, seed: int = 0, sample_steps: int = 300, sampler: str | None = None,
             likelihood_points: int = 500, progress: bool = False, command: str = "evaluate", data_file=None,
             columns=None, model_folder=None, uniform_baseline: bool = False, device=None) -> Evaluation:
    """Evaluate ``model`` on validated points ``data``: the report (:data:`REPORT_SCHEMA`) and what is behind it.

    ``data_file``, ``columns``, ``model_folder`` are recorded in the report (None from the Python API);
    ``uniform_baseline`` adds the sample metrics of as many uniform points (``space.random_uniform``).
    Sampling and log-likelihoods run on ``device`` (None: the model's), metrics on the CPU.
    """
    from heatwalk.core.devices import to_device

    space = model.space
    perm, half_a, half_b = split_halves(space, data, seed)
    n_b = space.n_points(half_b)
    sampler = sampler or model.objective.default_sampler
    timings: dict = {}
    t0 = time.perf_counter()
    samples = to_device(model.sample(n_b, steps=sample_steps, sampler=sampler, seed=seed + 1, progress=progress,
                                     device=device), torch.device("cpu"))
    timings["sampling_seconds"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    metrics = sample_metrics(space, samples, half_a, half_b)
    if uniform_baseline:
        uniform = space.random_uniform(n_b, torch.Generator().manual_seed(seed + 2))
        metrics["uniform_baseline"] = sample_metrics(space, uniform, half_a, half_b,
                                                     bandwidth=metrics["mmd_squared"]["bandwidth"])
    timings["metrics_seconds"] = time.perf_counter() - t0
    likelihood, out, index = None, None, None
    if likelihood_points > 0:
        t0 = time.perf_counter()
        index = perm[:likelihood_points]
        likelihood, out = likelihood_section(model, space.take(data, index), device=device)
        timings["likelihood_seconds"] = time.perf_counter() - t0
    report = {
        "schema": SCHEMA_ID, "command": command, "space": repr(space), "space_config": space.config(), "seed": seed,
        "data": {"file": None if data_file is None else str(Path(data_file).resolve()), "n": space.n_points(data),
                 "columns": None if columns is None else list(columns), "n_half_a": space.n_points(half_a),
                 "n_half_b": n_b},
        "model": {"folder": None if model_folder is None else str(Path(model_folder).resolve()),
                  "objective": model.objective.name, "sampler": sampler, "reverse_steps": sample_steps,
                  "n_samples": n_b},
        "fit": _fit_section(model.record),
        "likelihood": likelihood,
        "sample_metrics": metrics,
        "timings_seconds": timings,
    }
    return Evaluation(validate_report(report), samples, out, index)


def _metric_lines(metrics: dict, indent: str = "  ", who: str = "samples") -> list[str]:
    m = metrics["mmd_squared"]
    lines = [f"{indent}MMD²          {who} vs half A {m['samples_vs_half_a']:.5f}, noise floor (half B vs A) "
             f"{m['noise_floor_half_b_vs_half_a']:.5f}; permutation z {m['permutation_z']:.2f} "
             f"(p {m['permutation_p_value']:.3f}, {m['permutation_points']} points, {m['n_permutations']} "
             f"relabellings); bandwidth {m['bandwidth']:.4f}"]
    if "wasserstein1_per_angle_rad" in metrics:
        w = metrics["wasserstein1_per_angle_rad"]
        lines.append(f"{indent}W1 per angle  {who} vs half A " + ", ".join(f"{v:.4f}" for v in w["samples_vs_half_a"])
                     + " rad; noise floor " + ", ".join(f"{v:.4f}" for v in w["noise_floor_half_b_vs_half_a"]))
    if "kmer_tv_distance" in metrics:
        lines.append(f"{indent}k-mer TV      " + "; ".join(
            f"k={k}: {who} vs half A {v['samples_vs_half_a']:.4f}, floor {v['noise_floor_half_b_vs_half_a']:.4f}"
            for k, v in metrics["kmer_tv_distance"].items()))
    if "length_distribution" in metrics:
        d = metrics["length_distribution"]
        lines.append(f"{indent}lengths       TV {who} vs half A {d['samples_vs_half_a']:.4f}, floor "
                     f"{d['noise_floor_half_b_vs_half_a']:.4f}; mean length samples {d['mean_length_samples']:.1f}, "
                     f"half A {d['mean_length_half_a']:.1f}")
    for i, factor in metrics.get("per_factor", {}).items():
        lines.append(f"{indent}factor {i} alone (its marginal):")
        lines += _metric_lines(factor, indent=indent + "  ", who=who)
    return lines


def _num(v, fmt: str, unit: str = "") -> str:
    return "?" if v is None else f"{v:{fmt}}{unit}"


def format_table(report: dict) -> str:
    """The report as readable text (evaluation.txt / demo_report.txt): one line per part, units spelled out."""
    d, m, f = report["data"], report["model"], report["fit"]
    lines = [f"heatwalk {report['command']}: the model {m['folder'] or '(Python API)'} on {report['space']}",
             f"  data          {d['n']} points from {d['file'] or '(Python API)'}"
             + (f" (columns {', '.join(d['columns'])})" if d["columns"] else "")
             + f"; half A {d['n_half_a']}, half B {d['n_half_b']}; seed {report['seed']}",
             f"  model         {m['objective']} objective; {m['n_samples']} samples by {m['sampler']} in "
             f"{m['reverse_steps']} reverse steps",
             f"  fit           {_num(f['steps'], 'd')} steps, batch {_num(f['batch_size'], 'd')}, "
             f"{_num(f['n_train'], 'd')} training points; final loss {_num(f['final_loss'], '.4f')} "
             f"(mean of the last 100 steps); {_num(f['train_seconds'], '.1f', ' s')}"]
    lik = report["likelihood"]
    if lik is None:
        lines.append("  likelihood    not computed (--likelihood-points 0)")
    elif lik["bound"]:
        lines.append(f"  likelihood    ELBO {lik['elbo_nats']:.4f} ± {lik['stderr_nats']:.4f} nats per point, a lower "
                     f"bound on log p; so {lik['nll_bound_nats']:.4f} nats per point is an upper bound on the "
                     f"negative log-likelihood (n={lik['n']})")
    else:
        lines.append(f"  likelihood    mean log-likelihood {lik['mean_log_likelihood_nats']:.4f} ± "
                     f"{lik['stderr_nats']:.4f} nats per point (n={lik['n']})")
    if lik is not None:
        if "bits_per_token" in lik:
            lines.append(f"                {lik['bits_per_token']:.4f} bits per token (upper bound)")
        lines.append(f"                by {lik['method']}; density w.r.t. {lik['reference_measure']}")
    metrics = report["sample_metrics"]
    lines += _metric_lines(metrics)
    if "uniform_baseline" in metrics:
        lines.append("  uniform points instead of samples (a baseline):")
        lines += _metric_lines(metrics["uniform_baseline"], indent="    ", who="uniform")
    lines.append("  timings       " + ", ".join(f"{k.removesuffix('_seconds')} {v:.1f} s"
                                             for k, v in report["timings_seconds"].items()))
    return "\n".join(lines)


def write_per_point(path, result: Evaluation) -> Path:
    """A CSV of each evaluated point's log-likelihood (or ELBO, when it is a bound), atomically.

    Columns: ``point`` (0-based index of the point in the data as read), ``log_likelihood_nats`` or
    ``elbo_nats``, and ``stderr_nats`` where the estimate has one per point (Monte Carlo ELBO).
    """
    if result.log_prob is None:
        raise InputError("per-point log-likelihoods need --likelihood-points > 0", field="per_point")
    values = result.log_prob["log_prob"].detach().cpu().double().tolist()
    name = "elbo_nats" if result.report["likelihood"]["bound"] else "log_likelihood_nats"
    se = result.log_prob.get("stderr")
    se = None if se is None else torch.as_tensor(se).detach().cpu().double().reshape(-1).tolist()
    rows = [f"point,{name}" + (",stderr_nats" if se is not None else "")]
    for k, (i, v) in enumerate(zip(result.likelihood_index.tolist(), values)):
        rows.append(f"{i},{v!r}" + (f",{se[k]!r}" if se is not None else ""))
    path = Path(path)
    with atomic_path(path) as tmp:
        tmp.write_text("\n".join(rows) + "\n")
    return path


def write_report(out_dir, report: dict, *, name: str = "evaluation") -> tuple[Path, Path]:
    """NAME.json and NAME.txt in ``out_dir`` (each written atomically), after checking the schema."""
    validate_report(report)
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    j, t = out_dir / f"{name}.json", out_dir / f"{name}.txt"
    write_json(j, report)
    with atomic_path(t) as tmp:
        tmp.write_text(format_table(report) + "\n")
    return j, t


def write_pictures(out_dir, model, data, result: Evaluation, picture_options: dict | None = None, *,
                   space_picture: bool = True) -> list[Path]:
    """The pictures of an evaluation in ``out_dir``: data_vs_samples (the space's picture, where it has one
    and ``space_picture``; ``picture_options`` go to it), losses (when the model kept its per-step losses)
    and log_likelihoods (when computed). Replaces old ones."""
    from heatwalk.frontend.plots import plot, plot_log_likelihoods, plot_losses, save_figure

    out_dir = Path(out_dir)
    written = []
    if space_picture and getattr(model.space, "plot_kind", None) is not None:
        fig = plot(model.space, data, result.samples, title="data and samples (density of the samples)",
                   **(picture_options or {}))
        written.append(save_figure(fig, out_dir / "data_vs_samples.png", overwrite=True))
    if model.losses is not None and len(model.losses) > 0:
        written.append(save_figure(plot_losses(model, title="training loss"), out_dir / "losses.png", overwrite=True))
    if result.log_prob is not None:
        fig = plot_log_likelihoods({"held-out data": result.log_prob}, title="per-point log-likelihoods")
        written.append(save_figure(fig, out_dir / "log_likelihoods.png", overwrite=True))
    return written
