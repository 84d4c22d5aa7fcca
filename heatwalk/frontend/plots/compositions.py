"""Pictures of compositions (the simplex): a ternary diagram for K = 3 parts, log-ratio panels otherwise.

Ternary diagram (K = 3): part 0 at the lower-left corner (0, 0), part 1 at the lower-right (1, 0),
part 2 at the top (1/2, √3/2); a composition x sits at x_1 (1, 0) + x_2 (1/2, √3/2). Grid lines mark
every 0.1 of each part, with that part's values along one edge (part 0 on the bottom edge, part 1
on the right, part 2 on the left). The triangle is cut into ``grid``² equal small triangles (each
side in ``grid`` pieces), and the density is shown *relative to the uniform law* on the simplex
(1 = uniform; the uniform law has density 2 w.r.t. Lebesgue measure on (x_0, x_1)), from one of
(``density``; the title says which):

- ``"model"``: exp(``model.log_prob``) / 2 at the centroid of each small triangle (``log_prob`` is
  w.r.t. Lebesgue measure on the first K-1 parts, as scipy.stats.dirichlet);
- ``"samples"`` / ``"data"``: a histogram over the small triangles, (count / n) · grid².

Other K: one panel per pair of parts i < j with the histograms of the log-ratio log(x_i / x_j)
(natural log) of the data and of the samples, per unit of log-ratio; ``pairs`` picks the pairs.
"""

from __future__ import annotations

import math

import numpy as np
import torch

from heatwalk.checks import check_int
from heatwalk.errors import InputError
from heatwalk.frontend.plots.figures import (
    COLOR_SCALE_OPTION, DATA_COLOUR, DENSITY_OPTION, MAX_POINTS_OPTION, OVERLAY_COLOUR, SAMPLES_COLOUR,
    check_model_space, check_names, choose_density, density_cmap,
    density_norm, log_prob_on, points, render, spread,
)
from heatwalk.spaces.base import Option

#: the most log-ratio panels drawn without an explicit ``pairs``
MAX_PAIRS = 28
_H = math.sqrt(3) / 2


#: the options the command line offers (``columns`` follows the data file's columns)
OPTIONS = (
    DENSITY_OPTION,
    Option("grid", int, "pieces of each side of the ternary diagram (grid^2 small triangles)", default=24,
           metavar="N"),
    Option("pairs", str, "log-ratio panels for K != 3 parts, e.g. 0/1,0/2 or food/fuel (indices or column names)",
           metavar="I/J,..."),
    Option("bins", int, "bins of each log-ratio histogram", default=40, metavar="N"),
    COLOR_SCALE_OPTION,
    MAX_POINTS_OPTION,
)


def shows_model_density(space) -> bool:
    """The ternary diagram (K = 3) shows a model's density; the log-ratio panels show point sets."""
    return space.K == 3


