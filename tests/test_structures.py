"""Torsion tables from structure files (heatwalk.io.structures) against numpy and files shipped in MDAnalysisTests.

Reference angles are computed here, independently of the module, with the standard dihedral formula
(atan2 of cross products, numpy) from atom coordinates picked by atom name in the test itself.
"""

from __future__ import annotations

import sys

import numpy as np
import pytest

mda = pytest.importorskip("MDAnalysis", reason="MDAnalysis is not installed (pip install 'heatwalk[data]')")
datafiles = pytest.importorskip("MDAnalysisTests.datafiles",
                                reason="MDAnalysisTests is not installed (pip install 'heatwalk[data]')")
pd = pytest.importorskip("pandas", reason="pandas is not installed")

# the reference Universes opened in this file would print MDAnalysis' notes on guessed elements etc.
pytestmark = pytest.mark.filterwarnings("ignore:::MDAnalysis")

from heatwalk.errors import InputError  # noqa: E402
from heatwalk.io.structures import torsion_table, write_torsion_table  # noqa: E402

# adk_open.pdb (MDAnalysisTests.datafiles.PDB_small): adenylate kinase, one chain of 214 residues, segid 4AKE.
PDB_FILE = datafiles.PDB_small
# adk.psf + adk_dims.dcd (MDAnalysisTests.datafiles.PSF, .DCD): the same protein, CHARMM names, 98 frames.
PSF_FILE, DCD_FILE = datafiles.PSF, datafiles.DCD


def numpy_dihedral(p0, p1, p2, p3):
    """Dihedral angle in degrees of points (n, 3): atan2(|b2| b1.(b2 x b3), (b1 x b2).(b2 x b3)), b_k = p_k - p_{k-1}.

    Standard formula (e.g. Blondel & Karplus 1996, J. Comput. Chem. 17, 1132); written here independently.
    """
    b1, b2, b3 = p1 - p0, p2 - p1, p3 - p2
    n1, n2 = np.cross(b1, b2), np.cross(b2, b3)
    y = np.linalg.norm(b2, axis=-1) * np.einsum("...i,...i", b1, n2)
    x = np.einsum("...i,...i", n1, n2)
    return np.degrees(np.arctan2(y, x))


def angle_gap(a, b):
    """Largest difference of two angle arrays in degrees, modulo 360 (so 179.99 and -179.99 are close)."""
    d = (np.asarray(a) - np.asarray(b) + 180.0) % 360.0 - 180.0
    return float(np.max(np.abs(d)))


def atom(universe, resindex, name):
    """Float64 position of the atom ``name`` in residue ``resindex`` (exactly one must exist)."""
    group = universe.residues[resindex].atoms.select_atoms(f"name {name}")
    assert len(group) == 1, (resindex, name)
    return group.positions[0].astype(np.float64)


def backbone_reference(universe):
    """phi, psi, omega of every residue of a single unbroken chain (NaN at the ends), numpy only."""
    n = len(universe.residues)
    get = {name: np.array([atom(universe, k, name) for k in range(n)]) for name in ("N", "CA", "C")}
    phi, psi, omega = (np.full(n, np.nan) for _ in range(3))
    phi[1:] = numpy_dihedral(get["C"][:-1], get["N"][1:], get["CA"][1:], get["C"][1:])
    psi[:-1] = numpy_dihedral(get["N"][:-1], get["CA"][:-1], get["C"][:-1], get["N"][1:])
    omega[:-1] = numpy_dihedral(get["CA"][:-1], get["C"][:-1], get["N"][1:], get["CA"][1:])
    return phi, psi, omega


@pytest.fixture(scope="module")
def pdb_universe():
    return mda.Universe(PDB_FILE)


@pytest.fixture(scope="module")
def pdb_table():
    return torsion_table(PDB_FILE, chi=True, keep_incomplete=True, progress=False)


@pytest.fixture(scope="module")
def trajectory_table():
    return torsion_table([DCD_FILE], topology=PSF_FILE, chi=True, keep_incomplete=True, progress=False)


