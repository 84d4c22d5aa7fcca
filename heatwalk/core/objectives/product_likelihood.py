"""Log-likelihoods of a product space, from the one network trained with factor roles.

Write x = (x_C, x_D), x_C the manifold factors and x_D the finite ones. Then

    log p(x) = log p(x_C) + log p(x_D | x_C)

- log p(x_C): the probability-flow ODE of the manifold factors jointly, with the
  finite factors *dropped* (held at a prior draw and flagged, so the network
  gives the scores of the marginal of x_C). Exact up to solver tolerance and
  training error, as on a single manifold.
- log p(x_D | x_C): the continuous-time ELBO of the finite factors jointly, with
  the manifold factors *known* (clean, flagged): a lower bound.

So the log-likelihood of a product with a finite factor is a lower bound,
reported with ``bound = True`` (the ODE part alone is not); of a product of
manifolds it is the ODE value (``bound = False``); of a product of finite
spaces the joint ELBO. ``parts`` gives the two terms separately (nats per point).

The ODE runs on a flat view of the manifold factors (:class:`ManifoldFactors`:
their ambient coordinates side by side, with the product metric) in the time
T = e^τ of the clock τ ∈ [0, 1], where factor i moves at rate dt_i/dT, so the
engine of :mod:`heatwalk.samplers.flow_ode` applies unchanged.
"""

from __future__ import annotations

import math

import torch

from heatwalk.checks import check_int
from heatwalk.core.fields import ScoreField
from heatwalk.samplers.flow_ode import MAX_STEPS, FlowField, integrate
from heatwalk.spaces.base import DTYPE
from heatwalk.spaces.manifold import Manifold

DIFFUSED, KNOWN, DROPPED = 0, 1, 2


