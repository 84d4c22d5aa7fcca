"""No NaN is handed back as a result: samples, log-likelihoods and training losses are checked."""

import pytest
import torch

import heatwalk
from heatwalk import InputError
from heatwalk.core.result_checks import NonFiniteResult, TrainingDiverged
from heatwalk.spaces import Simplex, Torus


@pytest.fixture(scope="module")
def torus_model():
    space = Torus(2)
    x = space.random_uniform(64, torch.Generator().manual_seed(0))
    # the MLP: the test edits its last layer's bias
    return heatwalk.fit(space, x, steps=5, batch_size=16, network={"hidden": 8, "depth": 2, "residual": False},
                        progress=False)


def _poison(model, value):
    with torch.no_grad():
        model.network.net[-1].bias.fill_(value)


def test_samples_with_nan_are_refused_naming_the_causes(torus_model):
    _poison(torus_model, float("nan"))
    try:
        with pytest.raises(NonFiniteResult, match=r"sampling gave 4 of 4 samples with NaN or infinite coordinates "
                                                  r"\(sampler 'geodesic_random_walk'.*under-trained model.*corrupted "
                                                  r"weights.*another sampler \(predictor_corrector, probability_flow\)"):
            torus_model.sample(4, steps=3, progress=False)
        x = torus_model.sample(4, steps=3, progress=False, check_finite=False)  # the explicit diagnostic escape
        assert bool(torch.isnan(x).all())
    finally:
        _poison(torus_model, 0.0)


def test_weights_of_1e30_give_an_error_not_samples(torus_model):
    # the reported case: a weights file full of 1e30 (finite, so it loads) gave rows of NaN with exit 0
    saved = {k: v.clone() for k, v in torus_model.network.state_dict().items()}
    with torch.no_grad():
        for p in torus_model.network.parameters():
            p.fill_(1e30)
    try:
        with pytest.raises(NonFiniteResult, match="of 4 samples with NaN or infinite coordinates"):
            torus_model.sample(4, steps=3, progress=False)
    finally:
        torus_model.network.load_state_dict(saved)


def test_an_under_trained_simplex_model_no_longer_returns_nan_rows():
    # the reported case: probability_flow on a briefly fitted simplex model wrote rows of NaN with exit 0
    # (the same fit and sampler as the golden values, which record 11 of 12 NaN rows)
    from golden.golden_values import FIT, _data_for

    space = Simplex(3)
    model = heatwalk.fit(space, _data_for("simplex3", space), network={"hidden": 32, "depth": 2}, **FIT)
    with pytest.raises(NonFiniteResult, match="of 12 samples with NaN"):
        model.sample(12, steps=15, sampler="probability_flow", seed=7, progress=False, method="rk4")


def test_log_likelihoods_that_are_not_finite_are_refused(torus_model):
    x = torus_model.space.random_uniform(3, torch.Generator().manual_seed(1))
    assert torch.isfinite(torus_model.log_prob(x, method="rk4", steps=4)["log_prob"]).all()
    _poison(torus_model, float("inf"))
    try:
        # an infinite score: the ODE solver's own FloatingPointError becomes the same kind of one-line error
        with pytest.raises(NonFiniteResult, match=r"log-likelihood could not be computed \(non-finite divergence.*"
                                                  r"under-trained model, corrupted weights"):
            torus_model.log_prob(x, method="rk4", steps=4)
    finally:
        _poison(torus_model, 0.0)


def test_a_diverging_fit_names_the_learning_rate():
    space = Torus(1)
    x = space.random_uniform(32, torch.Generator().manual_seed(0))
    with pytest.raises(TrainingDiverged, match=r"loss became (nan|inf) at step \d+; the likely cause is too large a "
                                               r"learning rate \(lr = 1e\+30\): lower it") as e:
        heatwalk.fit(space, x, steps=50, batch_size=16, lr=1e30, network={"hidden": 8, "depth": 2}, progress=False)
    assert isinstance(e.value, InputError) and isinstance(e.value, FloatingPointError)
