"""Product spaces from data files: ``--space product --factors KIND:N,…`` through fit, sample (with whole factors
fixed), evaluate and plot, and the reading of a product table checked against independent conversions.

The two-mode demo law (invented for this test): a sign s = ±1 with probability 1/2, an angle phi ~ von Mises(s·90°,
κ = 8) and a point (x, y) = (2s, 0) + noise (standard deviations 0.3 and 0.5). Fixing phi near +90° should give
x near +2, and fixing (x, y) near (2, 0) should give phi near +90°.
"""

from __future__ import annotations

import csv
import math

import matplotlib

matplotlib.use("Agg")

import numpy as np  # noqa: E402
import pytest  # noqa: E402
import torch  # noqa: E402

import heatwalk.frontend.plots as plots  # noqa: E402
from heatwalk.errors import InputError  # noqa: E402
from heatwalk.frontend.cli import main  # noqa: E402
from heatwalk.frontend.messages import for_command_line  # noqa: E402
from heatwalk.spaces import SO3, Euclidean, Product, Torus  # noqa: E402

FACTORS = "torus:1,euclidean:2"


def run(args, capsys):
    code = main(args)
    out = capsys.readouterr()
    return code, out.out, out.err


def _two_modes(n: int, seed: int = 2):
    rng = np.random.default_rng(seed)
    s = rng.choice([-1, 1], n)
    phi = np.degrees(rng.vonmises(s * np.pi / 2, 8.0))
    return phi, 2 * s + 0.3 * rng.standard_normal(n), 0.5 * rng.standard_normal(n)


def _write(path, columns: dict) -> None:
    names = list(columns)
    with open(path, "w") as f:
        f.write(",".join(names) + "\n")
        for row in zip(*columns.values()):
            f.write(",".join(repr(float(v)) for v in row) + "\n")


def _read(path):
    rows = list(csv.reader(open(path)))
    return rows[0], np.array(rows[1:], dtype=float)


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    """A product model fitted from a CSV with an id column, angles in degrees and named columns."""
    folder = tmp_path_factory.mktemp("product")
    phi, x, y = _two_modes(3000)
    data = folder / "mixed.csv"
    _write(data, {"id": np.arange(len(phi)), "phi": phi, "x": x, "y": y})
    model = folder / "model"
    code = main(["fit", str(data), "--space", "product", "--factors", FACTORS, "--columns", "phi,x,y", "--degrees",
                 "--out", str(model), "--train-steps", "600", "--hidden", "64", "--quiet"])
    assert code == 0
    return folder, data, model


# ----- reading a product table, against conversions outside the project -----------------------------------------
def test_product_rows_are_read_by_each_factor_with_its_options():
    """Angles in degrees and quaternions (x, y, z, w) beside positions: the torus factor equals numpy's deg2rad, the
    SO(3) factor scipy's Rotation.from_quat(...).as_matrix() (tolerance 1e-12, float64 round-off), R^3 the columns."""
    from scipy.spatial.transform import Rotation

    rng = np.random.default_rng(0)
    q = rng.standard_normal((50, 4))
    q /= np.linalg.norm(q, axis=1, keepdims=True)
    deg = rng.uniform(-179, 179, (50, 1))
    pos = rng.standard_normal((50, 3))
    options = {"factors": "torus:1:degrees,so3:4:rotation_format=quaternion:quaternion_order=xyzw,euclidean:3"}
    space = Product.from_table(8, **options)
    assert space == Product(Torus(1), SO3(), Euclidean(3))
    angles, rotations, points = space.from_rows(np.concatenate([deg, q, pos], 1), **options)
    np.testing.assert_allclose(angles.numpy(), np.deg2rad(deg), atol=1e-12)     # numpy's conversion
    np.testing.assert_allclose(rotations.numpy(), Rotation.from_quat(q).as_matrix(), atol=1e-12)  # scipy
    np.testing.assert_array_equal(points.numpy(), pos)
    # written back in the same options: the same numbers (quaternions up to sign)
    back = space.to_rows((angles, rotations, points), **options).numpy()
    np.testing.assert_allclose(back[:, :1], deg, atol=1e-9)
    np.testing.assert_allclose(np.abs(np.sum(back[:, 1:5] * q, 1)), 1.0, atol=1e-12)
    np.testing.assert_allclose(back[:, 5:], pos, atol=0)
    names = space.column_names(**options)
    assert len(names) == 8 and names[0].startswith("f0_") and names[1].startswith("f1_") and names[-1].startswith("f2_")


