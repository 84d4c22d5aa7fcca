"""Real backbone torsions with their residue names: one joint model of (phi, psi) and the residue.

Data: protein structures that ship as test files inside the MDAnalysisTests
package (``pip install MDAnalysis MDAnalysisTests``, heatwalk's optional ``data``
extra), by their MDAnalysisTests names: ``PDB_small`` (adk_open.pdb, adenylate
kinase 4AKE), ``CONECT`` (1hvr.pdb), ``PDB_full`` (4E43.pdb), ``PDB_janin``
(1a28.pdb.gz), ``PDB_rama`` (19hc.pdb.gz) and ``PDB_CHECK_RIGHTHAND_PA``
(6msm.pdb.bz2) for training, ``PDB_icodes`` (1osm.pdb.gz) held out. Licence:
MDAnalysisTests is distributed under the GNU LGPL v3 or later; the coordinate
files are Protein Data Bank entries, free of copyright (CC0).

The table is what ``heatwalk torsions`` writes (phi, psi in degrees and the
residue name per residue; protonation variants mapped to their parent residue,
non-standard residues left out), and the model is what

    heatwalk fit table.csv --space product --columns phi,psi,residue_name --factors torus:2:degrees,categories:1

fits: T² × {20 residue names}, the names read from the table. The example
then fixes the residue by name and compares the sampled angles with the held-out
entry's residues of that name: the share of positive phi (the left-handed
region, where glycine is common and proline almost never is) and the circular
mean of phi. It also fits the angles alone and scores the held-out residues
with that model and the residue shares of the training set, a model blind to
how the angles depend on the residue.

    python examples/residue_torsions.py [--steps 3000] [--out residue_torsions_out]

About ten minutes on one CPU core with the default steps (two fits).
"""

from __future__ import annotations

import argparse
import math
import warnings
from pathlib import Path

import numpy as np

import heatwalk
from heatwalk.io.points import files_for
from heatwalk.io.structures import RESIDUE_ALIASES, torsion_table
from heatwalk.io.tables import write_points, write_table
from heatwalk.spaces import Product

FILES = ["PDB_small", "CONECT", "PDB_full", "PDB_janin", "PDB_rama", "PDB_CHECK_RIGHTHAND_PA"]
HELD_OUT = ["PDB_icodes"]
STANDARD = {"ALA", "ARG", "ASN", "ASP", "CYS", "GLN", "GLU", "GLY", "HIS", "ILE", "LEU", "LYS", "MET", "PHE",
            "PRO", "SER", "THR", "TRP", "TYR", "VAL"}
OPTIONS = {"factors": "torus:2:degrees,categories:1"}
COLUMNS = ["phi", "psi", "residue_name"]
SHOWN = ["GLY", "PRO", "ASN", "ALA", "LEU"]


def residue_table(names: list[str], path: Path) -> Path:
    """phi, psi (degrees) and the standard residue name of every residue of the named files, as a CSV."""
    import MDAnalysisTests.datafiles as datafiles

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")              # MDAnalysis' notes on guessed elements and the like
        table = torsion_table([getattr(datafiles, n) for n in names], progress=False)
    residue = table["residue_name"].map(lambda r: RESIDUE_ALIASES.get(r, r))
    keep = residue.isin(STANDARD).to_numpy()
    return write_table(path, {"phi": table["phi"].to_numpy()[keep], "psi": table["psi"].to_numpy()[keep],
                              "residue_name": residue.to_numpy(dtype=object)[keep]}, overwrite=True)


def phi_summary(phi_deg: np.ndarray) -> str:
    positive = float(np.mean(phi_deg > 0))
    mean = math.degrees(math.atan2(np.sin(np.radians(phi_deg)).mean(), np.cos(np.radians(phi_deg)).mean()))
    return f"phi > 0: {positive:5.1%}, circular mean of phi {mean:7.1f}°"


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--steps", type=int, default=3000)
    ap.add_argument("--samples", type=int, default=2000, help="samples per fixed residue")
    ap.add_argument("--out", type=Path, default=Path("residue_torsions_out"))
    args = ap.parse_args(argv)
    args.out.mkdir(parents=True, exist_ok=True)
    files = files_for(Product)
    train_file = residue_table(FILES, args.out / "train.csv")
    held_file = residue_table(HELD_OUT, args.out / "heldout.csv")
    space, train, _ = files.read_new(train_file, Product, OPTIONS, columns=COLUMNS)
    names = space.factors[1].state_names
    print(f"{space.n_points(train)} training residues, {len(names)} residue names: {', '.join(names)}")
    model = heatwalk.fit(space, train, steps=args.steps, seed=0)
    held = files.read(held_file, model.space, OPTIONS, columns=COLUMNS)
    bound = model.log_prob(held, seed=0)["log_prob"]
    print(f"held-out ({space.n_points(held)} residues of {HELD_OUT[0]}): joint log-likelihood {bound.mean():.3f} "
          f"± {bound.std() / math.sqrt(len(bound)):.3f} nats per residue (a lower bound; w.r.t. the product of "
          f"dphi dpsi in radians and counting measure on the names)")
    # the same angles fitted without the residue, and the residue by its training share (add-one smoothed): the
    # model that ignores how the angles depend on the residue
    angles_alone = heatwalk.fit(space.factors[0], train[0], steps=args.steps, seed=0, progress=False)
    counts = np.bincount(train[1][:, 0].numpy(), minlength=len(names)) + 1.0
    independent = (angles_alone.log_prob(held[0])["log_prob"].numpy()
                   + np.log(counts / counts.sum())[held[1][:, 0].numpy()])
    print(f"{'':9}angles alone + residue shares: {independent.mean():.3f} ± "
          f"{independent.std() / math.sqrt(len(independent)):.3f}; joint − independent "
          f"{(bound.numpy() - independent).mean():+.3f} ± "
          f"{(bound.numpy() - independent).std() / math.sqrt(len(independent)):.3f} (paired)")
    held_phi = np.degrees(held[0][:, 0].numpy())
    held_names = np.asarray(names, dtype=object)[held[1][:, 0].numpy()]
    for residue in SHOWN:
        angles, _ = model.sample(args.samples, given={1: residue}, seed=1, progress=False)
        print(f"{residue}  samples given {residue}: {phi_summary(np.degrees(angles[:, 0].numpy()))}")
        mine = held_phi[held_names == residue]
        print(f"{'':5}held-out {residue} (n={len(mine):3d}): {phi_summary(mine) if len(mine) else '–'}")
    free = model.sample(args.samples, seed=2, progress=False)
    out = write_points(args.out / "samples.csv", model.space, free, overwrite=True, names=COLUMNS, **OPTIONS)
    print(f"wrote {out} (angles in degrees and residue names, as read)")


if __name__ == "__main__":
    main()
