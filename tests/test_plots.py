"""Pictures: every plot kind writes a PNG of the requested size that is not blank, with the expected labels.

Besides what is drawn, the numbers behind the pictures are checked against computations outside the
plotting code: numpy's histogram2d, scipy's von Mises–Fisher density, scipy's Haar-random rotations and
rotation vectors, matplotlib's own point location in a triangulation, and plain-Python counting.
"""

from __future__ import annotations

import math
from collections import Counter

import matplotlib

matplotlib.use("Agg")

import matplotlib.colors  # noqa: E402
import matplotlib.image  # noqa: E402
import numpy as np  # noqa: E402
import pytest  # noqa: E402
import scipy.stats  # noqa: E402
import torch  # noqa: E402
from scipy.spatial.transform import Rotation  # noqa: E402

import heatwalk  # noqa: E402
from heatwalk.errors import InputError  # noqa: E402
from heatwalk.frontend.demo_data import lanternfold_torsions  # noqa: E402
from heatwalk.frontend.plots import (  # noqa: E402
    PLOT_KINDS, picture_options, plot, plot_angles, plot_data_and_samples, plot_log_likelihoods, plot_losses,
    save_figure,
)
from heatwalk.frontend.plots.compositions import triangle_cells, triangle_histogram, ternary_xy  # noqa: E402
from heatwalk.frontend.plots.directions import map_grid, vmf_density  # noqa: E402
from heatwalk.frontend.plots.rotations import axes_and_angles, haar_angle_density  # noqa: E402
from heatwalk.spaces import SO3, SPACE_KINDS, Categories, Euclidean, Product, Simplex, Sphere, Torus  # noqa: E402
from stat_thresholds import p_value_threshold  # noqa: E402

NET = {"hidden": 32, "depth": 2}
SIZE = (640, 480)


def _gen(seed=0):
    return torch.Generator().manual_seed(seed)


def _fit(space, x, steps=20):
    return heatwalk.fit(space, x, steps=steps, batch_size=64, progress=False, network=NET, seed=0)


@pytest.fixture(scope="module")
def torus():
    space = Torus(2)
    x = space.validate(lanternfold_torsions(400, seed=1))
    return space, x, _fit(space, x)


@pytest.fixture(scope="module")
def sphere():
    space = Sphere(2)
    mu = torch.tensor([0.3, 0.5, 0.8], dtype=torch.float64)
    x = space.sample_forward((mu / mu.norm()).expand(300, 3), 0.2, _gen(1))
    return space, x, _fit(space, x)


@pytest.fixture(scope="module")
def simplex3():
    space = Simplex(3)
    x = space.sample_forward(torch.tensor([0.6, 0.3, 0.1], dtype=torch.float64).expand(300, 3), 0.3, _gen(2))
    return space, x, _fit(space, x)


def _labels(fig) -> set[str]:
    """Every axis label, title, colour-bar label and free text of a figure (subfigures included)."""
    out = set()
    for ax in fig.get_axes() + [c for a in fig.get_axes() for c in a.child_axes]:
        out |= {ax.get_xlabel(), ax.get_ylabel(), ax.get_title()}
        out |= {t.get_text() for t in ax.texts}
        out |= {t.get_text() for t in ax.get_yticklabels() + ax.get_xticklabels()}
    for sub in getattr(fig, "subfigs", []):
        out |= _labels(sub)
        if sub._suptitle is not None:
            out.add(sub._suptitle.get_text())
    return out - {""}


def _check_png(path, size):
    """The PNG has (width, height) = size, and at least 2 % of its pixels differ from the background."""
    img = matplotlib.image.imread(path)
    assert img.shape[:2] == (size[1], size[0]), img.shape
    rgb = img[..., :3]
    background = rgb[0, 0]
    drawn = np.abs(rgb - background).sum(-1) > 0.05
    assert drawn.mean() > 0.02, f"only {drawn.mean():.4f} of the pixels are drawn"


def _save(fig, tmp_path, name="picture.png"):
    return save_figure(fig, tmp_path / name)


# ----- every kind of picture: size, pixels, labels ---------------------------------------------------------

