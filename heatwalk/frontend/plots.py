"""Pictures of data against samples.

A space can offer ``plot_coordinates(x) -> (coords (n, 2) numpy, (xlabel, ylabel), (xlim, ylim))``;
:func:`plot_data_and_samples` draws a side-by-side scatter of the two sets in
those coordinates (angles for a torus, longitude/latitude for S², …). Spaces
without it get no picture, and the caller is told so (``None`` is returned).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from heatwalk.io.atomic import atomic_path


def default_plot_coordinates(space, x):
    cfg = space.config()
    if cfg["kind"] == "torus":
        a = x[:, :2].numpy() if space.n >= 2 else np.stack([x[:, 0].numpy(), np.zeros(x.shape[0])], 1)
        lim = (-math.pi, math.pi)
        return a, ("angle 0 (rad)", "angle 1 (rad)" if space.n >= 2 else ""), (lim, lim)
    if cfg["kind"] == "sphere" and cfg["d"] == 2:
        v = x.numpy()
        lat = np.degrees(np.arcsin(np.clip(v[:, 2], -1, 1)))
        lon = np.degrees(np.arctan2(v[:, 1], v[:, 0]))
        return np.stack([lon, lat], 1), ("longitude (deg)", "latitude (deg)"), ((-180, 180), (-90, 90))
    if cfg["kind"] == "so3":
        # rotation axis direction as longitude/latitude (the angle is not shown)
        r = x.numpy()
        axis = np.stack([r[:, 2, 1] - r[:, 1, 2], r[:, 0, 2] - r[:, 2, 0], r[:, 1, 0] - r[:, 0, 1]], 1)
        axis /= np.maximum(np.linalg.norm(axis, axis=1, keepdims=True), 1e-12)
        lat = np.degrees(np.arcsin(np.clip(axis[:, 2], -1, 1)))
        lon = np.degrees(np.arctan2(axis[:, 1], axis[:, 0]))
        return np.stack([lon, lat], 1), ("axis longitude (deg)", "axis latitude (deg)"), ((-180, 180), (-90, 90))
    return None


def plot_data_and_samples(space, data, samples, path, title: str = "", max_points: int = 5000):
    """Write a PNG with data (left) and samples (right); returns the path, or None if the space has no picture."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    coords = getattr(space, "plot_coordinates", None)
    get = coords if coords is not None else (lambda x: default_plot_coordinates(space, x))
    a = get(data[:max_points])
    b = get(samples[:max_points])
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
