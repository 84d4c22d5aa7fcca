"""Real data on S^2: the 50 world cities that ship inside geomstats.

Provenance: geomstats (MIT licence) ships `datasets/data/cities/cities.json`
with the latitude and longitude (degrees) of 50 large cities; we read the
JSON directly with our own latitude/longitude reader (heatwalk's
`lonlat` option) rather than geomstats' converter, so the frame is
the usual one (x towards latitude 0, longitude 0; z to the north pole).
With 50 points this is a small-data illustration: the model's samples
spread around the populated regions.

    python examples/world_cities.py [OUT_DIR] [--steps N]
"""

import argparse
import json
from pathlib import Path

import numpy as np

import heatwalk
from heatwalk.frontend.plots import plot_data_and_samples
from heatwalk.spaces import Sphere


def load_city_latlon():
    from geomstats.datasets.utils import CITIES_PATH

    rows = json.loads(Path(CITIES_PATH).read_text(encoding="utf-8"))
    return np.array([[r["lat"], r["lng"]] for r in rows], dtype=float), [r["city"] for r in rows]


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("out", nargs="?", default="example-output/world_cities")
    ap.add_argument("--steps", type=int, default=1500)
    a = ap.parse_args()
    out = Path(a.out)
    out.mkdir(parents=True, exist_ok=True)
    latlon, names = load_city_latlon()
    space = Sphere(2)
    x = space.from_rows(latlon[:, ::-1].copy(), lonlat=True)  # lonlat reads longitude, latitude
    print(f"loaded {len(names)} cities from geomstats, e.g. {', '.join(names[:3])}")
    model = heatwalk.fit(space, x, steps=a.steps, batch_size=50, network={"hidden": 128, "depth": 3})
    samples = model.sample(1000, steps=300)
    print("wrote", plot_data_and_samples(space, x, samples, out / "cities.png",
                                         title="geomstats world cities: data vs samples"))


if __name__ == "__main__":
    main()
