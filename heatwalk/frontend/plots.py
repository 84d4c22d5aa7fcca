"""Pictures of data against samples.

Every space offers ``plot_coordinates(x) -> (coords (n, 2) numpy, (xlabel,
ylabel), (xlim, ylim))`` or None (no 2-D picture): angles for a torus,
longitude/latitude for S², rotation axes for SO(3), the ternary diagram for a
3-part simplex. :func:`plot_data_and_samples` draws a side-by-side scatter of
the two sets in those coordinates.
"""

from __future__ import annotations

from pathlib import Path

from heatwalk.io.atomic import atomic_path


def plot_data_and_samples(space, data, samples, path, title: str = "", max_points: int = 5000):
    """Write a PNG with data (left) and samples (right); returns the path, or None if the space has no picture."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    a = space.plot_coordinates(data[:max_points])
    b = space.plot_coordinates(samples[:max_points])
    if a is None or b is None:
        return None
    (pa, labels, lims), (pb, _, _) = a, b
    fig, axes = plt.subplots(1, 2, figsize=(10, 4.6), sharex=True, sharey=True)
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
    fig.tight_layout()
    path = Path(path)
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=110, format="png")
    plt.close(fig)
    return path
