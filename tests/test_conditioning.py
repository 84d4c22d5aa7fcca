"""Conditioning: labels with classifier-free guidance, fixed coordinates, products, user guides.

References: conditional laws known in closed form for invented test laws (a wrapped normal
residual; per-category means; the conditional frequencies of a Markov chain, computed exactly by
enumeration with numpy); scipy.stats.kstest / ks_2samp for distribution checks. Every statistical
check uses a fixed seed and states its failure rate (tests/stat_thresholds.py).
"""

import math

import numpy as np
import pytest
import scipy.stats
import torch

import heatwalk
from heatwalk import InputError
from heatwalk.spaces import Categories, Euclidean, Product, Sphere, Torus
from stat_thresholds import p_value_threshold, sigma_threshold

F64 = torch.float64


def gen(seed):
    return torch.Generator().manual_seed(seed)


def circular_mean(a: torch.Tensor) -> float:
    return float(torch.atan2(a.sin().mean(), a.cos().mean()))


def wrap(a):
    return torch.remainder(a + math.pi, 2 * math.pi) - math.pi


# ----- labels and classifier-free guidance ----------------------------------------------------------
@pytest.fixture(scope="module")
def two_class_model():
    # invented law: class "north" concentrated at angle +1.5, class "south" at -1.5 (von Mises, kappa 20)
    rng = np.random.default_rng(0)
    n = 2000
    names = np.where(rng.random(n) < 0.5, "north", "south")
    mu = np.where(names == "north", 1.5, -1.5)
    x = rng.vonmises(mu, 20.0)[:, None]
    model = heatwalk.fit(Torus(1), x, labels=list(names), steps=1500, batch_size=256, seed=0, progress=False,
                         network={"hidden": 128, "depth": 3})
    return model


def test_guidance_weight_zero_is_the_unconditional_sampler_bit_for_bit(two_class_model):
    m = two_class_model
    a = m.sample(200, steps=60, seed=5, progress=False)
    b = m.sample(200, steps=60, seed=5, progress=False, label="north", guidance=0.0)
    assert torch.equal(a, b)


def test_guidance_one_puts_samples_in_the_requested_mode(two_class_model):
    m = two_class_model
    assert m.classes == ["north", "south"]
    for name, centre in (("north", 1.5), ("south", -1.5)):
        x = m.sample(400, steps=80, seed=6, progress=False, label=name, guidance=1.0)
        near = (wrap(x[:, 0] - centre).abs() < 0.75).double().mean()
        assert float(near) >= 0.95, (name, float(near))
    # stronger guidance stays on the space (angles in [-π, π)) and is at least as concentrated
    x = m.sample(400, steps=80, seed=6, progress=False, label="north", guidance=3.0)
    assert bool(((x >= -math.pi) & (x < math.pi)).all()) and bool(torch.isfinite(x).all())
    assert float((wrap(x[:, 0] - 1.5).abs() < 0.75).double().mean()) >= 0.95
    # one label per sample
    labels = ["north"] * 100 + ["south"] * 100
    x = m.sample(200, steps=80, seed=7, progress=False, label=labels)
    assert float((x[:100, 0] > 0).double().mean()) > 0.9 and float((x[100:, 0] < 0).double().mean()) > 0.9


def test_labels_saved_and_loaded(two_class_model, tmp_path):
    two_class_model.save(tmp_path / "m")
    again = heatwalk.load(tmp_path / "m")
    assert again.classes == ["north", "south"]
    torch.testing.assert_close(again.sample(20, steps=10, seed=1, progress=False, label="south"),
                               two_class_model.sample(20, steps=10, seed=1, progress=False, label="south"),
                               atol=0, rtol=0)