@pytest.mark.parametrize("factors, n_columns, options, message", [
    (None, 3, {}, "needs factors=KIND:N"),
    ("torus:1", 1, {}, "at least two factors"),
    ("torus:1,euclidean:2", 4, {}, "take 3 columns, but the table has 4"),
    ("torus:1,plane:2", 3, {}, "unknown space 'plane'"),
    ("torus:1,product:2", 3, {}, "a product factor is not read from a table"),
    ("torus:1,categories:2", 3, {}, "the cells of columns \\[2, 3\\] were not read as text"),
    ("torus:1,categories:1:uppercase", 2, {}, "a categories factor takes no reading options"),
    ("torus:1,euclidean", 3, {}, "is not KIND:N"),
    ("torus:1,euclidean:0", 1, {}, "column count N ≥ 1"),
    ("torus:1,so3:4", 5, {}, "takes 9 columns, not 4"),
    ("torus:1:radians,euclidean:2", 3, {}, "torus takes no reading option 'radians'"),
    ("torus:1:degrees=yes,euclidean:2", 3, {}, "degrees is a switch"),
    ("so3:4:rotation_format=euler,euclidean:2", 6, {}, "expected one of matrix, quaternion, rotvec"),
    ("torus:1,so3:4:rotation_format=quaternion:quaternion_order=wxyz", 5, {"degrees": True},
     "degrees was given for every factor that takes it; give it to one factor alone"),
    ("torus:1,euclidean:2", 3, {"lonlat": True}, "no factor takes the reading option 'lonlat'"),
])
def test_bad_factor_specs_are_refused_naming_what_is_wrong(factors, n_columns, options, message):
    with pytest.raises(InputError, match=message):
        Product.from_table(n_columns, factors=factors, **options)


def test_a_reading_option_no_factor_takes_is_refused():
    space = Product(Torus(1), Euclidean(2))
    with pytest.raises(InputError, match="no factor takes the reading option 'lonlat'"):
        space.from_rows(np.zeros((2, 3)), lonlat=True)


def test_product_reprs_are_not_rewritten_as_flags():
    message = "factor 1 (Euclidean(d=2, t_max=100.0, process='brownian')) is odd; use rotation_format='rotvec'"
    assert for_command_line(message) == ("factor 1 (Euclidean(d=2, t_max=100.0, process='brownian')) is odd; use "
                                         "--rotation-format rotvec")


# ----- the command line ------------------------------------------------------------------------------------------
def test_fit_records_the_factors_and_columns(fitted, capsys):
    folder, data, model = fitted
    code, out, err = run(["info", str(model)], capsys)
    assert code == 0, err
    assert "Product(Torus(n=1), Euclidean(d=2" in out and "phi, x, y" in out and "ignored      id" in out


def test_samples_are_written_in_the_data_columns_and_units(fitted, tmp_path, capsys):
    folder, data, model = fitted
    out = tmp_path / "s.csv"
    code, _, err = run(["sample", str(model), "--n", "200", "--out", str(out), "--quiet"], capsys)
    assert code == 0, err
    names, values = _read(out)
    assert names == ["phi", "x", "y"]
    assert np.all(np.abs(values[:, 0]) <= 180) and np.abs(values[:, 0]).max() > 2 * math.pi   # degrees


def test_fixing_a_whole_factor_conditions_the_others(fitted, tmp_path, capsys):
    """Fixed values come back as given (to float64 round-off of the degree conversion, 1e-9); the free factor
    follows the fixed one's mode. Thresholds (|mean x| > 1 where the law's is 2; phi within 30° of ±90°) are loose
    bounds for a 600-step fit (common practice for a smoke test of conditioning, not a published figure)."""
    folder, data, model = fitted
    for sign in (1, -1):
        out = tmp_path / f"phi{sign}.csv"
        code, _, err = run(["sample", str(model), "--n", "300", "--out", str(out), "--fix", f"phi={90 * sign}",
                            "--quiet"], capsys)
        assert code == 0, err
        _, v = _read(out)
        np.testing.assert_allclose(v[:, 0], 90 * sign, atol=1e-9)
        assert sign * v[:, 1].mean() > 1.0
    out = tmp_path / "xy.csv"
    code, _, err = run(["sample", str(model), "--n", "300", "--out", str(out), "--fix", "x=2", "--fix", "y=0",
                        "--quiet"], capsys)
    assert code == 0, err
    _, v = _read(out)
    assert np.all(v[:, 1] == 2.0) and np.all(v[:, 2] == 0.0)
    mean_angle = math.degrees(math.atan2(np.sin(np.radians(v[:, 0])).mean(), np.cos(np.radians(v[:, 0])).mean()))
    assert abs(mean_angle - 90) < 30


