"""The heatwalk command line: demo, fit -> sample round trip, and bad input (exit 2, one line, nothing written)."""

import csv
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
    x = np.stack([rng.vonmises(1.0, 5.0, 300), rng.vonmises(-2.0, 3.0, 300)], 1)
    p = tmp_path / "angles.csv"
    with open(p, "w") as f:
        f.write("phi,psi\n")
        for r in x:
            f.write(f"{r[0]},{r[1]}\n")
    return p


def test_fit_then_sample_roundtrip(tmp_path, angles_csv, capsys):
    model = tmp_path / "model"
    code, out, err = run(["fit", str(angles_csv), "--space", "torus", "--out", str(model), "--train-steps", "30",
                          "--batch-size", "64", "--hidden", "32", "--quiet"], capsys)
    assert code == 0, err
    assert (model / "model.json").is_file() and (model / "weights.safetensors").is_file()
    samples = tmp_path / "s.csv"
    code, out, err = run(["sample", str(model), "--n", "40", "--out", str(samples), "--reverse-steps", "20", "--quiet"],
                         capsys)
    assert code == 0, err
    rows = list(csv.reader(open(samples)))
    assert rows[0] == ["phi", "psi"] and len(rows) == 41        # the data's column names travel with the model
    vals = np.array(rows[1:], dtype=float)
    assert np.all((vals >= -math.pi) & (vals < math.pi))
    # degrees on the way out
    code, _, err = run(["sample", str(model), "--n", "5", "--out", str(tmp_path / "d.csv"), "--reverse-steps", "5",
                        "--degrees", "--quiet"], capsys)
    assert code == 0, err
    vals = np.array(list(csv.reader(open(tmp_path / "d.csv")))[1:], dtype=float)
    assert np.all(np.abs(vals) <= 180)
    # an existing model folder is never overwritten silently
    code, _, err = run(["fit", str(angles_csv), "--space", "torus", "--out", str(model), "--train-steps", "2",
                        "--quiet"], capsys)
    assert code == 2 and "already exists" in err


@pytest.mark.parametrize("content, message", [
    ("phi,psi\n0.1,0.2\n0.3,abc\n", r"line 3, column 2 \(psi\): 'abc' is not a number"),
    ("0.1,0.2\nnan,0.2\n", r"line 2, column 1: value 'nan' is not finite"),
    ("0.1,0.2\n0.5,inf\n", r"line 2, column 2: value 'inf' is not finite"),
    ("0.1,0.2\n0.3,0.4,0.5\n", r"line 2: 3 columns, but the first row has 2"),
    ("", r"no data rows"),
    ("phi,psi\n", r"no data rows"),
    ("0.1,0.2\n0.3,0.4\n120.0,45.0\n", r"line 3, column 1: angle 120 is outside .*degrees"),
])
def test_bad_input_exit_2_and_nothing_written(tmp_path, capsys, content, message):
    import re

    p = tmp_path / "bad.csv"
    p.write_text(content)
    out = tmp_path / "model"
    code, stdout, err = run(["fit", str(p), "--space", "torus", "--out", str(out), "--train-steps", "2", "--quiet"],
                            capsys)
    assert code == 2
    assert err.startswith("heatwalk: error: ") and err.count("\n") == 1 and "Traceback" not in err
    assert re.search(message, err), err
    assert str(p) in err
    assert not out.exists() and sorted(x.name for x in tmp_path.iterdir()) == ["bad.csv"]


def test_degrees_flag_reads_degrees(tmp_path, capsys):
    p = tmp_path / "deg.csv"
    p.write_text("10,20\n-170,179\n30,-60\n")
    code, _, err = run(["fit", str(p), "--space", "torus", "--degrees", "--out", str(tmp_path / "m"),
                        "--train-steps", "2", "--hidden", "8", "--quiet"], capsys)
    assert code == 0, err
    import json

    rec = json.loads((tmp_path / "m" / "model.json").read_text())["record"]
    assert rec["reading_options"] == {"degrees": True}


def test_unknown_space_and_missing_file(tmp_path, capsys):
    code, _, err = run(["fit", str(tmp_path / "none.csv"), "--space", "torus", "--out", str(tmp_path / "m")],
                       capsys)
    assert code == 2 and "no such file" in err
    p = tmp_path / "a.csv"
    p.write_text("0.1,0.2\n")
    code, _, err = run(["fit", str(p), "--space", "klein_bottle", "--out", str(tmp_path / "m")], capsys)
    assert code == 2 and "invalid choice: 'klein_bottle'" in err