def test_torus_pair_with_model_density(tmp_path, torus):
    space, x, model = torus
    fig = plot(space, x, model=model, columns=["phi", "psi"], grid=12, size=SIZE)
    _check_png(_save(fig, tmp_path), SIZE)
    labels = _labels(fig)
    assert {"phi (deg)", "psi (deg)", "density (1/deg²)"} <= labels
    assert any(lab.startswith("model density") for lab in labels)
    # the map is exp(model.log_prob) per deg² at the cell centres (12 cells of 30° per angle)
    image = fig.axes[0].images[0].get_array()
    c = torch.tensor([-math.pi + (k + 0.5) * math.pi / 6 for k in (2, 7)], dtype=torch.float64)
    expected = torch.exp(model.log_prob(c.reshape(1, 2))["log_prob"]).item() * (math.pi / 180) ** 2
    # image rows are psi (origin lower), columns phi; tolerance 1e-4 relative: the adaptive ODE (rtol 1e-5)
    # takes other steps for one point than for the whole grid
    assert image[7, 2] == pytest.approx(expected, rel=1e-4)


def test_torus_pair_histogram_matches_numpy(tmp_path, torus):
    space, x, _ = torus
    samples = space.validate(lanternfold_torsions(500, seed=5))
    fig = plot(space, x, samples, bins=36, smoothing=0, degrees=False, size=SIZE)
    _check_png(_save(fig, tmp_path), SIZE)
    labels = _labels(fig)
    assert {"angle0 (rad)", "angle1 (rad)", "density (1/rad²)", "−π", "π/2"} <= labels
    # reference: numpy's histogram2d with density=True on the same 36 x 36 cells of [-π, π]²
    ref, _, _ = np.histogram2d(samples[:, 0].numpy(), samples[:, 1].numpy(), bins=36,
                               range=[[-math.pi, math.pi]] * 2, density=True)
    np.testing.assert_allclose(fig.axes[0].images[0].get_array(), ref.T, rtol=1e-12, atol=1e-15)
    fig = plot(space, x, samples, bins=36, smoothing=0, degrees=False, color_scale="log", size=SIZE)
    _check_png(_save(fig, tmp_path, "log.png"), SIZE)
    norm = fig.axes[0].images[0].norm
    assert isinstance(norm, matplotlib.colors.LogNorm) and norm.vmax == pytest.approx(ref.max(), rel=1e-12)
    assert norm.vmin == pytest.approx(ref.max() / 1e4, rel=1e-12)
    with pytest.raises(InputError, match="color_scale must be one of 'linear', 'log'"):
        plot(space, x, color_scale="cubic")


def test_torus_all_pairs(tmp_path):
    space = Torus(3)
    x = torch.cat([torch.as_tensor(lanternfold_torsions(300, seed=3)), torch.rand(300, 1, generator=_gen()) - 0.5], 1)
    fig = plot(space, x, x.flip(0), columns=["phi", "psi", "omega"], size=(720, 700))
    _check_png(_save(fig, tmp_path), (720, 700))
    pairs = {(ax.get_xlabel(), ax.get_ylabel()) for ax in fig.axes if ax.images}
    assert pairs == {("phi (deg)", "psi (deg)"), ("phi (deg)", "omega (deg)"), ("psi (deg)", "omega (deg)")}
    assert {"density (1/deg)", "density of each pair (1/deg²)"} <= _labels(fig)
    with pytest.raises(InputError, match="marginal"):
        plot(space, x, model=_fit(space, x, steps=2), density="model")


def test_torus_one_angle(tmp_path):
    space = Torus(1)
    x = torch.as_tensor(lanternfold_torsions(300)[:, :1])
    fig = plot(space, x, x, columns=["chi1"], size=SIZE)
    _check_png(_save(fig, tmp_path), SIZE)
    assert {"chi1 (deg)", "density (1/deg)"} <= _labels(fig)


def test_sphere_map(tmp_path, sphere):
    space, x, model = sphere
    fig = plot(space, x, model=model, grid=16, size=SIZE)
    _check_png(_save(fig, tmp_path), SIZE)
    assert fig.axes[0].name == "mollweide"
    labels = _labels(fig)
    assert {"longitude (deg)", "latitude (deg)"} <= labels
    assert any(lab.startswith("density (1/sr") for lab in labels)
    fig = plot(space, x, space.random_uniform(200, _gen()), projection="hammer", size=SIZE)
    _check_png(_save(fig, tmp_path, "hammer.png"), SIZE)
    assert fig.axes[0].name == "hammer"
    with pytest.raises(InputError, match="map of S\\^2"):
        plot(Sphere(3), Sphere(3).random_uniform(10, _gen()))