def test_fixed_degrees_are_written_exactly_as_given(fitted, tmp_path, capsys):
    """-60° goes to radians and back as -59.999999999999986 in float64 (numpy: np.rad2deg(np.deg2rad(-60.0)));
    the written file holds the value as given, for one fixed value and for one value per sample."""
    assert np.rad2deg(np.deg2rad(-60.0)) != -60.0            # the round trip this test is about
    folder, data, model = fitted
    out = tmp_path / "fixed.csv"
    code, _, err = run(["sample", str(model), "--n", "20", "--out", str(out), "--fix", "phi=-60", "--quiet"], capsys)
    assert code == 0, err
    assert np.all(_read(out)[1][:, 0] == -60.0)
    wanted = [-60.0, 33.3, 170.1, -0.7, 12.345678]
    given = tmp_path / "given.csv"
    _write(given, {"phi": wanted})
    code, _, err = run(["sample", str(model), "--n", str(len(wanted)), "--out", str(out), "--given", str(given),
                        "--overwrite", "--quiet"], capsys)
    assert code == 0, err
    assert _read(out)[1][:, 0].tolist() == wanted


def test_fixing_part_of_a_factor_is_refused(fitted, tmp_path, capsys):
    folder, data, model = fitted
    out = tmp_path / "part.csv"
    code, _, err = run(["sample", str(model), "--n", "5", "--out", str(out), "--fix", "x=1", "--quiet"], capsys)
    assert code == 2 and "is fixed whole: give all of its columns, x, y (missing y)" in err and "--process" not in err
    assert not out.exists()
    given = tmp_path / "given.csv"
    _write(given, {"phi": [10.0, 20.0, 30.0]})
    code, _, err = run(["sample", str(model), "--n", "5", "--out", str(out), "--given", str(given), "--quiet"], capsys)
    assert code == 2 and "3 rows; give one row" in err and "(--n 5)" in err
    assert not out.exists()


def test_evaluate_and_plot_draw_one_picture_per_factor_in_the_data_names(fitted, tmp_path, capsys, figures):
    folder, data, model = fitted
    report = tmp_path / "report"
    code, out, err = run(["evaluate", str(model), str(data), "--out", str(report), "--likelihood-points", "100",
                          "--quiet"], capsys)
    assert code == 0, err
    assert (report / "data_vs_samples.png").is_file() and "MMD²" in out
    assert "probability-flow ODE of the manifold factors jointly (exact divergence" in out   # no finite factor
    assert "lower bound" not in out
    figures.clear()
    code, out, err = run(["plot", "--model", str(model), "--data", str(data), "--out", str(tmp_path / "p.png"),
                          "--n-samples", "300", "--quiet"], capsys)
    assert code == 0, err
    labels = {ax.get_xlabel() for sub in figures[0].subfigs for ax in sub.axes} | \
        {ax.get_ylabel() for sub in figures[0].subfigs for ax in sub.axes}
    assert {"phi (deg)", "x", "y"} <= labels


def test_picture_flags_reach_every_factor_picture_that_takes_them(fitted, tmp_path, capsys, figures):
    """--bins 20 --smoothing 0 on the product: the R^d factor's density image is 20 x 20 cells (not its default
    72); a flag no factor's picture takes (--projection, of the sphere's map) is refused, naming the ones taken."""
    folder, data, model = fitted
    code, _, err = run(["plot", "--model", str(model), "--data", str(data), "--out", str(tmp_path / "p.png"),
                        "--n-samples", "200", "--bins", "20", "--smoothing", "0", "--quiet"], capsys)
    assert code == 0, err
    plane = figures[-1].subfigs[1]
    shapes = {im.get_array().shape for ax in plane.axes for im in ax.get_images()}
    assert shapes == {(20, 20)}
    code, _, err = run(["plot", "--model", str(model), "--data", str(data), "--out", str(tmp_path / "q.png"),
                        "--projection", "hammer", "--quiet"], capsys)
    assert code == 2 and "--projection does not apply to the 'factors' picture" in err and "--bins" in err
    assert not (tmp_path / "q.png").exists()


