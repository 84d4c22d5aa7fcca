"""The absorbing chain's closed-form ELBO integrand equals the general reverse-rates expression.

References: the general integrand Σ_v [r_θ − r + r log(r / r_θ)] is Campbell et al. 2022, Prop. 2
(path-space KL form of Lou et al. 2024, eq. 8); the closed form (1/t) Σ_masked −log p_θ(x_0,l | x_t)
is the masked-diffusion ELBO of Sahoo et al. 2024, eq. 10, and Shi et al. 2024, eq. 5 (weight
−α'_t / (1 − α_t) = 1/t for α_t = 1 − t). The t-integral is scipy.integrate.quad; the expectation
over x_t is an exact sum over the 2^L mask patterns.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
import scipy.integrate
import torch

import heatwalk
from heatwalk import InputError
from heatwalk.core.objectives.discrete_elbo import DiscreteELBO
from heatwalk.core.schedule import TimeSchedule
from heatwalk.spaces import Categories
from stat_thresholds import sigma_threshold

T_MIN = 1e-3


def gen(seed=0):
    return torch.Generator().manual_seed(seed)


def objectives(space):
    sch = TimeSchedule(T_MIN, 1.0)
    return DiscreteELBO(space, sch), DiscreteELBO(space, sch, integrand="rates")


def small_net(obj, seed=0):
    torch.manual_seed(seed)
    net = obj.default_network(d_model=16, n_layers=1, n_heads=2)
    with torch.no_grad():  # sharper than the initial near-uniform logits, so the check is not trivial
        net.out.weight.mul_(20.0)
    return net.eval()


@pytest.mark.parametrize("variable_length", [False, True])
def test_closed_form_integrand_equals_reverse_rates_for_every_state(variable_length):
    """For each drawn (x_0, x_t, t) and arbitrary model probabilities: equal to 1e-12 relative
    (both are sums of the same logarithms in a different order; measured 4e-16)."""
    sp = Categories(5, 7, process="absorbing", variable_length=variable_length)
    closed, rates = objectives(sp)
    g = gen(1)
    x0 = sp.random_uniform(400, g)
    t = T_MIN + (1 - T_MIN) * torch.rand(400, dtype=torch.float64, generator=g)
    xt = sp.sample_forward(x0, t, g)
    log_p = closed._restrict(torch.randn(400, sp.L, sp.K, dtype=torch.float64, generator=g) * 3, xt, t)
    a = sp.closed_form_integrand(xt, x0, log_p, t)
    b = rates._integrand(xt, x0, t, log_p)
    assert a is not None and bool((b > 0).any())
    np.testing.assert_allclose(a.numpy(), b.numpy(), rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(closed._integrand(xt, x0, t, log_p).numpy(), a.numpy(), rtol=0, atol=0)


@pytest.mark.parametrize("process", ["uniform", "rates"])
def test_chains_without_closed_form_use_the_reverse_rates(process):
    rates = [[-1.0, 0.6, 0.4], [0.2, -0.5, 0.3], [0.5, 0.5, -1.0]] if process == "rates" else None
    sp = Categories(3, 4, process=process, rates=rates)
    x0 = sp.random_uniform(10, gen(2))
    log_p = torch.log_softmax(torch.randn(10, 4, 3, dtype=torch.float64, generator=gen(3)), -1)
    assert sp.closed_form_integrand(x0, x0, log_p, 0.5) is None


def _exact_integrands(space, obj, net, x0, t):
    """E_{x_t ~ q(·|x_0)} of the closed-form and of the reverse-rates integrand at time t: exact sums over
    the 2^L mask patterns of the absorbing chain, each weighted by t^{#masked} (1 − t)^{#unmasked}."""
    L = space.L
    patterns = torch.tensor(list(itertools.product([False, True], repeat=L)))
    xt = torch.where(patterns, space.mask_state, x0.expand(len(patterns), L))
    w = (torch.tensor(t) ** patterns.sum(1)) * (torch.tensor(1 - t) ** (~patterns).sum(1))
    tt = torch.full((len(patterns),), t, dtype=torch.float64)
    x0s = x0.expand(len(patterns), L)
    with torch.no_grad():
        log_p = obj.log_x0_probs(net, xt, tt)
        closed = space.closed_form_integrand(xt, x0s, log_p, tt)
        general = obj._rates_integrand(xt, x0s, tt, log_p)
    return float((w * closed).sum()), float((w * general).sum()), float((w * -log_p.gather(2, x0s.unsqueeze(-1))
                                                                         .squeeze(-1).sum(-1)).sum())


def test_per_sample_elbo_closed_form_equals_general_estimator():
    """Same network, same x_0: the exact t-integral (scipy quad, epsrel 1e-8) of the expected closed-form
    integrand equals that of the reverse-rates integrand to 1e-7 relative (the float32 network makes the
    integrand smooth only to ~1e-7, which limits quad's accuracy), and the Monte Carlo estimator
    of ``elbo`` with the reverse rates (2000 stratified times × 8 copies) agrees with the exact bound
    within 4 standard errors (failure rate 6e-5) plus 1e-3 for the reconstruction term's draws."""
    sp = Categories(3, 4, process="absorbing")
    closed, rates = objectives(sp)
    net = small_net(closed)
    for x0 in (torch.tensor([0, 1, 2, 1]), torch.tensor([2, 2, 0, 0])):
        # in s = log t (the network's time features are smooth in log t): ∫ f(t) dt = ∫ f(e^s) e^s ds
        ic, _ = scipy.integrate.quad(lambda s: _exact_integrands(sp, closed, net, x0, np.exp(s))[0] * np.exp(s),
                                     np.log(T_MIN), 0.0, limit=200, epsabs=1e-10, epsrel=1e-8)
        ig, _ = scipy.integrate.quad(lambda s: _exact_integrands(sp, closed, net, x0, np.exp(s))[1] * np.exp(s),
                                     np.log(T_MIN), 0.0, limit=200, epsabs=1e-10, epsrel=1e-8)
        assert ic > 0.1
        assert abs(ic - ig) <= 1e-7 * abs(ig), (ic, ig)
        recon = _exact_integrands(sp, closed, net, x0, T_MIN)[2]
        bound = ic + recon + float(sp.prior_kl(x0.unsqueeze(0), 1.0))
        with torch.no_grad():
            est = rates.elbo(net, x0.expand(8, -1).clone(), gen(5), n_time_samples=2000)
            est_closed = closed.elbo(net, x0.expand(8, -1).clone(), gen(5), n_time_samples=2000)
        mean, se = float(est.nats.mean()), float(est.stderr.pow(2).sum().sqrt()) / 8
        assert abs(mean - bound) < sigma_threshold(6e-5) * se + 1e-3, (mean, se, bound)
        # the same draws through the closed form: the same estimate up to rounding
        np.testing.assert_allclose(est_closed.nats.numpy(), est.nats.numpy(), rtol=1e-12)


def test_model_likelihood_bound_unchanged():
    """A fitted model's reported bound (Model.log_prob, closed form) equals the reverse-rates objective's
    on the same draws (seed), to 1e-11 relative: the change of evaluation does not move the bound."""
    sp = Categories(4, 6, process="absorbing")
    data = torch.randint(4, (1, 6), generator=gen(6)).expand(300, -1).clone()
    flip = torch.rand(300, 6, generator=gen(7)) < 0.3
    data = torch.where(flip, torch.randint(4, (300, 6), generator=gen(8)), data)
    model = heatwalk.fit(sp, data, steps=30, batch_size=64, seed=1, progress=False,
                         network={"d_model": 16, "n_layers": 1, "n_heads": 2})
    assert model.objective.integrand == "auto"
    ours = model.log_prob(data[:20], n_time_samples=16, seed=3)
    _, rates = objectives(sp)
    with torch.no_grad():
        general = rates.log_prob(model.network, data[:20], n_time_samples=16, seed=3)
    np.testing.assert_allclose(ours["log_prob"].numpy(), general["log_prob"].numpy(), rtol=1e-11)
    np.testing.assert_allclose(ours["stderr"].numpy(), general["stderr"].numpy(), rtol=1e-8, atol=1e-12)


def test_reconstruction_rows_with_determined_x0_skip_the_network():
    """Rows of x_{t_min} with no masked position have −log p_θ(x_0 | x_{t_min}) = 0: the batch loss and its
    gradient equal those of the full evaluation (every row through the network) to 1e-6 relative, a few
    float32 eps (the network runs in float32 and its rounding depends on the rows it is given; measured 2e-9)."""
    sp = Categories(3, 5, process="absorbing")
    obj, _ = objectives(sp)
    net = small_net(obj)
    x0 = sp.random_uniform(64, gen(9))
    drawn = obj.draw(x0, gen(10))
    # mask a few reconstruction rows by hand so both kinds of row occur
    xr = drawn["xr"].clone()
    xr[:3, 1] = sp.mask_state
    drawn["xr"] = xr
    m = xr.shape[0]
    assert 0 < int((xr == sp.mask_state).any(-1).sum()) < m
    loss = obj.share_loss(net, drawn)
    grads = torch.autograd.grad(loss, list(net.parameters()))
    # the full evaluation, written out
    t, xt = drawn["t"], drawn["xt"]
    tr = torch.full((m,), T_MIN, dtype=torch.float64)
    log_p = obj.log_x0_probs(net, torch.cat([xt, xr]), torch.cat([t, tr]))
    integral = (1 - T_MIN) * obj._integrand(xt, x0, t, log_p[:64])
    recon = -log_p[64:].gather(2, x0[:m].unsqueeze(-1)).squeeze(-1).sum(-1)
    full = (integral.mean() + recon.mean()) / sp.L
    full_grads = torch.autograd.grad(full, list(net.parameters()))
    assert abs(float(loss.detach()) - float(full.detach())) <= 1e-6 * abs(float(full.detach()))
    for a, b in zip(grads, full_grads):
        np.testing.assert_allclose(a.numpy(), b.numpy(), rtol=1e-5, atol=1e-6)


def test_integrand_option_round_trips_and_is_checked():
    sp = Categories(3, 4)
    obj = DiscreteELBO(sp, TimeSchedule(T_MIN, 1.0), integrand="rates")
    again = DiscreteELBO.from_config(sp, obj.config())
    assert again.integrand == "rates"
    assert "integrand" not in DiscreteELBO(sp, TimeSchedule(T_MIN, 1.0)).config()
    with pytest.raises(InputError, match="integrand must be one of 'auto', 'rates'; got 'exact'"):
        DiscreteELBO(sp, TimeSchedule(T_MIN, 1.0), integrand="exact")