def test_label_and_guidance_errors(two_class_model):
    m = two_class_model
    with pytest.raises(InputError, match="never seen in training"):
        m.sample(5, label="east", progress=False)
    for bad in (float("nan"), float("inf"), "2"):
        with pytest.raises(InputError, match="guidance must be a finite number"):
            m.sample(5, label="north", guidance=bad, progress=False)
    with pytest.raises(InputError, match="one class or one per sample"):
        m.sample(5, label=["north", "south"], progress=False)
    unlabelled = heatwalk.fit(Torus(1), np.zeros((10, 1)), steps=2, progress=False)
    with pytest.raises(InputError, match="fitted without labels"):
        unlabelled.sample(5, label="north", progress=False)
    with pytest.raises(InputError, match="integers or strings, not both"):
        heatwalk.fit(Torus(1), np.zeros((3, 1)), labels=[1, "a", 2], steps=2, progress=False)
    with pytest.raises(InputError, match="got 2 labels for 3 data points"):
        heatwalk.fit(Torus(1), np.zeros((3, 1)), labels=[1, 2], steps=2, progress=False)


# ----- fixed coordinates on a correlated torus law --------------------------------------------------
SIGMA = 0.3


@pytest.fixture(scope="module")
def correlated_torus_model():
    # invented law on T²: angle 0 uniform, angle 1 = angle 0 + N(0, 0.3²) (wrapped). The conditional law of
    # angle 1 given angle 0 = a is the wrapped normal around a with σ = 0.3 (wrapping is below 1e-20 here).
    g = gen(0)
    a0 = (2 * torch.rand(4000, generator=g, dtype=F64) - 1) * math.pi
    a1 = a0 + SIGMA * torch.randn(4000, generator=g, dtype=F64)
    # the MLP (256x3): this checks the conditioning, at the fit it was written with. The size rule's residual
    # network (width 128 at 4,000 points) gave KS p = 0.0009 at a = -3 here (threshold 0.001; 2026-12-02)
    return heatwalk.fit(Torus(2), torch.stack([a0, a1], 1), steps=2000, seed=1, inpainting=True, progress=False,
                        network={"residual": False, "hidden": 256})


@pytest.mark.parametrize("a", [1.0, -3.0])
def test_fixed_angle_gives_the_closed_form_conditional(correlated_torus_model, a):
    x = correlated_torus_model.sample(2000, steps=200, given={0: a}, seed=3, progress=False)
    assert bool((x[:, 0] == torch.tensor(a, dtype=F64)).all())        # held exactly
    res = wrap(x[:, 1] - a)
    # circular mean of the residual: 0 within 0.05 rad (its standard error is 0.3/sqrt(2000) = 0.007, so this
    # allows the fit's own bias); KS test against N(0, 0.3²) (scipy), failure rate 1e-3 under exactness
    assert abs(circular_mean(res)) < 0.05
    assert scipy.stats.kstest(res.numpy(), scipy.stats.norm(0, SIGMA).cdf).pvalue > p_value_threshold(1e-3)


def test_replacement_is_biased_on_a_correlated_law(correlated_torus_model):
    # documented behaviour: replacement ignores what the free coordinate's state says about the known one, so
    # the conditional spread comes out far too wide (here > 1.5 σ); the trained method above does not
    x = correlated_torus_model.sample(1000, steps=200, given={0: 1.0}, given_method="replacement", seed=3,
                                      progress=False)
    assert float(wrap(x[:, 1] - 1.0).std()) > 1.5 * SIGMA


def test_given_errors(correlated_torus_model):
    m = correlated_torus_model
    with pytest.raises(InputError, match="angle 2 does not exist"):
        m.sample(5, given={2: 0.0}, progress=False)
    with pytest.raises(InputError, match="NaN or infinite"):
        m.sample(5, given={0: float("nan")}, progress=False)
    with pytest.raises(InputError, match="give one value or one per sample"):
        m.sample(5, given={0: [0.1, 0.2]}, progress=False)
    with pytest.raises(InputError, match="nothing is left to sample"):
        m.sample(5, given={0: 0.1, 1: 0.2}, progress=False)
    with pytest.raises(InputError, match="deterministic"):
        m.sample(5, given={0: 0.1}, sampler="probability_flow", progress=False)
    sphere = heatwalk.fit(Sphere(2), Sphere(2).random_uniform(20, gen(0)), steps=2, progress=False)
    with pytest.raises(InputError, match="no coordinates that can be fixed"):
        sphere.sample(5, given={0: 1.0}, progress=False)


