"""Protein torsion angles from structure and trajectory files, as a table ready for fitting.

:func:`torsion_table` reads PDB / mmCIF structures (every MODEL of a
multi-model file is a frame) or trajectories (a topology such as PSF plus
trajectory files such as DCD or XTC) with MDAnalysis and returns one row per
protein residue per frame; :func:`write_torsion_table` writes it atomically as
CSV, TSV or Parquet. The command the CLI will offer on top of these two::

    heatwalk torsions FILE... --out table.csv [--topology FILE] [--chi] [--keep-incomplete]

and the table it writes is read back by
``heatwalk fit table.csv --space torus --degrees --columns phi,psi --labels residue_name``.

MDAnalysis is an optional extra (``pip install 'heatwalk[data]'``); it is
imported only when a function here is called. Reading mmCIF files also needs
the ``gemmi`` package (MDAnalysis uses it for that format).

Angles (all in degrees, in [-180, 180], IUPAC sign convention: looking along
the bond b-c, positive when the far bond turns clockwise)

- ``phi``   C(i-1) - N(i) - CA(i) - C(i)
- ``psi``   N(i) - CA(i) - C(i) - N(i+1)
- ``omega`` CA(i) - C(i) - N(i+1) - CA(i+1), the peptide bond *after* residue i
  (the convention of MDAnalysis' ``omega_selection``; about 180 for trans, 0 for cis).
- ``chi1`` ... ``chi5`` side-chain angles of the standard amino acids
  (IUPAC-IUB 1970 atom quadruplets, see ``CHI_ATOMS``); with ``chi=True`` all
  five columns are present, NaN where the residue has no such angle (GLY and
  ALA have none, only ARG has chi5).

Residues i-1 and i+1 are the neighbouring protein residues in file order in
the same chain (and segment), and only when they are joined by a peptide bond:
the C(i-1)-N(i) distance must be at most ``PEPTIDE_BOND_MAX`` = 2.0 angstrom
(the bond is about 1.33 angstrom; 2.0 is common practice for a covalent-bond
test). So chain ends and gaps of missing residues give NaN, whatever the
residue numbering says. Coordinates are used as stored: molecules split across
a periodic box must be made whole first. Where a file lists alternate
locations of an atom, the first one listed is used (common practice: the
``A`` conformer).

Rows with undefined phi or psi (chain ends, gaps) are dropped by default, so
every row has finite phi and psi and can be fitted as it is; omega is then
finite too (psi defined implies the next residue is bonded) unless an atom is
missing. ``keep_incomplete=True`` keeps every residue, with NaN where an angle
is undefined; fit such a table only after ``df.dropna(subset=["phi", "psi"])``.
In CSV/TSV output NaN is an empty cell.
"""

from __future__ import annotations

import warnings
from collections import Counter
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from heatwalk.errors import InputError
from heatwalk.io.atomic import atomic_path

INSTALL_HINT = "pip install 'heatwalk[data]'"
PEPTIDE_BOND_MAX = 2.0  # angstrom; C(i-1)-N(i) distance above which residues are not bonded
BACKBONE_ANGLES = ("phi", "psi", "omega")
CHI_ANGLES = ("chi1", "chi2", "chi3", "chi4", "chi5")
ID_COLUMNS = ("structure", "frame", "chain", "residue_number", "insertion_code", "residue_name")

