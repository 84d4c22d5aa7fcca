"""Categorical factors read from tables: columns of named states (a residue name, a class) beside numeric columns,
through the readers (CSV, Parquet, NPZ), the product's table form, the writers, and fit / sample / evaluate / plot.

The law of the command-line tests (invented for them): a residue kind among GLY (30 %), ALA (50 %), PRO (20 %) and
angles (phi, psi) in degrees from von Mises laws whose centres depend on the kind: GLY (80, 0), ALA (-60, 140),
PRO (-65, 140) with κ = 20 (a spread of about 13°).
"""

from __future__ import annotations

import csv
import math

import matplotlib

matplotlib.use("Agg")

import numpy as np  # noqa: E402
import pytest  # noqa: E402
import torch  # noqa: E402
from scipy.stats import circmean  # noqa: E402

from heatwalk.errors import InputError  # noqa: E402
from heatwalk.frontend.cli import main  # noqa: E402
from heatwalk.io.points import files_for  # noqa: E402
from heatwalk.io.tables import read_table, table_column_names, write_table  # noqa: E402
from heatwalk.spaces import Categories, Product, Torus  # noqa: E402
from heatwalk.spaces.alphabet import sorted_state_names  # noqa: E402

FACTORS = "torus:2:degrees,categories:1"
CENTRES = {"GLY": (80.0, 0.0), "ALA": (-60.0, 140.0), "PRO": (-65.0, 140.0)}
SHARES = {"GLY": 0.3, "ALA": 0.5, "PRO": 0.2}


def run(args, capsys):
    code = main(args)
    out = capsys.readouterr()
    return code, out.out, out.err


def _law(n: int, seed: int = 0) -> dict:
    rng = np.random.default_rng(seed)
    kind = rng.choice(list(SHARES), n, p=list(SHARES.values()))
    centre = np.array([CENTRES[k] for k in kind])
    angles = np.degrees(rng.vonmises(np.radians(centre), 20.0))
    return {"id": np.arange(n), "kind": kind, "phi": angles[:, 0], "psi": angles[:, 1]}