def test_reconstruction_guidance_on_the_euclidean_gaussian_law():
    # linear-Gaussian law on R² (x1 = x0 + N(0, 0.5²), x0 ~ N(0, 1)): the posterior of x_0 given x_t is Gaussian,
    # where reconstruction guidance with the Tweedie covariance is exact; the conditional of x1 given x0 = 1 is
    # N(1, 0.5²). Checked: mean within 4 standard errors plus the fit's bias (0.05) and std within 15% (the fit
    # of 1500 steps and the Tweedie Jacobian through the network are themselves only accurate to several %).
    g = gen(2)
    x0 = torch.randn(4000, generator=g, dtype=F64)
    x = torch.stack([x0, x0 + 0.5 * torch.randn(4000, generator=g, dtype=F64)], 1)
    model = heatwalk.fit(Euclidean(2, process="ornstein_uhlenbeck"), x, steps=1500, seed=0, progress=False)
    s = model.sample(2000, steps=200, given={0: 1.0}, seed=1, progress=False)
    assert model.objective.default_given_method == "reconstruction"
    free = s[:, 1]
    assert abs(float(free.mean()) - 1.0) < sigma_threshold(6e-5) * 0.5 / math.sqrt(2000) + 0.05
    assert abs(float(free.std()) / 0.5 - 1) < 0.15
    # the default network on R² (residual with its time skip, heatwalk.core.sizing) samples the marginal law:
    # standard deviations 1 and sqrt(1.25) within 10% (the fit's accuracy; without the skip they were 25 and 48)
    assert model.network.config().get("time_skip") is True
    u = model.sample(2000, steps=200, seed=2, progress=False)
    assert torch.allclose(u.std(0), torch.tensor([1.0, math.sqrt(1.25)], dtype=u.dtype), rtol=0.1)


# ----- products ---------------------------------------------------------------------------------------
MEANS = torch.tensor([-2.0, 0.0, 2.0], dtype=F64)


@pytest.fixture(scope="module")
def mixed_model():
    # invented law on T¹ × {0, 1, 2}: category uniform, angle ~ N(mean[c], 0.3²) with means -2, 0, 2
    g = gen(0)
    c = torch.randint(3, (3000, 1), generator=g)
    ang = MEANS[c[:, 0]] + 0.3 * torch.randn(3000, generator=g, dtype=F64)
    return heatwalk.fit(Product(Torus(1), Categories(3, 1)), (ang.unsqueeze(-1), c), steps=1500, seed=1,
                        progress=False)


def test_mixed_product_reproduces_the_dependence(mixed_model):
    x = mixed_model.sample(3000, steps=200, seed=2, progress=False)
    assert isinstance(x, tuple) and x[0].shape == (3000, 1) and x[1].shape == (3000, 1)
    for k in range(3):
        sel = x[0][x[1][:, 0] == k, 0]
        assert sel.numel() > 700                                       # each category about a third
        assert abs(circular_mean(sel) - float(MEANS[k])) < 0.2, k      # per-category circular means
    for k in range(3):                                                 # the conditional given the category
        x = mixed_model.sample(800, steps=200, seed=3, progress=False, given={1: [[k]]})
        assert bool((x[1] == k).all())
        assert abs(circular_mean(x[0][:, 0]) - float(MEANS[k])) < 0.2
    x = mixed_model.sample(500, steps=200, seed=4, progress=False, given={0: [[1.9]]})
    assert float((x[1][:, 0] == 2).double().mean()) > 0.95               # and the other way round


