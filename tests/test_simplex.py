"""Simplex(K): Aitchison geometry, the Ornstein–Uhlenbeck forward process, densities, reading, fitting.

Each numerical check names its external reference beside it and states its
tolerance. Statistical checks use fixed seeds; the failure rate stated is the
one a fresh random seed would have.
"""

import math

import numpy as np
import pytest
import scipy.integrate
import scipy.linalg
import scipy.stats
import torch

import heatwalk
from heatwalk import InputError
from heatwalk.frontend.metrics import median_bandwidth, mmd_squared
from heatwalk.core.fields import ScoreField
from heatwalk.samplers import geodesic_random_walk, predictor_corrector
from heatwalk.core.schedule import TimeSchedule
from heatwalk.spaces import Simplex, from_config
from heatwalk.spaces.simplex import clr, helmert_basis, ilr, ilr_inverse
from stat_thresholds import sigma_threshold, p_value_threshold

F64 = torch.float64


def gen(seed):
    return torch.Generator().manual_seed(seed)


def np_ilr(x):
    """Independent ilr: scipy's Helmert matrix applied to log x (numpy)."""
    x = np.asarray(x, dtype=np.float64)
    return np.log(x) @ scipy.linalg.helmert(x.shape[-1]).T


def np_alr(x):
    x = np.asarray(x, dtype=np.float64)
    return np.log(x[..., :-1] / x[..., -1:])


# ----- coordinates ------------------------------------------------------------------------------
@pytest.mark.parametrize("K", [2, 3, 4, 7, 20, 33])
def test_helmert_basis_matches_scipy(K):
    # reference: scipy.linalg.helmert(K) (the same contrasts, built independently); tolerance 4 ulp
    ref = torch.as_tensor(scipy.linalg.helmert(K))
    torch.testing.assert_close(helmert_basis(K), ref, atol=4 * torch.finfo(F64).eps, rtol=0)
    h = helmert_basis(K)
    torch.testing.assert_close(h @ h.T, torch.eye(K - 1, dtype=F64), atol=1e-14, rtol=0)
    torch.testing.assert_close(h.sum(-1), torch.zeros(K - 1, dtype=F64), atol=1e-14, rtol=0)


@pytest.mark.parametrize("K", [2, 3, 20])
def test_clr_ilr_against_independent_numpy(K):
    rng = np.random.default_rng(K)
    x = rng.dirichlet(np.full(K, 0.7), size=200)
    x = np.clip(x, 1e-300, None)
    x = x / x.sum(-1, keepdims=True)
    xt = torch.as_tensor(x)
    # reference: clr = log(x / geometric mean) with scipy.stats.gmean (Aitchison 1986, def. 4.6); tol 1e-12 abs
    ref_clr = np.log(x / scipy.stats.gmean(x, axis=-1, keepdims=True))
    torch.testing.assert_close(clr(xt), torch.as_tensor(ref_clr), atol=1e-12, rtol=1e-12)
    # reference: ilr = helmert · log x (Egozcue et al. 2003) with scipy's Helmert matrix; tol 1e-12
    torch.testing.assert_close(ilr(xt), torch.as_tensor(np_ilr(x)), atol=1e-12, rtol=1e-12)
    # ilr is an isometry: Aitchison distance = Euclidean distance of ilr coordinates (Egozcue et al. 2003, Prop. 1)
    s = Simplex(K)
    d = s.dist(xt[:100], xt[100:])
    ref_d = np.linalg.norm(np_ilr(x[:100]) - np_ilr(x[100:]), axis=-1)
    torch.testing.assert_close(d, torch.as_tensor(ref_d), atol=1e-11, rtol=1e-12)
    torch.testing.assert_close(ilr_inverse(ilr(xt)), xt, atol=1e-15, rtol=1e-11)


def test_exp_is_perturbation():
    # exp(x, clr(y)) = x ⊕ y = C(x ∘ y) (Aitchison 1986, def. 2.5), by direct numpy products; tol 1e-14
    s = Simplex(5)
    x, y = s.prior_sample(50, gen(1)), s.prior_sample(50, gen(2))
    ref = (x * y).numpy()
    ref = ref / ref.sum(-1, keepdims=True)
    torch.testing.assert_close(s.exp(x, clr(y)), torch.as_tensor(ref), atol=1e-14, rtol=0)