def default_size(space) -> tuple[int, int]:
    if space.K == 3:
        return (760, 680)
    rows, cols = _panel_grid(min(space.K * (space.K - 1) // 2, MAX_PAIRS))
    return (270 * cols + 60, 230 * rows + 60)


def _panel_grid(p: int) -> tuple[int, int]:
    cols = min(5, math.ceil(math.sqrt(p)))
    return math.ceil(p / cols), cols


def ternary_xy(x: np.ndarray) -> np.ndarray:
    """Plane coordinates (m, 2) of 3-part compositions (m, 3) in the ternary diagram."""
    return np.stack([x[:, 1] + 0.5 * x[:, 2], _H * x[:, 2]], 1)


def triangle_cells(m: int):
    """The m² small triangles: vertex compositions (V, 3), triangles (m², 3) vertex indices, centroids (m², 3)."""
    index, verts = {}, []
    for a in range(m + 1):
        for b in range(m + 1 - a):
            index[(a, b)] = len(verts)
            verts.append((1 - (a + b) / m, a / m, b / m))
    tris = [(index[a, b], index[a + 1, b], index[a, b + 1]) for a in range(m) for b in range(m - a)]
    tris += [(index[a + 1, b], index[a + 1, b + 1], index[a, b + 1]) for a in range(m - 1) for b in range(m - 1 - a)]
    verts, tris = np.array(verts), np.array(tris)
    return verts, tris, verts[tris].mean(1)


def triangle_histogram(x: np.ndarray, m: int) -> np.ndarray:
    """Counts of compositions (n, 3) in the cells of :func:`triangle_cells` (same order), as density vs uniform."""
    u, w = x[:, 1] * m, x[:, 2] * m
    a = np.clip(np.floor(u), 0, m - 1).astype(int)
    b = np.clip(np.floor(w), 0, m - 1 - a).astype(int)
    up = ((u - a) + (w - b) < 1) | (a + b >= m - 1)
    n_up = m * (m + 1) // 2
    # offsets of upward triangle (a, b) and downward triangle (a, b) in the order triangle_cells lists them
    up_start = np.concatenate([[0], np.cumsum([m - a for a in range(m)])]).astype(np.int64)
    down_start = np.concatenate([[0], np.cumsum([m - 1 - a for a in range(max(m - 1, 0))])]).astype(np.int64)
    down_a = np.minimum(a, max(m - 2, 0))
    cell = np.where(up, up_start[a] + b, n_up + down_start[down_a] + b)
    counts = np.bincount(cell, minlength=m * m)
    return counts * (m * m) / x.shape[0]


def draw_compositions(fig, space, data, samples, *, model=None, density=None, columns=None, grid: int = 24,
                      pairs=None, bins: int = 40, color_scale: str = "linear", max_points: int = 3000) -> None:
    """Ternary diagram (K = 3) or log-ratio panels (other K); see the module docstring."""
    check_model_space(model, space)
    names = check_names(columns, space.K, space.column_names(), "parts")
    data, samples = points(space, data, "data"), points(space, samples, "samples")
    if space.K == 3:
        if pairs is not None:
            raise InputError("pairs applies to the log-ratio panels of K != 3 parts; K = 3 is a ternary diagram",
                             field="pairs")
        density_norm(color_scale, 1.0)  # checks the choice before any work
        _ternary(fig.add_subplot(), fig, space, data, samples, model, density, names,
                 check_int("grid", grid, minimum=2), color_scale, max_points)
        return
    if density is not None:
        raise InputError(f"density applies to the ternary diagram of K = 3 parts; {space!r} is drawn as "
                         "histograms of log-ratios", field="density")
    sets = [(n, x) for n, x in (("data", data), ("samples", samples)) if x is not None]
    if not sets:
        raise InputError("the log-ratio panels draw point sets: give data or samples", field="data")
    _log_ratios(fig, sets, _pairs(pairs, names), names, check_int("bins", bins, minimum=2))


def _pairs(pairs, names) -> list[tuple[int, int]]:
    K = len(names)
    if pairs is None:
        every = [(i, j) for i in range(K) for j in range(i + 1, K)]
        if len(every) > MAX_PAIRS:
            raise InputError(f"{K} parts give {len(every)} log-ratio panels (more than {MAX_PAIRS}); choose some "
                             "with pairs=[(i, j), ...] (indices or part names)", field="pairs")
        return every
    if isinstance(pairs, str):  # "0/1,0/2" or "food/fuel" (the command line's spelling)
        pairs = [tuple(int(v) if v.strip().isdigit() else v.strip() for v in p.split("/")) for p in pairs.split(",")]
        if any(len(p) != 2 for p in pairs):
            raise InputError(f"pairs: expected I/J,I/J,... (part indices or names), got {pairs!r}", field="pairs")
    out = []
    for p in pairs:
        try:
            i, j = (names.index(v) if isinstance(v, str) else int(v) for v in p)
        except (ValueError, TypeError):
            raise InputError(f"pairs: {p!r} is not a pair of part indices or names ({names})", field="pairs") from None
        if not (0 <= i < K and 0 <= j < K) or i == j:
            raise InputError(f"pairs: {p!r} must name two different parts among 0 … {K - 1}", field="pairs")
        out.append((i, j))
    if not out:
        raise InputError("pairs: expected at least one pair", field="pairs")
    return out


def _log_ratios(fig, sets, pairs, names, bins: int) -> None:
    rows, cols = _panel_grid(len(pairs))
    axes = fig.subplots(rows, cols, squeeze=False).reshape(-1)
    for ax in axes[len(pairs):]:
        ax.set_axis_off()
    logs = {name: torch.log(x).numpy() for name, x in sets}
    for ax, (i, j) in zip(axes, pairs):
        values = {name: lx[:, i] - lx[:, j] for name, lx in logs.items()}
        every = np.concatenate(list(values.values()))
        lo, hi = np.quantile(every, [0.005, 0.995])
        lo, hi = (lo - 0.5, hi + 0.5) if hi - lo < 1e-9 else (lo, hi)
        for name, v in values.items():
            data_set = name == "data"
            ax.hist(v, bins=bins, range=(lo, hi), density=True, histtype="stepfilled" if data_set else "step",
                    color=DATA_COLOUR if data_set else SAMPLES_COLOUR, alpha=0.4 if data_set else 1.0, lw=1.8,
                    label=f"{name} (n={v.shape[0]})")
        ax.set_xlabel(f"log({names[i]} / {names[j]})")
        ax.set_ylabel("density (per unit log-ratio)")
        ax.tick_params(labelsize="small")
    axes[0].legend(fontsize="x-small")


def _ternary(ax, fig, space, data, samples, model, density, names, m: int, color_scale: str,
             max_points: int) -> None:
    from matplotlib.tri import Triangulation

    source = choose_density(density, data=data, samples=samples, model=model)
    verts, tris, centroids = triangle_cells(m)
    if source == "model":
        values = np.exp(log_prob_on(model, torch.as_tensor(centroids))) / 2.0
        how = f"model density exp(log_prob) at the centres of {m * m} small triangles"
    else:
        pts = (samples if source == "samples" else data).numpy()
        values = triangle_histogram(pts, m)
        how = f"{source} density: histogram of {pts.shape[0]} points over {m * m} equal small triangles"
    xy = ternary_xy(verts)
    mesh = ax.tripcolor(Triangulation(xy[:, 0], xy[:, 1], tris), facecolors=values, cmap=density_cmap(),
                        norm=density_norm(color_scale, float(values.max())), edgecolors="none", rasterized=True)
    fig.colorbar(mesh, ax=ax, label="density relative to the uniform law (1 = uniform)", shrink=0.8)
    _ternary_frame(ax, names)
    if data is not None:
        shown = ternary_xy(data[torch.as_tensor(spread(data.shape[0], max_points))].numpy())
        ax.scatter(shown[:, 0], shown[:, 1], s=4 if shown.shape[0] < 1000 else 1.5, lw=0, alpha=0.6,
                   color=OVERLAY_COLOUR, label=f"data ({shown.shape[0]} shown)", zorder=3)
        ax.legend(loc="upper right", fontsize="x-small", markerscale=3, framealpha=0.7)
    ax.set_title(how, fontsize="small")


def _ternary_frame(ax, names) -> None:
    """Outline, grid lines every 0.1 of each part with their values on one edge, corner labels, caption."""
    corners = np.array([[0.0, 0.0], [1.0, 0.0], [0.5, _H]])
    ax.plot(*np.vstack([corners, corners[:1]]).T, color="0.2", lw=1.2)
    for p in range(3):
        q, r = (p + 1) % 3, (p + 2) % 3  # ticks of part p on the edge where part r is 0
        for v in np.arange(1, 10) / 10:
            ends = np.zeros((2, 3))
            ends[:, p] = v
            ends[0, q], ends[1, r] = 1 - v, 1 - v
            seg = ternary_xy(ends)
            ax.plot(seg[:, 0], seg[:, 1], color="0.55", lw=0.5, alpha=0.8)
            at = seg[0] + 0.035 * (seg[0] - np.array([0.5, _H / 3])) / np.linalg.norm(seg[0] - [0.5, _H / 3])
            ax.text(at[0], at[1], f"{v:.1f}", fontsize="x-small", color="0.35", ha="center", va="center")
    offsets = [(-0.04, -0.05, "right"), (0.04, -0.05, "left"), (0.0, 0.05, "center")]
    for (x, y), (dx, dy, ha), name in zip(corners, offsets, names):
        ax.text(x + dx, y + dy, name, ha=ha, va="center", fontsize="medium", fontweight="bold")
    ax.set_aspect("equal")
    ax.set_xlim(-0.16, 1.16)
    ax.set_ylim(-0.12, _H + 0.1)
    ax.set_xticks([])
    ax.set_yticks([])
    for side in ax.spines.values():
        side.set_visible(False)
    ax.set_xlabel(f"shares of {names[0]}, {names[1]}, {names[2]} (each is 1 at its corner; grid every 0.1)")


def plot_compositions(space, data=None, samples=None, *, model=None, size=None, dpi: int = 100, title: str = "",
                      **options):
    """A Figure of compositions: ternary diagram for K = 3, log-ratio histograms otherwise (module docstring).

    Options: ``columns`` (K part names), ``density`` ("model", "samples" or "data"; K = 3 only),
    ``grid`` (ternary: pieces per side), ``pairs`` (log-ratio panels: pairs of part indices or names),
    ``bins`` (log-ratio histograms), ``color_scale`` ("linear" or "log"; ternary), ``max_points`` (data
    points drawn). ``size`` in pixels.
    """
    return render("compositions", draw_compositions, default_size, space, data, samples, model, size, dpi,
                  title, options)
