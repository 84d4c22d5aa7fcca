"""Kernel cost and accuracy.

Cost: log_kernel + score (``space.log_kernel_and_score``) on N points at mixed times (log-uniform over the
space's time range), as a ratio to torch.distributions.Normal(...).log_prob on
a batch of the same shape, measured side by side in one run (best of R
repeats each, the two timed alternately so that machine load hits both).
Targets: torus and S^2 <= 10x, SO(3) <= 20x.

Accuracy: worst relative error (relative to max(1, |value|)) of log_kernel and
of the radial derivative (score) against 50-digit mpmath references over a
grid of t in [1e-5, 50] and distances in [0, π].

    python benchmarks/kernel_cost.py [--n 1000000] [--repeats 3] [--threads 1] [--json out.json]
"""

from __future__ import annotations

import argparse
import json
import math
import time

import torch

from heatwalk.spaces import SO3, Sphere, Torus


def best_time(fn, repeats):
    best = math.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def cost_rows(n, repeats):
    rows = []
    g = torch.Generator().manual_seed(0)
    for name, space, target in (("torus T^1", Torus(1), 10), ("torus T^2", Torus(2), 10),
                                ("sphere S^2", Sphere(2), 10), ("SO(3)", SO3(), 20)):
        t_min, t_max = space.time_range
        x0 = space.random_uniform(n, g)
        t = torch.exp(math.log(t_min) + (math.log(t_max) - math.log(t_min)) * torch.rand(n, dtype=torch.float64,
                                                                                       generator=g))
        xt = space.sample_forward(x0, t, g)
        loc = torch.zeros_like(xt)
        scale = t.reshape(-1, *([1] * len(space.ambient_shape))).sqrt().expand_as(xt)
        normal = torch.distributions.Normal(loc, scale, validate_args=False)
        ours = base = math.inf
        for _ in range(repeats):  # alternate, so that a busy machine slows both alike
            ours = min(ours, best_time(lambda: space.log_kernel_and_score(xt, x0, t), 1))
            base = min(base, best_time(lambda: normal.log_prob(xt), 1))
        rows.append({"space": name, "n": n, "heatwalk_s": ours, "normal_log_prob_s": base,
                     "ratio": ours / base, "target_ratio": target})
    return rows


