"""Command line: config files, --dry-run, info, --version/--help without torch, fixed coordinates, torsions."""

import math
import subprocess
import sys

import numpy as np
import pytest

from heatwalk.frontend.cli import main


def run(args, capsys):
    code = main(args)
    out = capsys.readouterr()
    return code, out.out, out.err


@pytest.fixture()
def angles_csv(tmp_path):
    rng = np.random.default_rng(0)
    x = np.stack([rng.vonmises(1.0, 5.0, 200), rng.vonmises(-2.0, 3.0, 200)], 1)
    p = tmp_path / "angles.csv"
    p.write_text("phi,psi\n" + "".join(f"{a},{b}\n" for a, b in x))
    return p


def test_config_file_and_flag_override_are_saved_beside_the_model(tmp_path, angles_csv, capsys):
    import tomllib

    cfg = tmp_path / "fit.toml"
    cfg.write_text(f'data = "{angles_csv}"\nspace = "torus"\ntrain_steps = 7\nhidden = 16\nseed = 3\n'
                   f'out = "{tmp_path / "m"}"\n')
    code, out, err = run(["fit", "--config", str(cfg), "--train-steps", "5", "--quiet"], capsys)
    assert code == 0, err
    saved = tomllib.loads((tmp_path / "m" / "fit_config.toml").read_text())
    assert saved["train_steps"] == 5 and saved["hidden"] == 16 and saved["seed"] == 3 and saved["space"] == "torus"
    assert "heatwalk model in" in out and "5 steps" in out            # the one-screen summary
    code, out, err = run(["info", str(tmp_path / "m")], capsys)
    assert code == 0 and "Torus(n=2)" in out and "200 points" in out
    # the saved file repeats the fit (after changing the output folder on the command line)
    code, out, err = run(["fit", "--config", str(tmp_path / "m" / "fit_config.toml"), "--out", str(tmp_path / "m2"),
                          "--quiet"], capsys)
    assert code == 0, err


def test_dry_run_prints_the_resolved_configuration_and_writes_nothing(tmp_path, angles_csv, capsys):
    code, out, err = run(["fit", str(angles_csv), "--space", "torus", "--out", str(tmp_path / "m"), "--dry-run"],
                         capsys)
    assert code == 0, err
    # train_steps is left to the size rule (not printed); the other defaults are
    assert "train_steps" not in out and 'space = "torus"' in out and "batch_size = 512" in out
    assert not (tmp_path / "m").exists()


def test_unknown_config_key_is_one_line_with_the_nearest_key(tmp_path, angles_csv, capsys):
    cfg = tmp_path / "fit.toml"
    cfg.write_text("train_stepz = 5\n")
    code, out, err = run(["fit", str(angles_csv), "--space", "torus", "--out", str(tmp_path / "m"), "--config",
                          str(cfg)], capsys)
    assert code == 2 and err.count("\n") == 1 and "unknown key 'train_stepz'" in err and "'train_steps'" in err
    cfg.write_text("train_steps = 'many'\n")
    code, out, err = run(["fit", str(angles_csv), "--space", "torus", "--out", str(tmp_path / "m"), "--config",
                          str(cfg)], capsys)
    assert code == 2 and "must be an integer" in err
    assert not (tmp_path / "m").exists()


def test_out_of_range_config_values_name_the_file_and_key_not_the_flag(tmp_path, angles_csv, capsys):
    cfg = tmp_path / "fit.toml"
    base = [str(angles_csv), "--out", str(tmp_path / "m"), "--config", str(cfg)]
    cfg.write_text("train_steps = 0\n")  # a fit flag's declared range
    code, out, err = run(["fit", "--space", "torus", *base], capsys)
    assert code == 2 and err.count("\n") == 1 and f"{cfg}: key 'train_steps'" in err and "--train-steps" not in err
    cfg.write_text("zero_replacement = -1.0\n")  # a space option's declared range
    code, out, err = run(["fit", "--space", "simplex", *base], capsys)
    assert code == 2 and f"{cfg}: key 'zero_replacement'" in err and "--zero-replacement" not in err
    cfg.write_text("train_steps = 5\n")  # the same value given on the command line is named by its flag
    code, out, err = run(["fit", "--space", "torus", "--train-steps", "0", *base], capsys)
    assert code == 2 and "--train-steps must be" in err and "fit.toml" not in err
    assert not (tmp_path / "m").exists()