def _write_csv(path, columns: dict) -> None:
    with open(path, "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(list(columns))
        w.writerows(zip(*[[v if isinstance(v, str) else repr(float(v)) for v in c] for c in columns.values()]))


def _read_csv(path):
    rows = list(csv.reader(open(path)))
    return rows[0], rows[1:]


# ----- state names -----------------------------------------------------------------------------------------------
@pytest.mark.parametrize("names, message", [
    (["a", "b"], "has 2 names, expected K = 3"),
    (["a", "b", "a"], "'a' appears twice"),
    (["a", " b", "c"], "without surrounding spaces"),
    (["a", "b,c", "d"], "holds ','"),
    (["a", "", "c"], "expected non-empty text"),
    ("abc", "expected a list of 3 names"),
])
def test_state_names_are_checked(names, message):
    with pytest.raises(InputError, match=message):
        Categories(3, 1, state_names=names)


def test_state_names_need_a_fixed_length_and_are_saved_with_the_space():
    with pytest.raises(InputError, match="fixed length"):
        Categories(2, 3, state_names=["x", "y"], variable_length=True)
    space = Categories(3, 2, state_names=["wet", "dry", "icy"])
    assert Categories.from_config({k: v for k, v in space.config().items() if k != "kind"}) == space
    assert space.column_states() == {0: ("wet", "dry", "icy"), 1: ("wet", "dry", "icy")}
    assert Categories(3, 2).column_states() == {}
    assert space.given_part({1: "icy"}, 4).values[:, 1].tolist() == [2, 2, 2, 2]
    with pytest.raises(InputError, match="'hot' is not one of the states wet, dry, icy"):
        space.given_part({0: "hot"}, 4)


def test_state_names_are_sorted_numerically_when_all_are_integers():
    assert sorted_state_names(["10", "2", "1", "2"]) == ["1", "2", "10"]
    assert sorted_state_names(["b10", "b2", "a"]) == ["a", "b10", "b2"]
    assert sorted_state_names(["-1", "3", "x"]) == ["-1", "3", "x"]


# ----- readers -----------------------------------------------------------------------------------------------------
def _formats(tmp_path, columns: dict):
    """The same table as CSV, Parquet (pandas) and NPZ (named 1-D arrays, the names as unicode)."""
    import pandas as pd

    csv_path, parquet, npz = tmp_path / "t.csv", tmp_path / "t.parquet", tmp_path / "t.npz"
    _write_csv(csv_path, columns)
    pd.DataFrame(columns).to_parquet(parquet, index=False)
    np.savez(npz, **{k: np.asarray(v) for k, v in columns.items()})
    return [csv_path, parquet, npz]


def test_named_state_columns_are_read_as_text_from_every_table_format(tmp_path):
    columns = _law(40)
    for path in _formats(tmp_path, columns):
        table = read_table(path, columns=["phi", "psi", "kind"], text_columns=[2])
        assert table.names == ["phi", "psi", "kind"] and table.ignored == ["id"], path
        np.testing.assert_array_equal(table.values[:, :2], np.column_stack([columns["phi"], columns["psi"]]))
        assert table.text[2].tolist() == columns["kind"].tolist(), path
        everything = read_table(path, text_columns=[1])                 # columns=None: every column, file order
        assert everything.names == ["id", "kind", "phi", "psi"] and everything.text[1].tolist() == \
            columns["kind"].tolist()
        assert table_column_names(path) == ["id", "kind", "phi", "psi"]


def test_a_text_column_cannot_also_be_the_label_column_or_lie_outside_the_table(tmp_path):
    path = _formats(tmp_path, _law(10))[0]
    with pytest.raises(InputError, match="'kind' is both the label column and a data column of named states"):
        read_table(path, columns=["phi", "kind"], labels="kind", text_columns=[1])
    with pytest.raises(InputError, match="data column 3 should hold named states, but the table has 2 data columns"):
        read_table(path, columns=["phi", "psi"], text_columns=[2])
    with pytest.raises(InputError, match="is not a number"):                 # without text_columns, text is refused
        read_table(path, columns=["phi", "kind"])


# ----- the product's table form ------------------------------------------------------------------------------------
def test_a_product_read_from_a_table_takes_its_states_from_the_data_and_writes_them_back(tmp_path):
    columns = _law(60)
    path = tmp_path / "t.csv"
    _write_csv(path, columns)
    options = {"factors": FACTORS}
    assert Product.table_text_columns(**options) == (2,)
    space, (angles, kinds), facts = files_for(Product).read_new(path, Product, options,
                                                                 columns=["phi", "psi", "kind"])
    assert space == Product(Torus(2), Categories(3, 1, state_names=["ALA", "GLY", "PRO"]))
    assert facts["ignored"] == ["id"]
    np.testing.assert_allclose(angles.numpy(), np.radians(np.column_stack([columns["phi"], columns["psi"]])),
                               atol=1e-12)                                     # numpy's degree conversion
    assert [["ALA", "GLY", "PRO"][k] for k in kinds[:, 0].tolist()] == columns["kind"].tolist()
    assert space.column_states(**options) == {2: ("ALA", "GLY", "PRO")}
    out = tmp_path / "back.parquet"
    files_for(space).write(out, space, (angles, kinds), options, overwrite=False, names=["phi", "psi", "kind"])
    import pandas as pd

    back = pd.read_parquet(out)                                              # pandas reads the written file
    assert back["kind"].tolist() == columns["kind"].tolist()
    np.testing.assert_allclose(back["phi"].to_numpy(), columns["phi"], atol=1e-9)
    again = files_for(space).read(out, space, options, columns=["phi", "psi", "kind"])
    assert torch.equal(again[1], kinds)
    npz = files_for(space).write(tmp_path / "back.npz", space, (angles, kinds), options, overwrite=False,
                                 names=["phi", "psi", "kind"])
    with np.load(npz, allow_pickle=False) as archive:                   # text stored as unicode, not pickled
        assert archive["kind"].tolist() == columns["kind"].tolist()
    assert torch.equal(files_for(space).read(npz, space, options, columns=["phi", "psi", "kind"])[1], kinds)


def test_a_state_the_model_does_not_know_is_refused_naming_line_column_and_states(tmp_path):
    space = Product(Torus(2), Categories(3, 1, state_names=["ALA", "GLY", "PRO"]))
    columns = _law(5)
    columns["kind"][3] = "TRP"
    path = tmp_path / "new.csv"
    _write_csv(path, columns)
    with pytest.raises(InputError, match=r"new.csv, line 5, column kind: 'TRP' is not one of the 3 states ALA, GLY, "
                                         r"PRO"):
        files_for(space).read(path, space, {"factors": FACTORS}, columns=["phi", "psi", "kind"])


def test_one_state_name_is_not_a_categorical_factor(tmp_path):
    columns = _law(5)
    columns["kind"][:] = "GLY"
    path = tmp_path / "one.csv"
    _write_csv(path, columns)
    with pytest.raises(InputError, match="hold 1 distinct state name"):
        files_for(Product).read_new(path, Product, {"factors": FACTORS}, columns=["phi", "psi", "kind"])


# ----- the command line ------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    folder = tmp_path_factory.mktemp("named")
    data = folder / "residues.csv"
    _write_csv(data, _law(1500))
    model = folder / "model"
    code = main(["fit", str(data), "--space", "product", "--factors", FACTORS, "--columns", "phi,psi,kind",
                 "--train-steps", "800", "--seed", "0", "--out", str(model), "--quiet"])
    assert code == 0
    return folder, data, model


def test_fit_reads_the_kinds_as_a_categorical_factor(fitted):
    import heatwalk

    _, _, model = fitted
    m = heatwalk.load(model)
    assert m.space.factors[1] == Categories(3, 1, state_names=["ALA", "GLY", "PRO"])
    assert m.record["columns"] == ["phi", "psi", "kind"] and m.record["ignored"] == ["id"]


def _circular_mean_deg(values) -> float:
    return math.degrees(circmean(np.radians(np.asarray(values, dtype=float)), high=math.pi, low=-math.pi))


def test_fixing_a_kind_by_name_samples_its_angles(fitted, tmp_path, capsys):
    """Each kind fixed by name: every written row holds that name, and the circular mean of phi (scipy's circmean)
    lies within 20° of the law's centre for the kind (sampling noise of 400 draws of a 13° spread is under 1°; the
    rest is a loose bound for an 800-step fit: common practice for a smoke test of conditioning)."""
    _, _, model = fitted
    for kind, (phi, _) in CENTRES.items():
        out = tmp_path / f"{kind}.csv"
        code, _, err = run(["sample", str(model), "--n", "400", "--out", str(out), "--fix", f"kind={kind}",
                            "--quiet"], capsys)
        assert code == 0, err
        header, rows = _read_csv(out)
        assert header == ["phi", "psi", "kind"] and {r[2] for r in rows} == {kind}
        assert abs(_circular_mean_deg([r[0] for r in rows]) - phi) < 20, kind


def test_free_kinds_follow_the_data_shares_and_a_given_table_fixes_them_by_name(fitted, tmp_path, capsys):
    """Unconditional samples: the share of each kind within 0.08 of the law's (binomial s.d. of 1,000 draws is
    0.016; the rest is fit error). A --given table with one kind per sample is written back row by row."""
    _, _, model = fitted
    out = tmp_path / "free.csv"
    code, _, err = run(["sample", str(model), "--n", "1000", "--out", str(out), "--quiet"], capsys)
    assert code == 0, err
    kinds = [r[2] for r in _read_csv(out)[1]]
    for kind, share in SHARES.items():
        assert abs(kinds.count(kind) / len(kinds) - share) < 0.08, kind
    given = tmp_path / "given.csv"
    wanted = ["PRO", "GLY", "GLY", "ALA"]
    _write_csv(given, {"kind": np.array(wanted)})
    code, _, err = run(["sample", str(model), "--n", "4", "--out", str(tmp_path / "g.csv"), "--given", str(given),
                        "--quiet"], capsys)
    assert code == 0, err
    assert [r[2] for r in _read_csv(tmp_path / "g.csv")[1]] == wanted


def test_an_unknown_kind_to_fix_is_one_clear_error(fitted, tmp_path, capsys):
    _, _, model = fitted
    out = tmp_path / "bad.csv"
    code, _, err = run(["sample", str(model), "--n", "5", "--out", str(out), "--fix", "kind=TRP", "--quiet"], capsys)
    assert code == 2 and "kind='TRP' is not one of its 3 states ALA, GLY, PRO" in err
    code, _, err = run(["sample", str(model), "--n", "5", "--out", str(out), "--fix", "phi=east", "--fix", "psi=0",
                        "--quiet"], capsys)
    assert code == 2 and "phi='east' is not a number" in err
    assert not out.exists()


def test_evaluate_and_plot_a_model_with_named_states(fitted, tmp_path, capsys, figures):
    _, data, model = fitted
    report = tmp_path / "report"
    code, out, err = run(["evaluate", str(model), str(data), "--out", str(report), "--likelihood-points", "100",
                          "--quiet"], capsys)
    assert code == 0, err
    assert "plus the ELBO of the finite factors given them" in out and (report / "data_vs_samples.png").is_file()
    import json

    per_factor = json.loads((report / "evaluation.json").read_text())["sample_metrics"]["per_factor"]
    assert "wasserstein1_per_angle_rad" in per_factor["0"] and "1" in per_factor["1"]["kmer_tv_distance"]
    assert "factor 1 alone (its marginal):" in out
    figures.clear()
    code, _, err = run(["plot", "--model", str(model), "--data", str(data), "--out", str(tmp_path / "p.png"),
                        "--n-samples", "200", "--quiet"], capsys)
    assert code == 0, err
    axes = [ax for sub in figures[0].subfigs for ax in sub.axes]
    assert {"ALA", "GLY", "PRO"} <= {t.get_text() for ax in axes for t in ax.get_yticklabels()}
    # the state column's position is labelled by the table's column name
    state_axes = [ax for ax in axes if ax.get_xlabel() == "column"]
    assert state_axes and all([t.get_text() for t in ax.get_xticklabels()] == ["kind"] for ax in state_axes)


def test_a_label_column_and_a_state_column_are_different_columns(tmp_path, capsys):
    data = tmp_path / "d.csv"
    _write_csv(data, _law(30))
    code, _, err = run(["fit", str(data), "--space", "product", "--factors", FACTORS, "--columns", "phi,psi,kind",
                        "--labels", "kind", "--out", str(tmp_path / "m"), "--quiet"], capsys)
    assert code == 2 and "both" in err
    assert not (tmp_path / "m").exists()


def test_write_table_keeps_names_of_mixed_columns(tmp_path):
    """The writer the samples go through: a text column beside numbers reads back as the same text (csv module)."""
    path = write_table(tmp_path / "m.csv", {"a": np.array([1.5, 2.0]), "k": np.array(["x", "y"], dtype=object)})
    assert _read_csv(path) == (["a", "k"], [["1.5", "x"], ["2.0", "y"]])


@pytest.mark.filterwarnings("ignore:::MDAnalysis")      # its notes on guessed elements of the reference Universe
def test_residue_names_of_a_real_structure_from_torsions_to_a_joint_model(tmp_path, capsys):
    """adk_open.pdb (MDAnalysisTests.datafiles.PDB_small: adenylate kinase, 214 residues): `torsions` writes phi,
    psi and residue_name; a product fitted on them has one state per residue name of the table's rows, the same
    set as MDAnalysis' own residue names of those residues, and a residue fixed by name is written by name."""
    datafiles = pytest.importorskip("MDAnalysisTests.datafiles",
                                    reason="MDAnalysisTests is not installed (pip install 'heatwalk[data]')")
    import pandas as pd

    table = tmp_path / "adk.csv"
    code, _, err = run(["torsions", datafiles.PDB_small, "--out", str(table), "--quiet"], capsys)
    assert code == 0, err
    rows = pd.read_csv(table)
    model = tmp_path / "m"
    code, out, err = run(["fit", str(table), "--space", "product", "--factors", FACTORS, "--columns",
                          "phi,psi,residue_name", "--train-steps", "30", "--out", str(model), "--quiet"], capsys)
    assert code == 0, err
    import heatwalk

    import MDAnalysis as mda

    universe = mda.Universe(datafiles.PDB_small)
    kept = universe.residues[np.isin(universe.residues.resids, rows["residue_number"].to_numpy())]
    names = heatwalk.load(model).space.factors[1].state_names
    assert set(names) == set(kept.resnames) and list(names) == sorted(names)
    out_file = tmp_path / "gly.csv"
    code, _, err = run(["sample", str(model), "--n", "20", "--out", str(out_file), "--fix", "residue_name=GLY",
                        "--quiet"], capsys)
    assert code == 0, err
    assert set(pd.read_csv(out_file)["residue_name"]) == {"GLY"}


def test_columns_out_of_factor_order_and_empty_state_cells_are_clear_errors(tmp_path, capsys):
    columns = _law(20)
    data = tmp_path / "d.csv"
    _write_csv(data, {"phi": columns["phi"], "psi": columns["psi"], "kind": columns["kind"]})
    code, _, err = run(["fit", str(data), "--space", "product", "--factors", "categories:1,torus:2:degrees",
                        "--out", str(tmp_path / "m"), "--quiet"], capsys)
    assert code == 2 and "column 3 (kind): " in err and "is not a number" in err
    assert "data column 1 hold named states: name the columns in factor order" in err
    lines = data.read_text().splitlines()
    lines[4] = ",".join(lines[4].split(",")[:2] + [""])
    data.write_text("\n".join(lines) + "\n")
    code, _, err = run(["fit", str(data), "--space", "product", "--factors", FACTORS, "--out", str(tmp_path / "m"),
                        "--quiet"], capsys)
    assert code == 2 and "line 5, column 3 (kind): empty state name cell, expected a state name" in err
    assert not (tmp_path / "m").exists()


def test_names_are_points_in_python_too(fitted):
    """Categories with state_names takes names wherever it takes codes: validate, and given= of Model.sample."""
    import heatwalk

    space = Categories(3, 2, state_names=["wet", "dry", "icy"])
    assert space.validate([["icy", "wet"], ["dry", "dry"]]).tolist() == [[2, 0], [1, 1]]
    assert space.validate(["icy", "wet"]).tolist() == [[2, 0]]                      # one point of L names
    with pytest.raises(InputError, match="row 1, position 0: 'hot' is not one of the states wet, dry, icy"):
        space.validate([["icy", "wet"], ["hot", "dry"]])
    model = heatwalk.load(fitted[2])
    angles, kinds = model.sample(50, given={1: "PRO"}, seed=1, progress=False)
    assert kinds.tolist() == [[2]] * 50
    with pytest.raises(InputError, match="'TRP' is not one of the states"):
        model.sample(5, given={1: "TRP"}, progress=False)