def test_vmf_density_against_scipy():
    # reference: scipy.stats.vonmises_fisher (scipy >= 1.11); tolerance 1e-10 relative (float64 rounding)
    at = Sphere(2).random_uniform(50, _gen(3)).numpy()
    mu = np.array([0.0, 0.6, 0.8])
    for bandwidth in (5.0, 30.0):
        kappa = 1.0 / math.radians(bandwidth) ** 2
        ref = scipy.stats.vonmises_fisher(mu, kappa).pdf(at)
        np.testing.assert_allclose(vmf_density(at, mu[None], bandwidth), ref, rtol=1e-10, atol=1e-300)
    # the map's cells: density times exact cell solid angle Δλ (sin φ_hi - sin φ_lo) sums to 1 (grid error < 1e-3)
    lon_e, lat_e, centres = map_grid(96)
    dens = vmf_density(centres.reshape(-1, 3), Sphere(2).random_uniform(40, _gen(4)).numpy(), 8.0)
    area = np.diff(lon_e)[None, :] * np.diff(np.sin(lat_e))[:, None]
    assert (dens.reshape(centres.shape[:2]) * area).sum() == pytest.approx(1.0, abs=1e-3)


def test_rotations(tmp_path):
    space = SO3()
    x = space.sample_forward(torch.eye(3, dtype=torch.float64).expand(300, 3, 3), 0.5, _gen(5))
    fig = plot(space, x, space.random_uniform(300, _gen(6)), size=(800, 600))
    _check_png(_save(fig, tmp_path), (800, 600))
    labels = _labels(fig)
    assert {"axis longitude (deg)", "axis latitude (deg)", "rotation angle ω (deg)", "density (1/deg)"} <= labels
    assert sum(ax.name == "mollweide" for ax in fig.axes) == 2
    haar = [line for ax in fig.axes for line in ax.lines if "Haar" in str(line.get_label())]
    assert len(haar) == 1
    fig = plot(space, samples=x, degrees=False, size=SIZE)
    _check_png(_save(fig, tmp_path, "radians.png"), SIZE)
    assert {"rotation angle ω (rad)", "density (1/rad)"} <= _labels(fig)


def test_rotation_angles_and_axes_against_scipy():
    r = Rotation.random(2000, random_state=7)
    lonlat, angle, has_axis = axes_and_angles(torch.as_tensor(r.as_matrix()))
    # reference: scipy's rotation vectors (axis · angle); tolerance 1e-9 (float64 rounding near angle π)
    np.testing.assert_allclose(angle, r.magnitude(), atol=1e-9)
    axis = np.stack([np.cos(lonlat[:, 1]) * np.cos(lonlat[:, 0]), np.cos(lonlat[:, 1]) * np.sin(lonlat[:, 0]),
                     np.sin(lonlat[:, 1])], 1)
    np.testing.assert_allclose(axis * angle[:, None], r.as_rotvec(), atol=1e-8)
    assert has_axis.all()


def test_haar_angle_law_against_scipy_random_rotations():
    # reference: scipy's Haar-random rotations; chi-square of 18 bins against the drawn density integrated per bin,
    # failure rate 1e-6 (stat_thresholds)
    omega = Rotation.random(40000, random_state=11).magnitude()
    edges = np.linspace(0, math.pi, 19)
    observed, _ = np.histogram(omega, edges)
    expected = [scipy.integrate.quad(haar_angle_density, a, b)[0] * omega.size for a, b in zip(edges, edges[1:])]
    assert sum(expected) == pytest.approx(omega.size, rel=1e-12)
    assert scipy.stats.chisquare(observed, expected).pvalue > p_value_threshold(1e-6)


def test_ternary(tmp_path, simplex3):
    space, x, model = simplex3
    names = ["food", "rent", "leisure"]
    fig = plot(space, x, model=model, columns=names, grid=8, size=SIZE)
    _check_png(_save(fig, tmp_path), SIZE)
    labels = _labels(fig)
    assert set(names) <= labels and "0.5" in labels
    assert "density relative to the uniform law (1 = uniform)" in labels
    assert any(lab.startswith("shares of food, rent, leisure") for lab in labels)
    # the model cells are exp(log_prob)/2: relative to the uniform law, whose density is 2 on (x0, x1)
    _, _, centroids = triangle_cells(8)
    mesh = next(c for c in fig.axes[0].collections if c.get_array() is not None)
    expected = np.exp(model.log_prob(torch.as_tensor(centroids))["log_prob"].numpy()) / 2
    np.testing.assert_allclose(mesh.get_array(), expected, rtol=1e-4)
    fig = plot(space, x, x.flip(0), size=SIZE)
    _check_png(_save(fig, tmp_path, "samples.png"), SIZE)