# Side-chain quadruplets (IUPAC-IUB 1970 definitions, common practice). Each slot is a tuple of accepted
# atom names, the first one present wins: CHARMM names the isoleucine delta carbon CD instead of CD1.
_N, _CA, _CB = ("N",), ("CA",), ("CB",)
_CHI1_CG = (_N, _CA, _CB, ("CG",))
_CHI2_CD1 = (_CA, _CB, ("CG",), ("CD1",))
CHI_ATOMS: dict[str, tuple[tuple[tuple[str, ...], ...], ...]] = {
    "ARG": (_CHI1_CG, (_CA, _CB, ("CG",), ("CD",)), (_CB, ("CG",), ("CD",), ("NE",)),
            (("CG",), ("CD",), ("NE",), ("CZ",)), (("CD",), ("NE",), ("CZ",), ("NH1",))),
    "ASN": (_CHI1_CG, (_CA, _CB, ("CG",), ("OD1",))),
    "ASP": (_CHI1_CG, (_CA, _CB, ("CG",), ("OD1",))),
    "CYS": ((_N, _CA, _CB, ("SG",)),),
    "GLN": (_CHI1_CG, (_CA, _CB, ("CG",), ("CD",)), (_CB, ("CG",), ("CD",), ("OE1",))),
    "GLU": (_CHI1_CG, (_CA, _CB, ("CG",), ("CD",)), (_CB, ("CG",), ("CD",), ("OE1",))),
    "HIS": (_CHI1_CG, (_CA, _CB, ("CG",), ("ND1",))),
    "ILE": ((_N, _CA, _CB, ("CG1",)), (_CA, _CB, ("CG1",), ("CD1", "CD"))),
    "LEU": (_CHI1_CG, _CHI2_CD1),
    "LYS": (_CHI1_CG, (_CA, _CB, ("CG",), ("CD",)), (_CB, ("CG",), ("CD",), ("CE",)),
            (("CG",), ("CD",), ("CE",), ("NZ",))),
    "MET": (_CHI1_CG, (_CA, _CB, ("CG",), ("SD",)), (_CB, ("CG",), ("SD",), ("CE",))),
    "MSE": (_CHI1_CG, (_CA, _CB, ("CG",), ("SE",)), (_CB, ("CG",), ("SE",), ("CE",))),
    "PHE": (_CHI1_CG, _CHI2_CD1),
    "PRO": (_CHI1_CG, (_CA, _CB, ("CG",), ("CD",))),
    "SER": ((_N, _CA, _CB, ("OG",)),),
    "THR": ((_N, _CA, _CB, ("OG1",)),),
    "TRP": (_CHI1_CG, _CHI2_CD1),
    "TYR": (_CHI1_CG, _CHI2_CD1),
    "VAL": ((_N, _CA, _CB, ("CG1",)),),
}
# Force-field names of protonation / bonding states -> the standard residue whose chi atoms they share.
RESIDUE_ALIASES = {
    "HSD": "HIS", "HSE": "HIS", "HSP": "HIS", "HID": "HIS", "HIE": "HIS", "HIP": "HIS",
    "HISA": "HIS", "HISB": "HIS", "HISD": "HIS", "HISE": "HIS", "HISH": "HIS", "HIS1": "HIS", "HIS2": "HIS",
    "CYX": "CYS", "CYM": "CYS", "CYS1": "CYS", "CYS2": "CYS", "CYSH": "CYS",
    "ASH": "ASP", "ASPH": "ASP", "GLH": "GLU", "GLUH": "GLU", "LYN": "LYS", "LYSH": "LYS",
}


def _import_mdanalysis():
    try:
        import MDAnalysis
    except ImportError:
        raise InputError(f"reading structure files needs MDAnalysis, which is not installed: {INSTALL_HINT}") \
            from None
    return MDAnalysis


def _format_of(mda, path: Path, role: str) -> str:
    fmt = mda.lib.util.guess_format(str(path)).upper()
    if fmt not in mda._READERS and fmt not in mda._PARSERS:
        known = ", ".join(sorted(f.lower() for f in set(mda._READERS) | set(mda._PARSERS) if f.isalpha()))
        raise InputError(f"{path}: unknown {role} format {fmt.lower() or '(no extension)'!r}; expected a file "
                         f"extension MDAnalysis reads, such as pdb, cif, gro, psf, dcd, xtc (all: {known})",
                         field=str(path))
    return fmt


@contextmanager
def _quiet_mdanalysis():
    """Silence MDAnalysis' own warnings (guessed elements, masses, box sizes; reader deprecations).

    None of them concerns a torsion angle; warnings raised by other modules still show.
    """
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", module=r"MDAnalysis(\.|$)")
        yield


