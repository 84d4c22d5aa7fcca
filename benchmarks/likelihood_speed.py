"""Probability-flow log-likelihood speed and accuracy: per-point step control against one step for the batch.

Targets with an exact oracle (the score is exact, so the ODE log-likelihood must equal the exact
log-density of the time-t_min marginal up to the solver's and Hutchinson's errors):

- "mixture R^2": R^2 under the Ornstein–Uhlenbeck flow, data a mixture of a narrow (σ² = 0.01) and a wide
  (σ² = 1) Gaussian, weights 1/2; marginal = mixture of N(a μ_k, (a² σ_k² + 1 − a²) I), a = e^{-t/2}.
  Exact divergence.
- "mixture R^6": the same in R^6 (Hutchinson divergence, the default above dimension 3).
- "simplex K=6": the 5-dimensional simplex with a logistic-normal target ilr(x_0) ~ N(μ, 0.2 I);
  marginal N(ilr x; a μ, (a² 0.2 + 1 − a²) I) plus log_volume_density (Hutchinson).

For each, n points drawn from the data law are evaluated in one block by the adaptive Dormand–Prince
solver at the stated tolerance (the library defaults rtol = 1e-5, atol = 1e-6; 4 Hutchinson probes),
with ``step_control="batch"`` (one step size, set by the largest error in the batch: the behaviour
before per-point control) and ``step_control="point"`` (the default now), side by side in one run, best of R repeats.
The Hutchinson rows also run the behaviour before this change in full: one step for the batch *and*
fresh probes at every stage, capped at ``--old-cap`` attempted steps (it is not expected to finish).
The Hutchinson cases add a row with the exact divergence (dim backward passes per stage), which
separates the solver's error from the estimator's variance. Columns: points per second, accepted steps per point (mean; for batch control every point takes
the batch's), the error against the oracle (max and mean |ODE − exact| in nats), the mean Hutchinson
standard error.

    python benchmarks/likelihood_speed.py [--n 256] [--threads 1] [--old-cap 400] [--repeats 2] [--json PATH]
"""

from __future__ import annotations

import argparse
import json
import math
import time
from pathlib import Path

import torch

from heatwalk.core.fields import ScoreField
from heatwalk.core.schedule import TimeSchedule
from heatwalk.errors import InputError
from heatwalk.samplers.flow_ode import FlowField, integrate
from heatwalk.spaces import Euclidean, Simplex
from heatwalk.spaces.simplex import helmert_basis, ilr, ilr_inverse

F64 = torch.float64
RTOL, ATOL, N_PROBES = 1e-5, 1e-6, 4
RESULTS = Path(__file__).resolve().parent / "results" / "likelihood_speed.json"


def gen(seed):
    return torch.Generator().manual_seed(seed)


class MixtureOU:
    """Σ_k w_k N(μ_k, σ_k² I) on R^d under the OU flow: exact marginal score and log-density."""

    def __init__(self, d, seed=0):
        self.space = Euclidean(d, process="ornstein_uhlenbeck")
        self.mu = torch.randn(2, d, dtype=F64, generator=gen(seed)) * 1.5
        self.var = torch.tensor([0.01, 1.0], dtype=F64)
        self.logw = torch.log(torch.tensor([0.5, 0.5], dtype=F64))
        self.schedule = TimeSchedule(*self.space.time_range)

    def _parts(self, x, t):
        a2 = torch.exp(-t).reshape(-1, 1)
        diff = x.unsqueeze(1) - a2.sqrt().unsqueeze(-1) * self.mu
        v = a2 * self.var + 1 - a2
        logn = -0.5 * diff.square().sum(-1) / v - 0.5 * x.shape[-1] * torch.log(2 * math.pi * v)
        return logn + self.logw, diff, v

    def score(self, x, t):
        logj, diff, v = self._parts(x, t)
        return (torch.softmax(logj, -1).unsqueeze(-1) * (-diff / v.unsqueeze(-1))).sum(1)

    def exact(self, x):
        t = torch.full((x.shape[0],), self.schedule.t_min, dtype=F64)
        return torch.logsumexp(self._parts(x, t)[0], -1)

    def sample(self, n, seed):
        g = gen(seed)
        k = torch.arange(n) % 2
        return self.mu[k] + self.var[k].sqrt().unsqueeze(-1) * torch.randn(n, self.mu.shape[1], dtype=F64, generator=g)


class LogisticNormal:
    """ilr(x_0) ~ N(μ, σ² I) on the simplex (OU flow in ilr coordinates): exact score and log-density."""

    def __init__(self, K=6, s2=0.2):
        self.space, self.s2 = Simplex(K), s2
        self.mu = torch.linspace(-1.0, 1.0, K - 1, dtype=F64)
        self.h = helmert_basis(K)
        self.schedule = TimeSchedule(*self.space.time_range)

    def score(self, x, t):
        a2 = torch.exp(-t)[:, None]
        return (-(ilr(x) - a2.sqrt() * self.mu) / (a2 * self.s2 + 1 - a2)) @ self.h

    def exact(self, x):
        a2 = math.exp(-self.schedule.t_min)
        v = a2 * self.s2 + 1 - a2
        return (-0.5 * (ilr(x) - math.sqrt(a2) * self.mu).square().sum(-1) / v
                - 0.5 * (self.space.K - 1) * math.log(2 * math.pi * v) + self.space.log_volume_density(x))

    def sample(self, n, seed):
        return ilr_inverse(self.mu + math.sqrt(self.s2) * torch.randn(n, self.space.K - 1, dtype=F64,
                                                                      generator=gen(seed)))


