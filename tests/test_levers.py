"""Training levers of heatwalk.fit: time importance sampling, random Fourier features, learning-rate warm-up and
floor, held-out model choice and the size rule."""

import math

import numpy as np
import pytest
import scipy.integrate
import scipy.stats
import torch

import heatwalk
from heatwalk import InputError
from heatwalk.core import sizing
from heatwalk.core.objectives import make_objective
from heatwalk.core.schedule import TimeSchedule
from heatwalk.core.training import lr_factor
from heatwalk.spaces import Categories, Torus

from stat_thresholds import p_value_threshold, sigma_threshold

SPACE = Torus(2)
SMALL = dict(batch_size=64, network={"hidden": 16, "depth": 2}, progress=False)


def _data(n=200, seed=0):
    return SPACE.random_uniform(n, torch.Generator().manual_seed(seed))


# ----- time importance sampling --------------------------------------------------------------------------------
@pytest.mark.parametrize("tilt", [0.6, -0.6])
def test_tilted_times_give_the_same_expectation_as_log_uniform_ones(tilt):
    """E_q[w f(t)] equals the log-uniform expectation of f, computed by scipy's quad on the log-time fraction.

    Reference: scipy.integrate.quad of f(t(u)) over u in [0, 1] (t(u) = t_min (t_max/t_min)^u). Check: the
    Monte Carlo mean of 200,000 weighted draws within sigma_threshold(1e-6) ≈ 4.9 of its standard error
    (failure rate 1e-6 for a correct implementation).
    """
    sched = TimeSchedule(1e-4, 20.0, tilt=tilt)
    f = lambda t: 1.0 / (1.0 + t) + 0.3 * np.log(t) ** 2  # noqa: E731 - a smooth function of t with weight at both ends
    span = math.log(20.0) - math.log(1e-4)
    exact, _ = scipy.integrate.quad(lambda u: f(1e-4 * math.exp(span * u)), 0.0, 1.0, epsabs=1e-12)
    t, w = sched.sample_weighted(200_000, torch.Generator().manual_seed(1))
    values = (w * torch.as_tensor(f(t.numpy()))).numpy()
    se = values.std(ddof=1) / math.sqrt(values.size)
    assert abs(values.mean() - exact) < sigma_threshold(1e-6) * se
    # and the draws follow q: the log-time fraction has CDF F(u) = (1 + a) u - a u^2 (scipy's exact KS p-value)
    u = (torch.log(t) - math.log(1e-4)) / span
    p = scipy.stats.kstest(u.numpy()[:20_000], lambda v: (1 + tilt) * v - tilt * v * v).pvalue
    assert p > p_value_threshold(1e-6)


def test_zero_tilt_reproduces_the_log_uniform_draws_with_unit_weights():
    sched = TimeSchedule(1e-4, 20.0)
    t0 = sched.sample(1000, torch.Generator().manual_seed(3))
    t1, w = sched.sample_weighted(1000, torch.Generator().manual_seed(3))
    assert torch.equal(t0, t1) and torch.equal(w, torch.ones_like(w))
    assert "tilt" not in sched.config() and TimeSchedule(1e-4, 20.0, tilt=0.5).config()["tilt"] == 0.5


def test_tilted_fit_records_its_tilt_and_other_objectives_refuse_it(tmp_path):
    model = heatwalk.fit(SPACE, _data(), steps=5, time_tilt=0.5, **SMALL)
    assert model.objective.schedule.tilt == 0.5 and model.record["levers"]["time_tilt"] == 0.5
    model.save(tmp_path / "m")  # the tilt travels with the model (its schedule's config)
    assert heatwalk.load(tmp_path / "m").objective.schedule.tilt == 0.5
    with pytest.raises(InputError, match="time_tilt must be 0 for it"):
        make_objective(Categories(4, 3), time_tilt=0.5)
    with pytest.raises(InputError, match="time_tilt"):
        TimeSchedule(1e-4, 20.0, tilt=1.0)


