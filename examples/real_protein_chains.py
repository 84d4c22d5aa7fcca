"""Real protein sequence fragments: fit a masked discrete diffusion to 8-residue windows of PDB chains.

Data: protein chains of PDB entries that ship as test files inside the
MDAnalysisTests package (install with ``pip install MDAnalysis MDAnalysisTests``,
heatwalk's optional ``data`` extra). The files used, by their MDAnalysisTests
names: ``PDB_small`` (adk_open.pdb, adenylate kinase 4AKE), ``CONECT``
(1hvr.pdb, HIV-1 protease), ``PDB_full`` (4E43.pdb), ``PDB_janin`` (1a28.pdb.gz),
``PDB_rama`` (19hc.pdb.gz), ``PDB_icodes`` (1osm.pdb.gz) and
``PDB_CHECK_RIGHTHAND_PA`` (6msm.pdb.bz2). Licence: the MDAnalysisTests package
is distributed under the GNU LGPL v3 or later; the coordinate files are
entries of the Protein Data Bank, whose data are free of copyright (CC0).

Each chain's residues (20 standard amino acids; common protonation and
selenomethionine variants mapped to their parent) are cut into overlapping
windows of L = 8 residues; windows never cross a chain break or a non-standard
residue. Identical chains are kept once. One entry (1osm) is held out for the
ELBO. Protein sequences are close to incompressible at this scale, so the
interesting comparison is with the composition-only (unigram) model and the
uniform 20-letter code.

    python examples/real_protein_chains.py [--steps 600] [--out protein_windows_out]

Runs in about three minutes on one CPU core.
"""

from __future__ import annotations

import argparse
import math
import warnings
from pathlib import Path

import torch

import heatwalk
from heatwalk.io.sequence_files import write_sequences
from heatwalk.spaces.alphabet import encode_strings
from heatwalk.spaces import Categories

AMINO = {"ALA": "A", "ARG": "R", "ASN": "N", "ASP": "D", "CYS": "C", "GLN": "Q", "GLU": "E", "GLY": "G",
         "HIS": "H", "ILE": "I", "LEU": "L", "LYS": "K", "MET": "M", "PHE": "F", "PRO": "P", "SER": "S",
         "THR": "T", "TRP": "W", "TYR": "Y", "VAL": "V",
         "HSD": "H", "HSE": "H", "HSP": "H", "HID": "H", "HIE": "H", "HIP": "H", "MSE": "M"}
ALPHABET = "ACDEFGHIKLMNPQRSTVWY"
FILES = ["PDB_small", "CONECT", "PDB_full", "PDB_janin", "PDB_rama", "PDB_CHECK_RIGHTHAND_PA"]
HELD_OUT = ["PDB_icodes"]
L = 8


def chain_strings(names: list[str]) -> list[str]:
    """Unbroken runs of standard residues of every distinct protein chain in the named files."""
    import MDAnalysis as mda
    import MDAnalysisTests.datafiles as datafiles

    runs, seen = [], set()
    for name in names:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # missing-element and similar parser notices
            u = mda.Universe(getattr(datafiles, name))
        for seg in u.select_atoms("protein").segments:
            seq = "".join(AMINO.get(r.resname, "-") for r in seg.residues)
            if seq in seen:
                continue
            seen.add(seq)
            runs.extend(part for part in seq.split("-") if len(part) >= L)
    return runs


def windows(runs: list[str]) -> list[str]:
    return [r[i:i + L] for r in runs for i in range(len(r) - L + 1)]


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--steps", type=int, default=600)
    ap.add_argument("--out", default="protein_windows_out")
    args = ap.parse_args()
    torch.set_num_threads(1)

    train_w, test_w = windows(chain_strings(FILES)), windows(chain_strings(HELD_OUT))
    train = encode_strings(train_w, list(ALPHABET), length=L, where="training windows")
    test = encode_strings(test_w, list(ALPHABET), length=L, where="held-out windows")
    print(f"{len(train_w)} training windows, {len(test_w)} held-out windows of {L} residues")

    space = Categories(20, L, process="absorbing", alphabet=ALPHABET)
    # small data (a few thousand windows): a narrow network and few epochs, to limit overfitting
    model = heatwalk.fit(space, train, steps=args.steps, batch_size=128, lr=1e-3, ema_decay=0.99, seed=0,
                         network={"d_model": 32, "n_layers": 2, "n_heads": 4})
    print(f"trained {args.steps} steps in {model.record['train_seconds']:.0f} s")

    est = model.elbo(test, n_time_samples=16)
    freq = (torch.bincount(train.flatten(), minlength=20).double() + 1) / (train.numel() + 20)
    unigram = float(-torch.log2(freq[test]).mean())
    print(f"held-out ELBO       {est.bits_per_token:.3f} ± {est.bits_per_token_stderr:.3f} bits/residue")
    print(f"composition model   {unigram:.3f} bits/residue (training amino-acid frequencies)")
    print(f"uniform code        {math.log2(20):.3f} bits/residue")

    samples = model.sample(500, sampler="unmasking", steps=L, progress=False)
    s_freq = torch.bincount(samples.flatten(), minlength=20).double() / samples.numel()
    tv = 0.5 * float((s_freq - freq).abs().sum())
    print(f"amino-acid composition of samples vs training: total variation {tv:.3f}")
    out = Path(args.out)
    model.save(out / "model", overwrite=True)
    path = write_sequences(out / "samples.fasta", samples, ALPHABET, prefix="window", overwrite=True)
    print("first samples:", *space.decode(samples[:5]), sep="\n  ")
    print(f"model in {out / 'model'}, samples in {path}")


if __name__ == "__main__":
    main()