def _open_universe(mda, path: Path, topology: Path | None):
    """Open ``path`` (a structure, or a trajectory of ``topology``) as an MDAnalysis Universe."""
    if not path.is_file():
        raise InputError(f"{path}: no such file", field=str(path))
    fmt = _format_of(mda, path, "structure" if topology is None else "trajectory")
    if topology is None and fmt not in mda._PARSERS:
        raise InputError(f"{path}: a {fmt} file holds coordinates only and needs a topology (for example a "
                         f"PSF, PDB or GRO file of the same atoms): pass topology=... (--topology FILE)",
                         field=str(path))
    args = (str(path),) if topology is None else (str(topology), str(path))
    try:
        with _quiet_mdanalysis():
            return mda.Universe(*args)
    except ImportError as e:
        raise InputError(f"{path}: reading this format needs a package that is not installed ({e})") from None
    except Exception as e:  # MDAnalysis raises many types (OSError, ValueError, IndexError, ...) for bad files
        what = f"{path}" if topology is None else f"{path} with topology {topology}"
        raise InputError(f"{what}: cannot be read as {fmt} ({type(e).__name__}: {e})", field=str(path)) from None


@dataclass
class _Plan:
    """Atom indices of every angle of every protein residue of one Universe (-1 where undefined)."""

    quads: dict[str, np.ndarray]   # angle name -> (n_residues, 4) int atom indices
    bonds: dict[str, np.ndarray]   # angle name -> (n_residues, 2) peptide bond (C, N) the angle crosses
    meta: dict[str, np.ndarray]    # id columns other than structure and frame


def _first_atoms(residue) -> dict[str, int]:
    """Atom name -> index of its first listed atom in the residue (first alternate location wins)."""
    found: dict[str, int] = {}
    for name, index in zip(residue.atoms.names, residue.atoms.indices):
        found.setdefault(str(name), int(index))
    return found


def _quad(atoms: dict[str, int], slots) -> list[int]:
    out = []
    for names in slots:
        index = next((atoms[n] for n in names if n in atoms), -1)
        if index < 0:
            return [-1, -1, -1, -1]
        out.append(index)
    return out


def _chain_ids(residues) -> np.ndarray:
    """Chain id of each residue: the chainID of its first atom when the file has one, else its segid."""
    segids = np.asarray(residues.segids, dtype=object)
    if not hasattr(residues.universe.atoms, "chainIDs"):
        return segids
    first = np.asarray([r.atoms[0].chainID for r in residues], dtype=object)
    return np.where(first == "", segids, first)


def _plan(residues, chi: bool) -> _Plan:
    chains = _chain_ids(residues)
    segments = residues.segindices
    atoms = [_first_atoms(r) for r in residues]
    n = len(residues)
    names = list(BACKBONE_ANGLES) + (list(CHI_ANGLES) if chi else [])
    quads = {name: np.full((n, 4), -1, dtype=np.int64) for name in names}
    bonds = {name: np.full((n, 2), -1, dtype=np.int64) for name in ("phi", "psi", "omega")}
    for k, a in enumerate(atoms):
        if k > 0 and chains[k - 1] == chains[k] and segments[k - 1] == segments[k]:
            prev = atoms[k - 1]
            quads["phi"][k] = _quad({**a, "C-": prev.get("C", -1)}, (("C-",), ("N",), ("CA",), ("C",)))
            bonds["phi"][k] = [prev.get("C", -1), a.get("N", -1)]
        if k + 1 < n and chains[k + 1] == chains[k] and segments[k + 1] == segments[k]:
            nxt = {"N+": atoms[k + 1].get("N", -1), "CA+": atoms[k + 1].get("CA", -1)}
            quads["psi"][k] = _quad({**a, **nxt}, (("N",), ("CA",), ("C",), ("N+",)))
            quads["omega"][k] = _quad({**a, **nxt}, (("CA",), ("C",), ("N+",), ("CA+",)))
            bonds["psi"][k] = bonds["omega"][k] = [a.get("C", -1), nxt["N+"]]
        if chi:
            standard = RESIDUE_ALIASES.get(residues[k].resname, residues[k].resname)
            for name, slots in zip(CHI_ANGLES, CHI_ATOMS.get(standard, ())):
                quads[name][k] = _quad(a, slots)
    for name, b in bonds.items():  # an angle across a missing bond atom is undefined
        quads[name][(b < 0).any(axis=1)] = -1
    meta = {
        "chain": chains.astype(str),
        "residue_number": np.asarray(residues.resids, dtype=np.int64),
        "insertion_code": (np.asarray(residues.icodes, dtype=str) if hasattr(residues, "icodes")
                           else np.full(n, "", dtype=str)),
        "residue_name": np.asarray(residues.resnames, dtype=str),
    }
    return _Plan(quads=quads, bonds=bonds, meta=meta)