def test_the_factors_key_in_a_config_file(tmp_path, capsys):
    phi, x, y = _two_modes(50)
    data = tmp_path / "d.csv"
    _write(data, {"phi": phi, "x": x, "y": y})
    config = tmp_path / "fit.toml"
    config.write_text(f'space = "product"\nfactors = "{FACTORS}"\ndegrees = true\n')
    code, out, err = run(["fit", str(data), "--config", str(config), "--out", str(tmp_path / "m"), "--dry-run"],
                         capsys)
    assert code == 0, err
    assert f'factors = "{FACTORS}"' in out
    code, out, err = run(["fit", str(data), "--config", str(config), "--out", str(tmp_path / "m"), "--train-steps",
                          "5", "--quiet"], capsys)
    assert code == 0, err
    assert "Product(Torus(n=1)" in out


def test_a_product_without_factors_on_the_command_line_is_one_clear_error(tmp_path, capsys):
    data = tmp_path / "d.csv"
    _write(data, {"a": [0.1, 0.2], "b": [0.3, 0.4]})
    code, _, err = run(["fit", str(data), "--space", "product", "--out", str(tmp_path / "m"), "--quiet"], capsys)
    assert code == 2 and "--factors" in err and "KIND:N" in err
    assert not (tmp_path / "m").exists()


# ----- the picture of R^d ---------------------------------------------------------------------------------------
def test_coordinates_histogram_density_against_the_normal_pdf():
    """The 1-D density of 200,000 N(0, 1) draws over the data's window against scipy.stats.norm.pdf: within 0.01
    (per unit) at every cell centre in [-2, 2] (the 1.5-bin smoothing of a 72-bin histogram biases the peak by
    about σ_s²/2·|pdf''| ≈ 0.004 with σ_s ≈ 0.09; the rest is counting noise ≈ 0.003)."""
    from scipy.stats import norm

    from heatwalk.frontend.plots.coordinates import histogram_density, window

    x = torch.randn(200_000, 1, generator=torch.Generator().manual_seed(0), dtype=torch.float64).numpy()
    limits = window(x)
    dens = histogram_density(x, limits, 72, 1.5)
    lo, hi = limits[0]
    centres = lo + (np.arange(72) + 0.5) * (hi - lo) / 72
    inside = np.abs(centres) <= 2
    np.testing.assert_allclose(dens[inside], norm.pdf(centres[inside]), atol=0.01)


@pytest.mark.parametrize("d", [1, 2, 3])
def test_coordinates_picture_of_every_dimension(d):
    space = Euclidean(d)
    data = torch.randn(400, d, generator=torch.Generator().manual_seed(1), dtype=torch.float64)
    fig = plots.plot(space, data, data.flip(0), columns=[f"c{i}" for i in range(d)])
    labels = {ax.get_xlabel() for ax in fig.axes} | {ax.get_ylabel() for ax in fig.axes}
    assert {f"c{i}" for i in range(d)} <= labels
    with pytest.raises(InputError, match="window from data or samples"):
        plots.plot(space, None, None, model=_FakeModel(space))


class _FakeModel:
    def __init__(self, space):
        self.space = space


def test_bad_values_are_named_by_their_column_in_files_and_in_fix(fitted, tmp_path, capsys):
    """A value out of range is named by the file's line and column (1-based, with its name), or by the column
    name of --fix / a --given table; a value that is not finite is refused before sampling."""
    folder, data, model = fitted
    out = tmp_path / "s.csv"
    code, _, err = run(["sample", str(model), "--n", "5", "--out", str(out), "--fix", "phi=400", "--quiet"], capsys)
    assert code == 2 and "--fix: phi: factor 0 (Torus(n=1)): angle 400 is outside [-360, 360] degrees" in err
    code, _, err = run(["sample", str(model), "--n", "5", "--out", str(out), "--fix", "phi=inf", "--quiet"], capsys)
    assert code == 2 and "--fix: phi='inf' is not a finite number" in err
    given = tmp_path / "given.csv"
    _write(given, {"phi": [10.0, 500.0]})
    code, _, err = run(["sample", str(model), "--n", "2", "--out", str(out), "--given", str(given), "--quiet"],
                       capsys)
    assert code == 2 and "given.csv: line 3, phi: factor 0 (Torus(n=1)): angle 500 is outside" in err
    bad = tmp_path / "bad.csv"
    _write(bad, {"x": [0.0, 1.0], "phi": [10.0, 400.0], "y": [0.0, 0.0]})
    code, _, err = run(["fit", str(bad), "--space", "product", "--factors", FACTORS, "--degrees", "--columns",
                        "phi,x,y", "--out", str(tmp_path / "m"), "--quiet"], capsys)
    assert code == 2 and "bad.csv, line 3, column 1 (phi): factor 0 (Torus(n=1)): angle 400 is outside" in err
    assert not out.exists() and not (tmp_path / "m").exists()