# ----- densities --------------------------------------------------------------------------------
@pytest.mark.parametrize("K", [2, 3, 20])
@pytest.mark.parametrize("t", [1e-4, 0.1, 1.0, 20.0])
def test_log_kernel_vs_scipy_multivariate_normal(K, t):
    # reference: scipy.stats.multivariate_normal in ilr coordinates, mean e^{-t/2} y0, cov (1 - e^{-t}) I;
    # tolerance 1e-10 absolute (log-densities of size up to ~100 nats)
    s = Simplex(K)
    x0 = s.prior_sample(1, gen(3))
    xt = s.sample_forward(x0.expand(64, K), t, gen(4))
    y0, y = np_ilr(x0.numpy())[0], np_ilr(xt.numpy())
    mvn = scipy.stats.multivariate_normal(mean=math.exp(-t / 2) * y0, cov=-math.expm1(-t) * np.eye(K - 1))
    torch.testing.assert_close(s.log_kernel(xt, x0.expand_as(xt), t), torch.as_tensor(mvn.logpdf(y)).reshape(64),
                               atol=1e-10, rtol=0)


@pytest.mark.parametrize("K", [2, 3, 5, 20])
def test_log_volume_density_vs_autograd_jacobian(K):
    # reference: log |det ∂ ilr(x_1..x_{K-1}, 1 - Σ) / ∂(x_1..x_{K-1})| by torch autograd, an independent
    # change of variables; tolerance 1e-10 absolute
    s = Simplex(K)
    x = s.prior_sample(6, gen(5))

    def chart(u):
        return ilr(torch.cat([u, 1 - u.sum(-1, keepdim=True)], -1))

    for row in x:
        jac = torch.autograd.functional.jacobian(chart, row[:-1].clone())
        ref = torch.linalg.slogdet(jac)[1]
        torch.testing.assert_close(s.log_volume_density(row), ref, atol=1e-10, rtol=0)


@pytest.mark.parametrize("K", [2, 3, 6])
@pytest.mark.parametrize("t", [0.3, 4.0])
def test_density_wrt_lebesgue_is_logistic_normal(K, t):
    # reference: the logistic-normal density of Aitchison & Shen (1980, Biometrika 67, eq. 1.3) w.r.t. Lebesgue
    # on x_1..x_{K-1}: N(alr x; μ, Σ) / Π x_i with alr x = log(x_i / x_K). Our law is ilr ~ N(e^{-t/2} y0, v I),
    # i.e. alr ~ N(e^{-t/2} alr(x0), v (I + 1 1^T)) (v = 1 - e^{-t}; the stationary law: t = inf).
    # scipy.stats.multivariate_normal evaluates it; tolerance 1e-10 absolute.
    s = Simplex(K)
    x0 = s.prior_sample(1, gen(6))
    x = s.prior_sample(40, gen(7))
    sigma = np.eye(K - 1) + np.ones((K - 1, K - 1))
    logx = np.log(x.numpy()).sum(-1)
    mvn = scipy.stats.multivariate_normal(mean=math.exp(-t / 2) * np_alr(x0.numpy())[0], cov=-math.expm1(-t) * sigma)
    ours = s.log_kernel(x, x0.expand_as(x), t) + s.log_volume_density(x)
    torch.testing.assert_close(ours, torch.as_tensor(mvn.logpdf(np_alr(x.numpy())) - logx).reshape(40),
                               atol=1e-10, rtol=0)
    stationary = scipy.stats.multivariate_normal(mean=np.zeros(K - 1), cov=sigma)
    torch.testing.assert_close(s.prior_log_prob(x) + s.log_volume_density(x),
                               torch.as_tensor(stationary.logpdf(np_alr(x.numpy())) - logx).reshape(40),
                               atol=1e-10, rtol=0)