# ----- random Fourier features ---------------------------------------------------------------------------------
@pytest.mark.parametrize("residual", [False, True])
def test_fourier_features_are_sin_and_cos_of_fixed_gaussian_frequencies(tmp_path, residual):
    n = 300
    model = heatwalk.fit(SPACE, _data(n), steps=3, **{**SMALL, "network": {"hidden": 16, "depth": 2,
                                                                           "fourier_features": 256,
                                                                           "residual": residual}})
    net = model.network
    # the rule n^(1/(d+4)) / spread of heatwalk.core.sizing, d = 2 for T², spread of the (cos, sin) embedding
    spread = torch.cat([torch.cos(_data(n)), torch.sin(_data(n))], dim=1).var(dim=0).mean().sqrt().item()
    scale = n ** (1 / (2 + 4)) / spread
    assert net.config()["fourier_scale"] == pytest.approx(scale, rel=1e-12)
    # 512 N(0, scale²) entries: the sample standard deviation is within 15% (about 5 of its standard errors
    # 1/sqrt(2·512) ≈ 3%; common-practice normal approximation) of the scale
    assert net.frequencies.std().item() == pytest.approx(scale, rel=0.15)
    # the first layer sees [e, sin(eΩ), cos(eΩ)] (the MLP: then the time features)
    seen = {}
    (net.inlet if residual else net.net[0]).register_forward_hook(lambda mod, inp, out: seen.update(x=inp[0]))  # returns None: output kept
    e = torch.randn(5, 4)
    net(e, torch.zeros(5, net.config()["time_dim"]))
    z = e @ net.frequencies
    assert torch.allclose(seen["x"][:, :4 + 512], torch.cat([e, torch.sin(z), torch.cos(z)], dim=1))
    # saved with the weights (never trained: a buffer) and loaded back
    model.save(tmp_path / "m")
    back = heatwalk.load(tmp_path / "m")
    assert torch.equal(back.network.frequencies, net.frequencies)
    assert "frequencies" not in dict(net.named_parameters())


# ----- residual network with time in every block ----------------------------------------------------------------
def test_residual_network_starts_as_its_input_map_and_reads_the_time_in_every_block(tmp_path):
    from heatwalk.core.networks.residual import ResidualDenoiser

    net = ResidualDenoiser(4, 17, 4, hidden=32, depth=3)
    e, tf = torch.randn(6, 4), torch.randn(6, 17)
    # zero-initialised outer layers: each block is the identity at the start, so the output is
    # outlet(SiLU(LayerNorm(inlet(e)))) whatever the time
    with torch.no_grad():
        expect = net.outlet(torch.nn.functional.silu(net.norm(net.inlet(e))))
        assert torch.allclose(net(e, tf), expect, atol=1e-6)
        assert torch.allclose(net(e, tf), net(e, torch.randn(6, 17)), atol=1e-6)
        for block in net.blocks:  # once the blocks are not the identity, every one of them hears the time
            torch.nn.init.normal_(block.outer.weight)
        assert (net(e, tf) - net(e, tf + 1.0)).abs().max().item() > 1e-3
        for i, block in enumerate(net.blocks):
            seen = {}
            hook = block.condition.register_forward_hook(lambda mod, inp, out: seen.update(c=inp[0]))
            net(e, tf)
            hook.remove()
            assert torch.allclose(seen["c"], net.time_embedding(tf)), i
    # chosen by a fit's network option, saved and loaded as the same class and weights
    model = heatwalk.fit(SPACE, _data(), steps=3, **{**SMALL, "network": {"hidden": 16, "depth": 2, "residual": True}})
    assert type(model.network) is ResidualDenoiser and model.network.config()["depth"] == 2
    model.save(tmp_path / "m")
    back = heatwalk.load(tmp_path / "m")
    assert type(back.network) is ResidualDenoiser
    saved, loaded = model.network.state_dict(), back.network.state_dict()
    assert saved.keys() == loaded.keys() and all(torch.equal(saved[k], loaded[k]) for k in saved)
    e, c = torch.randn(7, 4), torch.randn(7, back.network.time_embedding[0].in_features)
    with torch.no_grad():
        assert torch.equal(back.network(e, c), model.network(e, c))
    x = _data(5, seed=9)
    # the same log-likelihoods to 1e-6 relative (the float32 network's rounding, through the adaptive ODE solver):
    # the loaded model's differ from the fitted one's by about 6e-8 though weights and outputs are equal bit for
    # bit (seen 2026-12-04; the cause is not known)
    assert torch.allclose(back.log_prob(x)["log_prob"], model.log_prob(x)["log_prob"], rtol=1e-6, atol=0)
    with pytest.raises(InputError, match="'residual' must be true or false"):
        heatwalk.fit(SPACE, _data(), steps=1, **{**SMALL, "network": {"residual": "yes"}})