def test_usage_errors_are_one_line(capsys):
    for argv in (["fit", "--train-steps", "x"], ["sample"], ["bogus"], []):
        code, out, err = run(argv, capsys)
        assert code == 2 and err.startswith("heatwalk: error: ") and err.count("\n") == 1, (argv, err)


def test_version_and_help_do_not_import_torch():
    code = ("import sys; from heatwalk.frontend.cli import main\n"
            "try:\n    main(['--version'])\nexcept SystemExit:\n    pass\n"
            "try:\n    main(['--help'])\nexcept SystemExit:\n    pass\n"
            "print('torch' in sys.modules)")
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    assert r.stdout.strip().endswith("False") and "heatwalk 0." in r.stdout and "COMMAND" in r.stdout
    r = subprocess.run([sys.executable, "-m", "heatwalk", "--version"], capture_output=True, text=True, timeout=120)
    assert r.returncode == 0 and r.stdout.startswith("heatwalk ")


def test_fix_a_coordinate_from_the_command_line(tmp_path, angles_csv, capsys):
    code, _, err = run(["fit", str(angles_csv), "--space", "torus", "--out", str(tmp_path / "m"), "--train-steps",
                        "20", "--hidden", "16", "--inpainting", "--quiet"], capsys)
    assert code == 0, err
    code, _, err = run(["sample", str(tmp_path / "m"), "--n", "30", "--out", str(tmp_path / "s.csv"),
                        "--reverse-steps", "10", "--fix", "phi=0.5", "--quiet"], capsys)
    assert code == 0, err
    vals = np.loadtxt(tmp_path / "s.csv", delimiter=",", skiprows=1)
    assert np.allclose(vals[:, 0], 0.5, atol=1e-12)
    code, _, err = run(["sample", str(tmp_path / "m"), "--n", "3", "--out", str(tmp_path / "t.csv"),
                        "--fix", "omega=1", "--quiet"], capsys)
    assert code == 2 and "'omega' is not a column" in err and not (tmp_path / "t.csv").exists()
    given = tmp_path / "given.csv"
    given.write_text("psi\n-1.0\n")
    code, _, err = run(["sample", str(tmp_path / "m"), "--n", "10", "--out", str(tmp_path / "g.csv"),
                        "--reverse-steps", "10", "--given", str(given), "--quiet"], capsys)
    assert code == 0, err
    assert np.allclose(np.loadtxt(tmp_path / "g.csv", delimiter=",", skiprows=1)[:, 1], -1.0, atol=1e-12)


def test_torsions_command_writes_a_table_ready_for_fit(tmp_path, capsys):
    pytest.importorskip("MDAnalysis", reason="the data extra (MDAnalysis) is not installed")
    datafiles = pytest.importorskip("MDAnalysisTests.datafiles", reason="MDAnalysisTests is not installed")
    out = tmp_path / "t.csv"
    # MDAnalysisTests' adenylate kinase structure (adk_oplsaa.pdb, 214 residues, one chain)
    code, text, err = run(["torsions", datafiles.PDB, "--out", str(out), "--quiet"], capsys)
    assert code == 0, err
    header = out.read_text().splitlines()[0].split(",")
    assert header[:6] == ["structure", "frame", "chain", "residue_number", "insertion_code", "residue_name"]
    rows = out.read_text().splitlines()[1:]
    assert len(rows) > 150 and "wrote" in text
    phi = np.array([float(r.split(",")[6]) for r in rows])
    assert np.all(np.abs(phi) <= 180) and not math.isnan(phi.sum())
    code, _, err = run(["torsions", str(tmp_path / "none.pdb"), "--out", str(tmp_path / "x.csv")], capsys)
    assert code == 2 and "no such file" in err and not (tmp_path / "x.csv").exists()