def test_pdb_backbone_matches_numpy(pdb_universe, pdb_table):
    phi, psi, omega = backbone_reference(pdb_universe)
    assert len(pdb_table) == 214
    assert list(pdb_table.columns[:6]) == ["structure", "frame", "chain", "residue_number", "insertion_code",
                                           "residue_name"]
    assert (pdb_table["structure"] == "adk_open.pdb").all() and (pdb_table["frame"] == 0).all()
    assert (pdb_table["chain"] == "4AKE").all()
    assert pdb_table["residue_number"].tolist() == list(pdb_universe.residues.resids)
    for name, ref in (("phi", phi), ("psi", psi), ("omega", omega)):
        got = pdb_table[name].to_numpy()
        assert np.array_equal(np.isnan(got), np.isnan(ref)), name
        ok = ~np.isnan(ref)
        # same float32 coordinates; MDAnalysis computes in single precision, numpy in double: measured worst
        # gap 3e-6 degrees, so 1e-5 degrees (float32 rounding only) is the tolerance
        assert angle_gap(got[ok], ref[ok]) < 1e-5, name
    # omega is that of the peptide bond after the residue: the one cis bond of this file, PHE 86 - PRO 87
    # (found with the numpy reference above), is reported on PHE 86; every other bond is trans
    cis = pdb_table[np.abs(pdb_table["omega"]) < 150]
    assert cis["residue_number"].tolist() == [86] and cis["residue_name"].tolist() == ["PHE"]
    assert pdb_table["residue_name"].iloc[cis.index[0] + 1] == "PRO"


def test_pdb_text_parsed_by_hand_agrees():
    # coordinates read here straight from the ATOM records (PDB format columns 13-16 name, 23-26 residue
    # number, 31-54 x y z), so MDAnalysis is not involved in the reference at all
    coords: dict[tuple[int, str], np.ndarray] = {}
    with open(PDB_FILE) as f:
        for line in f:
            if line.startswith("ATOM"):
                key = (int(line[22:26]), line[12:16].strip())
                coords.setdefault(key, np.array([float(line[30:38]), float(line[38:46]), float(line[46:54])]))
    table = torsion_table(PDB_FILE, progress=False)
    rows = table["residue_number"].to_numpy()
    ref_phi = numpy_dihedral(*(np.array([coords[(r + dr, a)] for r in rows])
                               for dr, a in ((-1, "C"), (0, "N"), (0, "CA"), (0, "C"))))
    ref_psi = numpy_dihedral(*(np.array([coords[(r + dr, a)] for r in rows])
                               for dr, a in ((0, "N"), (0, "CA"), (0, "C"), (1, "N"))))
    # MDAnalysis stores coordinates as float32 (rounding <= 4e-6 angstrom at |x| < 100): 1e-3 degrees is ample
    assert angle_gap(table["phi"], ref_phi) < 1e-3
    assert angle_gap(table["psi"], ref_psi) < 1e-3


def test_default_drops_chain_ends_so_phi_psi_are_finite(pdb_table):
    table = torsion_table(PDB_FILE, progress=False)
    assert len(table) == 212  # 214 residues less the two chain ends
    assert np.isfinite(table[["phi", "psi", "omega"]].to_numpy()).all()
    assert "chi1" not in table.columns
    ends = pdb_table.iloc[[0, -1]]
    assert np.isnan(ends["phi"].iloc[0]) and np.isnan(ends["psi"].iloc[1]) and np.isnan(ends["omega"].iloc[1])


