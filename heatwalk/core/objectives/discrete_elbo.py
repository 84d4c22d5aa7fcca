"""The continuous-time ELBO for sequences on a finite state space (``Categories``).

The network reads a noised sequence x_t and the time t and predicts logits of
x_0 at every position. Through the x_0-prediction parametrisation they define
reverse-time jump rates r_θ(x_t → y) for every y that differs from x_t at one
position (:meth:`Categories.log_reverse_rates`). The generative model is: x_1
from the prior, the reverse chain with rates r_θ from t = 1 down to t_min,
then x_0 ~ p_θ(x_0 | x_{t_min}) = Π_l p_θ(x_0,l | x_{t_min}). For every
sequence x_0 (Campbell et al. 2022, Prop. 2, written as a path-space KL as in
Lou et al. 2024, eq. 8),

    -log p_θ(x_0) <= KL(q(x_1 | x_0) || prior)
                     + ∫_{t_min}^{1} E_{x_t ~ q(·|x_0)} Σ_{y ≠ x_t} [ r_θ − r + r log(r / r_θ) ](x_t → y) dt
                     + E_{x_{t_min} ~ q(·|x_0)} [ −log p_θ(x_0 | x_{t_min}) ],

where r(x_t → y) is the exact reverse rate given x_0 (the same formula with
p = one-hot(x_0)). Each bracket is >= 0 and vanishes when r_θ = r. For the
absorbing chain the integrand is (1/t) Σ_{masked l} −log p_θ(x_0,l | x_t), the
masked-diffusion ELBO of Sahoo et al. 2024 / Shi et al. 2024 with the linear
schedule. x_0 probabilities are restricted to the states a that can have
produced x_t (Pr(x_t | a) > 0), which for the absorbing chain is the
"carry-over" of unmasked tokens.

Which expression evaluates the integrand is the space's business: the
objective asks ``space.closed_form_integrand`` first (the absorbing chain
answers with the time-weighted cross-entropy on the masked positions, which
needs neither reverse rates nor the exact rates given x_0) and falls back on
the reverse-rates expression above when the chain has no closed form, or when
the objective is built with ``integrand="rates"`` (the general expression on
every chain; equal to the closed form for every x_t, up to rounding).

The integral is estimated with stratified uniform times; the prior term is
exact (0 at t_max = 1). Units: nats per sequence; ``loss`` reports nats per
token.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import torch
from torch import nn

from heatwalk.checks import check_choice, check_int, check_number
from heatwalk.core.conditioning import Conditioning, combine_guidance, guide_gradient
from heatwalk.core.devices import input_device, make_generator
from heatwalk.core.fields import X0ProbabilityField
from heatwalk.core.networks.mlp import MLPDenoiser
from heatwalk.core.networks.transformer import TransformerDenoiser
from heatwalk.core.objectives.base import Objective
from heatwalk.core.parallel import WHOLE, Share
from heatwalk.core.schedule import TimeSchedule
from heatwalk.errors import InputError
from heatwalk.spaces.base import generator_device
from heatwalk.spaces.finite import FiniteStateSpace

LN2 = math.log(2.0)
#: how the ELBO integrand is evaluated (see the module docstring)
INTEGRANDS = ("auto", "rates")


@dataclass
class ELBOEstimate:
    """Monte Carlo estimate of the ELBO bound on -log p(x).

    nats : (n,) float64, estimated upper bound on -log p(x) for each sequence (nats)
    stderr : (n,) float64, Monte Carlo standard error of each entry of ``nats``
    bits_per_token : mean of ``nats`` over the sequences, divided by L ln 2
    bits_per_token_stderr : Monte Carlo standard error of ``bits_per_token``
    n_time_samples : time samples per sequence
    """

    nats: torch.Tensor
    stderr: torch.Tensor
    bits_per_token: float
    bits_per_token_stderr: float
    n_time_samples: int

    @property
    def nats_per_token(self) -> float:
        return self.bits_per_token * LN2


class DiscreteELBO(Objective):
    """Training by the continuous-time ELBO (see module docstring), optionally plus a cross-entropy term.

    Parameters
    ----------
    space : a :class:`heatwalk.spaces.Categories`
    schedule : time range [t_min, t_max] (t_max <= 1) and time features for the network
    ce_weight : weight of an auxiliary cross-entropy −log p_θ(x_0 | x_t) per token (D3PM's λ; 0 = pure ELBO)
    recon_fraction : fraction of each training batch on which the reconstruction term is estimated
    integrand : "auto" (the space's closed form of the ELBO integrand where its chain has one, else the
        reverse-rates expression) or "rates" (the reverse-rates expression on every chain)
    """

    name = "discrete_elbo"
    field_kind = "x0_probabilities"
    default_sampler = "ancestral"
    likelihood_is_bound = True
    likelihood_method = "continuous-time ELBO (Monte Carlo over diffusion times), a lower bound on log p"

    def __init__(self, space, schedule: TimeSchedule, ce_weight: float = 0.0, recon_fraction: float = 0.25,
                 classes=None, label_dropout: float = 0.1, inpainting: bool = False, integrand: str = "auto"):
        if not isinstance(space, FiniteStateSpace):
            raise InputError(f"the discrete ELBO needs a finite state space, got {type(space).__name__}",
                             field="space")
        if schedule.t_max > 1.0:
            raise InputError(f"time range: t_max must be <= 1 on a finite space (t = 1 is the prior), "
                             f"got {schedule.t_max}", field="time_range")
        super().__init__(space, schedule, classes, label_dropout, inpainting)
        self.ce_weight = check_number("ce_weight", ce_weight, minimum=0)
        self.recon_fraction = check_number("recon_fraction", recon_fraction, minimum=0, open_minimum=True, maximum=1)
        self.integrand = check_choice("integrand", integrand, INTEGRANDS)
        # cpu: a one-off check of the time range when the objective is built
        states = torch.arange(space.K).reshape(-1, 1).expand(-1, space.L)
        if not bool(torch.isfinite(space.prior_kl(states, schedule.t_max)).all()):
            raise InputError(f"time range: at t_max = {schedule.t_max} the law of x_t is not absolutely continuous "
                             "w.r.t. the prior (KL is infinite); use t_max = 1", field="time_range")

    @classmethod
    def from_config(cls, space, config: dict) -> "DiscreteELBO":
        extra = {k: config[k] for k in ("ce_weight", "recon_fraction", "integrand") if k in config}
        return cls(space, TimeSchedule(**config["schedule"]), **extra, **cls._label_config(config))

    def config(self) -> dict:
        out = {**super().config(), "ce_weight": self.ce_weight, "recon_fraction": self.recon_fraction}
        if self.integrand != "auto":
            out["integrand"] = self.integrand
        return out

    # ----- network ------------------------------------------------------------------------------
    def default_network(self, architecture: str | None = None, **options) -> nn.Module:
        """A transformer over positions for L > 1 (d_model 64, 2 layers, 4 heads), an MLP for L = 1.

        ``architecture`` ("transformer" or "mlp") overrides the choice; other options go to the
        network (transformer: d_model, n_layers, n_heads, with ``hidden`` and ``depth`` accepted as
        d_model and n_layers; mlp: hidden, depth).
        """
        sp = self.space
        arch = architecture or ("mlp" if sp.L == 1 else "transformer")
        if arch == "transformer":
            # the library-wide width / depth names map onto the transformer's
            for general, specific in (("hidden", "d_model"), ("depth", "n_layers")):
                if general in options:
                    if specific in options:
                        raise InputError(f"give either {general!r} or {specific!r}, not both", field="network")
                    options[specific] = options.pop(general)
            allowed, defaults = {"d_model", "n_layers", "n_heads"}, dict(d_model=64, n_layers=2, n_heads=4)
        elif arch == "mlp":
            allowed, defaults = {"hidden", "depth"}, dict(hidden=128, depth=3)
        else:
            raise InputError(f"network architecture must be 'transformer' or 'mlp', got {arch!r}",
                             field="architecture")
        unknown = set(options) - allowed
        if unknown:
            raise InputError(f"unknown {arch} network options {sorted(unknown)}; accepted: {sorted(allowed)}",
                             field="network")
        cfg = {**defaults, **options}
        if arch == "transformer":
            return TransformerDenoiser(sp.L, sp.n_states, sp.K, self.condition_dim, **cfg)
        return MLPDenoiser(sp.L * sp.n_states, self.condition_dim, sp.L * sp.K, **cfg)

    def logits(self, net: nn.Module, xt: torch.Tensor, t: torch.Tensor, labels=None) -> torch.Tensor:
        """(n, L, K) float64 raw x_0 logits of the network."""
        sp = self.space
        out = net(sp.embed(xt).float(), self.condition_features(t, labels).float()).double()
        return out.reshape(xt.shape[0], sp.L, sp.K)

    def log_x0_probs(self, net: nn.Module, xt: torch.Tensor, t: torch.Tensor, labels=None) -> torch.Tensor:
        """(n, L, K) float64 log-probabilities of x_0 restricted to the states consistent with x_t."""
        return self._restrict(self.logits(net, xt, t, labels), xt, t)

    def _restrict(self, logits, xt, t):
        support = self.space.x0_support(xt, t)
        return torch.log_softmax(logits.masked_fill(~support, -math.inf), dim=-1)

    def field(self, net: nn.Module, conditioning: Conditioning | None = None) -> X0ProbabilityField:
        c = conditioning or Conditioning()
        if c.given is not None and c.given_method != "replacement":
            raise InputError(f"given_method {c.given_method!r} does not apply to a finite space; positions are fixed "
                             f"by replacement (exact on the absorbing chain)", field="given_method")

        def log_x0_fn(xt, t):
            uncond = self.logits(net, xt, t, None) if (c.labels is None or c.guidance != 1.0) else None
            cond = self.logits(net, xt, t, c.labels) if (c.labels is not None and c.guidance != 0.0) else None
            log_p = self._restrict(combine_guidance(uncond, cond, c.guidance), xt, t)
            if c.guide is None:
                return log_p
            with torch.enable_grad():
                probs = log_p.exp().detach().requires_grad_(True)
                weight = guide_gradient(c.guide, probs, probs, xt.shape[0])
            return torch.log_softmax(log_p + c.guide_scale * weight.masked_fill(~torch.isfinite(log_p), 0.0), -1)

        constrain = None
        if c.given is not None:
            def constrain(x, t, generator, final):
                return self.space.replace_given(x, c.given, t, generator, final=final)

        return X0ProbabilityField(self.space, self.schedule, log_x0_fn, constrain)

    # ----- the bound ---------------------------------------------------------------------------
    def _integrand(self, xt, x0, t, log_p):
        """Σ_l Σ_v [r_θ − r + r log(r/r_θ)] for each row: (n,); the space's closed form where it has one."""
        if self.integrand == "auto":
            closed = self.space.closed_form_integrand(xt, x0, log_p, t)
            if closed is not None:
                if not bool(torch.isfinite(closed).all()):
                    raise FloatingPointError("model x_0 probability is zero at a masked data token")
                return closed
        return self._rates_integrand(xt, x0, t, log_p)

    def _rates_integrand(self, xt, x0, t, log_p):
        """The integrand from the reverse rates (any chain): model and exact rates, then the bracket."""
        sp = self.space
        onehot = torch.nn.functional.one_hot(x0, sp.K).bool()
        log_true = torch.where(onehot, 0.0, -math.inf).to(torch.float64)
        log_rate_true = sp.log_reverse_rates(xt, log_true, t)     # exact reverse rates given x_0
        log_rate_model = sp.log_reverse_rates(xt, log_p, t)       # the model's
        has_r, has_q = torch.isfinite(log_rate_true), torch.isfinite(log_rate_model)
        if bool((has_r & ~has_q).any()):
            raise FloatingPointError("model reverse rate is zero where the exact one is not")
        d = torch.where(has_r, log_rate_true, 0.0) - torch.where(has_r, log_rate_model, 0.0)
        q = torch.where(has_q, log_rate_model, -math.inf).exp()
        # r_θ (e^d d − e^d + 1) = r log(r/r_θ) − r + r_θ, written so small d keeps full precision
        em1 = torch.expm1(d)
        phi = torch.where(has_r, d * em1 + (d - em1), 1.0)
        return (q * phi).sum((-1, -2))

    def _terms(self, net, x0, t, x_rec, generator, labels=None, labels_rec=None):
        """Integral estimate (span · integrand) at times t, reconstruction at t_min for rows x_rec, CE."""
        xt, xr = self._noised(x0, t, x_rec, generator)
        return self._evaluate(net, x0, t, xt, x_rec, xr, labels, labels_rec)

    def _noised(self, x0, t, x_rec, generator):
        """The exact draws x_t ~ q(· | x_0) at times t and x_{t_min} ~ q(· | x_rec)."""
        sp = self.space
        return sp.sample_forward(x0, t, generator), sp.sample_forward(x_rec, self.schedule.t_min, generator)

    def _evaluate(self, net, x0, t, xt, x_rec, xr, labels=None, labels_rec=None):
        """The terms of :meth:`_terms` from drawn states (deterministic: the network and the bound's integrand).

        A reconstruction row whose x_{t_min} leaves one possible data state at every position
        (:meth:`x0_support`; on the absorbing chain: no position masked, most rows at t_min) has
        −log p_θ(x_0 | x_{t_min}) = 0 exactly, whatever the network says, and no gradient: it is not
        sent through the network.
        """
        sch = self.schedule
        m, n = x_rec.shape[0], x0.shape[0]
        tr = torch.full((m,), sch.t_min, dtype=torch.float64, device=t.device)
        open_rows = (self.space.x0_support(xr, tr).sum(-1) > 1).any(-1)            # (m,) x_0 not determined
        states, times = torch.cat([xt, xr[open_rows]]), torch.cat([t, tr[open_rows]])
        if labels is None:
            log_p_all = self.log_x0_probs(net, states, times)
        else:
            log_p_all = self.log_x0_probs(net, states, times, torch.cat([labels, labels_rec[open_rows]]))
        log_p, log_r = log_p_all[:n], log_p_all[n:]
        integral = (sch.t_max - sch.t_min) * self._integrand(xt, x0, t, log_p)
        recon = torch.zeros(m, dtype=torch.float64, device=t.device)
        recon = recon.masked_scatter(open_rows, -torch.gather(log_r, 2, x_rec[open_rows].unsqueeze(-1))
                                     .squeeze(-1).sum(-1))
        ce = -torch.gather(log_p, 2, x0.unsqueeze(-1)).squeeze(-1).sum(-1) if self.ce_weight else None
        return integral, recon, ce

    def _stratified_times(self, n: int, generator) -> torch.Tensor:
        """n times covering [t_min, t_max) in n strata with one shared random offset (low variance)."""
        sch, dev = self.schedule, generator_device(generator)
        u0 = torch.rand((), dtype=torch.float64, generator=generator, device=dev)
        u = torch.remainder(u0 + torch.arange(n, dtype=torch.float64, device=dev) / n, 1.0)
        u = u[torch.randperm(n, generator=generator, device=dev)]
        return sch.t_min + (sch.t_max - sch.t_min) * u

    def draw(self, x0: torch.Tensor, generator: torch.Generator | None = None,
             labels: torch.Tensor | None = None) -> dict:
        """Dropped labels, stratified times, x_t ~ q(· | x_0), and x_{t_min} for the first m rows (reconstruction)."""
        labels = self.drop_labels(labels, generator)
        n = x0.shape[0]
        t = self._stratified_times(n, generator)
        m = max(1, int(round(self.recon_fraction * n)))
        xt, xr = self._noised(x0, t, x0[:m], generator)
        return {"x0": x0, "labels": labels, "t": t, "xt": xt, "xr": xr}

    def share_loss(self, net: nn.Module, drawn: dict, share: Share = WHOLE) -> torch.Tensor:
        """Batch estimate of the ELBO in nats per token (plus ce_weight × cross-entropy per token)."""
        x0, labels = drawn["x0"], drawn["labels"]
        (n, L), m = x0.shape, drawn["xr"].shape[0]
        mine = [share.take(drawn[k], n) for k in ("x0", "labels", "t", "xt")]
        x_rec, xr = share.take(x0[:m], m), share.take(drawn["xr"], m)
        labels_rec = None if labels is None else share.take(labels[:m], m)
        integral, recon, ce = self._evaluate(net, mine[0], mine[2], mine[3], x_rec, xr, mine[1], labels_rec)
        prior = self.space.prior_kl(mine[0], self.schedule.t_max)
        value = (share.mean(integral, n) + share.mean(prior, n) + share.mean(recon, m)) / L
        if ce is not None:
            value = value + self.ce_weight * share.mean(ce, n) / L
        return value

    def elbo(self, net: nn.Module, x: torch.Tensor, generator: torch.Generator | None = None,
             n_time_samples: int = 32, batch_size: int = 1024, labels: torch.Tensor | None = None) -> ELBOEstimate:
        """Estimate the upper bound on −log p_θ(x) (nats per sequence) with ``n_time_samples`` per sequence.

        Times are stratified per sequence; the reconstruction term uses ``n_time_samples`` draws
        of x_{t_min}; the prior term is exact. The returned standard errors are those of the
        unstratified estimator (an upper bound on the stratified one).
        """
        check_int("n_time_samples", n_time_samples, minimum=2)
        sp, sch, M = self.space, self.schedule, n_time_samples
        x = sp.validate(x)
        n, L = x.shape
        nats, var = [], []
        with torch.no_grad():
            rows_per = max(1, batch_size // M)
            for i in range(0, n, rows_per):
                xb = x[i:i + rows_per]
                b = xb.shape[0]
                rep = xb.repeat_interleave(M, dim=0)
                lab = None if labels is None else labels[i:i + rows_per].repeat_interleave(M, dim=0)
                u = (torch.arange(M, dtype=torch.float64, device=x.device).repeat(b)
                     + torch.rand(b * M, dtype=torch.float64, device=x.device, generator=generator)) / M
                t = sch.t_min + (sch.t_max - sch.t_min) * u
                integral, recon, _ = self._terms(net, rep, t, rep, generator, lab, lab)
                per = (integral + recon).reshape(b, M)
                nats.append(per.mean(1) + sp.prior_kl(xb, sch.t_max))
                var.append(per.var(1) / M)
        nats, var = torch.cat(nats), torch.cat(var)
        return ELBOEstimate(nats=nats, stderr=var.sqrt(), bits_per_token=float(nats.mean()) / (L * LN2),
                            bits_per_token_stderr=float(var.sum().sqrt()) / (n * L * LN2), n_time_samples=M)

    def log_prob(self, net: nn.Module, x, n_time_samples: int = 32, generator: torch.Generator | None = None,
                 seed: int = 0, batch_size: int = 1024, labels: torch.Tensor | None = None) -> dict:
        """Lower bound on log p_θ(x) per sequence (nats, counting measure): minus the ELBO estimate.

        Returns ``{"log_prob": (n,), "stderr": (n,), "bits_per_token": float, "bound": True}``.
        """
        if generator is None:
            generator = make_generator(seed, input_device(x))
        est = self.elbo(net, x, generator, n_time_samples=n_time_samples, batch_size=batch_size, labels=labels)
        return {"log_prob": -est.nats, "stderr": est.stderr, "bits_per_token": est.bits_per_token,
                "bits_per_token_stderr": est.bits_per_token_stderr, "n_time_samples": est.n_time_samples,
                "bound": True}
