"""Conditional targets of the fit-quality benchmark: laws with exact conditionals, log-densities and entropies.

Imported by ``benchmarks/conditional_quality.py`` and by ``tests/test_conditional_targets.py``
(which puts ``benchmarks/`` on ``sys.path``); not installed with heatwalk. Densities are in nats
w.r.t. arc length on each circle (arc-length area on T²), counting measure on categories.

Circular laws (one angle, wrapped to [-π, π)):

- ``VonMises(mu, kappa)``: density e^{κ cos(θ - μ)} / (2π I0(κ)); H from
  ``scipy.stats.vonmises(κ).entropy()``.
- ``WrappedCauchy(mu, rho)``: density (1 - ρ²) / (2π (1 + ρ² - 2ρ cos(θ - μ))), drawn by
  wrapping a Cauchy(μ, γ) law with γ = -log ρ (the wrapped law's first trigonometric moment is
  the Cauchy characteristic function e^{iμ - γ}); H = log(2π (1 - ρ²)) in closed form (checked
  against quadrature in the tests).
- ``CircularMixture(weights, laws)``: H by 1-D adaptive quadrature (scipy quad).

Targets:

1. ``TorusClasses`` (labels on T²): three classes, each a ``ChainedTorusLaw`` φ ~ F,
   ψ | φ ~ vM(ν + a sin φ + b φ, κ) with b ∈ {0, 1} (so the location is 2π-periodic modulo 2π).
   H(X | class) = H(F) + H_vM(κ) exactly: given φ the conditional entropy of a von Mises law does
   not depend on its location.
2. ``TorusInpainting`` (fixed angle 0 on T²): a ``ChainedTorusLaw`` banana, whose conditional
   p(ψ | φ = a) is vM(ν + α sin a, κ) in closed form.
3. ``MixedCategories`` (T¹ × Categories(3, 1)): category c ~ π, angle | c ~ a circular law.
   H = H(π) + Σ_c π_c H(angle | c); the angle's marginal entropy H(angle) by quadrature, so
   H(category | angle) = H - H(angle).
"""

from __future__ import annotations

import math

import numpy as np
import scipy.integrate
import scipy.special
import scipy.stats
import torch

from heatwalk.spaces import Categories, Product, Torus

TWO_PI = 2 * math.pi


def wrap(a):
    """Angles wrapped to [-π, π)."""
    return np.remainder(np.asarray(a, dtype=np.float64) + math.pi, TWO_PI) - math.pi


def circle_quad(fn) -> float:
    """∫_{-π}^{π} fn(θ) dθ by adaptive quadrature (scipy quad, breakpoints every π/4)."""
    pts = [-math.pi + k * math.pi / 4 for k in range(1, 8)]
    val, _ = scipy.integrate.quad(lambda th: float(fn(th)), -math.pi, math.pi, points=pts, epsabs=1e-13,
                                  epsrel=1e-12, limit=400)
    return float(val)


# ----- circular laws -------------------------------------------------------------------------------
class VonMises:
    def __init__(self, mu: float, kappa: float):
        self.mu, self.kappa = float(mu), float(kappa)

    def log_prob(self, th):
        return scipy.stats.vonmises.logpdf(wrap(th), self.kappa, loc=self.mu)

    def sample(self, n: int, rng) -> np.ndarray:
        return wrap(rng.vonmises(self.mu, self.kappa, size=n))

    def entropy(self) -> float:
        return float(scipy.stats.vonmises(self.kappa).entropy())

    def __repr__(self):
        return f"vM({self.mu:g}, {self.kappa:g})"


class WrappedCauchy:
    def __init__(self, mu: float, rho: float):
        self.mu, self.rho = float(mu), float(rho)

    def log_prob(self, th):
        r = self.rho
        return np.log1p(-r * r) - math.log(TWO_PI) - np.log(1 + r * r - 2 * r * np.cos(np.asarray(th) - self.mu))

    def sample(self, n: int, rng) -> np.ndarray:
        return wrap(self.mu - math.log(self.rho) * rng.standard_cauchy(n))

    def entropy(self) -> float:
        return math.log(TWO_PI * (1 - self.rho**2))

    def __repr__(self):
        return f"wC({self.mu:g}, {self.rho:g})"


