"""Property-based tests (hypothesis): every validator and every kernel either returns finite values or raises
InputError — never another exception, a NaN, a hang or a wrapped integer.

The number of generated cases of each property is printed at the end of the module's tests.
"""

import math
from collections import Counter

import numpy as np
import pytest
import torch
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from heatwalk import InputError
from heatwalk.spaces import SO3, Categories, Euclidean, Manifold, Simplex, Sphere, Torus

CASES: Counter = Counter()

MANIFOLDS = {
    "torus1": Torus(1), "torus3": Torus(3), "circle": Sphere(1), "sphere2": Sphere(2), "sphere3": Sphere(3),
    "sphere5": Sphere(5), "so3": SO3(), "simplex2": Simplex(2), "simplex4": Simplex(4), "r2": Euclidean(2),
    "r3_ou": Euclidean(3, process="ornstein_uhlenbeck"),
}
FINITE = {"cat_uniform": Categories(4, 3, process="uniform"), "cat_absorbing": Categories(3, 2),
          "cat_rates": Categories(3, 2, rates=[[-1.0, 0.6, 0.4], [0.2, -0.5, 0.3], [0.5, 0.5, -1.0]])}
SPACES = {**MANIFOLDS, **FINITE}
SETTINGS = settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])

#: values at and near every boundary the validators know: 0, 1, ±π, ±2π (the angle limit), tiny, huge,
#: 2^63 (int64 overflow), NaN and ±inf
SPECIAL = [0.0, -0.0, 1.0, -1.0, 0.5, 1 + 1e-7, 1 - 1e-7, math.pi, -math.pi, 2 * math.pi, -2 * math.pi,
           2 * math.pi + 1e-9, 1e-300, 5e-324, 1e20, -1e20, 2.0**63, 1e308, math.nan, math.inf, -math.inf, 3.0, 2.0]
DTYPES = [np.float64, np.float32, np.float16, np.int64, np.int32, np.uint8, np.uint64, np.bool_, np.complex128]


@pytest.fixture(scope="module", autouse=True)
def _report_counts(request):
    yield
    text = ", ".join(f"{k} {v}" for k, v in sorted(CASES.items()))
    line = f"\nhypothesis cases generated in {__name__}: {sum(CASES.values())} ({text})"
    capture = request.config.pluginmanager.getplugin("capturemanager")
    with capture.global_and_fixture_disabled():  # shown whatever the capture mode, as capsys.disabled() does
        print(line)


def _points(space, n, gen):
    """n points of the space: uniform on compact spaces, from the prior on the others (R^d, the simplex)."""
    return space.prior_sample(n, gen) if math.isinf(space.log_volume) else space.random_uniform(n, gen)


def _values(draw, size):
    pick = st.one_of(st.sampled_from(SPECIAL), st.floats(allow_nan=True, allow_infinity=True, width=64),
                     st.floats(min_value=-4, max_value=4))
    return [draw(pick) for _ in range(size)]


