"""``heatwalk plot``: every plot kind from the command line writes a picture of the requested size that is
not blank, its axes carry the labels of the data (read back from the Figure the command drew), the format
follows the extension, and bad requests are one line with exit status 2 and nothing written.

The Figures are caught by the ``figures`` fixture of conftest.py (it wraps ``heatwalk.frontend.plots.save_figure``,
which the command saves through).
The picture of a product (``factors``) read from a data file is checked in tests/test_cli_product.py.
"""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import matplotlib.image  # noqa: E402
import numpy as np  # noqa: E402
import pytest  # noqa: E402
import torch  # noqa: E402

import heatwalk.frontend.plots as plots  # noqa: E402
from heatwalk.frontend.cli import main  # noqa: E402
from heatwalk.frontend.demo_data import lanternfold_torsions  # noqa: E402
from heatwalk.spaces import SO3, Simplex, Sphere  # noqa: E402

SIZE = (640, 480)
TINY_FIT = ["--train-steps", "20", "--hidden", "16", "--batch-size", "64", "--quiet"]


def _labels(fig) -> set[str]:
    """Axis labels, titles, colour-bar labels, tick labels, free texts and the suptitle of a figure."""
    out = set()
    for ax in fig.get_axes() + [c for a in fig.get_axes() for c in a.child_axes]:
        out |= {ax.get_xlabel(), ax.get_ylabel(), ax.get_title()}
        out |= {t.get_text() for t in ax.texts}
        out |= {t.get_text() for t in ax.get_yticklabels() + ax.get_xticklabels()}
    if fig._suptitle is not None:
        out.add(fig._suptitle.get_text())
    return out - {""}


def _check_png(path, size):
    """A non-empty PNG of (width, height) = size with at least 2 % of its pixels unlike the background."""
    assert path.stat().st_size > 0
    img = matplotlib.image.imread(path)
    assert img.shape[:2] == (size[1], size[0]), img.shape
    rgb = img[..., :3]
    drawn = np.abs(rgb - rgb[0, 0]).sum(-1) > 0.05
    assert drawn.mean() > 0.02, f"only {drawn.mean():.4f} of the pixels are drawn"


def run(argv, capsys):
    code = main(argv)
    out = capsys.readouterr()
    return code, out.out, out.err


def _plot(argv, capsys):
    code, out, err = run(["plot", *argv, "--quiet"], capsys)
    assert code == 0, err
    return out


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    """Small data files of every kind (all invented), and tiny models fitted on some of them."""
    d = tmp_path_factory.mktemp("plot-files")
    g = torch.Generator().manual_seed(0)
    deg = np.degrees(np.asarray(lanternfold_torsions(300, seed=0)))
    omega = 180 - np.abs(np.random.default_rng(1).normal(0, 8, 300))
    np.savetxt(d / "torsions.csv", np.c_[deg, omega, np.arange(300)], delimiter=",", header="phi,psi,omega,frame",
               comments="")
    mu = torch.tensor([0.3, 0.5, 0.8], dtype=torch.float64)
    v = Sphere(2).sample_forward((mu / mu.norm()).expand(200, 3), 0.1, g).numpy()
    lon, lat = np.degrees(np.arctan2(v[:, 1], v[:, 0])), np.degrees(np.arcsin(v[:, 2]))
    np.savetxt(d / "directions.csv", np.c_[lon, lat], delimiter=",", header="lon,lat", comments="")
    r = SO3().sample_forward(torch.eye(3, dtype=torch.float64).expand(200, 3, 3), 0.3, g)
    from scipy.spatial.transform import Rotation

    rotvec = np.degrees(Rotation.from_matrix(r.numpy()).as_rotvec())
    np.savetxt(d / "rotations.csv", rotvec, delimiter=",", header="rx,ry,rz", comments="")
    x3 = Simplex(3).sample_forward(torch.tensor([0.6, 0.3, 0.1], dtype=torch.float64).expand(200, 3), 0.3, g)
    np.savetxt(d / "budget.csv", x3.numpy(), delimiter=",", header="sleep,work,leisure", comments="")
    x4 = Simplex(4).prior_sample(200, g)
    np.savetxt(d / "budget4.csv", x4.numpy(), delimiter=",", header="food,fuel,rent,other", comments="")
    rng = np.random.default_rng(2)
    seqs = ["".join(rng.choice(list("ACGT"), 8, p=[0.4, 0.3, 0.2, 0.1])) for _ in range(100)]
    (d / "seqs.fasta").write_text("".join(f">r{i}\n{s}\n" for i, s in enumerate(seqs)))
    for name, argv in {
        "torus-model": ["torsions.csv", "--space", "torus", "--degrees", "--columns", "phi,psi"],
        "sphere-model": ["directions.csv", "--space", "sphere", "--lonlat"],
        "simplex-model": ["budget.csv", "--space", "simplex"],
        "seq-model": ["seqs.fasta", "--space", "categories"],
    }.items():
        assert main(["fit", str(d / argv[0]), *argv[1:], "--out", str(d / name), *TINY_FIT]) == 0
    return d