def test_mixed_product_likelihood_is_a_flagged_bound(mixed_model):
    g = gen(9)
    c = torch.randint(3, (300, 1), generator=g)
    ang = MEANS[c[:, 0]] + 0.3 * torch.randn(300, generator=g, dtype=F64)
    out = mixed_model.log_prob((ang.unsqueeze(-1), c))
    assert out["bound"] is True and set(out["parts"]) == {"manifold_factors_ode", "finite_factors_given_manifold_elbo"}
    # exact entropy of the invented law (closed form: log 3 + the Gaussian entropy 0.5 log(2πe·0.09)); held-out
    # NLL must lie above it minus 4 standard errors and within 0.15 nats of it (a fit of 1500 steps)
    h = math.log(3) + 0.5 * math.log(2 * math.pi * math.e * 0.09)
    nll = -out["log_prob"]
    se = float(nll.std()) / math.sqrt(nll.numel())
    assert float(nll.mean()) > h - sigma_threshold(6e-5) * se
    assert float(nll.mean()) < h + 0.15


def test_fixing_one_independent_factor_leaves_the_other_unchanged():
    # invented law with independent factors: angle ~ N(1, 0.4²) on T¹ and a point on S² near the north pole;
    # fixing the sphere factor must not change the angle's law: two-sample KS between the angles sampled with
    # and without it fixed, failure rate 1e-3 under exactness (scipy.stats.ks_2samp)
    g = gen(3)
    ang = 1.0 + 0.4 * torch.randn(3000, 1, generator=g, dtype=F64)
    north = torch.tensor([[0.0, 0.0, 1.0]], dtype=F64).expand(3000, 3)
    pts = Sphere(2).sample_forward(north, 0.05, g)
    model = heatwalk.fit(Product(Torus(1), Sphere(2)), (ang, pts), steps=1000, seed=2, progress=False)
    free = model.sample(1000, steps=100, seed=5, progress=False)[0][:, 0]
    fixed = model.sample(1000, steps=100, seed=6, progress=False, given={1: pts[:1]})[0][:, 0]
    assert scipy.stats.ks_2samp(free.numpy(), fixed.numpy()).pvalue > p_value_threshold(1e-3)


def test_product_bad_input():
    sp = Product(Torus(1), Categories(3, 1))
    with pytest.raises(InputError, match="different lengths"):
        sp.validate((np.zeros((4, 1)), np.zeros((3, 1), dtype=int)))
    with pytest.raises(InputError, match="factor 1 .*state 3 is outside"):
        sp.validate((np.zeros((2, 1)), np.full((2, 1), 3)))
    with pytest.raises(InputError, match="factor 2 does not exist"):
        sp.given_part({2: 0}, 4)
    with pytest.raises(InputError, match="at least two factors"):
        Product(Torus(1))


# ----- positions of sequences -------------------------------------------------------------------------
def _markov_chain():
    # invented stationary Markov source on K = 3 states, L = 4: a sticky chain
    P = np.array([[0.8, 0.1, 0.1], [0.2, 0.6, 0.2], [0.1, 0.2, 0.7]])
    w, v = np.linalg.eig(P.T)
    pi = np.real(v[:, np.argmin(np.abs(w - 1))])
    return P, pi / pi.sum()


def test_fixed_positions_on_a_markov_source_follow_the_exact_conditional():
    P, pi = _markov_chain()
    rng = np.random.default_rng(0)
    n, L = 6000, 4
    x = np.zeros((n, L), dtype=np.int64)
    x[:, 0] = rng.choice(3, n, p=pi)
    for j in range(1, L):
        u = rng.random(n)[:, None]
        x[:, j] = (np.cumsum(P[x[:, j - 1]], 1) < u).sum(1)
    model = heatwalk.fit(Categories(3, L), x, steps=1500, seed=0, progress=False, network={"architecture": "mlp"})
    s = model.sample(3000, steps=L, sampler="unmasking", seed=1, progress=False, given={1: 2})
    assert bool((s[:, 1] == 2).all())                                   # fixed positions exactly the token
    # exact conditionals given x_1 = 2 (Markov property): x_0 ∝ pi(a) P[a, 2]; x_2 = P[2, :]
    p0 = pi * P[:, 2] / (pi * P[:, 2]).sum()
    for pos, p in ((0, p0), (2, P[2])):
        obs = np.bincount(s[:, pos].numpy(), minlength=3)
        # chi-square against the exact frequencies, failure rate 1e-3 under exactness, plus the fit's error:
        # also require every frequency within 0.04 of the exact one
        assert np.abs(obs / obs.sum() - p).max() < 0.04, (pos, obs / obs.sum(), p)