def test_wide_table_with_named_columns_labels_and_ignored_columns(tmp_path, capsys):
    # the case of a torsion table with extra columns: residue names as labels, omega ignored
    rng = np.random.default_rng(1)
    p = tmp_path / "wide.csv"
    rows = ["residue,phi,psi,omega"]
    for i in range(120):
        name = ("ALA", "GLY")[i % 2]
        rows.append(f"{name},{rng.normal(-60, 10):.3f},{rng.normal(-45, 10):.3f},{rng.normal(180, 3):.3f}")
    p.write_text("\n".join(rows) + "\n")
    code, out, err = run(["fit", str(p), "--space", "torus", "--degrees", "--columns", "phi,psi", "--labels",
                          "residue", "--out", str(tmp_path / "m"), "--train-steps", "10", "--hidden", "16",
                          "--quiet"], capsys)
    assert code == 0, err
    assert "Torus(n=2)" in out and "phi, psi (2 per point)" in out and "ignored      omega" in out
    assert "2 classes: ALA, GLY" in out
    code, _, err = run(["sample", str(tmp_path / "m"), "--n", "8", "--out", str(tmp_path / "s.npz"),
                        "--reverse-steps", "5", "--label", "GLY", "--quiet"], capsys)
    assert code == 0, err
    with np.load(tmp_path / "s.npz") as z:                      # written in the format the extension names
        assert sorted(z.files) == ["phi", "psi"] and np.all(np.abs(z["phi"]) <= 180)   # degrees, as fitted
    for out_name, message in (("s.xyz", "extension"), ("s.fasta", "extension")):
        code, _, err = run(["sample", str(tmp_path / "m"), "--n", "8", "--out", str(tmp_path / out_name),
                            "--quiet"], capsys)
        assert code == 2 and message in err and not (tmp_path / out_name).exists(), err
    code, _, err = run(["fit", str(p), "--space", "torus", "--columns", "phi,chi", "--out", str(tmp_path / "m2")],
                       capsys)
    assert code == 2 and "chi" in err and err.count("\n") == 1 and not (tmp_path / "m2").exists()
    code, _, err = run(["fit", str(p), "--space", "torus", "--out", str(tmp_path / "m3")], capsys)
    assert code == 2 and "residue" in err and not (tmp_path / "m3").exists()      # a text column named


def test_readme_simplex_command_with_zero_replacement_and_closure(tmp_path, capsys):
    # compositions rounded to five decimals with a zero part: the README's command, plus --closure
    p = tmp_path / "budgets.csv"
    rng = np.random.default_rng(2)
    shares = rng.dirichlet([4, 3, 2], 100)
    shares[0] = [0.6, 0.4, 0.0]
    p.write_text("food,fuel,other\n" + "".join(f"{a:.5f},{b:.5f},{c:.5f}\n" for a, b, c in shares))
    code, _, err = run(["fit", str(p), "--space", "simplex", "--zero-replacement", "1e-4", "--closure",
                        "--out", str(tmp_path / "budget-model"), "--train-steps", "5", "--hidden", "16", "--quiet"],
                       capsys)
    assert code == 0, err
    code, _, err = run(["sample", str(tmp_path / "budget-model"), "--n", "5", "--out", str(tmp_path / "s.csv"),
                        "--reverse-steps", "5", "--quiet"], capsys)
    assert code == 0, err
    header = (tmp_path / "s.csv").read_text().splitlines()[0]
    assert header == "food,fuel,other"
    code, _, err = run(["fit", str(p), "--space", "torus", "--lonlat", "--out", str(tmp_path / "x")], capsys)
    assert code == 2 and "--lonlat does not apply to --space torus" in err
