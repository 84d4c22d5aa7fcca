"""The objective of a product space: one network, each factor's own loss term on the shared clock.

One network reads every factor's features (the noised states, concatenated),
the clock features of τ, the label code (labelled models) and two flags per
factor, and outputs every factor's quantity side by side: the scaled score
sqrt(t_i) s_i (a tangent vector) of a manifold factor, the x_0 logits of a
finite factor. Each factor keeps its exact kernel and its loss term at its own
time t_i(τ) (:class:`heatwalk.spaces.Product`): denoising score matching for
manifolds (:class:`ScoreMatching`), the continuous-time ELBO for finite spaces
(:class:`DiscreteELBO`); the loss is their sum. With ``network={"factored": True}`` that one network
is the factored one (:mod:`heatwalk.core.networks.factored`): a residual network per factor on its own
features plus a coupling network on all of them, outputs summed.

Factor roles
------------
Every training row gives each factor one role:

- *diffused* (role 0): noised to its time t_i(τ); its loss term counts;
- *known* (role 1): kept clean — the network learns the others given it;
- *dropped* (role 2): replaced by a draw of its prior (the all-mask state of an
  absorbing chain) — the network learns the others with it marginalised out.

Half the rows diffuse every factor (the joint model); in the other half each
factor takes a role uniformly at random, with at least one diffused. So one
network gives the joint law, every conditional given whole factors
(``Model.sample(given={factor: value})`` holds a factor known: exact up to
training error) and every marginal, which is what the product's likelihood
uses (:mod:`heatwalk.core.objectives.product_likelihood`).
"""

from __future__ import annotations

import math

import torch
from torch import nn

from heatwalk.checks import check_number
from heatwalk.core.conditioning import Conditioning, combine_guidance
from heatwalk.core.fields import ProductField
from heatwalk.core.networks import point_denoiser
from heatwalk.core.networks.factored import FactoredDenoiser
from heatwalk.core.objectives.base import Objective
from heatwalk.core.objectives.discrete_elbo import DiscreteELBO
from heatwalk.core.objectives.score_matching import ScoreMatching
from heatwalk.core.parallel import WHOLE, Share
from heatwalk.core.schedule import ClockSchedule, TimeSchedule
from heatwalk.errors import InputError
from heatwalk.spaces.base import generator_device

DIFFUSED, KNOWN, DROPPED = 0, 1, 2