def test_chi_angles_match_numpy(pdb_universe, pdb_table):
    # IUPAC-IUB chi atoms, written out here for the check
    chi1_atoms = {"SER": "OG", "THR": "OG1", "VAL": "CG1", "ILE": "CG1", "CYS": "SG", "LEU": "CG",
                  "PHE": "CG", "ARG": "CG"}
    names = pdb_table["residue_name"].to_numpy()
    checked = 0
    for resname, gamma in chi1_atoms.items():
        for k in np.flatnonzero(names == resname)[:3]:
            ref = numpy_dihedral(*(atom(pdb_universe, k, a) for a in ("N", "CA", "CB", gamma)))
            assert angle_gap(pdb_table["chi1"].iloc[k], ref) < 1e-5, (resname, k)
            checked += 1
    assert checked >= 20
    for k in np.flatnonzero(names == "ARG")[:3]:  # ARG has all five
        quads = (("CA", "CB", "CG", "CD"), ("CB", "CG", "CD", "NE"), ("CG", "CD", "NE", "CZ"),
                 ("CD", "NE", "CZ", "NH1"))
        for column, quad in zip(("chi2", "chi3", "chi4", "chi5"), quads):
            ref = numpy_dihedral(*(atom(pdb_universe, k, a) for a in quad))
            assert angle_gap(pdb_table[column].iloc[k], ref) < 1e-5, (column, k)
    glycine_alanine = pdb_table[pdb_table["residue_name"].isin(["GLY", "ALA"])]
    assert len(glycine_alanine) > 0 and glycine_alanine[["chi1", "chi2"]].isna().all().all()
    assert pdb_table.loc[pdb_table["residue_name"] != "ARG", "chi5"].isna().all()


def test_trajectory_rows_are_frames_times_residues(trajectory_table):
    universe = mda.Universe(PSF_FILE, DCD_FILE)
    n_frames, n_residues = universe.trajectory.n_frames, len(universe.residues)
    assert (n_frames, n_residues) == (98, 214)
    assert len(trajectory_table) == n_frames * n_residues
    assert trajectory_table["frame"].tolist() == list(np.repeat(np.arange(n_frames), n_residues))
    dropped = torsion_table(DCD_FILE, topology=PSF_FILE, progress=False)
    assert len(dropped) == n_frames * (n_residues - 2)
    for frame in (0, 47, 97):
        universe.trajectory[frame]
        phi, psi, omega = backbone_reference(universe)
        rows = trajectory_table[trajectory_table["frame"] == frame]
        for name, ref in (("phi", phi), ("psi", psi), ("omega", omega)):
            ok = ~np.isnan(ref)
            assert angle_gap(rows[name].to_numpy()[ok], ref[ok]) < 1e-5, (frame, name)
        # CHARMM names the isoleucine delta carbon CD (not CD1): chi2 of ILE must still be found
        k = int(np.flatnonzero(rows["residue_name"].to_numpy() == "ILE")[0])
        ref = numpy_dihedral(*(atom(universe, k, a) for a in ("CA", "CB", "CG1", "CD")))
        assert angle_gap(rows["chi2"].iloc[k], ref) < 1e-5
        # HSD (CHARMM histidine) gets the chi1/chi2 of HIS
        k = int(np.flatnonzero(rows["residue_name"].to_numpy() == "HSD")[0])
        ref = numpy_dihedral(*(atom(universe, k, a) for a in ("CA", "CB", "CG", "ND1")))
        assert angle_gap(rows["chi2"].iloc[k], ref) < 1e-5


def test_chain_gap_gives_nan_whatever_the_numbering(tmp_path):
    # drop residues 50-52 from adk_open.pdb and renumber so the numbers stay consecutive across the gap
    lines = []
    with open(PDB_FILE) as f:
        for line in f:
            if line.startswith("ATOM"):
                number = int(line[22:26])
                if 50 <= number <= 52:
                    continue
                if number > 52:
                    line = f"{line[:22]}{number - 3:4d}{line[26:]}"
            lines.append(line)
    gapped = tmp_path / "gapped.pdb"
    gapped.write_text("".join(lines))
    table = torsion_table(gapped, keep_incomplete=True, progress=False).set_index("residue_number")
    assert np.isnan(table.loc[49, "psi"]) and np.isnan(table.loc[49, "omega"]) and np.isnan(table.loc[50, "phi"])
    assert np.isfinite(table.loc[48, "psi"]) and np.isfinite(table.loc[51, "phi"])
    assert len(torsion_table(gapped, progress=False)) == 211 - 4