class FreshProbes(FlowField):
    """The divergence estimate before this change: new Hutchinson probes at every evaluation."""

    def divergence_samples(self, x, t, probes=None):
        return super().divergence_samples(x, t, None)


def ode_log_prob(flow, x, step_control, max_steps):
    """log p_{t_min}(x) by the ODE (as heatwalk.samplers.flow_ode.log_likelihood, with a given flow)."""
    sp, sch = flow.space, flow.field.schedule
    xT, div, se, taken = integrate(flow, x, sch.t_min, sch.t_max, method="dopri5", rtol=RTOL, atol=ATOL,
                                   step_control=step_control, max_steps=max_steps)
    return sp.prior_log_prob(xT) + div + sp.log_volume_density(x), se, taken


def run_case(name, law, n, old_cap, repeats):
    field = ScoreField(law.space, law.schedule, law.score)
    x = law.sample(n, 1)
    exact = law.exact(x)
    rows = []
    modes = [("batch", FlowField, 10_000, "one step for the batch"),
             ("point", FlowField, 10_000, "per-point steps (new)")]
    if FlowField(field).divergence == "hutchinson":
        modes.insert(0, ("batch", FreshProbes, old_cap, "batch + fresh probes (old)"))
        modes.append(("point", FlowField, 10_000, "per-point, exact divergence"))
    for control, cls, cap, label in modes:
        div = "exact" if "exact" in label else "auto"
        times, failure = [], None
        for _ in range(1 if cls is FreshProbes else repeats):
            flow = cls(field, divergence=div, n_probes=N_PROBES, generator=gen(2))   # the same probes each repeat
            t0 = time.perf_counter()
            try:
                lp, se, taken = ode_log_prob(flow, x, control, cap)
            except InputError as err:
                failure = str(err).split(";")[0]
            times.append(time.perf_counter() - t0)
            if failure:
                break
        if failure:
            rows.append({"case": name, "mode": label, "finished": False, "seconds": times[-1],
                         "note": f"stopped after {cap} attempted steps: {failure}"})
            continue
        dt = min(times)
        err = (lp - exact).abs()
        rows.append({"case": name, "mode": label, "finished": True, "seconds": dt, "points_per_s": n / dt,
                     "mean_steps": float(taken.double().mean()), "max_steps": int(taken.max()),
                     "max_abs_error": float(err.max()), "mean_abs_error": float(err.mean()),
                     "mean_stderr": float(se.mean()), "divergence": flow.divergence})
    return rows


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--n", type=int, default=256)
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--old-cap", type=int, default=400)
    ap.add_argument("--repeats", type=int, default=2)
    ap.add_argument("--json", default=str(RESULTS))
    a = ap.parse_args()
    torch.set_num_threads(a.threads)
    cases = {"mixture R^2": MixtureOU(2), "mixture R^6": MixtureOU(6, seed=3), "simplex K=6": LogisticNormal()}
    rows = [r for name, law in cases.items() for r in run_case(name, law, a.n, a.old_cap, a.repeats)]
    print(f"probability-flow log-likelihood, {a.n} points in one block, dopri5 rtol={RTOL:g} atol={ATOL:g}, "
          f"{N_PROBES} Hutchinson probes, threads {a.threads}, best of {a.repeats}")
    print(f"{'case':<13} {'mode':<28} {'points/s':>9} {'steps/pt':>9} {'max|err|':>10} {'mean|err|':>10} "
          f"{'mean se':>9}")
    for r in rows:
        if not r["finished"]:
            print(f"{r['case']:<13} {r['mode']:<28} {'—':>9}  did not finish: {r['note']} ({r['seconds']:.1f} s)")
            continue
        print(f"{r['case']:<13} {r['mode']:<28} {r['points_per_s']:>9.1f} {r['mean_steps']:>9.1f} "
              f"{r['max_abs_error']:>10.2e} {r['mean_abs_error']:>10.2e} {r['mean_stderr']:>9.2e}")
    print()
    for name in cases:
        got = {r["mode"]: r for r in rows if r["case"] == name and r["finished"]}
        old, new = got.get("one step for the batch"), got.get("per-point steps (new)")
        if old and new:
            print(f"{name}: per-point / batch points per second = {new['points_per_s'] / old['points_per_s']:.2f}")
    Path(a.json).parent.mkdir(parents=True, exist_ok=True)
    Path(a.json).write_text(json.dumps({"n": a.n, "rtol": RTOL, "atol": ATOL, "n_probes": N_PROBES,
                                        "threads": a.threads, "repeats": a.repeats, "old_cap": a.old_cap, "rows": rows}, indent=2) + "\n")
    print(f"wrote {a.json}")


if __name__ == "__main__":
    main()
