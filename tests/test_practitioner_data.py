"""Data as practitioners hold it: DataFrames, scipy Rotations and Euler angles, proteomes of mixed lengths."""

import gzip

import numpy as np
import pytest
import torch

import heatwalk
from heatwalk import InputError
from heatwalk.frontend.cli import main
from heatwalk.spaces import SO3, Categories, Torus


def test_dataframes_are_read_by_their_columns():
    pd = pytest.importorskip("pandas")
    df = pd.DataFrame({"phi": [-1.0, 0.5, 2.0], "psi": [0.1, -0.2, 3.0]})
    x = Torus(2).validate(df)
    assert x.shape == (3, 2) and float(x[2, 1]) == 3.0
    with pytest.raises(InputError, match="column 'name' is not numeric"):
        Torus(2).validate(df.assign(name=["a", "b", "c"])[["phi", "name"]])
    assert heatwalk.fit(Torus(2), df, steps=2, progress=False).record["n_data"] == 3


def test_scipy_rotations_and_euler_angles_with_a_stated_convention():
    rot = pytest.importorskip("scipy.spatial.transform")
    r = rot.Rotation.random(5, random_state=0)
    x = SO3().validate(r)
    np.testing.assert_allclose(x.numpy(), r.as_matrix(), atol=1e-12)     # reference: scipy's own matrices
    angles = np.array([[10.0, 20.0, 30.0], [-50.0, 5.0, 170.0]])
    m = SO3.from_euler(angles, "ZYZ", degrees=True)
    np.testing.assert_allclose(m.numpy(), rot.Rotation.from_euler("ZYZ", angles, degrees=True).as_matrix(),
                               atol=1e-12)
    with pytest.raises(InputError, match="convention"):
        SO3.from_euler(angles, "ZY")
    with pytest.raises(InputError, match="no points"):
        SO3().validate(np.zeros((0, 3, 3)))


def _proteome(path, n=60, seed=0, gz=False):
    rng = np.random.default_rng(seed)
    lengths = np.concatenate([[10, 300], rng.integers(10, 301, n - 2)])
    text = "".join(f">p{i} invented protein\n" + "".join(rng.choice(list("ACDEGHKLMNPQRSTVWY"), int(k))) + "*\n"
                   for i, k in enumerate(lengths))
    if gz:
        with gzip.open(path, "wt") as f:
            f.write(text)
    else:
        path.write_text(text)
    return lengths


def test_proteome_of_mixed_lengths_gzipped_fits_and_samples_mixed_lengths(tmp_path, capsys):
    lengths = _proteome(tmp_path / "prot.faa.gz", gz=True)
    code = main(["fit", str(tmp_path / "prot.faa.gz"), "--space", "categories", "--stop-symbol", "*",
                 "--out", str(tmp_path / "m"), "--train-steps", "3", "--batch-size", "8", "--hidden", "8",
                 "--depth", "1", "--quiet"])
    out = capsys.readouterr()
    assert code == 0, out.err
    model = heatwalk.load(tmp_path / "m")
    assert model.space.variable_length and model.space.L == 300 and model.space.n_symbols == 18
    code = main(["sample", str(tmp_path / "m"), "--n", "6", "--out", str(tmp_path / "s.fasta"),
                 "--reverse-steps", "4", "--quiet"])
    assert code == 0, capsys.readouterr().err
    body = [ln for ln in (tmp_path / "s.fasta").read_text().splitlines() if ln and not ln.startswith(">")]
    assert body and all(set(ln) <= set("ACDEGHKLMNPQRSTVWY") for ln in body)
    # the policy for symbols outside the alphabet: a '*' is an error naming record and column by default
    code = main(["fit", str(tmp_path / "prot.faa.gz"), "--space", "categories", "--alphabet", "ACDEGHKLMNPQRSTVWY",
                 "--out", str(tmp_path / "m2"), "--train-steps", "2", "--quiet"])
    err = capsys.readouterr().err
    assert code == 2 and "record 1" in err and "'*'" in err and not (tmp_path / "m2").exists()


def test_variable_length_space_checks_and_lengths():
    sp = Categories(3, 5, variable_length=True, alphabet="abc")
    x = sp.encode(["ab", "abcab", "c"])
    assert x.tolist()[0] == [0, 1, 3, 3, 3] and sp.lengths(x).tolist() == [2, 5, 1]
    assert sp.decode(x) == ["ab", "abcab", "c"]
    with pytest.raises(InputError, match="a symbol after the end"):
        sp.validate(torch.tensor([[0, 3, 1, 3, 3]]))
    with pytest.raises(InputError, match="empty sequence"):
        sp.validate(torch.tensor([[3, 3, 3, 3, 3]]))
    # counting measure on sequences of lengths 1..5 over 3 symbols: log(3 + 9 + 27 + 81 + 243)
    assert abs(sp.log_volume - np.log(363)) < 1e-12
    u = sp.random_uniform(4000, torch.Generator().manual_seed(0))
    sp.validate(u)
    # lengths of uniform sequences: P(l) = 3^l / 363; P(5) = 243/363 = 0.669 (4 standard errors: 0.03)
    assert abs(float((sp.lengths(u) == 5).double().mean()) - 243 / 363) < 0.03


def test_variable_length_samples_are_never_empty(tmp_path):
    # a valid point has at least one symbol, so x_0's support leaves out the end state at position 0; an
    # under-trained model (5 steps) once sampled empty sequences that the FASTA writer then refused
    import heatwalk

    sp = Categories(3, 6, variable_length=True, alphabet="abc")
    data = sp.encode(["a", "ab", "abc", "cab", "bbbbbb", "ca"] * 10)
    xt = torch.full((2, 6), sp.mask_state, dtype=torch.int64)  # every position masked (absorbing chain)
    assert not sp.x0_support(xt, 0.5)[:, 0, sp.end_state].any()
    model = heatwalk.fit(sp, data, steps=5, seed=0, progress=False)
    x = model.sample(200, steps=20, seed=1, progress=False)
    assert (sp.lengths(x) >= 1).all()
    assert all(len(s) >= 1 for s in sp.decode(x))
