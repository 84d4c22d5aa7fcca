"""Edge cases of the spaces' validation: empty batches, booleans and complex numbers, huge category codes."""

import re

import numpy as np
import pytest
import torch

from heatwalk import InputError
from heatwalk.spaces import SO3, Categories, Euclidean, Product, Simplex, Sphere, Torus

MANIFOLDS = [Torus(2), Sphere(2), SO3(), Simplex(3), Euclidean(2)]


@pytest.mark.parametrize("space", MANIFOLDS + [Categories(4, 3)], ids=repr)
def test_an_empty_batch_has_no_points(space):
    # was a raw RuntimeError (reshaping 0 elements) on manifolds
    empty = torch.zeros(0, *space.ambient_shape, dtype=torch.float64)
    with pytest.raises(InputError, match=r"no points \(an empty array of shape \(0, "):
        space.validate(empty)
    with pytest.raises(InputError, match="no points"):
        space.from_rows(np.zeros((0, space.n_columns)))


@pytest.mark.parametrize("space", MANIFOLDS + [Categories(4, 3)], ids=repr)
@pytest.mark.parametrize("dtype", [torch.bool, torch.complex128])
def test_boolean_and_complex_tensors_are_refused(space, dtype):
    x = torch.zeros(2, *space.ambient_shape, dtype=dtype)
    with pytest.raises(InputError, match=f"expected (real numbers|integer state codes), got dtype "
                                         f"{str(dtype).replace('torch.', '')}"):
        space.validate(x)
    with pytest.raises(InputError, match="got dtype (bool|complex128)"):
        space.validate(x.numpy())  # as numpy arrays too
    with pytest.raises(InputError, match="got dtype (bool|complex128)"):
        space.validate(x.tolist())  # and as nested Python lists


def test_text_and_ragged_input_are_refused():
    with pytest.raises(InputError, match="expected an array of numbers"):
        Torus(2).validate([["a", "b"]])
    with pytest.raises(InputError, match="expected an array of numbers"):
        Torus(2).validate([[0.1, 0.2], [0.3]])


def test_python_floats_keep_their_64_bits():
    x = 0.1 + 2**-40
    assert float(Euclidean(1).validate([[x]])[0, 0]) == x


@pytest.mark.parametrize("value, shown", [(1e20, "1e+20"), (2.0**63, "9.223372036854776e+18"), (-1e300, "-1e+300"),
                                          (7.0, "7")])
def test_huge_float_codes_are_reported_as_themselves(value, shown):
    # was reported as state -9223372036854775808 (the float wrapped to int64 before the range check)
    x = torch.tensor([[0.0, value, 1.0]], dtype=torch.float64)
    with pytest.raises(InputError, match=rf"row 0, position 1: state {re.escape(shown)} is outside \[0, 4\)"):
        Categories(4, 3).validate(x)


def test_unsigned_64_bit_codes_beyond_int64_are_reported_as_themselves():
    x = np.array([[0, 2**63 + 5, 1]], dtype=np.uint64)
    with pytest.raises(InputError, match=r"state 9.22337203685477\de\+18 is outside"):
        Categories(4, 3).validate(x)
    assert Categories(4, 3).validate(np.array([[0, 3, 1]], dtype=np.uint64)).tolist() == [[0, 3, 1]]


def test_from_rows_with_the_wrong_number_of_columns_is_an_input_error():
    # was a raw RuntimeError from reshape
    with pytest.raises(InputError, match=r"expected a table of shape \(n, 4\) .*got \(4, 5\)"):
        Euclidean(4).from_rows(np.zeros((4, 5)))
    with pytest.raises(InputError, match=r"takes 9 columns per row, got an array of shape \(4, 5\)"):
        SO3().from_rows(np.zeros((4, 5)))
    with pytest.raises(InputError, match=r"expected a table of shape \(n, 3\)"):
        Euclidean(3).from_rows(np.zeros(6))


def test_a_product_names_the_factor_of_an_empty_batch():
    sp = Product(Torus(1), Categories(3, 2))
    with pytest.raises(InputError, match=r"factor 0 \(Torus\(n=1\)\): angles: no points"):
        sp.validate((torch.zeros(0, 1), torch.zeros(0, 2, dtype=torch.int64)))


def test_too_many_states_are_refused():
    with pytest.raises(InputError, match=r"K \(number of states\) must be an integer in \[2, 4096\], got 100000"):
        Categories(100_000, 2)
