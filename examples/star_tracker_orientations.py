"""Attitudes of a fictional survey satellite: fit a diffusion model on SO(3), sample, plot, write quaternions.

Scenario (invented): the small survey satellite *Tern-3* logs the attitude its
star tracker solves for (body-to-inertial rotation R; the tracker boresight is
the body +z axis) once per minute. Over a month the log falls into four
attitude modes:

    survey     (45%)  inertial pointing at the survey field, tight jitter
                      (Brownian motion on SO(3) for time 0.004: rms angle ≈ 0.11 rad)
    downlink   (25%)  pointed at the ground-station pass, looser (time 0.02: ≈ 0.24 rad)
    calibrate  (15%)  pointed at a calibration star field, tight (time 0.003)
    safe-spin  (15%)  sun-pointing safe mode: +z held on the sun line while the
                      body spins about it at a uniformly random phase, plus jitter (time 0.002)

The safe-spin mode is a ring (a circle of rotations), not a blob, so the
model has to learn more than three point masses. The modes are drawn with
the space's exact heat-kernel sampler ``SO3().sample_forward`` around fixed
centres. The script fits ``heatwalk.fit``, samples, reports an MMD (Gaussian
kernel in the rotation angle, bandwidth 0.3 rad) of the samples and of Haar
rotations against held-out log entries, the share of each mode, and writes

    OUT/attitude_log.csv      the training log, unit quaternions (qw, qx, qy, qz)
    OUT/samples.csv           model samples, unit quaternions (qw, qx, qy, qz), w ≥ 0
    OUT/body_axes.png         where each body axis points (longitude/latitude), log vs samples
    OUT/rotation_vectors.png  the rotation vector (axis · angle) projected on three planes
    OUT/model/                the fitted model (heatwalk.load reads it back)

    python examples/star_tracker_orientations.py [OUT] [--steps 2000] [--seed 0]

OUT defaults to ./example-output. Runs in about a minute on one CPU core.
"""

from __future__ import annotations

import argparse
import math
from pathlib import Path

import numpy as np
import torch

import heatwalk
from heatwalk.io.atomic import atomic_path
from heatwalk.io.tables import write_points
from heatwalk.frontend.metrics import mmd_with_floor
from heatwalk.spaces import SO3
from heatwalk.spaces.so3 import exp_so3

F64 = torch.float64
# mode name: (share, centre as a rotation vector in radians, jitter time, spins about the boresight)
MODES = {
    "survey": (0.45, (0.3, -0.9, 0.4), 0.004, False),
    "downlink": (0.25, (2.1, 0.2, -0.6), 0.02, False),
    "calibrate": (0.15, (-1.0, 1.6, 1.2), 0.003, False),
    "safe-spin": (0.15, (0.0, 1.1, 0.0), 0.002, True),
}
BANDWIDTH = 0.3


def attitude_log(space: SO3, n: int, seed: int) -> tuple[torch.Tensor, torch.Tensor]:
    """n log entries (n, 3, 3) and their mode index."""
    g = torch.Generator().manual_seed(seed)
    shares = torch.tensor([m[0] for m in MODES.values()], dtype=F64)
    mode = torch.multinomial(shares, n, replacement=True, generator=g)
    centres = exp_so3(torch.tensor([m[1] for m in MODES.values()], dtype=F64))[mode]
    spin = torch.tensor([m[3] for m in MODES.values()])[mode]
    phase = 2 * math.pi * torch.rand(n, dtype=F64, generator=g)
    about_z = exp_so3(torch.stack([torch.zeros_like(phase), torch.zeros_like(phase), phase], -1))
    # body-to-inertial R: a spin about the body z axis is R -> R Rz(phase), which keeps R e_z fixed
    centres = torch.where(spin[:, None, None], centres @ about_z, centres)
    jitter = torch.tensor([m[2] for m in MODES.values()], dtype=F64)[mode]
    return space.sample_forward(centres, jitter, g), mode


def nearest_mode(space: SO3, x: torch.Tensor) -> torch.Tensor:
    """Mode whose centre set is closest (for safe-spin: the angle between boresight and the sun line)."""
    d = []
    for _, centre, _, spins in MODES.values():
        c = exp_so3(torch.tensor(centre, dtype=F64)).expand_as(x)
        if spins:
            cz, xz = c[..., :, 2], x[..., :, 2]
            d.append(torch.acos((cz * xz).sum(-1).clamp(-1, 1)))
        else:
            d.append(space.dist(c, x))
    return torch.stack(d, -1).argmin(-1)


def lon_lat(v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    return np.degrees(np.arctan2(v[:, 1], v[:, 0])), np.degrees(np.arcsin(np.clip(v[:, 2], -1, 1)))


def save_figure(fig, path: Path) -> None:
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=110, format="png")