def accuracy_rows():
    import mpmath as mp

    from heatwalk.kernels.igso3 import igso3_log_prob_and_dlog as igso3_log_prob_and_score
    from heatwalk.kernels.sphere_heat import sphere_heat_log_prob_and_score

    mp.mp.dps = 50
    times = [1e-5, 1e-4, 1e-3, 1e-2, 0.1, 0.5, 1.0, 3.0, 10.0, 50.0]
    dists = [0.0, 1e-6, 0.1, 0.5, 1.0, 2.0, 3.0, math.pi - 1e-6, math.pi - 1e-9]

    def needed_digits(r, t):
        # the eigen-series sums O(1) terms down to p ~ exp(-r²/2t): that many digits cancel
        return int(float(r) ** 2 / (2 * float(t)) / math.log(10)) + 40

    def s2_ref(r, t):
        """Legendre series (Legendre recurrence) at enough digits; d/dr from (1-c²)P_l' = l(P_{l-1} - c P_l)."""
        dps = needed_digits(r, t)
        if dps > 400:
            return None
        with mp.workdps(dps):
            r, t = mp.mpf(r), mp.mpf(t)
            L = int(mp.sqrt(2 * (dps + 10) * mp.log(10) / t)) + 10
            c, sn = mp.cos(r), mp.sin(r)
            p_prev, p_cur = mp.mpf(1), c
            total = mp.mpf(1)  # l = 0 term
            dtotal = mp.mpf(0)
            for l in range(1, L):
                w = (2 * l + 1) * mp.exp(-l * (l + 1) * t / 2)
                total += w * p_cur
                if sn != 0:
                    dtotal += -w * l * (p_prev - c * p_cur) / sn
                p_prev, p_cur = p_cur, ((2 * l + 1) * c * p_cur - l * p_prev) / (l + 1)
            return mp.log(total / (4 * mp.pi)), dtotal / total

    def so3_ref(w, t):
        """IGSO(3) character series Σ (2l+1) e^{-l(l+1)t/2} sin((l+½)w)/sin(w/2) / 8π² and its w-derivative."""
        dps = needed_digits(w, t)
        if dps > 400:
            return None
        with mp.workdps(dps):
            w, t = mp.mpf(w), mp.mpf(t)
            L = int(mp.sqrt(2 * (dps + 10) * mp.log(10) / t)) + 10
            total = mp.mpf(0)
            dtotal = mp.mpf(0)
            s2, c2 = mp.sin(w / 2), mp.cos(w / 2)
            for l in range(L):
                a = (2 * l + 1) * mp.exp(-l * (l + 1) * t / 2)
                h = l + mp.mpf(1) / 2
                if w == 0:
                    total += a * (2 * l + 1)
                else:
                    total += a * mp.sin(h * w) / s2
                    dtotal += a * (h * mp.cos(h * w) * s2 - mp.sin(h * w) * c2 / 2) / s2**2
            return mp.log(total / (8 * mp.pi**2)), dtotal / total

    out = []
    for name, ours, ref in (("sphere S^2", lambda r, t: sphere_heat_log_prob_and_score(r, t, 2), s2_ref),
                            ("SO(3)", igso3_log_prob_and_score, so3_ref)):
        worst_lp = worst_sc = 0.0
        where_lp = where_sc = None
        checked = 0
        for t in times:
            r = torch.tensor(dists, dtype=torch.float64)
            lp, sc = ours(r, torch.full_like(r, t))
            for i, rr in enumerate(dists):
                rv = ref(rr, t)
                if rv is None:
                    continue
                checked += 1
                e1 = abs(float(lp[i]) - float(rv[0])) / max(1.0, abs(float(rv[0])))
                e2 = abs(float(sc[i]) - float(rv[1])) / max(1.0, abs(float(rv[1])))
                if e1 > worst_lp:
                    worst_lp, where_lp = e1, (t, rr)
                if e2 > worst_sc:
                    worst_sc, where_sc = e2, (t, rr)
        out.append({"space": name, "points_checked": checked, "worst_log_kernel_rel_err": worst_lp,
                    "at_log_kernel": where_lp, "worst_score_rel_err": worst_sc, "at_score": where_sc})
    return out


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--n", type=int, default=1_000_000)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--skip-accuracy", action="store_true")
    ap.add_argument("--json")
    a = ap.parse_args()
    torch.set_num_threads(a.threads)
    cost = cost_rows(a.n, a.repeats)
    print(f"kernel cost: log_kernel + score vs Normal.log_prob, n = {a.n}, threads = {a.threads}, best of {a.repeats}")
    print(f"{'space':<12} {'heatwalk s':>11} {'Normal s':>10} {'ratio':>7} {'target':>7}")
    for r in cost:
        print(f"{r['space']:<12} {r['heatwalk_s']:>11.4f} {r['normal_log_prob_s']:>10.4f} {r['ratio']:>7.1f} "
              f"{'<=' + str(r['target_ratio']):>7}")
    acc = [] if a.skip_accuracy else accuracy_rows()
    if acc:
        print("\naccuracy vs 50-digit mpmath series (t in [1e-5, 50], distance in [0, π]; relative to max(1,|v|))")
        print(f"{'space':<12} {'points':>7} {'log_kernel':>11} {'score':>11}")
        for r in acc:
            print(f"{r['space']:<12} {r['points_checked']:>7} {r['worst_log_kernel_rel_err']:>11.2e} "
                  f"{r['worst_score_rel_err']:>11.2e}")
    if a.json:
        with open(a.json, "w") as f:
            json.dump({"cost": cost, "accuracy": acc}, f, indent=2)


if __name__ == "__main__":
    main()