def _frame_angles(positions: np.ndarray, plan: _Plan, calc_dihedrals) -> dict[str, np.ndarray]:
    """Every planned angle at one frame, in degrees; NaN where undefined or across a broken peptide bond."""
    out = {}
    for name, quad in plan.quads.items():
        values = np.full(len(quad), np.nan)
        ok = (quad >= 0).all(axis=1)
        if name in plan.bonds and ok.any():
            c, n = plan.bonds[name][ok, 0], plan.bonds[name][ok, 1]
            bonded = np.linalg.norm(positions[c] - positions[n], axis=1) <= PEPTIDE_BOND_MAX
            ok[np.flatnonzero(ok)[~bonded]] = False
        if ok.any():
            q = quad[ok]
            values[ok] = np.degrees(calc_dihedrals(positions[q[:, 0]], positions[q[:, 1]],
                                                   positions[q[:, 2]], positions[q[:, 3]]))
        out[name] = values
    return out


def _structure_names(paths: list[Path]) -> list[str]:
    """File names, or the paths as given for every input when two inputs share a file name."""
    names = [p.name for p in paths]
    if any(count > 1 for count in Counter(names).values()):
        return [str(p) for p in paths]
    return names


def _one_file(mda, path: Path, topology: Path | None, name: str, chi: bool, bar) -> dict[str, np.ndarray]:
    """The table columns of one file: every protein residue at every frame."""
    from MDAnalysis.lib.distances import calc_dihedrals

    universe = _open_universe(mda, path, topology)
    residues = universe.select_atoms("protein").residues
    if len(residues) == 0:
        found = ", ".join(sorted(set(map(str, universe.residues.resnames)))[:10]) or "no residues at all"
        raise InputError(f"{path}: no protein residues (expected standard amino-acid residue names such as "
                         f"ALA, GLY; found {found})", field=str(path))
    plan = _plan(residues, chi)
    bar.total = (bar.total or 0) + universe.trajectory.n_frames
    bar.set_postfix_str(name, refresh=True)
    per_frame = []
    frame = -1
    try:
        with _quiet_mdanalysis():
            for frame, ts in enumerate(universe.trajectory):
                per_frame.append(_frame_angles(ts.positions, plan, calc_dihedrals))
                bar.update(1)
    except (OSError, EOFError, ValueError) as e:
        raise InputError(f"{path}, frame {frame + 1} (counting from 0): cannot be read "
                         f"({type(e).__name__}: {e})", row=frame + 1, field=str(path)) from None
    n_frames, n_residues = len(per_frame), len(residues)
    columns = {"structure": np.full(n_frames * n_residues, name, dtype=object),
               "frame": np.repeat(np.arange(n_frames, dtype=np.int64), n_residues)}
    columns.update({key: np.tile(values, n_frames) for key, values in plan.meta.items()})
    columns.update({key: np.concatenate([angles[key] for angles in per_frame]) for key in plan.quads})
    return columns