def test_models_are_frames_and_chains_and_insertion_codes():
    # nmr_neopetrosiamide.pdb (datafiles.PDB_multiframe): 24 MODELs of one peptide
    table = torsion_table(datafiles.PDB_multiframe, progress=False)
    assert sorted(table["frame"].unique()) == list(range(24))
    assert (table.groupby("frame").size() == len(table) // 24).all()
    # 1osm.pdb.gz (datafiles.PDB_icodes): residue numbers repeated with insertion codes A, B, ...
    table = torsion_table(datafiles.PDB_icodes, keep_incomplete=True, progress=False)
    keys = table[["chain", "residue_number", "insertion_code"]].apply(tuple, axis=1)
    assert keys.is_unique and (table["insertion_code"] != "").any()


def test_mmcif_agrees_with_pdb_of_same_entry():
    pytest.importorskip("gemmi", reason="gemmi is not installed (MDAnalysis needs it to read mmCIF)")
    # 1BD2.cif.gz and 1BD2.pdb.gz (datafiles.MMCIF folder): the same five-chain entry in both formats
    cif = torsion_table(f"{datafiles.MMCIF}/1BD2.cif.gz", chi=True, progress=False)
    pdb = torsion_table(f"{datafiles.MMCIF}/1BD2.pdb.gz", chi=True, progress=False)
    keys = ["chain", "residue_number", "residue_name"]
    assert len(cif) > 700 and cif[keys].equals(pdb[keys]) and cif["chain"].nunique() == 5
    values = ["phi", "psi", "omega", "chi1", "chi2"]
    a, b = cif[values].to_numpy(), pdb[values].to_numpy()
    assert np.array_equal(np.isnan(a), np.isnan(b))
    assert angle_gap(a[~np.isnan(a)], b[~np.isnan(b)]) < 1e-4  # same 3-decimal coordinates in both files


def test_several_files_and_shared_names(tmp_path):
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    text = open(PDB_FILE).read()
    for folder in ("a", "b"):
        (tmp_path / folder / "protein.pdb").write_text(text)
    table = torsion_table([tmp_path / "a" / "protein.pdb", tmp_path / "b" / "protein.pdb"], progress=False)
    assert len(table) == 2 * 212
    assert table["structure"].nunique() == 2 and table["structure"].iloc[0].endswith("a/protein.pdb")
    both = torsion_table([PDB_FILE, DCD_FILE], topology=PSF_FILE, progress=False)
    assert list(both["structure"].unique()) == ["adk_open.pdb", "adk_dims.dcd"]
    assert len(both) == 212 + 98 * 212


def test_progress_bar_goes_to_stderr(capsys):
    torsion_table(PDB_FILE, progress=True)
    captured = capsys.readouterr()
    assert captured.out == "" and "frame" in captured.err


# --- bad input ---------------------------------------------------------------------------------------------


def test_missing_file(tmp_path):
    with pytest.raises(InputError, match=r"nothere\.pdb: no such file"):
        torsion_table(tmp_path / "nothere.pdb", progress=False)
    with pytest.raises(InputError, match=r"nothere\.psf: no such file \(the topology\)"):
        torsion_table(DCD_FILE, topology=tmp_path / "nothere.psf", progress=False)
    with pytest.raises(InputError, match=r"adk_dims\.dcd: a DCD file holds coordinates only and cannot be a topology"):
        torsion_table(DCD_FILE, topology=DCD_FILE, progress=False)
    with pytest.raises(InputError, match="no structure files given"):
        torsion_table([], progress=False)


# MDAnalysis' DCD reader, failing on the broken file, then fails again in its destructor (its own bug)
@pytest.mark.filterwarnings("ignore::pytest.PytestUnraisableExceptionWarning")
def test_unknown_and_unreadable_formats(tmp_path):
    odd = tmp_path / "angles.foo"
    odd.write_text("1 2 3\n")
    with pytest.raises(InputError, match=r"angles\.foo: unknown structure format 'foo'.*such as pdb"):
        torsion_table(odd, progress=False)
    garbage = tmp_path / "garbage.pdb"
    garbage.write_text("this is not\na structure\n")
    with pytest.raises(InputError, match=r"garbage\.pdb: cannot be read as PDB"):
        torsion_table(garbage, progress=False)
    broken = tmp_path / "broken.dcd"
    broken.write_bytes(b"\x00" * 100)
    with pytest.raises(InputError, match=r"broken\.dcd with topology .*adk\.psf: cannot be read as DCD"):
        torsion_table(broken, topology=PSF_FILE, progress=False)
    # coordinates of a different system: atom counts differ (adk.psf 3341 atoms, adk_oplsaa.pdb more)
    with pytest.raises(InputError, match=r"adk_oplsaa\.pdb with topology .*adk\.psf: cannot be read"):
        torsion_table(datafiles.PDB, topology=PSF_FILE, progress=False)


def test_no_protein_residues(tmp_path):
    water = tmp_path / "water.pdb"
    water.write_text(
        "HETATM    1  O   HOH A   1       0.000   0.000   0.000  1.00  0.00           O\n"
        "HETATM    2  H1  HOH A   1       0.957   0.000   0.000  1.00  0.00           H\n"
        "HETATM    3  H2  HOH A   1      -0.240   0.927   0.000  1.00  0.00           H\n"
        "END\n")
    with pytest.raises(InputError, match=r"water\.pdb: no protein residues .*found HOH"):
        torsion_table(water, progress=False)


def test_trajectory_without_topology():
    with pytest.raises(InputError, match=r"adk_dims\.dcd: a DCD file holds coordinates only and needs a topology"):
        torsion_table(DCD_FILE, progress=False)


def test_mdanalysis_missing_gives_install_hint(monkeypatch):
    monkeypatch.setitem(sys.modules, "MDAnalysis", None)  # import MDAnalysis now raises ImportError
    with pytest.raises(InputError, match=r"needs MDAnalysis.*pip install 'heatwalk\[data\]'"):
        torsion_table(PDB_FILE, progress=False)


# --- writing -----------------------------------------------------------------------------------------------


def test_write_csv_tsv_round_trip(tmp_path, pdb_table):
    for name, sep in (("table.csv", ","), ("table.tsv", "\t")):
        out = tmp_path / name
        write_torsion_table(pdb_table, out)
        back = pd.read_csv(out, sep=sep, keep_default_na=False, na_values=[""])
        assert list(back.columns) == list(pdb_table.columns)
        assert np.allclose(back["phi"], pdb_table["phi"], rtol=0, atol=1e-12, equal_nan=True)
        assert back["chi1"].isna().sum() == pdb_table["chi1"].isna().sum() > 0
        assert (back["chain"] == "4AKE").all()
    header, first = ((tmp_path / "table.csv").read_text().splitlines()[i].split(",") for i in (0, 1))
    assert first[header.index("phi")] == ""  # NaN (phi of the first residue) is an empty cell
    assert sorted(p.name for p in tmp_path.iterdir()) == ["table.csv", "table.tsv"]  # no temporary left


def test_write_parquet(tmp_path, pdb_table):
    pytest.importorskip("pyarrow", reason="pyarrow is not installed (needed for Parquet)")
    out = tmp_path / "table.parquet"
    write_torsion_table(pdb_table, out)
    back = pd.read_parquet(out)
    assert back.shape == pdb_table.shape
    assert np.allclose(back["psi"], pdb_table["psi"], rtol=0, atol=0, equal_nan=True)


def test_write_refuses_overwrite_and_unknown_extension(tmp_path, pdb_table):
    out = tmp_path / "table.csv"
    write_torsion_table(pdb_table, out)
    before = out.read_text()
    with pytest.raises(InputError, match="already exists"):
        write_torsion_table(pdb_table.head(3), out)
    assert out.read_text() == before
    write_torsion_table(pdb_table.head(3), out, overwrite=True)
    assert len(out.read_text().splitlines()) == 4
    with pytest.raises(InputError, match=r"unknown table format '\.xlsx'; expected \.csv, \.tsv or \.parquet"):
        write_torsion_table(pdb_table, tmp_path / "table.xlsx")