class ProductObjective(Objective):
    """Sum of the factors' loss terms on the shared clock, with factor roles (module docstring)."""

    name = "product"
    field_kind = "product"
    default_sampler = "product_walk"

    def __init__(self, space, schedule: ClockSchedule | None = None, classes=None, label_dropout: float = 0.1,
                 recon_fraction: float = 0.25):
        from heatwalk.spaces.product import Product

        if not isinstance(space, Product):
            raise InputError(f"the product objective needs a Product space, got {space!r}", field="space")
        super().__init__(space, schedule or ClockSchedule(), classes, label_dropout)
        self.recon_fraction = check_number("recon_fraction", recon_fraction, minimum=0, open_minimum=True, maximum=1)
        self.parts = [ScoreMatching(f, TimeSchedule(*f.time_range)) if m else DiscreteELBO(f, TimeSchedule(*f.time_range))
                      for f, m in zip(space.factors, space.is_manifold)]
        self.out_sizes = [math.prod(f.ambient_shape) if m else f.L * f.K
                          for f, m in zip(space.factors, space.is_manifold)]

    #: whole factors are fixed by holding them known, as the network was trained to condition on them
    default_given_method = "trained"
    #: the size rule chooses the network too (residual, width by data size; benchmarks/product_defaults.py)
    sized_by_data = True

    @property
    def likelihood_method(self) -> str:  # what evaluate reports: the parts this product's log p is made of
        manifold = self.space.is_manifold
        if all(manifold):
            return ("probability-flow ODE of the manifold factors jointly (exact divergence; Hutchinson's estimator "
                    "above 3 dimensions)")
        if not any(manifold):
            return "continuous-time ELBO of the finite factors jointly, a lower bound on log p"
        return ("probability-flow ODE of the manifold factors plus the ELBO of the finite factors given them, "
                "a lower bound on log p")

    @property
    def likelihood_is_bound(self) -> bool:  # a product with a finite factor reports an ELBO-based bound
        return not all(self.space.is_manifold)

    @classmethod
    def schedule_config(cls, space, time_range) -> dict:
        if time_range is not None:
            raise InputError("a product has no single time range: each factor keeps its own (see Product)",
                             field="time_range")
        return ClockSchedule().config()

    @classmethod
    def from_config(cls, space, config: dict) -> "ProductObjective":
        extra = {k: config[k] for k in ("recon_fraction",) if k in config}
        return cls(space, ClockSchedule(**config["schedule"]), **cls._label_config(config), **extra)

    def config(self) -> dict:
        return {**super().config(), "recon_fraction": self.recon_fraction}

    # ----- network ------------------------------------------------------------------------------
    @property
    def condition_dim(self) -> int:
        return super().condition_dim + 2 * len(self.space.factors)

    def default_network(self, factored: bool = False, **options) -> nn.Module:
        """One network for every factor, on their features side by side: the MLP or the residual network, with
        the options of score matching (:func:`heatwalk.core.networks.point_denoiser`).

        ``factored=True``: the factored network instead (:class:`heatwalk.core.networks.factored.FactoredDenoiser`:
        a residual network per factor on its own features plus a coupling network on all of them), of the
        given ``hidden`` and ``depth``; ``time_skip`` then gives the time skip to the manifold factors whose
        features are unbounded (R^d, the simplex)."""
        if not isinstance(factored, bool):
            raise InputError(f"network option 'factored' must be true or false, got {factored!r}", field="network")
        if not factored:
            return point_denoiser(self.space.embed_dim, self.condition_dim, sum(self.out_sizes), who="a product",
                                  **options)
        accepted = {"hidden", "depth", "time_skip", "residual"}
        if set(options) - accepted:
            raise InputError(f"unknown network options for the factored product network: "
                             f"{sorted(set(options) - accepted)}; accepted: depth, factored, hidden, time_skip",
                             field="network")
        if options.get("residual") is False:
            raise InputError("network option 'factored' builds residual networks; it cannot be combined with "
                             "'residual': false", field="network")
        skip = options.get("time_skip", False)
        if not isinstance(skip, bool):
            raise InputError(f"network option 'time_skip' must be true or false, got {skip!r}", field="network")
        skips = [bool(skip and m and not f.bounded_embedding)
                 for f, m in zip(self.space.factors, self.space.is_manifold)]
        size = {k: options[k] for k in ("hidden", "depth") if k in options}
        return FactoredDenoiser([f.embed_dim for f in self.space.factors], self.condition_dim, self.out_sizes,
                                time_skips=skips, **size)

    def _condition(self, tau, labels, roles):
        flags = torch.cat([(roles == KNOWN).double(), (roles == DROPPED).double()], dim=-1)
        return torch.cat([self.condition_features(tau, labels), flags], dim=-1)

    def raw_outputs(self, net, x, tau, labels, roles) -> torch.Tensor:
        """(n, Σ outputs) float64: the network on the states ``x`` (a tuple) at clock times ``tau``."""
        return net(self.space.embed(x).float(), self._condition(tau, labels, roles).float()).double()

    def split(self, raw, x, tau) -> list[torch.Tensor]:
        """Per factor: the score (manifolds) or the log x_0 probabilities (finite spaces)."""
        out, j = [], 0
        for part, size, xi, ti, m in zip(self.parts, self.out_sizes, x, self.space.factor_times(tau),
                                         self.space.is_manifold):
            chunk = raw[:, j:j + size]
            j += size
            if m:
                scaled = part.space.tangent_from_network(xi, chunk.reshape(xi.shape))
                out.append(scaled / part._time_column(ti))
            else:
                out.append(part._restrict(chunk.reshape(xi.shape[0], part.space.L, part.space.K), xi, ti))
        return out

    # ----- roles and noised states ------------------------------------------------------------------
    def random_roles(self, n: int, generator) -> torch.Tensor:
        """(n, F) int64 roles: half the rows all diffused, the others uniform with at least one diffused."""
        f, dev = len(self.space.factors), generator_device(generator)
        joint = torch.rand(n, generator=generator, dtype=torch.float64, device=dev) < 0.5
        roles = torch.randint(3, (n, f), generator=generator, device=dev)
        none = (roles != DIFFUSED).all(-1)
        pick = torch.randint(f, (n,), generator=generator, device=dev)
        roles[none, pick[none]] = DIFFUSED
        return torch.where(joint.unsqueeze(-1), torch.zeros_like(roles), roles)

    def states(self, x0, tau, roles, generator):
        """Noised states for the roles: x_t at t_i(τ) (diffused), x_0 (known), a prior draw (dropped)."""
        n = self.space.n_points(x0)
        out = []
        for i, (f, xi, ti) in enumerate(zip(self.space.factors, x0, self.space.factor_times(tau))):
            xt = f.sample_forward(xi, ti, generator)
            prior = f.prior_sample(n, generator)
            r = roles[:, i].reshape(-1, *([1] * (xi.dim() - 1)))
            out.append(torch.where(r == KNOWN, xi, torch.where(r == DROPPED, prior.to(xt.dtype), xt)))
        return tuple(out)

    # ----- the loss -----------------------------------------------------------------------------------
    def draw(self, x0, generator: torch.Generator | None = None, labels=None) -> dict:
        """Dropped labels, clock times, factor roles, the noised states, and the reconstruction rows' states."""
        labels = self.drop_labels(labels, generator)
        n = self.space.n_points(x0)
        m = max(1, int(round(self.recon_fraction * n)))
        tau = self.schedule.sample(n, generator)
        roles = self.random_roles(n, generator)
        xt = self.states(x0, tau, roles, generator)
        x0_rec = self.space.take(x0, slice(0, m))
        tau_rec = torch.zeros(m, dtype=torch.float64, device=tau.device)
        x_rec = self.states(x0_rec, tau_rec, roles[:m], generator)
        return {"x0": x0, "labels": labels, "tau": tau, "roles": roles, "xt": xt, "x0_rec": x0_rec,
                "tau_rec": tau_rec, "x_rec": x_rec}

    def share_loss(self, net: nn.Module, drawn: dict, share: Share = WHOLE) -> torch.Tensor:
        """Sum over factors of their loss terms on the rows of ``share`` (module docstring)."""
        n, m = self.space.n_points(drawn["x0"]), self.space.n_points(drawn["x0_rec"])
        x0, labels, tau, roles, xt = (share.take(drawn[k], n) for k in ("x0", "labels", "tau", "roles", "xt"))
        x0_rec, tau_rec, x_rec = (share.take(drawn[k], m) for k in ("x0_rec", "tau_rec", "x_rec"))
        roles_rec = share.take(drawn["roles"][:m], m)
        labels_rec = None if drawn["labels"] is None else share.take(drawn["labels"][:m], m)
        k = tau.shape[0]  # this share's rows of the main part
        both = tuple(torch.cat([a, b]) for a, b in zip(xt, x_rec))
        tau_all, roles_all = torch.cat([tau, tau_rec]), torch.cat([roles, roles_rec])
        lab = None if labels is None else torch.cat([labels, labels_rec])
        outs = self.split(self.raw_outputs(net, both, tau_all, lab, roles_all), both, tau_all)
        total = torch.zeros((), dtype=torch.float64, device=tau.device)
        for i, (part, o, ti) in enumerate(zip(self.parts, outs, self.space.factor_times(tau))):
            live = (roles[:, i] == DIFFUSED).double()
            if self.space.is_manifold[i]:
                total = total + share.mean(self._score_term(part, xt[i], x0[i], ti, o[:k], live), n)
            else:
                live_rec = (roles_rec[:, i] == DIFFUSED).double()
                main, rec = self._elbo_term(part, xt[i], x0[i], ti, o[:k], o[k:], x0_rec[i], live, live_rec)
                total = total + (share.mean(main, n) + share.mean(rec, m)) / part.space.L
        return total

    @staticmethod
    def _score_term(part, xt, x0, t, score, live):
        """Per row: the factor's σ²-weighted squared score error where it is diffused (0 elsewhere)."""
        sqrt_t = part._time_column(t)
        diff = sqrt_t * score - sqrt_t * part.space.score(xt, x0, t)
        per_row = part.space.inner(xt, diff, diff) / part.space.dim
        return live * per_row

    @staticmethod
    def _elbo_term(part, xt, x0, t, log_p, log_rec, x_rec, live, live_rec):
        """Per row: the factor's integral and prior terms, and per reconstruction row its reconstruction term."""
        sp, sch = part.space, part.schedule
        integral = (sch.t_max - sch.t_min) * part._integrand(xt, x0, t, log_p)
        recon = -torch.gather(log_rec, 2, x_rec.unsqueeze(-1)).squeeze(-1).sum(-1)
        prior = sp.prior_kl(x0, sch.t_max)
        return live * (integral + prior), live_rec * recon

    # ----- fields and likelihoods ------------------------------------------------------------------
    def field(self, net: nn.Module, conditioning: Conditioning | None = None) -> ProductField:
        c = conditioning or Conditioning()
        if c.given is not None and c.given_method != "trained":
            raise InputError("a product fixes whole factors with the trained method (given_method='trained')",
                             field="given_method")
        given = c.given or {}
        sp = self.space

        def roles_for(n, device):
            roles = torch.zeros(n, len(sp.factors), dtype=torch.int64, device=device)
            for i in given:
                roles[:, i] = KNOWN
            return roles

        def compute(x, tau, roles):
            uncond = self.raw_outputs(net, x, tau, None, roles) if (c.labels is None or c.guidance != 1.0) else None
            cond = self.raw_outputs(net, x, tau, c.labels, roles) if (c.labels is not None and c.guidance != 0.0) \
                else None
            return self.split(combine_guidance(uncond, cond, c.guidance), x, tau)

        def outputs(x, tau):
            n, dev = sp.n_points(x), x[0].device
            tau = torch.as_tensor(tau, dtype=torch.float64, device=dev).expand(n)
            if c.guide is None:
                return compute(x, tau, roles_for(n, dev))
            return self._guided(compute, x, tau, roles_for(n, dev), c)

        def constrain(x, tau, generator, final):
            return tuple(given[i] if i in given else xi for i, xi in enumerate(x))

        return ProductField(sp, self.schedule, outputs, constrain if given else None)

    def _guided(self, compute, x, tau, roles, c):
        """Outputs with the user guide: λ ∇ fn(x̂) added to manifold scores, finite factors' probabilities
        reweighted by exp(λ ∂fn/∂p); fn receives the tuple of denoised estimates (manifold points, and
        x_0 probabilities (n, L, K) for finite factors)."""
        sp, n = self.space, self.space.n_points(x)
        with torch.enable_grad():
            xs = tuple(xi.detach().requires_grad_(True) if m else xi for xi, m in zip(x, sp.is_manifold))
            outs = compute(xs, tau, roles)
            hats, wrt = [], []
            for f, xi, o, ti, m in zip(sp.factors, xs, outs, sp.factor_times(tau), sp.is_manifold):
                if m:
                    hats.append(f.denoised_mean(xi, o, ti))
                    wrt.append(xi)
                else:
                    p = o.exp().detach().requires_grad_(True)
                    hats.append(p)
                    wrt.append(p)
            value = c.guide(tuple(hats))
            if not isinstance(value, torch.Tensor) or tuple(value.shape) != (n,) or not bool(torch.isfinite(value).all()):
                raise InputError(f"guide: must return {n} finite log-likelihoods (one per sample)", field="guide")
            grads = torch.autograd.grad(value.sum(), wrt, allow_unused=True)
        out = []
        for f, xi, o, g, m in zip(sp.factors, xs, outs, grads, sp.is_manifold):
            g = torch.zeros_like(wrt[len(out)]) if g is None else g
            if m:
                out.append((o + c.guide_scale * f.gradient_to_tangent(xi, g)).detach())
            else:
                out.append(torch.log_softmax(o + c.guide_scale * g.masked_fill(~torch.isfinite(o), 0.0), -1).detach())
        return out

    def log_prob(self, net: nn.Module, x, labels=None, **options) -> dict:
        from heatwalk.core.objectives.product_likelihood import product_log_prob

        return product_log_prob(self, net, x, labels=labels, **options)


__all__ = ["ProductObjective", "DIFFUSED", "KNOWN", "DROPPED"]