def test_triangle_histogram_against_matplotlib_point_location():
    from matplotlib.tri import Triangulation

    x = scipy.stats.dirichlet([1.5, 0.8, 1.0]).rvs(3000, random_state=3)
    for m in (1, 2, 7):
        verts, tris, _ = triangle_cells(m)
        xy = ternary_xy(verts)
        finder = Triangulation(xy[:, 0], xy[:, 1], tris).get_trifinder()
        p = ternary_xy(x)
        cell = finder(p[:, 0], p[:, 1])
        assert (cell >= 0).all()
        ref = np.bincount(cell, minlength=m * m) * (m * m) / x.shape[0]
        np.testing.assert_array_equal(triangle_histogram(x, m), ref)


def test_log_ratio_panels(tmp_path):
    space = Simplex(5)
    x, y = space.prior_sample(300, _gen(1)), space.prior_sample(200, _gen(2))
    names = ["food", "fuel", "clothes", "travel", "other"]
    fig = plot(space, x, y, columns=names, size=(900, 600))
    _check_png(_save(fig, tmp_path), (900, 600))
    xl = {ax.get_xlabel() for ax in fig.axes} - {""}
    assert len(xl) == 10 and "log(food / fuel)" in xl and "log(travel / other)" in xl
    assert "density (per unit log-ratio)" in _labels(fig)
    # the histogram heights are numpy's density histogram of log(x0/x1)
    ax = next(a for a in fig.axes if a.get_xlabel() == "log(food / fuel)")
    v = np.log(x[:, 0].numpy() / x[:, 1].numpy())
    lo, hi = np.quantile(np.concatenate([v, np.log(y[:, 0].numpy() / y[:, 1].numpy())]), [0.005, 0.995])
    ref, _ = np.histogram(v, bins=40, range=(lo, hi), density=True)
    np.testing.assert_allclose(ax.patches[0].get_xy()[1:-1:2, 1][: ref.size], ref, rtol=1e-12)
    fig = plot(space, x, columns=names, pairs=[("food", "other"), (1, 2)], size=SIZE)
    assert {ax.get_xlabel() for ax in fig.axes} - {""} == {"log(food / other)", "log(fuel / clothes)"}
    with pytest.raises(InputError, match="ternary"):
        plot(space, x, density="samples")
    with pytest.raises(InputError, match="choose some"):
        plot(Simplex(9), Simplex(9).prior_sample(20, _gen()))


def test_sequences(tmp_path):
    space = Categories(4, 10, alphabet="ACGT")
    x = torch.randint(0, 4, (200, 10), generator=_gen(1))
    x[:, 2] = 1
    y = torch.randint(0, 4, (150, 10), generator=_gen(2))
    fig = plot(space, x, y, size=(800, 560))
    _check_png(_save(fig, tmp_path), (800, 560))
    labels = _labels(fig)
    assert {"position", "symbol", "frequency", "difference in frequency", "A", "C", "G", "T"} <= labels
    assert "sequence length (symbols)" not in labels                # every sequence has length 10: no lengths row
    data_map = next(ax for ax in fig.axes if ax.get_title().startswith("data")).images[0].get_array()
    # reference: plain-Python counting of symbol k at position l
    for l in (0, 2, 9):
        counts = Counter(int(v) for v in x[:, l])
        for k in range(4):
            assert data_map[k, l] == pytest.approx(counts[k] / 200, abs=1e-15)


def test_sequence_strings_and_padding(tmp_path):
    space = Categories(5, 6, alphabet="ACGT-")
    data = ["ACGT", "AC", "ACGTTA"]
    samples = torch.tensor([[0, 1, 4, 4, 4, 4], [0, 4, 1, 2, 4, 4]])
    fig = plot(space, data, samples, pad_symbol="-", size=SIZE)
    _check_png(_save(fig, tmp_path), SIZE)
    bars = {}
    ax = next(a for a in fig.axes if a.get_xlabel() == "sequence length (symbols)")
    for patch in ax.patches:
        bars.setdefault(patch.get_facecolor(), {})[round(patch.get_x() + patch.get_width() / 2)] = patch.get_height()
    heights = sorted(sorted((k, round(v, 6)) for k, v in b.items() if v > 0) for b in bars.values())
    # data lengths 4, 2, 6; samples 2 and 4 (trailing '-' is padding, the inner '-' counts)
    third = round(1 / 3, 6)
    assert heights == sorted([[(2, third), (4, third), (6, third)], [(2, 0.5), (4, 0.5)]])
    with pytest.raises(InputError, match="unknown symbol 'X'"):
        plot(space, ["ACX"])
    with pytest.raises(InputError, match="pad_symbol"):
        plot(space, data, pad_symbol="*")