# ----- every plot kind ---------------------------------------------------------------------------------

def test_torus_model_density_in_the_units_and_names_of_the_data(files, tmp_path, capsys, figures):
    out = tmp_path / "phi_psi.png"
    text = _plot(["--model", str(files / "torus-model"), "--data", str(files / "torsions.csv"), "--out", str(out),
                  "--size", "640,480", "--grid", "12"], capsys)
    _check_png(out, SIZE)
    labels = _labels(figures[-1])
    # fitted with --degrees --columns phi,psi: the map is in degrees with the data's column names
    assert {"phi (deg)", "psi (deg)", "density (1/deg²)"} <= labels
    assert any(lab.startswith("model density exp(log_prob) on a 12-cell grid") for lab in labels)
    assert any(lab.startswith("density of the model") for lab in labels) and "density of the model" in text


def test_torus_all_pairs_from_a_data_file(files, tmp_path, capsys, figures):
    out = tmp_path / "three.png"
    _plot(["--data", str(files / "torsions.csv"), "--space", "torus", "--degrees", "--columns", "phi,psi,omega",
           "--out", str(out), "--size", "720,700"], capsys)
    _check_png(out, (720, 700))
    pairs = {(ax.get_xlabel(), ax.get_ylabel()) for ax in figures[-1].axes if ax.images}
    assert pairs == {("phi (deg)", "psi (deg)"), ("phi (deg)", "omega (deg)"), ("psi (deg)", "omega (deg)")}


def test_data_and_samples_files_side_by_side(files, tmp_path, capsys, figures):
    samples = tmp_path / "s.csv"
    assert main(["sample", str(files / "torus-model"), "--n", "200", "--out", str(samples), "--reverse-steps", "5",
                 "--quiet"]) == 0
    out = tmp_path / "both.png"
    text = _plot(["--model", str(files / "torus-model"), "--data", str(files / "torsions.csv"), "--samples",
                  str(samples), "--out", str(out), "--size", "640,480"], capsys)
    _check_png(out, SIZE)
    labels = _labels(figures[-1])
    assert {"phi (deg)", "psi (deg)"} <= labels
    assert any(lab.startswith("samples density: histogram of 200 samples") for lab in labels)
    assert "samples" in text and "data" in text


def test_sphere_map_of_model_and_data(files, tmp_path, capsys, figures):
    out = tmp_path / "map.png"
    _plot(["--model", str(files / "sphere-model"), "--data", str(files / "directions.csv"), "--out", str(out),
           "--size", "640,480", "--grid", "16"], capsys)
    _check_png(out, SIZE)
    labels = _labels(figures[-1])
    assert {"longitude (deg)", "latitude (deg)"} <= labels
    assert any(lab.startswith("model density exp(log_prob) on a 16 × 8 grid") for lab in labels)
    out = tmp_path / "map2.png"
    _plot(["--data", str(files / "directions.csv"), "--space", "sphere", "--lonlat", "--projection", "hammer",
           "--out", str(out), "--size", "640,480"], capsys)
    _check_png(out, SIZE)
    assert figures[-1].axes[0].name == "hammer"


def test_rotations_in_the_units_of_the_data(files, tmp_path, capsys, figures):
    out = tmp_path / "rot.png"
    _plot(["--data", str(files / "rotations.csv"), "--space", "so3", "--rotation-format", "rotvec", "--degrees",
           "--out", str(out), "--size", "800,600"], capsys)
    _check_png(out, (800, 600))
    labels = _labels(figures[-1])
    assert {"axis longitude (deg)", "axis latitude (deg)", "rotation angle ω (deg)", "density (1/deg)"} <= labels


def test_ternary_with_model_density_and_log_ratio_panels(files, tmp_path, capsys, figures):
    out = tmp_path / "ternary.png"
    _plot(["--model", str(files / "simplex-model"), "--data", str(files / "budget.csv"), "--out", str(out),
           "--size", "640,480", "--grid", "6"], capsys)
    _check_png(out, SIZE)
    labels = _labels(figures[-1])
    assert {"sleep", "work", "leisure", "density relative to the uniform law (1 = uniform)"} <= labels
    out = tmp_path / "ratios.png"
    _plot(["--data", str(files / "budget4.csv"), "--space", "simplex", "--pairs", "food/fuel,0/3", "--out", str(out),
           "--size", "640,480"], capsys)
    _check_png(out, SIZE)
    assert {ax.get_xlabel() for ax in figures[-1].axes} >= {"log(food / fuel)", "log(food / other)"}


