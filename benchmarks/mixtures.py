"""Classical mixture baselines of the fit-quality benchmark, fitted by EM in numpy (number of components by BIC).

Each family gives per-component log-densities w.r.t. heatwalk's reference measure of the
space, a weighted M-step, a parameter count and a sampler:

- ``VonMisesProduct`` (T^n): products of von Mises laws. M-step: weighted circular mean and
  κ = A1^{-1}(R̄) by the approximation of Best & Fisher (1981, "The BIAS of the maximum
  likelihood estimators of the von Mises-Fisher concentration parameters", Commun. Stat.
  B10, 493-502; as tabulated in Fisher 1993, *Statistical Analysis of Circular Data*, eq. 4.40).
- ``VonMisesFisher`` (S^{p-1}, here S²): von Mises–Fisher laws; κ ≈ R̄(p - R̄²)/(1 - R̄²)
  (Banerjee, Dhillon, Ghosh & Sra 2005, JMLR 6, 1345-1382, eq. 4.4). Sampling: exact
  inverse CDF of w = μ·x on S².
- ``QuaternionVMF`` (SO(3)): vMF laws on unit quaternions made antipodally symmetric,
  ½ vMF(q; m, κ) + ½ vMF(-q; m, κ), so each is a law on SO(3) = S³/±1. The sign is a
  latent variable of the EM (its posterior mean is tanh(κ m·q)). Density on SO(3) w.r.t.
  the bi-invariant volume (total 8π²) = density on S³ (area, total 2π²) / 4, since the
  double cover S³ → SO(3) doubles lengths (volume x 8) and is 2-to-1. Sampling: Wood's
  (1994, Commun. Stat. Simul. 23, 157-164) rejection sampler, capped at 200 rounds.
- ``IlrGaussian`` (simplex): Gaussians with full covariance in ilr coordinates; density
  w.r.t. Lebesgue measure on the first K-1 parts = N(ilr x) · d(Aitchison vol)/d(Lebesgue)
  (``Simplex.log_volume_density``).
- ``fit_bigram`` (Categories): a first-order Markov (bigram) model fitted by counts with
  add-1/2 smoothing (no components, no BIC) — the family of the benchmark's source.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.special
import torch

LOG_2PI = math.log(2 * math.pi)


def _normalise(v):
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def a1_inverse(r):
    """Best–Fisher approximation of the inverse of A1(κ) = I1(κ)/I0(κ)."""
    r = np.clip(np.asarray(r, dtype=np.float64), 1e-9, 1 - 1e-9)
    return np.where(r < 0.53, 2 * r + r**3 + 5 * r**5 / 6,
                    np.where(r < 0.85, -0.4 + 1.39 * r + 0.43 / (1 - r), 1 / (r**3 - 4 * r**2 + 3 * r)))


def banerjee_kappa(r, p):
    r = np.clip(np.asarray(r, dtype=np.float64), 1e-9, 1 - 1e-9)
    return r * (p - r * r) / (1 - r * r)


class VonMisesProduct:
    def __init__(self, n_angles):
        self.d = n_angles

    def n_params(self, k):
        return k * 2 * self.d + k - 1

    def init(self, x, k, rng):
        return {"m": x[rng.choice(len(x), k, replace=False)], "kappa": np.full((k, self.d), 2.0)}

    def log_comp(self, x, p):
        kap = p["kappa"]
        lin = np.log(scipy.special.i0e(kap)) + kap + LOG_2PI  # log(2π I0(κ)), (k, d)
        c = np.cos(x[None] - p["m"][:, None])  # (k, n, d)
        return (kap[:, None] * c - lin[:, None]).sum(-1)

    def mstep(self, x, r, p):
        w = r.sum(1, keepdims=True)  # (k, 1)
        cs, sn = r @ np.cos(x), r @ np.sin(x)  # (k, d)
        m = np.arctan2(sn, cs)
        rbar = np.hypot(cs, sn) / w
        return {"m": m, "kappa": np.minimum(a1_inverse(rbar), 1e3)}

    def sample(self, p, comp, rng):
        return np.remainder(rng.vonmises(p["m"][comp], p["kappa"][comp]) + math.pi, 2 * math.pi) - math.pi


class VonMisesFisher:
    """vMF on S² (p = 3)."""
    p = 3

    def n_params(self, k):
        return k * 3 + k - 1

    def init(self, x, k, rng):
        return {"m": x[rng.choice(len(x), k, replace=False)], "kappa": np.full(k, 5.0)}

    def log_comp(self, x, p):
        kap = p["kappa"]
        # log C3(κ) = log κ - log 2π - κ - log(1 - e^{-2κ})
        logc = np.log(kap) - LOG_2PI - kap - np.log1p(-np.exp(-2 * kap))
        return logc[:, None] + kap[:, None] * (p["m"] @ x.T)

    def mstep(self, x, r, p):
        s = r @ x
        w = r.sum(1)
        return {"m": _normalise(s), "kappa": np.minimum(banerjee_kappa(np.linalg.norm(s, axis=1) / w, 3), 1e4)}

    def sample(self, p, comp, rng):
        m, kap = p["m"][comp], p["kappa"][comp]
        u = rng.random(len(comp))
        w = 1 + np.log(u + (1 - u) * np.exp(-2 * kap)) / kap  # exact inverse CDF of μ·x
        v = _normalise(rng.standard_normal((len(comp), 3)))
        v = _normalise(v - (v * m).sum(1, keepdims=True) * m)
        return w[:, None] * m + np.sqrt(np.clip(1 - w * w, 0, None))[:, None] * v


def wood_vmf(m, kap, rng, max_rounds=200):
    """Wood (1994) sampler of vMF on S^{p-1}, one draw per row of m (n, p) with κ (n,); capped rejection."""
    n, p = m.shape
    b = (-2 * kap + np.sqrt(4 * kap**2 + (p - 1) ** 2)) / (p - 1)
    x0 = (1 - b) / (1 + b)
    c = kap * x0 + (p - 1) * np.log(1 - x0**2)
    w = np.full(n, np.nan)
    todo = np.arange(n)
    for _ in range(max_rounds):
        if todo.size == 0:
            break
        z = rng.beta((p - 1) / 2, (p - 1) / 2, size=todo.size)
        ww = (1 - (1 + b[todo]) * z) / (1 - (1 - b[todo]) * z)
        ok = kap[todo] * ww + (p - 1) * np.log(1 - x0[todo] * ww) - c[todo] >= np.log(rng.random(todo.size))
        w[todo[ok]] = ww[ok]
        todo = todo[~ok]
    if todo.size:
        raise RuntimeError(f"Wood's vMF sampler: {todo.size} draws not accepted after {max_rounds} rounds")
    v = _normalise(rng.standard_normal((n, p)))
    v = _normalise(v - (v * m).sum(1, keepdims=True) * m)
    return w[:, None] * m + np.sqrt(np.clip(1 - w * w, 0, None))[:, None] * v


class QuaternionVMF:
    """Antipodally symmetric vMF on S³ as a law on SO(3); data are unit quaternions (n, 4)."""

    def n_params(self, k):
        return k * 4 + k - 1

    def init(self, q, k, rng):
        return {"m": q[rng.choice(len(q), k, replace=False)], "kappa": np.full(k, 10.0)}

    def log_comp(self, q, p):
        kap = p["kappa"]
        logc4 = np.log(kap) - math.log(4 * math.pi**2) - (np.log(scipy.special.ive(1, kap)) + kap)
        a = np.abs(p["m"] @ q.T) * kap[:, None]
        log_cosh = a + np.log1p(np.exp(-2 * a)) - math.log(2)
        return logc4[:, None] + log_cosh - math.log(4)  # /4: from S³ area to the SO(3) volume

    def mstep(self, q, r, p):
        s = np.tanh(p["kappa"][:, None] * (p["m"] @ q.T))  # E[sign | q] for each component
        v = (r * s) @ q
        w = r.sum(1)
        return {"m": _normalise(v), "kappa": np.minimum(banerjee_kappa(np.linalg.norm(v, axis=1) / w, 4), 1e5)}

    def sample(self, p, comp, rng):
        return wood_vmf(p["m"][comp], p["kappa"][comp], rng)


class IlrGaussian:
    """Gaussian in ilr coordinates (2-D for the 2-simplex); data are ilr coordinates y (n, 2)."""

    def __init__(self, dim=2):
        self.d = dim

    def n_params(self, k):
        d = self.d
        return k * (d + d * (d + 1) // 2) + k - 1

    def init(self, y, k, rng):
        return {"mu": y[rng.choice(len(y), k, replace=False)], "cov": np.repeat(np.cov(y.T)[None], k, 0)}

    def log_comp(self, y, p):
        out = []
        for mu, cov in zip(p["mu"], p["cov"]):
            ch = np.linalg.cholesky(cov)
            z = np.linalg.solve(ch, (y - mu).T)
            out.append(-0.5 * (z * z).sum(0) - np.log(np.diag(ch)).sum() - 0.5 * self.d * LOG_2PI)
        return np.stack(out)

    def mstep(self, y, r, p):
        w = r.sum(1)
        mu = (r @ y) / w[:, None]
        cov = []
        for j in range(len(w)):
            dy = y - mu[j]
            cov.append((r[j][:, None] * dy).T @ dy / w[j] + 1e-6 * np.eye(self.d))
        return {"mu": mu, "cov": np.stack(cov)}

    def sample(self, p, comp, rng):
        out = np.empty((len(comp), self.d))
        for j in range(len(p["mu"])):
            sel = comp == j
            out[sel] = rng.multivariate_normal(p["mu"][j], p["cov"][j], size=int(sel.sum()))
        return out


def em(family, x, k, rng, iters=300, tol=1e-7):
    """EM for a k-component mixture of ``family``; returns (params, log weights, total log-likelihood)."""
    p = family.init(x, k, rng)
    logw = np.full(k, -math.log(k))
    prev = -math.inf
    for _ in range(iters):
        lc = family.log_comp(x, p) + logw[:, None]
        ll_i = scipy.special.logsumexp(lc, axis=0)
        r = np.exp(lc - ll_i)
        ll = float(ll_i.sum())
        nk = r.sum(1)
        if nk.min() < 1e-8 * len(x):  # an emptied component: stop here (its BIC is then not chosen)
            break
        logw = np.log(nk / len(x))
        p = family.mstep(x, r, p)
        if ll - prev < tol * abs(ll):
            break
        prev = ll
    lc = family.log_comp(x, p) + logw[:, None]
    return p, logw, float(scipy.special.logsumexp(lc, axis=0).sum())


def fit_by_bic(family, x, k_max, seed, restarts=2):
    """Fit k = 1..k_max components (``restarts`` initialisations each); keep the lowest BIC."""
    rng = np.random.default_rng(seed)
    best, table = None, []
    for k in range(1, k_max + 1):
        fits = [em(family, x, k, rng) for _ in range(restarts if k > 1 else 1)]
        p, logw, ll = max(fits, key=lambda f: f[2])
        bic = -2 * ll + family.n_params(k) * math.log(len(x))
        table.append({"k": k, "loglik": ll, "bic": bic})
        if best is None or bic < best["bic"]:
            best = {"k": k, "params": p, "logw": logw, "bic": bic}
    best["bic_table"] = table
    return best


def mixture_log_prob(family, fit, x):
    return scipy.special.logsumexp(family.log_comp(x, fit["params"]) + fit["logw"][:, None], axis=0)


def mixture_sample(family, fit, n, seed):
    rng = np.random.default_rng(seed)
    comp = rng.choice(len(fit["logw"]), size=n, p=np.exp(fit["logw"]) / np.exp(fit["logw"]).sum())
    return family.sample(fit["params"], comp, rng)


# ----- bigram model for sequences ----------------------------------------------------------------
def fit_bigram(x, K, alpha=0.5):
    """Initial-state law and one transition matrix shared by all positions, by counts + alpha smoothing."""
    x = np.asarray(x)
    init = np.bincount(x[:, 0], minlength=K) + alpha
    trans = np.full((K, K), alpha)
    np.add.at(trans, (x[:, :-1].ravel(), x[:, 1:].ravel()), 1)
    return {"init": init / init.sum(), "T": trans / trans.sum(1, keepdims=True)}


def bigram_log_prob(b, x):
    x = np.asarray(x)
    return np.log(b["init"][x[:, 0]]) + np.log(b["T"][x[:, :-1], x[:, 1:]]).sum(1)


def bigram_sample(b, n, L, seed):
    rng = np.random.default_rng(seed)
    K = len(b["init"])
    x = np.empty((n, L), dtype=np.int64)
    x[:, 0] = rng.choice(K, size=n, p=b["init"])
    cdf = np.cumsum(b["T"], 1)
    for i in range(1, L):
        x[:, i] = np.minimum((rng.random(n)[:, None] > cdf[x[:, i - 1]]).sum(1), K - 1)
    return torch.as_tensor(x)