def test_demo_runs_as_a_command(tmp_path):
    # the installed console script, as a user would run it (short training to keep the suite fast)
    r = subprocess.run([sys.executable, "-m", "heatwalk.frontend.cli", "demo", "--out", str(tmp_path / "demo"),
                        "--train-steps", "150", "--reverse-steps", "40", "--quiet"], capture_output=True, text=True,
                       timeout=600)
    assert r.returncode == 0, r.stderr
    for name in ("samples.csv", "torsions.png", "demo_report.json", "lanternfold_torsions.csv"):
        assert (tmp_path / "demo" / name).is_file()
    assert "MMD²" in r.stdout and "uniform vs half A" in r.stdout


BAD_MANIFOLD_FILES = [
    # (space, extra flags, file content, expected message)
    ("sphere", [], "0,0,1\n0,0.5,0.5\n", r"line 2: .*norm"),
    ("sphere", [], "0,0,1\n0,0,0\n", r"line 2: .*(zero|norm)"),
    ("sphere", ["--lonlat"], "20,10\n20,95\n", r"line 2, column 2: latitude 95 degrees"),
    ("so3", [], "1,0,0,0,1,0,0,0,1\n1,0,0,0,1,0,0,0,-1\n", r"line 2: .*(reflection|det)"),
    ("so3", [], "1,0,0,0,1,0,0,0,1\n1,0.2,0,0,1,0,0,0,1\n", r"line 2: .*not a rotation matrix"),
    ("so3", ["--rotation-format", "quaternion", "--quaternion-order", "wxyz"], "1,0,0,0\n0,0,0,0\n",
     r"line 2: .*zero"),
    ("so3", ["--rotation-format", "quaternion"], "1,0,0,0\n", r"order must be stated"),
    ("so3", [], "1,0,0\n", r"3 columns per row.*needs 9"),
    ("simplex", [], "0.2,0.3,0.5\n0.2,-0.1,0.9\n", r"line 2, column 2: part -0.1 is negative"),
    ("simplex", [], "0.2,0.3,0.5\n0.2,0.3,0.4\n", r"line 2: .*sum"),
    ("simplex", [], "0.2,0.3,0.5\n0.0,0.5,0.5\n", r"line 2, column 1: part is exactly 0.*zero.*replacement"),
    ("simplex", [], "1.0\n1.0\n", r"K"),
]


@pytest.mark.parametrize("space, flags, content, message", BAD_MANIFOLD_FILES)
def test_bad_points_on_other_spaces(tmp_path, capsys, space, flags, content, message):
    import re

    p = tmp_path / "bad.csv"
    p.write_text(content)
    out = tmp_path / "model"
    code, _, err = run(["fit", str(p), "--space", space, *flags, "--out", str(out), "--train-steps", "2", "--quiet"],
                       capsys)
    assert code == 2, err
    assert err.startswith("heatwalk: error: ") and err.count("\n") == 1 and "Traceback" not in err
    assert re.search(message, err, flags=re.IGNORECASE), err
    assert not out.exists() and sorted(x.name for x in tmp_path.iterdir()) == ["bad.csv"]


def test_fit_sample_evaluate_on_the_sphere_with_latlon(tmp_path, capsys):
    rng = np.random.default_rng(1)
    lat = np.clip(40 + 10 * rng.standard_normal(200), -89, 89)
    lon = -30 + 20 * rng.standard_normal(200)
    p = tmp_path / "pts.csv"
    p.write_text("lon,lat\n" + "".join(f"{b},{a}\n" for a, b in zip(lat, lon)))
    code, _, err = run(["fit", str(p), "--space", "sphere", "--lonlat", "--out", str(tmp_path / "m"),
                        "--train-steps", "20", "--hidden", "16", "--quiet"], capsys)
    assert code == 0, err
    code, _, err = run(["sample", str(tmp_path / "m"), "--n", "10", "--out", str(tmp_path / "s.csv"),
                        "--reverse-steps", "10", "--quiet"], capsys)
    assert code == 0, err
    rows = list(csv.reader(open(tmp_path / "s.csv")))
    assert rows[0] == ["lon", "lat"] and len(rows) == 11
    code, out, err = run(["evaluate", str(tmp_path / "m"), str(p), "--out", str(tmp_path / "ev"), "--reverse-steps", "10",
                          "--likelihood-points", "5", "--quiet"], capsys)
    assert code == 0, err
    import json

    rep = json.loads((tmp_path / "ev" / "evaluation.json").read_text())
    assert rep["likelihood"]["n"] == 5 and not rep["likelihood"]["bound"]
    assert math.isfinite(rep["likelihood"]["mean_log_likelihood_nats"])
    assert rep["sample_metrics"]["mmd_squared"]["n"] == 100
    assert (tmp_path / "ev" / "data_vs_samples.png").is_file() and "MMD²" in out