@pytest.mark.parametrize("t", [0.05, 0.3])
def test_density_integrates_to_one_k3(t):
    # reference: scipy.integrate.dblquad of exp(log_kernel + log_volume_density) over the triangle
    # {x1, x2 > 0, x1 + x2 < 1}; tolerance 1e-6 (quadrature asked for 1e-8). Larger t spread the mass into the
    # corners, where adaptive quadrature needs 10^5+ evaluations; there the logistic-normal comparison above
    # and the contract's importance-sampling check cover normalisation.
    s = Simplex(3)
    x0 = torch.tensor([[0.6, 0.3, 0.1]], dtype=F64)

    def density(x2, x1):
        x3 = 1.0 - x1 - x2
        if x3 <= 0.0 or x1 <= 0.0 or x2 <= 0.0:  # the boundary has measure 0 (rounding at the upper limit)
            return 0.0
        x = torch.tensor([[x1, x2, x3]], dtype=F64)
        return math.exp(float(s.log_kernel(x, x0, t) + s.log_volume_density(x)))

    total, err = scipy.integrate.dblquad(density, 0.0, 1.0, 0.0, lambda x1: 1.0 - x1, epsabs=1e-8, epsrel=1e-8)
    assert abs(total - 1.0) < 1e-6, (total, err)


def test_density_integrates_to_one_k2():
    # reference: scipy.integrate.quad over x1 ∈ (0, 1) of the stationary density; tolerance 1e-8
    s = Simplex(2)

    def density(x1):
        x = torch.tensor([[x1, 1.0 - x1]], dtype=F64)
        return math.exp(float(s.prior_log_prob(x) + s.log_volume_density(x)))

    total, _ = scipy.integrate.quad(density, 0.0, 1.0, epsabs=1e-11, epsrel=1e-11)
    assert abs(total - 1.0) < 1e-8


# ----- the forward process ----------------------------------------------------------------------
@pytest.mark.parametrize("K", [4, 20])
def test_forward_process_leaves_stationary_law_invariant(K):
    # reference: scipy.stats.kstest of each ilr coordinate against scipy.stats.norm (the stationary law is
    # ilr ~ N(0, I)); 20000 draws, each KS test at level 1e-4 -> with a random seed the whole test fails with
    # probability ≤ 4 · (K-1) · 1e-4. Correlations between coordinates: |r| < 5/sqrt(n) (normal approx.).
    s = Simplex(K)
    n = 20000
    x0 = s.prior_sample(n, gen(10))
    for k, t in enumerate([0.0, 0.05, 1.0, 6.0]):
        xt = x0 if t == 0.0 else s.sample_forward(x0, t, gen(11 + k))
        y = ilr(xt).numpy()
        for j in range(K - 1):
            p = scipy.stats.kstest(y[:, j], scipy.stats.norm.cdf).pvalue
            assert p > p_value_threshold(1e-4), (t, j, p)
        r = np.corrcoef(y.T)
        assert np.abs(r - np.eye(K - 1)).max() < 5 / math.sqrt(n), t


@pytest.mark.parametrize("K", [3, 6])
def test_exact_sampler_vs_euler_maruyama(K):
    # reference: Euler–Maruyama simulation of dX = f(X) dt + dB in the simplex itself (x <- exp_x(h f + sqrt(h) z),
    # f = -clr(x)/2 from ``drift``), 1000 steps of h = 1e-3 to t = 1 (weak error O(h): 2.5e-4 in the mean factor,
    # far below the standard errors ≈ 0.008). Means and variances of ilr coordinates of 10000 exact and 10000
    # simulated draws agree within 5 combined standard errors, and both agree with the closed form e^{-t/2} y0, 1 - e^{-t}.
    s = Simplex(K)
    n, t, steps = 10000, 1.0, 1000
    h = t / steps
    x0 = ilr_inverse(torch.linspace(-1.5, 1.0, K - 1, dtype=F64)).expand(n, K)
    g = gen(20)
    x = x0.clone()
    for _ in range(steps):
        x = s.exp(x, h * s.drift(x, None) + math.sqrt(h) * s.random_tangent(x, g))
    y_em = ilr(x)
    y_ex = ilr(s.sample_forward(x0, t, gen(21)))
    m_em, m_ex, v_em, v_ex = y_em.mean(0), y_ex.mean(0), y_em.var(0), y_ex.var(0)
    se_m = (v_em / n + v_ex / n).sqrt()
    assert ((m_em - m_ex).abs() < sigma_threshold(6e-7) * se_m).all(), (m_em, m_ex)
    se_v = (2 * v_em**2 / (n - 1) + 2 * v_ex**2 / (n - 1)).sqrt()
    assert ((v_em - v_ex).abs() < sigma_threshold(6e-7) * se_v).all(), (v_em, v_ex)
    mean = math.exp(-t / 2) * ilr(x0[0])
    var = -math.expm1(-t)
    assert ((m_ex - mean).abs() < 5 * (v_ex / n).sqrt()).all()
    assert ((v_ex - var).abs() < 5 * math.sqrt(2 / (n - 1)) * var).all()