def torsion_table(paths, *, topology=None, chi: bool = False, keep_incomplete: bool = False,
                  progress: bool = True):
    """Backbone (and optionally side-chain) torsion angles of every protein residue in every frame.

    Parameters
    ----------
    paths : str, Path or sequence of them
        Structure files (PDB, mmCIF, GRO, ...; each MODEL of a multi-model
        file is a frame) or, with ``topology``, trajectory files (DCD, XTC,
        TRR, NetCDF, ... or coordinate files) of the topology's atoms. Each
        file is read on its own; frames are numbered from 0 within each file.
    topology : str or Path, optional
        Topology shared by every file in ``paths`` (PSF, PDB, GRO, TPR, ...).
        Required for trajectory formats that hold coordinates only.
    chi : bool
        Add side-chain columns ``chi1`` ... ``chi5`` (NaN where undefined).
    keep_incomplete : bool
        Keep residues whose phi or psi is undefined (chain ends, gaps, missing
        atoms), with NaN. By default they are dropped, so that every row has
        finite phi and psi.
    progress : bool
        Show a progress bar over frames (on standard error).

    Returns
    -------
    pandas.DataFrame
        Columns ``structure`` (file name), ``frame`` (0-based), ``chain``
        (chain id, or segment id where the file has no chain ids),
        ``residue_number``, ``insertion_code`` ('' when none),
        ``residue_name`` (as written in the file, e.g. HSD), ``phi``, ``psi``,
        ``omega`` and with ``chi`` ``chi1`` ... ``chi5``, all in degrees in
        [-180, 180]. Rows are ordered by file, frame, then residue in file
        order: one row per protein residue per frame (before dropping).

    Raises
    ------
    InputError
        MDAnalysis missing; a missing file; an unknown or unreadable format;
        a trajectory without topology; a structure with no protein residues.

    Notes
    -----
    The dihedral of points p1..p4 is atan2(|b2| b1 . (b2 x b3), (b1 x b2) . (b2 x b3))
    with b_k = p_{k+1} - p_k, computed by ``MDAnalysis.lib.distances.calc_dihedrals``
    from the stored coordinates (angstrom). MDAnalysis keeps coordinates in
    float32 and computes the angle in single precision: values agree with a
    float64 evaluation from the same coordinates to about 1e-5 degrees. See
    the module docstring for the atom definitions and the peptide-bond test.
    """
    import pandas as pd
    from tqdm.auto import tqdm

    mda = _import_mdanalysis()
    paths = [Path(paths)] if isinstance(paths, (str, Path)) else [Path(p) for p in paths]
    if not paths:
        raise InputError("no structure files given (expected at least one path)", field="paths")
    if topology is not None:
        topology = Path(topology)
        if not topology.is_file():
            raise InputError(f"{topology}: no such file (the topology)", field="topology")
        if _format_of(mda, topology, "topology") not in mda._PARSERS:
            raise InputError(f"{topology}: a {mda.lib.util.guess_format(str(topology))} file holds coordinates "
                             f"only and cannot be a topology (expected PSF, PDB, GRO, TPR, PRMTOP, ...)",
                             field="topology")
    columns = list(ID_COLUMNS) + list(BACKBONE_ANGLES) + (list(CHI_ANGLES) if chi else [])
    parts = []
    with tqdm(total=0, unit="frame", desc="torsions", disable=not progress, leave=False) as bar:
        for path, name in zip(paths, _structure_names(paths)):
            parts.append(_one_file(mda, path, topology, name, chi, bar))
    table = pd.DataFrame({c: np.concatenate([part[c] for part in parts]) for c in columns})
    if not keep_incomplete:
        table = table[np.isfinite(table["phi"]) & np.isfinite(table["psi"])].reset_index(drop=True)
    return table.astype({"frame": "int64", "residue_number": "int64"})


def write_torsion_table(df, path, *, overwrite: bool = False) -> None:
    """Write a torsion table atomically: ``.csv``, ``.tsv`` or ``.parquet`` by the file extension.

    CSV and TSV have a header line, no index column, NaN as an empty cell and
    floats in full precision. Parquet needs ``pyarrow``. The file is written
    under a temporary name beside ``path`` and renamed, so a failed write
    leaves nothing; an existing ``path`` is replaced only with ``overwrite=True``.
    """
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix not in (".csv", ".tsv", ".parquet"):
        raise InputError(f"{path}: unknown table format {suffix or '(no extension)'!r}; expected .csv, .tsv "
                         f"or .parquet", field=str(path))
    if suffix == ".parquet":
        try:
            import pyarrow  # noqa: F401  (pandas' Parquet engine)
        except ImportError:
            raise InputError(f"{path}: writing Parquet needs pyarrow, which is not installed: pip install pyarrow",
                             field=str(path)) from None
    with atomic_path(path, overwrite=overwrite) as tmp:
        if suffix == ".parquet":
            df.to_parquet(tmp, index=False)
        else:
            df.to_csv(tmp, sep="\t" if suffix == ".tsv" else ",", index=False)
