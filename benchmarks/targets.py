"""Target laws of the fit-quality benchmark, each with an exact sampler, log-density and entropy.

Imported by ``benchmarks/fit_quality.py`` and by ``tests/test_benchmark_targets.py`` (which
puts ``benchmarks/`` on ``sys.path``); the module is not installed with heatwalk.

Densities are in nats w.r.t. heatwalk's reference measure of each space (arc-length area
on T², area on S², the bi-invariant volume of total mass 8π² on SO(3), Lebesgue measure on
the first two parts of the 2-simplex, counting measure on sequences). Entropies are
H = -E log p w.r.t. the same measure.

1. ``TorusBanana`` on T²: φ ~ vM(μ, κ1), ψ | φ ~ vM(ν + a sin φ, κ2). H = H_vM(κ1) + H_vM(κ2)
   exactly: the conditional entropy of ψ given φ = φ0 is that of a von Mises law, which does
   not depend on its location; H_vM from ``scipy.stats.vonmises(κ).entropy()``.
2. ``SphereRing`` on S²: p(x) ∝ exp(-κ (μ·x - c)²). With u = μ·x (Archimedes: the area
   element is 2π du, u uniform under the uniform law) H = -∫_{-1}^{1} 2π p(u) log p(u) du,
   by 1-D adaptive quadrature. u is a normal law N(c, 1/(2κ)) truncated to [-1, 1], drawn by
   inverse CDF (``scipy.stats.truncnorm``); the azimuth about μ is uniform.
3. ``SO3Bimodal``: equal mixture of two IGSO(3) heat kernels at time t (heatwalk's exact
   sampler and log-kernel) around rotations at angle d apart. H = H(IGSO3_t) + log 2 - δ,
   H(IGSO3_t) = -∫_0^π f log f · 8π(1 - cos w) dw (1-D quadrature; f the kernel as a function
   of the angle w), and 0 <= δ <= ``overlap_bound()`` (derivation there), < 1e-8 here.
4. ``SimplexDirichletMixture``: mixture of Dirichlet laws (``scipy.stats.dirichlet``); H by
   2-D Gauss–Legendre quadrature on the triangle w.r.t. Lebesgue measure on (x1, x2).
5. ``MarkovSource`` on ``Categories(4, 12)``: a stationary first-order Markov chain. By the
   chain rule H = H(π) + (L - 1) Σ_i π_i H(T_i·) exactly.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.integrate
import scipy.special
import scipy.stats
import torch

from heatwalk.kernels.igso3 import igso3_log_prob_and_dlog
from heatwalk.spaces import SO3, Categories, Simplex, Sphere, Torus
from heatwalk.spaces.so3 import exp_so3

LOG_TWO_PI = math.log(2 * math.pi)


def _logsumexp(a, axis=0):
    return scipy.special.logsumexp(a, axis=axis)


# ------------------------------------------------------------------------------------- T²
class TorusBanana:
    """φ ~ vM(mu, k1); ψ | φ ~ vM(nu + a sin φ, k2): a curved law that wraps around ψ."""

    name = "torus_banana"
    label = "T^2 banana"

    def __init__(self, mu=0.5, nu=-1.0, a=2.0, k1=2.0, k2=4.0):
        self.mu, self.nu, self.a, self.k1, self.k2 = mu, nu, a, k1, k2
        self.space = Torus(2)

    def sample(self, n: int, seed: int) -> torch.Tensor:
        rng = np.random.default_rng(seed)
        phi = scipy.stats.vonmises.rvs(self.k1, loc=self.mu, size=n, random_state=rng)
        psi = scipy.stats.vonmises.rvs(self.k2, loc=self.nu + self.a * np.sin(phi), random_state=rng)
        return self.space.validate(np.stack([phi, psi], 1))

    def log_prob(self, x) -> np.ndarray:
        x = np.asarray(x, dtype=np.float64)
        phi, psi = x[:, 0], x[:, 1]
        return (scipy.stats.vonmises.logpdf(phi, self.k1, loc=self.mu)
                + scipy.stats.vonmises.logpdf(psi, self.k2, loc=self.nu + self.a * np.sin(phi)))

    def entropy(self) -> float:
        return float(scipy.stats.vonmises(self.k1).entropy() + scipy.stats.vonmises(self.k2).entropy())


# ------------------------------------------------------------------------------------- S²
class SphereRing:
    """p(x) ∝ exp(-kappa (mu·x - c)²) on S²: a band around the circle mu·x = c."""

    name = "sphere_ring"
    label = "S^2 ring"

    def __init__(self, mu=(0.3, -0.4, 0.866), kappa=20.0, c=0.3):
        m = np.asarray(mu, dtype=np.float64)
        self.mu = m / np.linalg.norm(m)
        self.kappa, self.c = float(kappa), float(c)
        self.space = Sphere(2)
        self._scale = 1.0 / math.sqrt(2 * self.kappa)
        # Z = ∫_{S²} exp(-κ(u - c)²) dA = 2π ∫_{-1}^{1} exp(-κ(u - c)²) du (Gaussian integral, erf form)
        s = math.sqrt(self.kappa)
        z_u = 0.5 * math.sqrt(math.pi / self.kappa) * (math.erf(s * (1 - self.c)) + math.erf(s * (1 + self.c)))
        self.log_z = math.log(2 * math.pi * z_u)

    def log_density_u(self, u):
        """log p(x) as a function of u = mu·x (nats, w.r.t. area on S²)."""
        return -self.kappa * (np.asarray(u) - self.c) ** 2 - self.log_z

    def sample(self, n: int, seed: int) -> torch.Tensor:
        rng = np.random.default_rng(seed)
        lo, hi = (-1 - self.c) / self._scale, (1 - self.c) / self._scale
        u = scipy.stats.truncnorm.rvs(lo, hi, loc=self.c, scale=self._scale, size=n, random_state=rng)
        az = rng.uniform(-math.pi, math.pi, size=n)
        e1 = np.cross(self.mu, [1.0, 0.0, 0.0] if abs(self.mu[0]) < 0.9 else [0.0, 1.0, 0.0])
        e1 /= np.linalg.norm(e1)
        e2 = np.cross(self.mu, e1)
        r = np.sqrt(np.clip(1 - u * u, 0, None))
        x = u[:, None] * self.mu + r[:, None] * (np.cos(az)[:, None] * e1 + np.sin(az)[:, None] * e2)
        return self.space.validate(x)

    def log_prob(self, x) -> np.ndarray:
        return self.log_density_u(np.asarray(x, dtype=np.float64) @ self.mu)

    def entropy(self) -> float:
        def integrand(u):
            lp = float(self.log_density_u(u))
            return -2 * math.pi * math.exp(lp) * lp

        val, _ = scipy.integrate.quad(integrand, -1, 1, points=[self.c], epsabs=1e-13, epsrel=1e-12, limit=200)
        return float(val)


# ------------------------------------------------------------------------------------ SO(3)
def igso3_log_f(w, t: float) -> np.ndarray:
    """log of the IGSO(3) density (heatwalk's kernel) at angles ``w``, time t, w.r.t. the SO(3) volume."""
    w = torch.as_tensor(np.asarray(w, dtype=np.float64))
    return igso3_log_prob_and_dlog(w, torch.full_like(w, t))[0].numpy()


def _quad_angle(fn, a: float, b: float, t: float) -> float:
    """∫_a^b fn(w) 8π(1 - cos w) dw by adaptive quadrature, with breakpoints on the kernel's scale sqrt(t)."""
    pts = [p for p in (math.sqrt(t) * k for k in (1, 2, 4, 8)) if a < p < b]
    val, _ = scipy.integrate.quad(lambda w: fn(w) * 8 * math.pi * (1 - math.cos(w)), a, b, points=pts or None,
                                  epsabs=1e-14, epsrel=1e-12, limit=400)
    return float(val)


def igso3_entropy(t: float) -> float:
    """H(IGSO3_t) = -∫_0^π f log f 8π(1 - cos w) dw, f from heatwalk's kernel (scipy quad)."""
    def g(w):
        lf = float(igso3_log_f([w], t)[0])
        return -math.exp(lf) * lf
    return _quad_angle(g, 0.0, math.pi, t)


class SO3Bimodal:
    """½ IGSO3_t(· | R1) + ½ IGSO3_t(· | R2) with R1 = I and R2 a rotation by ``angle`` (d(R1, R2) = angle)."""

    name = "so3_bimodal"
    label = "SO(3) bimodal"

    def __init__(self, t=0.05, angle=math.pi, axis=(1.0, 2.0, -1.0)):
        self.t, self.angle = float(t), float(angle)
        ax = torch.tensor(axis, dtype=torch.float64)
        ax = ax / torch.linalg.vector_norm(ax)
        self.centres = torch.stack([torch.eye(3, dtype=torch.float64), exp_so3(self.angle * ax)])
        self.space = SO3()

    def sample(self, n: int, seed: int) -> torch.Tensor:
        g = torch.Generator().manual_seed(seed)
        k = torch.randint(2, (n,), generator=g)
        return self.space.sample_forward(self.centres[k], self.t, g)

    def log_prob(self, x) -> np.ndarray:
        x = torch.as_tensor(x, dtype=torch.float64)
        lk = torch.stack([self.space.log_kernel(x, c.expand_as(x), self.t) for c in self.centres]).numpy()
        return _logsumexp(lk, 0) - math.log(2)

    def overlap_bound(self) -> float:
        """Upper bound on δ = H(IGSO3_t) + log 2 - H(mixture) >= 0.

        H(mix) = log 2 + H(f) - ½(δ1 + δ2), δi = ∫ p_i log(1 + p_j/p_i), δ1 = δ2 by symmetry.
        f is decreasing in the angle with maximum M = f(0), and w1 + w2 >= d (triangle
        inequality). On {w1 < w2}: w2 > d/2 and log(1 + y) <= y, so that part of δ1 is
        <= ∫_{w2 > d/2} p2 = T(d/2), the kernel's tail mass beyond d/2. On {w1 >= w2}:
        w1 >= d/2, p2 <= M and a log(1 + M/a) <= a log(2M/a) (a <= M), so that part is
        <= ∫_{w >= d/2} f log(2M/f) dvol. Both are 1-D integrals over the angle.
        """
        t, r = self.t, self.angle / 2
        log_m = float(igso3_log_f([0.0], t)[0])
        tail = _quad_angle(lambda w: math.exp(float(igso3_log_f([w], t)[0])), r, math.pi, t)

        def g(w):
            lf = float(igso3_log_f([w], t)[0])
            return math.exp(lf) * (math.log(2) + log_m - lf)
        return tail + _quad_angle(g, r, math.pi, t)

    def entropy(self) -> float:
        """H(IGSO3_t) + log 2 (the overlap δ is below ``overlap_bound()``)."""
        return igso3_entropy(self.t) + math.log(2)


# ------------------------------------------------------------------------------------ simplex
def triangle_quadrature(fn, n: int = 400):
    """∫ fn(x1, x2, x3) dx1 dx2 over {x1, x2 > 0, x1 + x2 < 1} (x3 = 1 - x1 - x2).

    Duffy map x1 = u, x2 = (1 - u) v (Jacobian 1 - u) and an n x n Gauss–Legendre rule on (0, 1)².
    """
    z, w = np.polynomial.legendre.leggauss(n)
    z, w = 0.5 * (z + 1), 0.5 * w
    u, v = np.meshgrid(z, z, indexing="ij")
    wu = np.outer(w, w) * (1 - u)
    x1, x2 = u, (1 - u) * v
    x3 = (1 - u) * (1 - v)
    return float((wu * fn(x1, x2, x3)).sum())


class SimplexDirichletMixture:
    """Σ_k w_k Dirichlet(alpha_k) on the 2-simplex."""

    name = "simplex_dirichlet"
    label = "simplex Dirichlet mix"

    def __init__(self, weights=(0.45, 0.55), alphas=((9.0, 3.0, 2.5), (2.5, 5.0, 9.0))):
        self.weights = np.asarray(weights, dtype=np.float64)
        self.alphas = np.asarray(alphas, dtype=np.float64)
        self.space = Simplex(3)

    def sample(self, n: int, seed: int) -> torch.Tensor:
        rng = np.random.default_rng(seed)
        k = rng.choice(len(self.weights), size=n, p=self.weights)
        x = rng.gamma(self.alphas[k])
        x = x / x.sum(1, keepdims=True)
        x = np.clip(x, 1e-300, None)
        return self.space.validate(x / x.sum(1, keepdims=True))

    def _log_components(self, x1, x2, x3):
        lx = np.log(np.stack([x1, x2, x3], -1))
        out = []
        for w, a in zip(self.weights, self.alphas):
            log_b = scipy.special.gammaln(a).sum() - scipy.special.gammaln(a.sum())
            out.append(math.log(w) + (lx * (a - 1)).sum(-1) - log_b)
        return np.stack(out, 0)

    def log_prob(self, x) -> np.ndarray:
        x = np.asarray(x, dtype=np.float64)
        return _logsumexp(self._log_components(x[:, 0], x[:, 1], x[:, 2]), 0)

    def entropy(self, n: int = 400) -> float:
        def fn(x1, x2, x3):
            lp = _logsumexp(self._log_components(x1, x2, x3), 0)
            return -np.exp(lp) * lp
        return triangle_quadrature(fn, n)


# ------------------------------------------------------------------------------------ sequences
class MarkovSource:
    """Stationary first-order Markov chain on K = 4 states, sequences of length L = 12."""

    name = "categories_markov"
    label = "Categories(4,12) Markov"

    T = np.array([[0.70, 0.15, 0.10, 0.05],
                  [0.10, 0.60, 0.25, 0.05],
                  [0.05, 0.10, 0.50, 0.35],
                  [0.30, 0.05, 0.15, 0.50]])

    def __init__(self, L: int = 12):
        self.K, self.L = self.T.shape[0], L
        w, v = np.linalg.eig(self.T.T)
        pi = np.real(v[:, np.argmin(np.abs(w - 1))])
        self.pi = pi / pi.sum()
        self.space = Categories(self.K, L)

    def sample(self, n: int, seed: int) -> torch.Tensor:
        rng = np.random.default_rng(seed)
        x = np.empty((n, self.L), dtype=np.int64)
        cdf_pi, cdf_t = np.cumsum(self.pi), np.cumsum(self.T, 1)
        x[:, 0] = np.minimum((rng.random(n)[:, None] > cdf_pi).sum(1), self.K - 1)
        for i in range(1, self.L):
            x[:, i] = np.minimum((rng.random(n)[:, None] > cdf_t[x[:, i - 1]]).sum(1), self.K - 1)
        return self.space.validate(torch.as_tensor(x))

    def log_prob(self, x) -> np.ndarray:
        x = np.asarray(x, dtype=np.int64)
        return np.log(self.pi[x[:, 0]]) + np.log(self.T[x[:, :-1], x[:, 1:]]).sum(1)

    def entropy(self) -> float:
        h_pi = -(self.pi * np.log(self.pi)).sum()
        h_rows = -(self.T * np.log(self.T)).sum(1)
        return float(h_pi + (self.L - 1) * (self.pi * h_rows).sum())


TARGETS = [TorusBanana, SphereRing, SO3Bimodal, SimplexDirichletMixture, MarkovSource]
