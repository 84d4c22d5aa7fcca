"""Scatter of data beside samples in the 2-D coordinates a space offers.

Every space offers ``plot_coordinates(x) -> (coords (n, 2) numpy, (xlabel, ylabel), (xlim, ylim))``
or None (no 2-D picture): angles for a torus, longitude/latitude for S², rotation axes for SO(3),
the ternary diagram for a 3-part simplex. :func:`plot_data_and_samples` draws a side-by-side
scatter of the two sets in those coordinates (the pictures of :func:`heatwalk.frontend.plots.plot`
are the fuller ones).
"""

from __future__ import annotations

from pathlib import Path

from heatwalk.frontend.plots.figures import new_figure, save_figure


def plot_data_and_samples(space, data, samples, path, title: str = "", max_points: int = 5000):
    """Write a PNG with data (left) and samples (right); returns the path, or None if the space has no picture.

    An existing file at ``path`` is replaced.
    """
    a = space.plot_coordinates(data[:max_points])
    b = space.plot_coordinates(samples[:max_points])
    if a is None or b is None:
        return None
    (pa, labels, lims), (pb, _, _) = a, b
    fig = new_figure((1100, 506), dpi=110)
    axes = fig.subplots(1, 2, sharex=True, sharey=True)
    for ax, pts, name in ((axes[0], pa, f"data (n={len(data)})"), (axes[1], pb, f"samples (n={len(samples)})")):
        ax.scatter(pts[:, 0], pts[:, 1], s=2, alpha=0.4, lw=0)
        ax.set_title(name)
        ax.set_xlabel(labels[0])
        ax.set_xlim(*lims[0])
        ax.set_ylim(*lims[1])
        ax.set_aspect("equal" if lims[0] == lims[1] else "auto")
    axes[0].set_ylabel(labels[1])
    if title:
        fig.suptitle(title)
    return save_figure(fig, Path(path), overwrite=True)