def plot_body_axes(data: torch.Tensor, samples: torch.Tensor, path: Path) -> None:
    import matplotlib.pyplot as plt

    fig, axes = plt.subplots(2, 3, figsize=(13, 6.2), sharex=True, sharey=True)
    for row, (x, name) in enumerate(((data, "attitude log"), (samples, "model samples"))):
        r = x.numpy()
        for col, axis_name in enumerate(("body +x", "body +y", "body +z (boresight)")):
            lon, lat = lon_lat(r[:, :, col])  # column i of R: body axis i in inertial coordinates
            ax = axes[row, col]
            ax.scatter(lon, lat, s=2, alpha=0.35, lw=0)
            ax.set_xlim(-180, 180)
            ax.set_ylim(-90, 90)
            ax.set_title(f"{name}: {axis_name}", fontsize=10)
            if row == 1:
                ax.set_xlabel("inertial longitude (deg)")
            if col == 0:
                ax.set_ylabel("inertial latitude (deg)")
    fig.suptitle("Tern-3: where the body axes point")
    fig.tight_layout()
    save_figure(fig, path)
    plt.close(fig)


def plot_rotation_vectors(space: SO3, data: torch.Tensor, samples: torch.Tensor, path: Path) -> None:
    import matplotlib.pyplot as plt

    fig, axes = plt.subplots(1, 3, figsize=(13, 4.9))
    dv = space.to_rows(data, rotation_format="rotvec").numpy()
    sv = space.to_rows(samples, rotation_format="rotvec").numpy()
    for ax, (i, j) in zip(axes, ((0, 1), (0, 2), (1, 2))):
        ax.scatter(dv[:, i], dv[:, j], s=2, alpha=0.3, lw=0, label="attitude log")
        ax.scatter(sv[:, i], sv[:, j], s=2, alpha=0.3, lw=0, label="model samples")
        ax.set_xlim(-math.pi, math.pi)
        ax.set_ylim(-math.pi, math.pi)
        ax.set_aspect("equal")
        ax.set_xlabel(f"rotation vector {'xyz'[i]} (rad)")
        ax.set_ylabel(f"rotation vector {'xyz'[j]} (rad)")
    axes[0].legend(markerscale=6, loc="lower left", fontsize=8)
    fig.suptitle("Tern-3: rotation vectors (axis × angle), ball of radius π")
    fig.tight_layout()
    save_figure(fig, path)
    plt.close(fig)


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("out", nargs="?", default="example-output", help="output folder (default: ./example-output)")
    ap.add_argument("--steps", type=int, default=2000, help="training steps (default 2000)")
    ap.add_argument("--seed", type=int, default=0)
    args = ap.parse_args()
    torch.set_num_threads(1)
    import matplotlib

    matplotlib.use("Agg")

    space = SO3()
    train, _ = attitude_log(space, 4000, seed=args.seed + 1)
    held_a, mode_a = attitude_log(space, 1000, seed=args.seed + 2)
    held_b, _ = attitude_log(space, 1000, seed=args.seed + 3)

    model = heatwalk.fit(space, train, steps=args.steps, batch_size=256, seed=args.seed,
                         network={"hidden": 256, "depth": 3})
    print(f"trained {args.steps} steps in {model.record['train_seconds']:.0f} s "
          f"(mean loss of the last 100 steps {model.record['mean_loss_last_100_steps']:.4f})")
    samples = model.sample(2000, steps=300, seed=args.seed + 4)
    haar = space.random_uniform(1000, torch.Generator().manual_seed(args.seed + 5))

    m = mmd_with_floor(space, samples[:1000], held_a, held_b, bandwidth=BANDWIDTH)
    u = mmd_with_floor(space, haar, held_a, held_b, bandwidth=BANDWIDTH)
    print(f"MMD² vs held-out log (Gaussian kernel in rotation angle, h = {BANDWIDTH} rad): "
          f"model {m['mmd2']:.4f}, Haar {u['mmd2']:.4f}, noise floor {m['floor']:.4f}")
    share_model = torch.bincount(nearest_mode(space, samples), minlength=len(MODES)).double() / len(samples)
    share_held = torch.bincount(nearest_mode(space, held_a), minlength=len(MODES)).double() / len(held_a)
    print("mode shares (nearest mode):    design   held-out   samples")
    for k, (name, (share, *_)) in enumerate(MODES.items()):
        print(f"  {name:<12}                 {share:5.2f}     {share_held[k]:6.3f}    {share_model[k]:6.3f}")

    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    quaternions = {"rotation_format": "quaternion", "quaternion_order": "wxyz"}
    write_points(out / "attitude_log.csv", space, train, overwrite=True, **quaternions)
    write_points(out / "samples.csv", space, samples, overwrite=True, **quaternions)
    plot_body_axes(train[:2000], samples, out / "body_axes.png")
    plot_rotation_vectors(space, train[:2000], samples, out / "rotation_vectors.png")
    model.save(out / "model", overwrite=True)
    print(f"wrote {out / 'samples.csv'}, {out / 'attitude_log.csv'}, {out / 'body_axes.png'}, "
          f"{out / 'rotation_vectors.png'} and {out / 'model'}")


if __name__ == "__main__":
    main()