class ManifoldFactors(Manifold):
    """The manifold factors of a product as one flat manifold (points: their ambient coordinates concatenated).

    Time is T = e^τ (τ the product's clock); the heat flow of factor i runs at rate dt_i/dT.
    """

    kind = "manifold_factors"

    def __init__(self, product):
        self.product = product
        self.index = [i for i, m in enumerate(product.is_manifold) if m]
        self.factors = [product.factors[i] for i in self.index]
        self.sizes = [math.prod(f.ambient_shape) for f in self.factors]
        self.ambient_shape = (sum(self.sizes),)
        self.dim = sum(f.dim for f in self.factors)

    def config(self) -> dict:
        return {"kind": self.kind, "of": self.product.config()}

    def split(self, x):
        out, j = [], 0
        for f, k in zip(self.factors, self.sizes):
            out.append(x[..., j:j + k].reshape(*x.shape[:-1], *f.ambient_shape))
            j += k
        return out

    def join(self, parts):
        return torch.cat([p.reshape(*p.shape[: p.dim() - len(f.ambient_shape)], -1)
                          for f, p in zip(self.factors, parts)], dim=-1)

    def _map(self, name, *args):
        return self.join([getattr(f, name)(*a) for f, *a in zip(self.factors, *[self.split(z) for z in args])])

    def validate(self, x):
        # cpu: a tensor keeps its device; other input is read on the CPU
        return self.join([f.validate(p) for f, p in zip(self.factors, self.split(torch.as_tensor(x, dtype=DTYPE)))])

    def project(self, x):
        return self._map("project", x)

    def to_tangent(self, x, v):
        return self._map("to_tangent", x, v)

    def exp(self, x, v):
        return self._map("exp", x, v)

    def log(self, x, y):
        return self._map("log", x, y)

    def inner(self, x, u, v):
        return sum(f.inner(a, b, c) for f, a, b, c in zip(self.factors, self.split(x), self.split(u), self.split(v)))

    def tangent_basis(self, x):
        n = x.shape[0]
        basis = torch.zeros(n, self.dim, self.ambient_shape[0], dtype=x.dtype, device=x.device)
        r = c = 0
        for f, p, k in zip(self.factors, self.split(x), self.sizes):
            basis[:, r:r + f.dim, c:c + k] = f.tangent_basis(p).reshape(n, f.dim, k)
            r, c = r + f.dim, c + k
        return basis

    def random_tangent(self, x, generator=None):
        return self.join([f.random_tangent(p, generator) for f, p in zip(self.factors, self.split(x))])

    @property
    def probe_shape(self) -> tuple[int, ...]:
        return (sum(math.prod(f.probe_shape) for f in self.factors),)

    def probe_tangent(self, x, z):
        """Each factor's probe from its slice of the noise."""
        parts, j = [], 0
        for f, p in zip(self.factors, self.split(x)):
            k = math.prod(f.probe_shape)
            parts.append(f.probe_tangent(p, z[..., j:j + k].reshape(*z.shape[:-1], *f.probe_shape)))
            j += k
        return self.join(parts)

    def random_uniform(self, n, generator=None):
        return self.join([f.random_uniform(n, generator) for f in self.factors])

    def prior_sample(self, n, generator=None):
        return self.join([f.prior_sample(n, generator) for f in self.factors])

    def prior_log_prob(self, x):
        return sum(f.prior_log_prob(p) for f, p in zip(self.factors, self.split(x)))

    def log_volume_density(self, x):
        return sum(f.log_volume_density(p) for f, p in zip(self.factors, self.split(x)))

    @property
    def log_volume(self) -> float:
        return sum(f.log_volume for f in self.factors)

    @property
    def embed_dim(self) -> int:
        return sum(f.embed_dim for f in self.factors)

    def embed(self, x):
        return torch.cat([f.embed(p) for f, p in zip(self.factors, self.split(x))], dim=-1)

    @property
    def time_range(self) -> tuple[float, float]:
        return (1.0, math.e)

    def _rates(self, T):
        tau = torch.log(T)
        rates = self.product.factor_time_rates(tau)
        times = self.product.factor_times(tau)
        return [(times[i], rates[i] / T) for i in self.index], tau

    def drift(self, x, T):
        T = torch.as_tensor(T, dtype=DTYPE, device=x.device).expand(x.shape[0])
        tr, _ = self._rates(T)
        return self.join([rate.reshape(-1, *([1] * len(f.ambient_shape))) * f.drift(p, t)
                          for f, p, (t, rate) in zip(self.factors, self.split(x), tr)])

    def _sample_forward(self, x0, T, generator):
        tr, _ = self._rates(T)
        return self.join([f.sample_forward(p, t, generator) for f, p, (t, _) in zip(self.factors, self.split(x0), tr)])

    def _log_kernel(self, xt, x0, T):
        tr, _ = self._rates(T)
        return sum(f.log_kernel(a, b, t) for f, a, b, (t, _) in zip(self.factors, self.split(xt), self.split(x0), tr))

    def _score(self, xt, x0, T):
        tr, _ = self._rates(T)
        return self.join([f.score(a, b, t) for f, a, b, (t, _) in zip(self.factors, self.split(xt), self.split(x0),
                                                                       tr)])


def _manifold_log_prob(objective, net, x, labels, finite_state, options) -> tuple[torch.Tensor, torch.Tensor]:
    """log p(x_C) by the ODE with the finite factors dropped: (values, Hutchinson standard errors)."""
    sp = objective.space
    view = ManifoldFactors(sp)
    n = sp.n_points(x)
    roles = torch.tensor([DIFFUSED if m else DROPPED for m in sp.is_manifold], dtype=torch.int64,
                         device=x[0].device).expand(n, -1)

    def score_fn(flat, T):
        rates, tau = view._rates(T)
        parts = view.split(flat)
        it = iter(parts)
        full = tuple(next(it) if m else finite_state[i][: flat.shape[0]] for i, m in enumerate(sp.is_manifold))
        outs = objective.split(objective.raw_outputs(net, full, tau, labels, roles[: flat.shape[0]]), full, tau)
        scores = [outs[i] for i in view.index]
        return view.join([r.reshape(-1, *([1] * len(f.ambient_shape))) * s
                          for f, s, (_, r) in zip(view.factors, scores, rates)])

    field = ScoreField(view, objective.schedule, score_fn)
    flow = FlowField(field, divergence=options.get("divergence", "auto"), n_probes=options.get("n_probes", 4),
                     generator=options.get("generator"))
    flat = view.join([x[i] for i in view.index])
    with torch.no_grad():
        xT, div_int, se, _ = integrate(flow, flat, 1.0, math.e, method=options.get("method", "dopri5"),
                                       steps=options.get("steps", 100), rtol=options.get("rtol", 1e-5),
                                       atol=options.get("atol", 1e-6), with_div=True,
                                       step_control=options.get("step_control", "point"),
                                       max_steps=options.get("max_steps", MAX_STEPS))
    return view.prior_log_prob(xT) + div_int + view.log_volume_density(flat), se