def test_drift_is_minus_half_clr_and_tangent():
    s = Simplex(5)
    x = s.prior_sample(10, gen(30))
    f = s.drift(x, 0.5)
    torch.testing.assert_close(s.to_tangent(x, f), f, atol=1e-15, rtol=0)
    # in ilr coordinates the drift is -y/2 (the OU drift); H f = -ilr(x)/2 exactly up to rounding
    torch.testing.assert_close(f @ helmert_basis(5).T, -0.5 * ilr(x), atol=1e-14, rtol=0)


@pytest.mark.parametrize("sampler", [geodesic_random_walk, predictor_corrector])
def test_reverse_samplers_with_exact_score_recover_logistic_normal(sampler):
    # The unchanged samplers (which use score - drift) with the exact marginal score of a logistic-normal target
    # ilr(x0) ~ N(μ, σ² I): ilr(x_t) ~ N(e^{-t/2} μ, (e^{-t} σ² + 1 - e^{-t}) I), in closed form (Gaussian
    # convolution). 20000 samples, 500 steps: means within 0.02 (5 standard errors = 0.011 plus discretisation),
    # variances within 6% of σ² = 0.09 (measured discretisation bias of the 500-step walk ≈ 3%).
    s = Simplex(4)
    mu, s2 = torch.tensor([1.0, -0.5, 0.3], dtype=F64), 0.09
    h = helmert_basis(4)

    def score(x, t):
        a2 = torch.exp(-t)[:, None]
        return (-(ilr(x) - a2.sqrt() * mu) / (a2 * s2 + 1 - a2)) @ h

    field = ScoreField(s, TimeSchedule(*s.time_range), score)
    y = ilr(sampler(field, 20000, steps=500, generator=gen(40), progress=False))
    assert (y.mean(0) - mu).abs().max() < 0.02, y.mean(0)
    assert ((y.var(0) - s2).abs() / s2).max() < 0.06, y.var(0)


def test_prior_at_t_max_and_time_range():
    # the module's claim on t_max: KL(N(a y0, v I_d) || N(0, I_d)) = (d v + a² |y0|² - d - d log v) / 2
    # (closed-form KL of two normals; a² = e^{-t}, v = 1 - e^{-t}) is below 5e-7 nats at |y0| = 20
    s = Simplex(20)
    t = s.time_range[1]
    a2, v = math.exp(-t), -math.expm1(-t)
    d = s.dim
    kl = 0.5 * (d * v + a2 * 20.0**2 - d - d * math.log(v))
    assert kl < 5e-7


# ----- space object -----------------------------------------------------------------------------
def test_config_roundtrip_and_noncompact_protocol():
    s = Simplex(7)
    assert s.config() == {"kind": "simplex", "K": 7}
    assert from_config(s.config()) == s
    assert s.dim == 6 and s.ambient_shape == (7,) and s.embed_dim == 7
    assert s.log_volume == math.inf
    with pytest.raises(InputError, match="not compact.*prior_sample"):
        s.random_uniform(3)
    x = s.prior_sample(5, gen(50))
    assert torch.all(x > 0) and torch.allclose(x.sum(-1), torch.ones(5, dtype=F64), atol=1e-15, rtol=0)
    torch.testing.assert_close(s.embed(x).sum(-1), torch.zeros(5, dtype=F64), atol=1e-13, rtol=0)


@pytest.mark.parametrize("bad", [1, 0, -3, 2.0, True, "3"])
def test_bad_number_of_parts(bad):
    with pytest.raises(InputError, match="K .* must be an integer >= 2"):
        Simplex(bad)


# ----- validation and reading -------------------------------------------------------------------
def test_validate_errors_name_row_and_column():
    s = Simplex(3)
    with pytest.raises(InputError, match=r"row 1 contains NaN"):
        s.validate([[0.2, 0.3, 0.5], [0.2, float("nan"), 0.8]])
    with pytest.raises(InputError, match=r"row 1, column 2: part -0.1 is negative") as e:
        s.validate([[0.2, 0.3, 0.5], [0.5, 0.6, -0.1]])
    assert e.value.row == 1 and e.value.field == "2"
    with pytest.raises(InputError, match=r"row 2, column 0: part is exactly 0.*zero_replacement") as e:
        s.validate([[0.2, 0.3, 0.5], [0.2, 0.3, 0.5], [0.0, 0.5, 0.5]])
    assert e.value.row == 2 and e.value.field == "0"
    with pytest.raises(InputError, match=r"row 0: parts sum to 1.1, not 1 \(tolerance 1e-06\).*closure=True"):
        s.validate([[0.2, 0.4, 0.5]])
    with pytest.raises(InputError, match=r"expected shape \(n, 3\)"):
        s.validate([[0.5, 0.5]])