def test_product_one_picture_per_factor(tmp_path, torus):
    _, x, _ = torus
    space = Product(Torus(2), Categories(4, 5, alphabet="ACGT"))
    pts = (x[:200], torch.randint(0, 4, (200, 5), generator=_gen()))
    fig = plot(space, pts, pts, factor_options=[{"columns": ["phi", "psi"]}, {}], size=(1100, 500))
    _check_png(_save(fig, tmp_path), (1100, 500))
    labels = _labels(fig)
    assert {"phi (deg)", "psi (deg)", "position", "symbol"} <= labels
    assert any(lab.startswith("factor 1: Categories") for lab in labels)
    with pytest.raises(InputError, match="joint"):
        plot(space, pts, factor_options=[{"density": "model"}, {}])
    with pytest.raises(InputError, match="takes no option 'degrees'"):
        plot(space, pts, factor_options=[{}, {"degrees": True}])
    fig = plot(space, pts, factor_options=[{}, {"columns": [f"site{i}" for i in range(5)]}])
    assert {"column", "site0", "site4"} <= _labels(fig) | {t.get_text() for ax in fig.axes for t in ax.get_xticklabels()}
    with pytest.raises(InputError, match="no picture"):
        plot(Product(_Unpictured(2), Torus(1)), (torch.zeros(3, 2), torch.zeros(3, 1)))


class _Unpictured(Euclidean):
    """A space of one's own that declares no picture."""

    plot_kind = None


# ----- the loss curve and log-likelihoods -----------------------------------------------------------------

def test_losses_are_kept_saved_and_drawn(tmp_path, torus):
    space, x, model = torus
    assert model.losses.shape == (20,) and torch.isfinite(model.losses).all()
    # the record's mean of the last steps is the mean of the kept losses (same values, two paths)
    assert model.record["mean_loss_last_100_steps"] == pytest.approx(float(model.losses.mean()), rel=1e-12)
    model.save(tmp_path / "m")
    lines = (tmp_path / "m" / "losses.csv").read_text().splitlines()
    assert lines[0] == "step,loss" and lines[1].startswith("1,") and len(lines) == 21
    back = heatwalk.load(tmp_path / "m")
    assert torch.equal(back.losses, model.losses)
    fig = plot_losses(back, size=SIZE)
    _check_png(_save(fig, tmp_path), SIZE)
    ax = fig.axes[0]
    assert ax.get_xlabel() == "training step" and ax.get_ylabel() == "training loss (score_matching objective)"
    np.testing.assert_array_equal(ax.lines[0].get_ydata(), model.losses.numpy())
    np.testing.assert_array_equal(ax.lines[0].get_xdata(), np.arange(1, 21))
    fig = plot_losses([3.0, 2.0, 1.5, 1.2] * 30, window=10, size=SIZE)
    _check_png(_save(fig, tmp_path, "list.png"), SIZE)
    assert fig.axes[0].lines[1].get_ydata()[0] == pytest.approx(np.mean(([3.0, 2.0, 1.5, 1.2] * 3)[:10]))


def test_losses_file_errors(tmp_path, torus):
    _, _, model = torus
    model.save(tmp_path / "m")
    path = tmp_path / "m" / "losses.csv"
    lines = path.read_text().splitlines()
    path.write_text("\n".join(lines[:3] + ["4,0.5"] + lines[4:]) + "\n")
    with pytest.raises(InputError, match="line 4: step 4, expected 3"):
        heatwalk.load(tmp_path / "m")
    path.write_text("\n".join(lines[:2] + ["2;0.5"]) + "\n")
    with pytest.raises(InputError, match="line 3: expected 'step,loss'"):
        heatwalk.load(tmp_path / "m")
    path.write_text("\n".join(lines[:2] + ["2,nan"]) + "\n")
    with pytest.raises(InputError, match="line 3: expected 'step,loss' \\(an integer and a finite number"):
        heatwalk.load(tmp_path / "m")
    path.unlink()
    old = heatwalk.load(tmp_path / "m")
    assert old.losses is None
    with pytest.raises(InputError, match="no per-step losses"):
        plot_losses(old)