class CircularMixture:
    def __init__(self, weights, laws):
        self.weights = np.asarray(weights, dtype=np.float64)
        self.laws = list(laws)

    def log_prob(self, th):
        th = np.asarray(th, dtype=np.float64)
        return scipy.special.logsumexp([math.log(w) + law.log_prob(th) for w, law in zip(self.weights, self.laws)],
                                       axis=0)

    def sample(self, n: int, rng) -> np.ndarray:
        k = rng.choice(len(self.weights), size=n, p=self.weights)
        out = np.empty(n)
        for j, law in enumerate(self.laws):
            sel = k == j
            out[sel] = law.sample(int(sel.sum()), rng)
        return out

    def entropy(self) -> float:
        return circle_quad(lambda th: -math.exp(float(self.log_prob(th))) * float(self.log_prob(th)))

    def __repr__(self):
        return " + ".join(f"{w:g}·{law!r}" for w, law in zip(self.weights, self.laws))


# ----- laws on T² ----------------------------------------------------------------------------------
class ChainedTorusLaw:
    """φ ~ ``first`` (a circular law); ψ | φ ~ vM(nu + a sin φ + b φ, kappa), b an integer."""

    def __init__(self, first, nu: float, a: float, b: int, kappa: float):
        self.first, self.nu, self.a, self.b, self.kappa = first, float(nu), float(a), int(b), float(kappa)

    def location(self, phi):
        return wrap(self.nu + self.a * np.sin(phi) + self.b * np.asarray(phi))

    def conditional(self, phi0: float) -> VonMises:
        """The exact law of ψ given φ = phi0."""
        return VonMises(float(self.location(phi0)), self.kappa)

    def sample(self, n: int, rng) -> np.ndarray:
        phi = self.first.sample(n, rng)
        psi = wrap(rng.vonmises(self.location(phi), self.kappa))
        return np.stack([phi, psi], 1)

    def log_prob(self, x) -> np.ndarray:
        x = np.asarray(x, dtype=np.float64)
        return self.first.log_prob(x[:, 0]) + scipy.stats.vonmises.logpdf(x[:, 1], self.kappa,
                                                                         loc=self.location(x[:, 0]))

    def entropy(self) -> float:
        return self.first.entropy() + float(scipy.stats.vonmises(self.kappa).entropy())


class TorusClasses:
    """Three labelled classes on T² (a banana, a product spot, a heavy-tailed diagonal band)."""

    name = "torus_labels"
    label = "T^2 | class"

    def __init__(self):
        self.space = Torus(2)
        self.classes = ["ridge", "spot", "band"]
        self.weights = np.array([0.4, 0.35, 0.25])
        self.laws = [ChainedTorusLaw(VonMises(-1.0, 1.5), nu=1.0, a=1.5, b=0, kappa=5.0),
                     ChainedTorusLaw(VonMises(2.0, 6.0), nu=-2.0, a=0.0, b=0, kappa=6.0),
                     ChainedTorusLaw(WrappedCauchy(0.0, 0.6), nu=2.5, a=0.0, b=1, kappa=8.0)]

    def sample(self, n: int, seed: int) -> tuple[torch.Tensor, np.ndarray]:
        """(points (n, 2), class names (n,))."""
        rng = np.random.default_rng(seed)
        k = rng.choice(len(self.classes), size=n, p=self.weights)
        x = np.empty((n, 2))
        for j, law in enumerate(self.laws):
            sel = k == j
            x[sel] = law.sample(int(sel.sum()), rng)
        return self.space.validate(x), np.asarray(self.classes)[k]

    def log_prob(self, x, names) -> np.ndarray:
        """log p(x | class), nats w.r.t. arc-length area."""
        x, names = np.asarray(x, dtype=np.float64), np.asarray(names)
        out = np.full(len(x), np.nan)
        for c, law in zip(self.classes, self.laws):
            sel = names == c
            out[sel] = law.log_prob(x[sel])
        return out

    def class_entropy(self, name: str) -> float:
        return self.laws[self.classes.index(name)].entropy()

    def entropy(self) -> float:
        """H(X | class) = Σ_c w_c H(X | c)."""
        return float(sum(w * law.entropy() for w, law in zip(self.weights, self.laws)))