def _fasta(records):
    return "".join(f">r{i}\n{s}\n" for i, s in enumerate(records))


def test_sequences_fit_sample_evaluate(tmp_path, capsys):
    rng = np.random.default_rng(2)
    seqs = ["".join(rng.choice(list("ACGT"), 8, p=[0.4, 0.3, 0.2, 0.1])) for _ in range(120)]
    p = tmp_path / "seqs.fasta"
    p.write_text(_fasta(seqs))
    code, _, err = run(["fit", str(p), "--space", "categories", "--out", str(tmp_path / "m"), "--train-steps", "20",
                        "--batch-size", "32", "--quiet"], capsys)
    assert code == 0, err
    code, _, err = run(["sample", str(tmp_path / "m"), "--n", "7", "--out", str(tmp_path / "s.fasta"),
                        "--reverse-steps", "10", "--quiet"], capsys)
    assert code == 0, err
    lines = (tmp_path / "s.fasta").read_text().split()
    body = [l for l in lines if not l.startswith(">")]
    assert len(body) == 7 and all(len(b) == 8 and set(b) <= set("ACGT") for b in body)
    code, out, err = run(["evaluate", str(tmp_path / "m"), str(p), "--out", str(tmp_path / "ev"), "--reverse-steps", "10",
                          "--likelihood-points", "10", "--quiet"], capsys)
    assert code == 0, err
    import json

    rep = json.loads((tmp_path / "ev" / "evaluation.json").read_text())
    lik = rep["likelihood"]
    assert lik["bound"] and lik["mean_log_likelihood_nats"] is None and lik["nll_bound_nats"] == -lik["elbo_nats"]
    assert "1" in rep["sample_metrics"]["kmer_tv_distance"]
    assert "bits per token" in out and "upper bound on the negative log-likelihood" in out


@pytest.mark.parametrize("content, flags, message", [
    (">a\nACGT\n>b\nACXT\n", ["--alphabet", "ACGT"], r"record 2, column 3: unknown symbol 'X'"),
    # records of different lengths are a variable-length model now; one longer than --length is refused
    (">a\nACGT\n>b\nACGTA\n", ["--length", "4"], r"length 5, longer than the maximum 4"),
    (">a\nACGT\n>b\n\n>c\nACGT\n", [], r"empty"),
    (">a\nAAAA\n>b\nAAAA\n", [], r"at least 2|K"),
])
def test_bad_sequences_exit_2(tmp_path, capsys, content, flags, message):
    import re

    p = tmp_path / "bad.fasta"
    p.write_text(content)
    code, _, err = run(["fit", str(p), "--space", "categories", *flags, "--out", str(tmp_path / "m"),
                        "--train-steps", "2", "--quiet"], capsys)
    assert code == 2, err
    assert err.startswith("heatwalk: error: ") and err.count("\n") == 1
    assert re.search(message, err, flags=re.IGNORECASE), err
    assert sorted(x.name for x in tmp_path.iterdir()) == ["bad.fasta"]


def test_a_closed_standard_output_stops_quietly_with_the_sigpipe_status(tmp_path, angles_csv, capsys, monkeypatch):
    """``heatwalk fit … | head -1``: the model folder is written whole, nothing is reported as a bug, and the exit
    status is 141 (128 + SIGPIPE, the shell's convention)."""
    import io

    class ClosedPipe(io.StringIO):
        def write(self, text):
            raise BrokenPipeError(32, "Broken pipe")

    model = tmp_path / "model"
    monkeypatch.setattr(sys, "stdout", ClosedPipe())
    code = main(["fit", str(angles_csv), "--space", "torus", "--out", str(model), "--train-steps", "5", "--quiet"])
    monkeypatch.undo()
    assert code == 141
    assert "bug" not in capsys.readouterr().err
    assert (model / "model.json").is_file() and (model / "weights.safetensors").is_file()