def _finite_elbo(objective, net, x, labels, n_time_samples: int, generator) -> tuple[torch.Tensor, torch.Tensor]:
    """Upper bound on -log p(x_D | x_C) (manifold factors known): (per point nats, standard errors)."""
    sp, M = objective.space, n_time_samples
    n = sp.n_points(x)
    dev = x[0].device
    roles = torch.tensor([KNOWN if m else DIFFUSED for m in sp.is_manifold], dtype=torch.int64, device=dev)
    rep = tuple(xi.repeat_interleave(M, dim=0) for xi in x)
    lab = None if labels is None else labels.repeat_interleave(M, dim=0)
    u = (torch.arange(M, dtype=DTYPE, device=dev).repeat(n)
         + torch.rand(n * M, dtype=DTYPE, device=dev, generator=generator)) / M
    per = torch.zeros(n * M, dtype=DTYPE, device=dev)
    for tau, with_integral in ((u, True), (torch.zeros(n * M, dtype=DTYPE, device=dev), False)):
        states = objective.states(rep, tau, roles.expand(n * M, -1), generator)
        outs = objective.split(objective.raw_outputs(net, states, tau, lab, roles.expand(n * M, -1)), states, tau)
        for i, (part, t) in enumerate(zip(objective.parts, sp.factor_times(tau))):
            if sp.is_manifold[i]:
                continue
            if with_integral:
                per = per + (part.schedule.t_max - part.schedule.t_min) * part._integrand(states[i], rep[i], t,
                                                                                          outs[i])
            else:
                per = per - torch.gather(outs[i], 2, rep[i].unsqueeze(-1)).squeeze(-1).sum(-1)
    per = per.reshape(n, M)
    prior = sum(part.space.prior_kl(x[i], part.schedule.t_max) for i, part in enumerate(objective.parts)
                if not sp.is_manifold[i])
    return per.mean(1) + prior, (per.var(1) / M).sqrt()


def product_log_prob(objective, net, x, labels=None, n_time_samples: int = 32, seed: int = 0, generator=None,
                     batch_size: int = 512, **options) -> dict:
    """log p(x) of a product (module docstring): ``log_prob`` (n,), ``stderr``, ``bound``, ``parts``."""
    sp = objective.space
    x = sp.validate(x)
    check_int("n_time_samples", n_time_samples, minimum=2)
    dev = x[0].device
    generator = generator or torch.Generator(device=dev).manual_seed(seed)
    n = sp.n_points(x)
    has_c, has_d = any(sp.is_manifold), not all(sp.is_manifold)
    ode, ode_se = torch.zeros(n, dtype=DTYPE, device=dev), torch.zeros(n, dtype=DTYPE, device=dev)
    elbo, elbo_se = torch.zeros(n, dtype=DTYPE, device=dev), torch.zeros(n, dtype=DTYPE, device=dev)
    with torch.no_grad():
        for a in range(0, n, batch_size):
            xb = sp.take(x, slice(a, a + batch_size))
            lb = None if labels is None else labels[a:a + batch_size]
            b = sp.n_points(xb)
            if has_c:
                prior = tuple(f.prior_sample(b, generator) for f in sp.factors)
                ode[a:a + b], ode_se[a:a + b] = _manifold_log_prob(objective, net, xb, lb, prior,
                                                                   {**options, "generator": generator})
            if has_d:
                nats, se = _finite_elbo(objective, net, xb, lb, n_time_samples, generator)
                elbo[a:a + b], elbo_se[a:a + b] = -nats, se
    return {"log_prob": ode + elbo, "stderr": (ode_se.square() + elbo_se.square()).sqrt(), "bound": has_d,
            "parts": {"manifold_factors_ode": ode if has_c else None,
                      "finite_factors_given_manifold_elbo": elbo if has_d else None}}