def test_validate_renormalises_within_tolerance():
    s = Simplex(3)
    x = s.validate([[0.2, 0.3, 0.5 + 5e-7]])
    assert abs(float(x.sum()) - 1) < 1e-15
    torch.testing.assert_close(x, torch.tensor([[0.2, 0.3, 0.5 + 5e-7]], dtype=F64) / (1 + 5e-7))


def test_from_rows_multiplicative_replacement():
    # reference: Martín-Fernández et al. (2003), multiplicative replacement: zeros -> δ, others x_j (1 - k δ);
    # computed by hand here; tolerance 1e-15
    s = Simplex(4)
    rows = [[0.5, 0.0, 0.3, 0.2], [0.0, 0.0, 0.6, 0.4], [0.1, 0.2, 0.3, 0.4]]
    x = s.from_rows(rows, zero_replacement=1e-3)
    ref = torch.tensor([[0.5 * 0.999, 1e-3, 0.3 * 0.999, 0.2 * 0.999],
                        [1e-3, 1e-3, 0.6 * 0.998, 0.4 * 0.998],
                        [0.1, 0.2, 0.3, 0.4]], dtype=F64)
    torch.testing.assert_close(x, ref, atol=1e-15, rtol=0)
    # the ratios of the non-zero parts are kept
    assert abs(float(x[0, 0] / x[0, 2]) - 0.5 / 0.3) < 1e-14
    # without the option, zeros are an error that names the option
    with pytest.raises(InputError, match=r"row 0, column 1: part is exactly 0.*zero_replacement"):
        s.from_rows(rows)


def test_from_rows_replacement_errors():
    s = Simplex(4)
    rows = [[0.5, 0.0, 0.3, 0.2], [0.0, 0.001, 0.6, 0.399]]
    with pytest.raises(InputError, match=r"row 1: zero_replacement δ = 0.002 is not smaller than the row's "
                                         r"smallest non-zero part 0.001"):
        s.from_rows(rows, zero_replacement=0.002)
    for bad in (0.0, -1e-3, float("nan"), "0.01", True):
        with pytest.raises(InputError, match="zero_replacement must be a positive finite number"):
            s.from_rows(rows, zero_replacement=bad)
    with pytest.raises(InputError, match=r"too large for K = 4 parts: needs δ < 1/K"):
        s.from_rows(rows, zero_replacement=0.3)
    with pytest.raises(InputError, match=r"row 0, column 3: part -0.2 is negative"):
        s.from_rows([[0.5, 0.7, 0.0, -0.2]], zero_replacement=1e-3)


def test_from_rows_closure():
    s = Simplex(3)
    x = s.from_rows([[200.0, 300.0, 500.0], [1.0, 1.0, 2.0]], closure=True)
    torch.testing.assert_close(x, torch.tensor([[0.2, 0.3, 0.5], [0.25, 0.25, 0.5]], dtype=F64), atol=1e-16, rtol=0)
    x = s.from_rows([[0.0, 300.0, 700.0]], closure=True, zero_replacement=1e-4)
    torch.testing.assert_close(x, torch.tensor([[1e-4, 0.3 * (1 - 1e-4), 0.7 * (1 - 1e-4)]], dtype=F64),
                               atol=1e-16, rtol=0)
    with pytest.raises(InputError, match=r"row 1: parts add up to 0; closure needs a positive total"):
        s.from_rows([[1.0, 2.0, 3.0], [0.0, 0.0, 0.0]], closure=True)
    with pytest.raises(InputError, match=r"row 0: parts sum to 1000"):
        s.from_rows([[200.0, 300.0, 500.0]])
    with pytest.raises(InputError, match="takes no option degrees"):
        s.to_rows(x, degrees=True)
    assert s.column_names() == ["part0", "part1", "part2"]


