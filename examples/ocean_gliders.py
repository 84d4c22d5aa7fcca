"""Headings of a fictional fleet of ocean gliders, as directions on the sphere S^2.

Invented scenario: the "Brinewake" survey runs autonomous gliders that surface
and report the unit vector (in an Earth-fixed frame) of their current heading
relative to their home buoy. Three survey legs give three clusters of
directions; one leg sweeps along a parallel of latitude. We fit heatwalk on S^2,
sample, and draw data against samples in longitude/latitude.

    python examples/ocean_gliders.py [OUT_DIR] [--steps N]
"""

import argparse
import math
from pathlib import Path

import numpy as np
import torch

import heatwalk
from heatwalk.io.tables import write_points
from heatwalk.frontend.metrics import mmd_with_floor
from heatwalk.frontend.plots import plot_data_and_samples
from heatwalk.spaces import Sphere


def brinewake_headings(n, seed=0):
    """Invented data: two tight clusters and one arc of headings (unit vectors in R^3)."""
    rng = np.random.default_rng(seed)
    comp = rng.choice(3, size=n, p=[0.4, 0.3, 0.3])
    out = np.empty((n, 3))
    for k, (lat, lon, spread) in enumerate([(20.0, -40.0, 0.12), (-35.0, 70.0, 0.08)]):
        idx = np.flatnonzero(comp == k)
        la, lo = math.radians(lat), math.radians(lon)
        c = np.array([math.cos(la) * math.cos(lo), math.cos(la) * math.sin(lo), math.sin(la)])
        v = c + spread * rng.standard_normal((idx.size, 3))
        out[idx] = v / np.linalg.norm(v, axis=1, keepdims=True)
    idx = np.flatnonzero(comp == 2)  # an arc: longitude sweeps 120..200 degrees near latitude 50 degrees
    lon = np.radians(rng.uniform(120, 200, idx.size))
    lat = np.radians(50 + 4 * rng.standard_normal(idx.size))
    out[idx] = np.stack([np.cos(lat) * np.cos(lon), np.cos(lat) * np.sin(lon), np.sin(lat)], 1)
    return out


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("out", nargs="?", default="example-output/ocean_gliders")
    ap.add_argument("--steps", type=int, default=2500)
    a = ap.parse_args()
    out = Path(a.out)
    out.mkdir(parents=True, exist_ok=True)
    space = Sphere(2)
    data = space.validate(brinewake_headings(5000))
    train, held_a, held_b = data[:3000], data[3000:4000], data[4000:]
    model = heatwalk.fit(space, train, steps=a.steps, batch_size=512)
    samples = model.sample(1000, steps=300, sampler="predictor_corrector")
    m = mmd_with_floor(space, samples, held_a, held_b, bandwidth=0.3)
    u = mmd_with_floor(space, space.random_uniform(1000, torch.Generator().manual_seed(1)), held_a, held_b,
                       bandwidth=0.3)
    print(f"MMD^2 (bandwidth 0.3 rad): model {m['mmd2']:.5f}, uniform {u['mmd2']:.5f}, floor {m['floor']:.5f}")
    write_points(out / "samples_lonlat.csv", space, samples, lonlat=True, overwrite=True)
    print("wrote", plot_data_and_samples(space, train, samples, out / "headings.png",
                                         title="Brinewake glider headings: data vs samples"))


if __name__ == "__main__":
    main()