@st.composite
def arrays(draw, space):
    """An array near the space's points: the right shape most of the time, else a random one; a random dtype."""
    ambient = space.ambient_shape
    n = draw(st.integers(0, 4))
    if draw(st.booleans()):
        shape = (n, *ambient)
    else:
        shape = tuple(draw(st.lists(st.integers(0, 4), min_size=0, max_size=4)))
    size = int(np.prod(shape)) if shape else 1
    if draw(st.booleans()) and size:
        base = _points(space, max(1, n), torch.Generator().manual_seed(draw(st.integers(0, 99))))
        flat = base.double().reshape(-1).tolist()
        flat = (flat * (size // max(len(flat), 1) + 1))[:size]
        for i in draw(st.lists(st.integers(0, size - 1), max_size=3)):
            flat[i] = draw(st.sampled_from(SPECIAL))
        values = flat
    else:
        values = _values(draw, size)
    dtype = draw(st.sampled_from(DTYPES))
    with np.errstate(all="ignore"):
        a = np.asarray(values, dtype=np.float64).reshape(shape)
        if np.issubdtype(dtype, np.integer):
            a = np.nan_to_num(a, nan=0, posinf=0, neginf=0)
            info = np.iinfo(dtype)
            a = np.clip(np.round(a), info.min, info.max)
        a = a.astype(dtype)
    return torch.as_tensor(np.asarray(a)) if draw(st.booleans()) and dtype != np.uint64 else a


def _check_points(space, out, n_expected=None):
    assert isinstance(out, torch.Tensor) and out.dim() == 1 + len(space.ambient_shape)
    assert tuple(out.shape[1:]) == tuple(space.ambient_shape) and out.shape[0] >= 1
    if n_expected is not None:
        assert out.shape[0] == n_expected
    if isinstance(space, Categories):
        assert out.dtype == torch.int64 and bool(((out >= 0) & (out < space.K)).all())
    else:
        assert out.dtype == torch.float64 and bool(torch.isfinite(out).all())


@pytest.mark.parametrize("name", sorted(SPACES))
@SETTINGS
@given(data=st.data())
def test_validate_returns_finite_points_or_an_input_error(name, data):
    space = SPACES[name]
    x = data.draw(arrays(space))
    CASES["validate"] += 1
    try:
        out = space.validate(x)
    except InputError:
        return
    _check_points(space, out)
    if isinstance(space, Sphere):  # the validated points lie on the space
        assert bool(((out.norm(dim=-1) - 1).abs() < 1e-12).all())
    if isinstance(space, Simplex):
        assert bool((out > 0).all()) and bool(((out.sum(-1) - 1).abs() < 1e-12).all())
    if isinstance(space, SO3):
        assert bool((torch.linalg.det(out) > 0).all())


@pytest.mark.parametrize("name", sorted(SPACES))
@SETTINGS
@given(data=st.data())
def test_from_rows_returns_finite_points_or_an_input_error(name, data):
    space = SPACES[name]
    n = data.draw(st.integers(0, 4))
    cols = data.draw(st.sampled_from([space.n_columns, space.n_columns, 0, 1, space.n_columns + 1]))
    values = _values(data.draw, n * cols)
    rows = np.asarray(values, dtype=np.float64).reshape(n, cols)
    CASES["from_rows"] += 1
    try:
        out = space.from_rows(rows)
    except InputError:
        return
    _check_points(space, out, n)


TIMES = st.one_of(st.floats(min_value=math.log(1e-12), max_value=math.log(1e6)).map(math.exp),
                  st.sampled_from([0.0, -1.0, -1e-300, math.nan, math.inf, -math.inf, 1e-12, 1e6, 1.0, 1 - 1e-12]))


@st.composite
def kernel_case(draw, space):
    """(xt, x0, t): random points, the same point, or (on spheres and SO(3)) far apart; t over 1e-12 … 1e6."""
    gen = torch.Generator().manual_seed(draw(st.integers(0, 10**6)))
    n = draw(st.integers(1, 3))
    x0, xt = _points(space, n, gen), _points(space, n, gen)
    how = draw(st.sampled_from(["random", "same", "far"]))
    if how == "same":
        xt = x0.clone()
    elif how == "far" and isinstance(space, Sphere):
        xt = -x0  # antipodes: the cut locus
    elif how == "far" and isinstance(space, SO3):
        xt = x0 @ torch.diag(torch.tensor([1.0, -1.0, -1.0], dtype=torch.float64))  # a rotation by π
    t = draw(TIMES)
    per_point = draw(st.booleans())
    return xt, x0, (torch.full((n,), t, dtype=torch.float64) if per_point else t), t


@pytest.mark.parametrize("name", sorted(SPACES))
@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.data())
def test_kernels_are_finite_or_raise_input_error(name, data):
    space = SPACES[name]
    xt, x0, t, t_value = data.draw(kernel_case(space))
    CASES["kernel"] += 1
    try:
        lp = space.log_kernel(xt, x0, t)
    except InputError:
        pass
    else:
        assert lp.shape == (x0.shape[0],)
        # a finite set's log-probability may be -inf for a state the chain cannot reach (absorbing: a data
        # state from another data state); every other value is finite
        if isinstance(space, Categories):
            assert not bool(torch.isnan(lp).any()) and bool((lp <= 1e-12).all())
        else:
            assert bool(torch.isfinite(lp).all()), (name, t_value, lp)
    if isinstance(space, Manifold):
        try:
            sc = space.score(xt, x0, t)
        except InputError:
            return
        assert bool(torch.isfinite(sc).all()), (name, t_value, sc)


@pytest.mark.parametrize("name", sorted(SPACES))
@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.data())
def test_forward_samples_are_valid_points_or_an_input_error(name, data):
    space = SPACES[name]
    _, x0, t, t_value = data.draw(kernel_case(space))
    CASES["sample_forward"] += 1
    try:
        xt = space.sample_forward(x0, t, torch.Generator().manual_seed(1))
    except InputError:
        return
    if isinstance(space, Categories):
        assert bool(((xt >= 0) & (xt < space.n_states)).all())
    else:
        assert bool(torch.isfinite(xt).all()), (name, t_value)
        space.validate(xt)  # on the space


@pytest.mark.parametrize("t", [0.0, -1.0, math.nan, math.inf, -math.inf])
@pytest.mark.parametrize("name", sorted(SPACES))
def test_bad_times_are_refused_by_every_kernel(name, t):
    # the reported hangs and silent NaN: SO(3) at t < 0 looped, Torus and Simplex returned NaN at t <= 0
    space = SPACES[name]
    x = _points(space, 2, torch.Generator().manual_seed(0))
    CASES["bad_time"] += 1
    with pytest.raises(InputError, match="diffusion time must be finite and > 0"):
        space.log_kernel(x, x, t)
    with pytest.raises(InputError, match="diffusion time must be finite and > 0"):
        space.sample_forward(x, t, torch.Generator().manual_seed(0))