def test_time_skip_adds_a_time_dependent_linear_map_of_the_features_starting_at_zero(tmp_path):
    from heatwalk.core.networks.residual import ResidualDenoiser

    torch.manual_seed(0)
    plain = ResidualDenoiser(3, 17, 2, hidden=16, depth=2)
    torch.manual_seed(0)
    net = ResidualDenoiser(3, 17, 2, hidden=16, depth=2, time_skip=True)
    e, tf = torch.randn(5, 3), torch.randn(5, 17)
    with torch.no_grad():
        assert torch.equal(net(e, tf), plain(e, tf))  # M(t) = 0 at the start: the network without the skip
        torch.nn.init.normal_(net.skip_matrix.weight)
        m = net.skip_matrix(net.time_embedding(tf)).reshape(5, 2, 3)
        expect = plain(e, tf) + torch.einsum("nij,nj->ni", m, e)
        assert torch.allclose(net(e, tf), expect, atol=1e-5)
        # linear in the features at a fixed time once the blocks' part is taken away
        assert torch.allclose(net(2 * e, tf) - plain(2 * e, tf), 2 * (net(e, tf) - plain(e, tf)), atol=1e-4)
    assert net.config()["time_skip"] is True and "time_skip" not in plain.config()
    model = heatwalk.fit(SPACE, _data(), steps=3, **{**SMALL, "network": {"hidden": 8, "depth": 1, "residual": True,
                                                                           "time_skip": True}})
    model.save(tmp_path / "m")
    back = heatwalk.load(tmp_path / "m")
    assert back.network.skip_matrix is not None
    assert torch.equal(back.network.skip_matrix.weight, model.network.skip_matrix.weight)


# ----- learning-rate schedule ---------------------------------------------------------------------------------
def test_learning_rate_factor_warms_up_then_decays_to_its_floor():
    steps = 100
    for k in (0, 13, 50, 99, 100):  # the defaults are the schedule heatwalk always had
        assert lr_factor(k, steps) == pytest.approx(0.1 + 0.9 * 0.5 * (1 + math.cos(math.pi * k / steps)), abs=1e-15)
    assert lr_factor(0, steps, warmup=10) == pytest.approx(0.1 * lr_factor(0, steps), abs=1e-15)
    assert lr_factor(9, steps, warmup=10) == pytest.approx(lr_factor(9, steps), abs=1e-15)
    assert lr_factor(steps, steps, floor=0.0) == pytest.approx(0.0, abs=1e-15)
    model = heatwalk.fit(SPACE, _data(), steps=20, lr_warmup=0.1, lr_floor=0.0, **SMALL)
    assert model.record["levers"]["lr_warmup"] == 2  # ceil(0.1 · 20)
    with pytest.raises(InputError, match="lr_floor"):
        heatwalk.fit(SPACE, _data(), steps=2, lr_floor=1.5, **SMALL)