# ----- fitting ----------------------------------------------------------------------------------
def dirichlet_mixture(n, rng):
    """Equal mixture of Dirichlet(12, 3, 3) and Dirichlet(2, 6, 12), drawn with scipy.stats.dirichlet."""
    a = scipy.stats.dirichlet.rvs([12.0, 3.0, 3.0], size=n, random_state=rng)
    b = scipy.stats.dirichlet.rvs([2.0, 6.0, 12.0], size=n, random_state=rng)
    return np.where((rng.random(n) < 0.5)[:, None], a, b)


def test_fit_on_dirichlet_mixture_beats_baselines():
    # Held-out metric: unbiased MMD² (heatwalk.frontend.metrics.mmd; Gretton et al. 2012) with a Gaussian kernel in the
    # Aitchison distance, bandwidth = median heuristic on held-out set A; 1000 points per sample.
    # Baselines: (1) the stationary law (where the reverse process starts), (2) the best single logistic-normal
    # (ilr mean and covariance of the training data: unimodal, so it misses the two modes).
    # Measured with this seed: model ≈ -0.0001, noise floor (held-out B vs A) ≈ -0.0005, logistic-normal ≈ 0.0046,
    # stationary law ≈ 0.044; the asserts leave a margin of > 4 standard errors of the estimate (≈ 0.001).
    # ema_decay 0.99: an EMA horizon of 100 steps, short against the 1500 steps (the default 0.999 would keep
    # 0.999^1500 = 22 % of the initial weights).
    torch.set_num_threads(1)
    s = Simplex(3)
    data = torch.as_tensor(dirichlet_mixture(5000, np.random.default_rng(1)))
    train, held_a, held_b = data[:3000], data[3000:4000], data[4000:]
    model = heatwalk.fit(s, train, steps=1500, batch_size=256, network={"hidden": 128, "depth": 3},
                         ema_decay=0.99, seed=0, progress=False)
    samples = model.sample(1000, steps=300, seed=1, progress=False)
    assert torch.isfinite(samples).all() and (samples > 0).all()
    bw = median_bandwidth(s, held_a)
    y = ilr(train)
    chol = torch.linalg.cholesky(torch.cov(y.T))
    lognormal = ilr_inverse(y.mean(0) + torch.randn(1000, 2, dtype=F64, generator=gen(3)) @ chol.T)
    m_model = mmd_squared(s, samples, held_a, bw)
    m_floor = mmd_squared(s, held_b, held_a, bw)
    m_prior = mmd_squared(s, s.prior_sample(1000, gen(2)), held_a, bw)
    m_lognormal = mmd_squared(s, lognormal, held_a, bw)
    assert m_model < 0.1 * m_prior, (m_model, m_prior)
    assert m_model < m_lognormal - 0.003, (m_model, m_lognormal)
    assert m_model < m_floor + 0.002, (m_model, m_floor)


def test_probability_flow_log_likelihood_of_logistic_normal():
    # reference: closed form of the time-t_min marginal of a logistic-normal target ilr(x0) ~ N(μ, σ² I):
    # N(ilr x; e^{-t/2} μ, (e^{-t} σ² + 1 - e^{-t}) I) plus log_volume_density (w.r.t. Lebesgue on x_1, x_2);
    # exact divergence, adaptive Dormand–Prince with rtol 1e-5: tolerance 1e-3 nats
    from heatwalk.samplers.flow_ode import log_likelihood

    s = Simplex(3)
    mu, s2 = torch.tensor([0.5, -1.0], dtype=F64), 0.2
    h = helmert_basis(3)

    def score(x, t):
        a2 = torch.exp(-t)[:, None]
        return (-(ilr(x) - a2.sqrt() * mu) / (a2 * s2 + 1 - a2)) @ h

    schedule = TimeSchedule(*s.time_range)
    x = ilr_inverse(mu + math.sqrt(s2) * torch.randn(20, 2, dtype=F64, generator=gen(60)))
    out = log_likelihood(ScoreField(s, schedule, score), x)
    a2 = math.exp(-schedule.t_min)
    v = a2 * s2 + 1 - a2
    ref = (-0.5 * (ilr(x) - math.sqrt(a2) * mu).square().sum(-1) / v - math.log(2 * math.pi * v)
           + s.log_volume_density(x))
    torch.testing.assert_close(out["log_prob"], ref, atol=1e-3, rtol=0)