# ----- user guidance ----------------------------------------------------------------------------------
def test_user_guide_on_the_sphere_moves_samples_toward_a_target():
    # invented scenario: directions spread over the upper hemisphere; the guide is a von Mises-Fisher
    # log-likelihood κ μ·x of the denoised direction (κ = 40) around a target 30 degrees from the pole
    g = gen(4)
    z = torch.randn(3000, 3, generator=g, dtype=F64)
    z[:, 2] = z[:, 2].abs()
    data = z / z.norm(dim=1, keepdim=True)
    model = heatwalk.fit(Sphere(2), data, steps=1000, seed=0, progress=False)
    target = torch.tensor([math.sin(math.radians(30)), 0.0, math.cos(math.radians(30))], dtype=F64)

    def within_10_degrees(x):
        return float(((x @ target).clamp(-1, 1).acos() < math.radians(10)).double().mean())

    plain = model.sample(1000, steps=150, seed=2, progress=False)
    guided = model.sample(1000, steps=150, seed=2, progress=False, guide=lambda x0: 40.0 * (x0 @ target),
                          guide_scale=1.0)
    assert bool(torch.isfinite(guided).all()) and torch.allclose(guided.norm(dim=1), torch.ones(1000, dtype=F64))
    # unguided: about 1.5% of the hemisphere's directions lie within 10° of the target; guided: at least 20
    # points more (stated amount: +0.20)
    assert within_10_degrees(guided) > within_10_degrees(plain) + 0.20


def test_user_guide_on_sequences_enriches_a_state():
    # invented: uniform sequences over K = 4, L = 6; the guide (additive over positions) rewards state 3
    rng = np.random.default_rng(1)
    x = rng.integers(0, 4, (2000, 6))
    model = heatwalk.fit(Categories(4, 6), x, steps=300, seed=0, progress=False, network={"architecture": "mlp"})
    plain = model.sample(1000, steps=20, seed=1, progress=False)
    guided = model.sample(1000, steps=20, seed=1, progress=False, guide=lambda p: p[..., 3].sum(-1), guide_scale=2.0)
    # exp(2·1) reweighting of state 3 at every position: frequency e²/(3 + e²) = 0.71 against 0.25 without
    assert float((guided == 3).double().mean()) > float((plain == 3).double().mean()) + 0.3
    with pytest.raises(InputError, match="one log-likelihood per sample"):
        model.sample(5, steps=3, progress=False, guide=lambda p: p.sum())


def test_conditional_log_prob_of_more_points_than_one_block():
    # regression: labels were passed whole while the ODE works in blocks of 1024 points
    x = np.random.default_rng(0).uniform(-3, 3, (1100, 1))
    m = heatwalk.fit(Torus(1), x, labels=["a"] * 550 + ["b"] * 550, steps=2, progress=False,
                     network={"hidden": 8, "depth": 1})
    out = m.log_prob(x, label="a", method="rk4", steps=2)
    assert out["log_prob"].shape == (1100,) and bool(torch.isfinite(out["log_prob"]).all())
    first = m.log_prob(x[:1000], label="a", method="rk4", steps=2)["log_prob"]
    torch.testing.assert_close(out["log_prob"][:1000], first, atol=1e-12, rtol=0)