# ----- held-out model choice ----------------------------------------------------------------------------------
def test_validation_keeps_the_ema_weights_of_the_lowest_held_out_loss():
    model = heatwalk.fit(SPACE, _data(400), steps=40, validation_fraction=0.25, validation_every=10, **SMALL)
    v = model.record["validation"]
    assert v["n_points"] == 100 and [s for s, _ in v["curve"]] == [10, 20, 30, 40]
    assert v["best_loss"] == min(loss for _, loss in v["curve"])
    # the kept weights give the recorded best loss on the same fixed draws (rebuilt as fit draws them)
    from heatwalk.core.validation import VALIDATION_SEED_OFFSET
    from heatwalk.core.devices import make_generator
    perm = torch.randperm(400, generator=torch.Generator().manual_seed(0 + VALIDATION_SEED_OFFSET))
    held = perm[:100].sort().values
    drawn = model.objective.draw(_data(400)[held], make_generator(VALIDATION_SEED_OFFSET, torch.device("cpu")))
    with torch.no_grad():
        loss = float(model.objective.share_loss(model.network, drawn))
    assert loss == pytest.approx(v["best_loss"], rel=1e-6)  # float32 network, same operations


def test_validation_refuses_checkpoints_and_too_few_points(tmp_path):
    with pytest.raises(InputError, match="without checkpoint_dir"):
        heatwalk.fit(SPACE, _data(), steps=2, validation_fraction=0.1, checkpoint_dir=tmp_path, **SMALL)
    with pytest.raises(InputError, match="leaves 0 for validation"):
        heatwalk.fit(SPACE, _data(4), steps=2, validation_fraction=0.1, **SMALL)


# ----- size rule -------------------------------------------------------------------------------------------------
def test_size_rule_steps_and_width_grow_with_the_data():
    from heatwalk.core.networks.mlp import MLPDenoiser
    from heatwalk.core.networks.residual import ResidualDenoiser

    bounded = dict(bounded=True)
    assert sizing.size_rule(1000, 2, **bounded) == {
        "steps": 3000, "network": {"residual": True, "time_skip": False, "hidden": 128, "depth": 3}}
    assert sizing.size_rule(16000, 2, **bounded) == {
        "steps": 12000, "network": {"residual": True, "time_skip": False, "hidden": 256, "depth": 3}}
    assert sizing.size_rule(4000, 2)["steps"] == 6000 and sizing.size_rule(10 ** 7, 2)["steps"] == 18000
    # unbounded features (R^d, clr): the same widths, with the time skip
    assert sizing.size_rule(1000, 2) == {"steps": 3000,
                                         "network": {"residual": True, "time_skip": True, "hidden": 128, "depth": 3}}
    assert sizing.size_rule(9000, 5)["network"] == {"residual": True, "time_skip": True, "hidden": 256, "depth": 3}
    with pytest.raises(InputError, match="number of data points"):
        sizing.size_rule(None, 2)
    # explicit steps and network entries win over the rule
    model = heatwalk.fit(SPACE, _data(), steps=4, size_rule=True, batch_size=32, progress=False,
                         network={"depth": 2})
    assert model.record["steps"] == 4 and model.network.config()["hidden"] == 128
    assert model.network.config()["depth"] == 2 and model.record["size_rule"] == "applied"
    assert type(model.network) is ResidualDenoiser
    plain = heatwalk.fit(SPACE, _data(), steps=2, batch_size=32, progress=False, network={"residual": False})
    assert type(plain.network) is MLPDenoiser and plain.network.config()["hidden"] == 128
    # on by default; from 8,000 points the width doubles
    big = SPACE.random_uniform(9000, torch.Generator().manual_seed(1))
    wide = heatwalk.fit(SPACE, big, steps=2, batch_size=16, progress=False)
    assert wide.network.config()["hidden"] == 256 and wide.record["size_rule"] == "applied"
    assert type(wide.network) is ResidualDenoiser
    # off: the fixed defaults of the objective (MLP, width 256, depth 3, 3000 steps)
    off = heatwalk.fit(SPACE, big, steps=2, batch_size=16, progress=False, size_rule=False)
    assert off.network.config()["hidden"] == 256 and off.record["size_rule"] == "off"
    assert type(off.network) is MLPDenoiser