def test_log_likelihood_histogram(tmp_path, torus):
    space, x, model = torus
    held = model.log_prob(x[:60])
    uniform = model.log_prob(space.random_uniform(60, _gen()))
    fig = plot_log_likelihoods({"held-out": held, "uniform": uniform}, size=SIZE)
    _check_png(_save(fig, tmp_path), SIZE)
    ax = fig.axes[0]
    assert ax.get_xlabel() == "log-likelihood per point (nats)" and ax.get_ylabel() == "density (1/nat)"
    means = sorted(line.get_xdata()[0] for line in ax.lines)
    assert means == pytest.approx(sorted([held["log_prob"].mean().item(), uniform["log_prob"].mean().item()]))
    bound = {"log_prob": torch.tensor([-4.0, -4.5, -3.9]), "bound": True}  # as a discrete model's log_prob
    fig = plot_log_likelihoods(bound, size=SIZE)
    assert fig.axes[0].get_xlabel() == "lower bound on the log-likelihood (−ELBO) per point (nats)"
    with pytest.raises(InputError, match="point 1"):
        plot_log_likelihoods(torch.tensor([0.0, math.nan]))


# ----- dispatch, options, files ----------------------------------------------------------------------------

def test_every_declared_kind_has_a_picture():
    for kind, cls in SPACE_KINDS.items():
        if cls.plot_kind is not None:
            assert cls.plot_kind in PLOT_KINDS, kind
    assert Euclidean.plot_kind == "coordinates"
    with pytest.raises(InputError, match="has no picture"):
        plot(_Unpictured(2), torch.zeros(4, 2))
    assert picture_options(Torus(2)) == ["density", "columns", "degrees", "grid", "bins", "smoothing", "color_scale",
                                         "max_points"]


def test_bad_options_and_arguments(torus):
    space, x, _ = torus
    with pytest.raises(InputError, match="takes no option 'bandwidth'; its options: density, columns"):
        plot(space, x, bandwidth=3.0)
    with pytest.raises(InputError, match="declares the picture 'angles', not 'directions'"):
        from heatwalk.frontend.plots import plot_directions
        plot_directions(space, x)
    with pytest.raises(InputError, match="columns: expected 2 names"):
        plot(space, x, columns=["phi"])
    with pytest.raises(InputError, match="density='model' needs a model"):
        plot(space, x, density="model")
    with pytest.raises(InputError, match="nothing to draw"):
        plot_angles(space)
    with pytest.raises(InputError, match="samples: angles: row 1"):
        plot(space, x, torch.tensor([[0.0, 0.0], [math.nan, 0.0]]))
    with pytest.raises(InputError, match="fitted on"):
        plot(space, x, model=_fit(Torus(1), x[:, :1], steps=2))
    with pytest.raises(InputError, match="size must be"):
        plot(space, x, size=640)


def test_save_figure_formats(tmp_path, torus):
    space, x, _ = torus
    fig = plot(space, x, size=SIZE)
    _check_png(save_figure(fig, tmp_path / "a.PNG"), SIZE)
    assert save_figure(fig, tmp_path / "a.svg").read_text()[:400].find("<svg") >= 0
    assert save_figure(fig, tmp_path / "a.pdf").read_bytes()[:5] == b"%PDF-"
    with pytest.raises(InputError, match="unknown picture format '.jpg'"):
        save_figure(fig, tmp_path / "a.jpg")
    with pytest.raises(InputError, match="already exists"):
        save_figure(fig, tmp_path / "a.svg")
    save_figure(fig, tmp_path / "a.svg", overwrite=True)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.PNG", "a.pdf", "a.svg"]  # no temporary files left


def test_plot_data_and_samples_still_writes(tmp_path, torus):
    space, x, _ = torus
    path = plot_data_and_samples(space, x, x.flip(0), tmp_path / "pic.png", title="data vs samples")
    _check_png(path, (1100, 506))
    assert plot_data_and_samples(Sphere(3), Sphere(3).random_uniform(5, _gen()),
                                 Sphere(3).random_uniform(5, _gen()), tmp_path / "none.png") is None