def test_sequences_model_alone_draws_samples_and_says_so(files, tmp_path, capsys, figures):
    out = tmp_path / "seq.png"
    text = _plot(["--model", str(files / "seq-model"), "--data", str(files / "seqs.fasta"), "--out", str(out),
                  "--size", "900,600", "--n-samples", "50", "--reverse-steps", "5"], capsys)
    _check_png(out, (900, 600))
    labels = _labels(figures[-1])
    assert {"position", "symbol", "A", "T"} <= labels and "sequence length (symbols)" not in labels  # one length
    assert any(lab.startswith("50 samples drawn from the model") for lab in labels)
    assert "50 samples drawn from the model" in text


@pytest.mark.parametrize("length", [1, 2, 3, 40])
def test_sequence_positions_are_ticked_at_whole_numbers_only(length):
    from heatwalk.spaces import Categories

    x = torch.randint(0, 4, (30, length), generator=torch.Generator().manual_seed(length))
    fig = plots.plot_sequences(Categories(4, length), x, x)
    fig.canvas.draw()
    for ax in fig.axes:
        if ax.get_xlabel() != "position":
            continue
        lo, hi = ax.get_xlim()
        shown = [t for t in ax.get_xticks() if lo <= t <= hi]
        assert shown and all(float(t).is_integer() and 1 <= t <= length for t in shown), shown


def test_sequence_positions_take_column_names_and_a_wrong_count_is_refused():
    from heatwalk.errors import InputError
    from heatwalk.spaces import Categories

    x = torch.randint(0, 3, (20, 2), generator=torch.Generator().manual_seed(0))
    fig = plots.plot_sequences(Categories(3, 2), x, x, columns=["site_a", "site_b"])
    fig.canvas.draw()
    named = [ax for ax in fig.axes if ax.get_xlabel() == "column"]
    assert len(named) == 3 and all([t.get_text() for t in ax.get_xticklabels()] == ["site_a", "site_b"]
                                   for ax in named)
    with pytest.raises(InputError, match="columns: expected 2 names of the positions, got 3 names"):
        plots.plot_sequences(Categories(3, 2), x, x, columns=["a", "b", "c"])


def test_loss_curve(files, tmp_path, capsys, figures):
    out = tmp_path / "loss.png"
    _plot(["--model", str(files / "torus-model"), "--losses", "--out", str(out), "--size", "640,480"], capsys)
    _check_png(out, SIZE)
    labels = _labels(figures[-1])
    assert {"training step", "training loss (score_matching objective)"} <= labels


def test_svg_and_pdf_by_extension(files, tmp_path, capsys):
    for name, head in (("a.svg", b"<svg"), ("a.pdf", b"%PDF-")):
        out = tmp_path / name
        _plot(["--data", str(files / "budget.csv"), "--space", "simplex", "--out", str(out)], capsys)
        start = out.read_bytes()[:400]
        assert head in start, start[:60]


# ----- refusals: one line, exit 2, nothing written ---------------------------------------------------

@pytest.mark.parametrize("extra, message", [
    (["--out", "x.jpg"], r"--out x.jpg: unknown picture format '.jpg'; expected one of .png, .svg, .pdf"),
    (["--out", "x"], r"unknown picture format '\(no extension\)'"),
    (["--out", "x.png", "--projection", "hammer"], r"--projection does not apply to the 'angles' picture"),
    (["--out", "x.png", "--size", "wide"], r"--size 'wide': expected WIDTH,HEIGHT"),
    (["--out", "x.png", "--losses"], r"--losses draws the loss curve alone; drop --data"),
])
def test_bad_requests_exit_2_with_one_line(files, tmp_path, capsys, monkeypatch, extra, message):
    import re

    monkeypatch.chdir(tmp_path)
    code, out, err = run(["plot", "--model", str(files / "torus-model"), "--data", str(files / "torsions.csv"),
                          *extra], capsys)
    assert code == 2 and err.count("\n") == 1 and err.startswith("heatwalk: error: "), err
    assert re.search(message, err), err
    assert list(tmp_path.iterdir()) == []


def test_nothing_to_draw_and_missing_space(tmp_path, capsys, files):
    code, _, err = run(["plot", "--out", str(tmp_path / "a.png")], capsys)
    assert code == 2 and "nothing to draw" in err
    code, _, err = run(["plot", "--data", str(files / "budget.csv"), "--out", str(tmp_path / "a.png")], capsys)
    assert code == 2 and "--space is required" in err
    existing = tmp_path / "b.png"
    existing.write_bytes(b"keep")
    code, _, err = run(["plot", "--data", str(files / "budget.csv"), "--space", "simplex", "--out", str(existing)],
                       capsys)
    assert code == 2 and "already exists" in err and existing.read_bytes() == b"keep"


def test_every_picture_option_is_a_keyword_of_its_draw_function():
    from heatwalk.frontend.plots.figures import option_names

    for kind, picture in plots.PLOT_KINDS.items():
        assert {o.name for o in picture.options} <= set(option_names(picture.draw)), kind