class TorusInpainting:
    """A correlated banana on T² with the closed-form conditional of angle 1 given angle 0."""

    name = "torus_inpainting"
    label = "T^2 angle1 | angle0"

    def __init__(self):
        self.space = Torus(2)
        self.law = ChainedTorusLaw(VonMises(0.5, 2.0), nu=-1.0, a=2.0, b=0, kappa=4.0)

    def sample(self, n: int, seed: int) -> torch.Tensor:
        return self.space.validate(self.law.sample(n, np.random.default_rng(seed)))

    def log_prob(self, x) -> np.ndarray:
        return self.law.log_prob(x)

    def entropy(self) -> float:
        return self.law.entropy()

    def conditional(self, phi0: float) -> VonMises:
        return self.law.conditional(phi0)

    def marginal_log_prob(self, phi0: float) -> float:
        """log density of angle 0 at phi0 (how much data lies near the conditioning value)."""
        return float(self.law.first.log_prob(np.array([phi0]))[0])


class MixedCategories:
    """Category c ~ π on {0, 1, 2}; angle | c ~ von Mises, wrapped Cauchy, or a two-mode von Mises mixture."""

    name = "mixed_product"
    label = "T^1 x Categories(3,1)"

    def __init__(self):
        self.space = Product(Torus(1), Categories(3, 1))
        self.pi = np.array([0.5, 0.3, 0.2])
        self.laws = [VonMises(-2.0, 8.0), WrappedCauchy(0.5, 0.7),
                     CircularMixture([0.5, 0.5], [VonMises(1.8, 12.0), VonMises(3.0, 12.0)])]

    def sample(self, n: int, seed: int) -> tuple[torch.Tensor, torch.Tensor]:
        rng = np.random.default_rng(seed)
        c = rng.choice(3, size=n, p=self.pi)
        ang = np.empty(n)
        for k, law in enumerate(self.laws):
            sel = c == k
            ang[sel] = law.sample(int(sel.sum()), rng)
        return self.space.validate((ang[:, None], c[:, None]))

    def log_prob(self, x) -> np.ndarray:
        """log p(angle, c), nats w.r.t. arc length × counting measure."""
        ang, c = np.asarray(x[0], dtype=np.float64)[:, 0], np.asarray(x[1])[:, 0]
        return np.log(self.pi[c]) + np.choose(c, [law.log_prob(ang) for law in self.laws])

    def conditional(self, k: int):
        return self.laws[k]

    def marginal_angle_log_prob(self, th) -> np.ndarray:
        th = np.asarray(th, dtype=np.float64)
        return scipy.special.logsumexp([math.log(p) + law.log_prob(th) for p, law in zip(self.pi, self.laws)],
                                       axis=0)

    def entropy(self) -> float:
        h_pi = float(-(self.pi * np.log(self.pi)).sum())
        return h_pi + float(sum(p * law.entropy() for p, law in zip(self.pi, self.laws)))

    def angle_entropy(self) -> float:
        """H(angle) of the marginal mixture, by quadrature."""
        return circle_quad(lambda th: -math.exp(float(self.marginal_angle_log_prob(th))) *
                           float(self.marginal_angle_log_prob(th)))


CONDITIONAL_TARGETS = [TorusClasses, TorusInpainting, MixedCategories]