def test_size_rule_adds_the_time_skip_only_where_the_embedding_is_unbounded():
    from heatwalk.core.networks.mlp import MLPDenoiser
    from heatwalk.core.networks.residual import ResidualDenoiser
    from heatwalk.spaces import SO3, Euclidean, Simplex, Sphere

    g = torch.Generator().manual_seed(4)
    for space, skip in ((Torus(2), False), (Sphere(2), False), (SO3(), False), (Euclidean(2), True),
                        (Simplex(3), True)):
        x = space.random_uniform(40, g) if space.kind not in ("euclidean", "simplex") else space.prior_sample(40, g)
        model = heatwalk.fit(space, x, steps=1, batch_size=8, progress=False)
        assert type(model.network) is ResidualDenoiser, space
        assert model.network.config().get("time_skip", False) is skip, space
        assert (model.network.skip_matrix is not None) is skip, space
        e = space.embed(x)  # what "bounded" means: the features' norm is the same order for any point
        if not skip:
            assert float(e.norm(dim=-1).max()) <= 3.0 + 1e-12  # |cos,sin| = sqrt(n), |unit vector| = 1, |R|_F = sqrt 3
    # an MLP asked for on an unbounded space does not get the rule's skip; the skip alone on an MLP is refused
    x = Euclidean(2).prior_sample(40, g)
    mlp = heatwalk.fit(Euclidean(2), x, steps=1, batch_size=8, progress=False, network={"residual": False})
    assert type(mlp.network) is MLPDenoiser
    with pytest.raises(InputError, match="'time_skip' belongs to the residual network"):
        heatwalk.fit(Euclidean(2), x, steps=1, batch_size=8, progress=False,
                     network={"residual": False, "time_skip": True})
    with pytest.raises(InputError, match="'time_skip' must be true or false"):
        heatwalk.fit(Euclidean(2), x, steps=1, batch_size=8, progress=False, network={"time_skip": 1})


def test_size_rule_sets_only_the_steps_of_sequence_objectives():
    space = Categories(4, 3)
    x = torch.randint(4, (50, 3), generator=torch.Generator().manual_seed(0))
    model = heatwalk.fit(space, x, size_rule=True, steps=2, batch_size=16, progress=False)
    assert model.network.config()["d_model"] == 64  # the transformer's own default, untouched by the rule


def test_a_product_takes_the_network_options_of_score_matching():
    """The product's one network is built like score matching's (MLP or residual, time skip on the residual
    one) and sized by the same rule; its features are bounded exactly when every manifold factor's are."""
    from heatwalk.core.networks.mlp import MLPDenoiser
    from heatwalk.core.networks.residual import ResidualDenoiser
    from heatwalk.spaces import SO3, Euclidean, Product, Sphere

    assert Product(Torus(2), SO3()).bounded_embedding and Product(Sphere(2), Categories(3, 2)).bounded_embedding
    assert not Product(Sphere(2), Euclidean(1)).bounded_embedding
    space = Product(Torus(1), Euclidean(1))
    g = torch.Generator().manual_seed(0)
    x = (space.factors[0].random_uniform(40, g), space.factors[1].prior_sample(40, g))
    skip = heatwalk.fit(space, x, steps=1, batch_size=8, progress=False,
                        network={"residual": True, "time_skip": True, "hidden": 16})
    assert type(skip.network) is ResidualDenoiser and skip.network.skip_matrix is not None
    mlp = heatwalk.fit(space, x, steps=1, batch_size=8, progress=False, network={"residual": False, "hidden": 16})
    assert type(mlp.network) is MLPDenoiser
    # by default the size rule's network, with the time skip since the R¹ factor's features are unbounded
    default = heatwalk.fit(space, x, steps=1, batch_size=8, progress=False)
    assert type(default.network) is ResidualDenoiser and default.network.config()["hidden"] == 128
    assert default.network.skip_matrix is not None and default.record["size_rule"] == "applied"
    with pytest.raises(InputError, match="unknown network options for a product: \\['width'\\]"):
        heatwalk.fit(space, x, steps=1, batch_size=8, progress=False, network={"width": 16})
