"""The command line's contract beyond bad data files: exit statuses, --debug, signals, ranges, output paths,
messages in flags, devices, threads, the main process and memory-mapped data."""

import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import torch

import heatwalk
from heatwalk.frontend.cli import main

TINY = ["--train-steps", "2", "--batch-size", "8", "--hidden", "8", "--quiet"]


def run(argv, capsys):
    code = main(argv)
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def one_error_line(err: str) -> bool:
    return err.startswith("heatwalk: error: ") and err.count("\n") == 1 and "Traceback" not in err


def listing(folder: Path) -> list[str]:
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*"))


@pytest.fixture()
def angles_csv(tmp_path):
    rng = np.random.default_rng(0)
    p = tmp_path / "angles.csv"
    p.write_text("phi,psi\n" + "".join(f"{a!r},{b!r}\n" for a, b in rng.uniform(-3, 3, (40, 2)).tolist()))
    return p


@pytest.fixture(scope="module")
def torus_model(tmp_path_factory):
    root = tmp_path_factory.mktemp("model")
    rng = np.random.default_rng(0)
    data = root / "angles.csv"
    data.write_text("phi,psi\n" + "".join(f"{a!r},{b!r}\n" for a, b in rng.uniform(-3, 3, (40, 2)).tolist()))
    assert main(["fit", str(data), "--space", "torus", "--out", str(root / "m"), *TINY]) == 0
    return root / "m", data


# ----- the one handler -----------------------------------------------------------------------------------
def _raise(exc):
    def command(args):
        raise exc
    return command


def test_an_unexpected_exception_is_one_line_asking_for_a_report(monkeypatch, capsys, torus_model):
    from heatwalk.frontend import commands

    monkeypatch.setattr(commands, "cmd_info", _raise(RuntimeError("wheel\nfell off")))
    code, out, err = run(["info", str(torus_model[0])], capsys)
    assert code == 1
    assert err.count("\n") == 1 and "Traceback" not in err
    assert "RuntimeError: wheel fell off" in err and "please report" in err and "--debug" in err


@pytest.mark.parametrize("where", ["after", "before"])
def test_debug_adds_the_traceback(monkeypatch, capsys, torus_model, where):
    from heatwalk.frontend import commands

    monkeypatch.setattr(commands, "cmd_info", _raise(ZeroDivisionError("oops")))
    argv = ["info", str(torus_model[0]), "--debug"] if where == "after" else ["--debug", "info", str(torus_model[0])]
    code, out, err = run(argv, capsys)
    assert code == 1
    assert err.startswith("Traceback") and "ZeroDivisionError: oops" in err
    assert err.splitlines()[-1].startswith("heatwalk: error: unexpected ZeroDivisionError")


def test_debug_is_accepted_by_every_command(capsys):
    for command in ("demo", "fit", "sample", "evaluate", "torsions", "info"):
        with pytest.raises(SystemExit):
            main([command, "--help"])
        assert "--debug" in capsys.readouterr().out, command


def test_interrupts_are_one_line_with_the_signal_status(monkeypatch, capsys, torus_model):
    from heatwalk.core.interrupts import Interrupted
    from heatwalk.frontend import commands

    monkeypatch.setattr(commands, "cmd_info", _raise(KeyboardInterrupt()))
    code, _, err = run(["info", str(torus_model[0])], capsys)
    assert code == 130 and err.count("\n") == 1 and err.startswith("heatwalk: interrupted (SIGINT)")
    monkeypatch.setattr(commands, "cmd_info", _raise(Interrupted(signal.SIGTERM, step=7)))
    code, _, err = run(["info", str(torus_model[0])], capsys)
    assert code == 143 and err.count("\n") == 1 and "stopped by SIGTERM after step 7" in err


def test_warnings_are_one_line_and_handlers_are_restored(monkeypatch, capsys, torus_model):
    import warnings

    from heatwalk.frontend import commands
    from heatwalk.notices import warn

    def command(args):
        warn("a stale\ntemporary was removed")
        return 0

    monkeypatch.setattr(commands, "cmd_info", command)
    shown, handler = warnings.showwarning, signal.getsignal(signal.SIGTERM)
    code, _, err = run(["info", str(torus_model[0])], capsys)
    assert code == 0 and err == "heatwalk: warning: a stale temporary was removed\n"
    assert warnings.showwarning is shown and signal.getsignal(signal.SIGTERM) is handler


def test_sigterm_stops_a_fit_with_one_line_and_status_143(tmp_path, angles_csv):
    ckpt, out = tmp_path / "ckpt", tmp_path / "model"
    proc = subprocess.Popen([sys.executable, "-m", "heatwalk", "fit", str(angles_csv), "--space", "torus", "--out",
                             str(out), "--train-steps", "1000000", "--batch-size", "8", "--hidden", "8", "--quiet",
                             "--checkpoints", str(ckpt), "--checkpoint-every", "1"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 120
        while not (ckpt / "checkpoint.pt").is_file():  # training has started
            assert proc.poll() is None and time.monotonic() < deadline, proc.stderr.read() if proc.poll() else ""
            time.sleep(0.1)
        proc.send_signal(signal.SIGTERM)
        _, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 143, err
    assert err.count("\n") == 1 and err.startswith("heatwalk: stopped by SIGTERM after step ") and "checkpoint" in err
    assert not out.exists()


# ----- ranges of numbers ---------------------------------------------------------------------------------
@pytest.mark.parametrize("flags, message", [
    (["--seed", "-1"], r"--seed must be an integer in \[0, 9223372036854775807\], got -1"),
    (["--seed", str(2**70)], r"--seed must be an integer in \[0, 9223372036854775807\]"),
    (["--batch-size", str(10**12)], r"--batch-size must be an integer in \[1, 10000000\], got 1000000000000"),
    (["--batch-size", "0"], r"--batch-size must be an integer in \[1, 10000000\], got 0"),
    (["--hidden", str(10**7)], r"--hidden must be an integer in \[1, 65536\]"),
    (["--train-steps", "0"], r"--train-steps must be an integer in \[1, 1000000000\]"),
    (["--learning-rate", "nan"], r"--learning-rate must be a positive finite number, got nan"),
    (["--learning-rate", "inf"], r"--learning-rate must be a positive finite number, got inf"),
    (["--learning-rate", "0"], r"--learning-rate must be a positive finite number, got 0"),
    (["--threads", "0"], r"--threads must be an integer in \[1, 4096\], got 0"),
    (["--label-dropout", "1"], r"--label-dropout must be a finite number in \[0, 1\), got 1.0"),
])
def test_fit_refuses_numbers_out_of_range(tmp_path, capsys, angles_csv, flags, message):
    import re

    before = listing(tmp_path)
    code, _, err = run(["fit", str(angles_csv), "--space", "torus", "--out", str(tmp_path / "m"), *TINY, *flags],
                       capsys)
    assert code == 2 and one_error_line(err) and re.search(message, err), err
    assert listing(tmp_path) == before


def test_sample_and_evaluate_refuse_numbers_out_of_range(tmp_path, capsys, torus_model):
    model, data = torus_model
    cases = [
        (["sample", str(model), "--n", str(10**13), "--out", str(tmp_path / "s.csv")], "--n must be an integer in"),
        (["sample", str(model), "--n", "0", "--out", str(tmp_path / "s.csv")], "--n must be an integer in"),
        (["sample", str(model), "--n", "3", "--seed", "-1", "--out", str(tmp_path / "s.csv")], "--seed must be"),
        (["sample", str(model), "--n", "3", "--reverse-steps", "0", "--out", str(tmp_path / "s.csv")],
         "--reverse-steps must be"),
        (["evaluate", str(model), str(data), "--likelihood-points", "-1", "--out", str(tmp_path / "r")],
         "--likelihood-points must be an integer in [0, 1000000000], got -1"),
        (["evaluate", str(model), str(data), "--seed", "-1", "--out", str(tmp_path / "r")], "--seed must be"),
        (["demo", "--train-steps", "0", "--out", str(tmp_path / "d")], "--train-steps must be"),
    ]
    for argv, message in cases:
        code, _, err = run(argv, capsys)
        assert code == 2 and one_error_line(err) and message in err, (argv, err)
    assert listing(tmp_path) == []


def test_length_of_sequences_is_checked_against_its_declared_range(tmp_path, capsys):
    p = tmp_path / "s.fasta"
    p.write_text(">a\nACGT\n>b\nACGA\n")
    code, _, err = run(["fit", str(p), "--space", "categories", "--length", "0", "--out", str(tmp_path / "m"), *TINY],
                       capsys)
    assert code == 2 and one_error_line(err) and "--length must be a positive integer, got 0" in err


# ----- library messages in the command line's words ------------------------------------------------------
@pytest.mark.parametrize("space, flags, content, wanted, unwanted", [
    ("torus", [], "10,20\n30,170\n", "read them with the reading option --degrees", "degrees=True"),
    ("simplex", [], "0.2,0.3,0.5\n0.2,0.3,0.6\n", "--closure", "Simplex.from_rows"),
    ("simplex", [], "0.2,0.3,0.5\n0.0,0.5,0.5\n", "--zero-replacement δ", "Simplex.from_rows"),
    ("so3", [], "1,0,0\n0,1,0\n", "3 columns are read with --rotation-format rotvec", "with options {}"),
    ("so3", [], "1,0,0,0\n0,1,0,0\n", "--rotation-format quaternion, --quaternion-order wxyz", "rotation_format"),
    ("so3", ["--degrees"], "1,0,0,0,1,0,0,0,1\n", "--degrees applies to format 'rotvec' only, got --rotation-format",
     "rotation_format"),
])
def test_errors_name_flags_not_python_keywords(tmp_path, capsys, space, flags, content, wanted, unwanted):
    p = tmp_path / "d.csv"
    p.write_text(content)
    code, _, err = run(["fit", str(p), "--space", space, "--out", str(tmp_path / "m"), *flags, *TINY], capsys)
    assert code == 2 and one_error_line(err)
    assert wanted in err and unwanted not in err, err


def test_a_diverging_fit_names_the_learning_rate_flag(tmp_path, capsys, angles_csv):
    code, _, err = run(["fit", str(angles_csv), "--space", "torus", "--out", str(tmp_path / "m"), "--learning-rate",
                        "1e30", "--train-steps", "30", "--batch-size", "8", "--hidden", "8", "--quiet"], capsys)
    assert code == 2 and one_error_line(err) and "(--learning-rate 1e+30)" in err and "lr =" not in err, err
    assert not (tmp_path / "m").exists()


def test_message_rewriting_leaves_words_paths_and_config_keys_alone():
    from heatwalk.frontend.messages import for_command_line

    assert for_command_line("angles given in degrees") == "angles given in degrees"
    assert for_command_line("/data/batch_size.csv: no such file") == "/data/batch_size.csv: no such file"
    assert for_command_line("f.toml: unknown key 'train_stepz'; did you mean 'train_steps'?").endswith("'train_steps'?")
    assert for_command_line("lr must be a positive finite number") == "--learning-rate must be a positive finite number"


# ----- output paths --------------------------------------------------------------------------------------
def test_fit_never_replaces_the_folder_holding_its_data(tmp_path, capsys):
    # the data-loss case: --out naming the data's own folder, with --overwrite
    data_dir = tmp_path / "data"
    data_dir.mkdir()
    data = data_dir / "torus.csv"
    data.write_text("0.1,0.2\n0.3,0.4\n0.5,0.6\n")
    (data_dir / "notes.txt").write_text("mine")
    for out in (data_dir, data):
        code, _, err = run(["fit", str(data), "--space", "torus", "--out", str(out), "--overwrite", *TINY], capsys)
        assert code == 2 and one_error_line(err), err
    assert listing(tmp_path) == ["data", "data/notes.txt", "data/torus.csv"]
    assert data.read_text() == "0.1,0.2\n0.3,0.4\n0.5,0.6\n"


def test_fit_output_paths_are_checked_before_any_work(tmp_path, capsys, angles_csv):
    (tmp_path / "mine").mkdir()
    (tmp_path / "mine" / "thesis.tex").write_text("x")
    (tmp_path / "a_file").write_text("x")
    (tmp_path / "ck").mkdir()
    cases = [
        (["--out", str(tmp_path / "mine"), "--overwrite"], "heatwalk did not write"),
        (["--out", str(tmp_path / "a_file"), "--overwrite"], "is a file; refusing to replace a file by a folder"),
        (["--out", str(tmp_path / "missing" / "m")], "does not exist"),
        (["--out", str(tmp_path / "ck" / "m"), "--checkpoints", str(tmp_path / "ck")], "inside the checkpoint folder"),
        (["--out", str(tmp_path / "m"), "--checkpoints", str(tmp_path / "m" / "ck")], "is inside the output"),
        (["--out", str(tmp_path / "m"), "--checkpoints", str(tmp_path / "a_file")], "--checkpoints"),
    ]
    before = listing(tmp_path)
    for flags, message in cases:
        code, _, err = run(["fit", str(angles_csv), "--space", "torus", *flags, *TINY], capsys)
        assert code == 2 and one_error_line(err) and message in err, (flags, err)
    assert listing(tmp_path) == before


def test_evaluate_refuses_an_existing_report_and_replaces_it_whole(tmp_path, capsys, torus_model):
    model, data = torus_model
    report = tmp_path / "report"
    flags = ["--reverse-steps", "2", "--likelihood-points", "3", "--quiet"]
    assert run(["evaluate", str(model), str(data), "--out", str(report), *flags], capsys)[0] == 0
    first = (report / "evaluation.json").read_bytes()
    code, _, err = run(["evaluate", str(model), str(data), "--out", str(report), *flags], capsys)
    assert code == 2 and one_error_line(err) and "already exists" in err
    assert run(["evaluate", str(model), str(data), "--out", str(report), "--seed", "5", "--overwrite", *flags],
               capsys)[0] == 0
    assert (report / "evaluation.json").read_bytes() != first
    assert [p.name for p in tmp_path.iterdir()] == ["report"]  # no temporary or set-aside folder left
    (tmp_path / "mine").mkdir()
    (tmp_path / "mine" / "keep.txt").write_text("x")
    code, _, err = run(["evaluate", str(model), str(data), "--out", str(tmp_path / "mine"), "--overwrite", *flags],
                       capsys)
    assert code == 2 and one_error_line(err) and (tmp_path / "mine" / "keep.txt").read_text() == "x"


def test_evaluate_writes_the_per_point_table(tmp_path, capsys, torus_model):
    from heatwalk.io.tables import read_table

    model, data = torus_model
    code, _, err = run(["evaluate", str(model), str(data), "--out", str(tmp_path / "r"), "--per-point",
                        "--reverse-steps", "2", "--likelihood-points", "6", "--quiet"], capsys)
    assert code == 0, err
    table = read_table(tmp_path / "r" / "per_point.csv")
    assert table.names[:2] == ["point", "log_likelihood_nats"] and table.values.shape == (6, len(table.names))
    assert set(table.values[:, 0]) <= set(range(0, 40)) and np.isfinite(table.values[:, 1]).all()
    code, _, err = run(["evaluate", str(model), str(data), "--out", str(tmp_path / "r2"), "--per-point",
                        "--likelihood-points", "0", "--quiet"], capsys)
    assert code == 2 and one_error_line(err) and not (tmp_path / "r2").exists()


def test_sample_and_torsions_check_their_output_file(tmp_path, capsys, torus_model):
    model, _ = torus_model
    (tmp_path / "dir").mkdir()
    code, _, err = run(["sample", str(model), "--n", "3", "--out", str(tmp_path / "dir"), "--overwrite"], capsys)
    assert code == 2 and one_error_line(err) and "is a folder" in err
    code, _, err = run(["sample", str(model), "--n", "3", "--out", str(model / "model.json"), "--overwrite"], capsys)
    assert code == 2 and one_error_line(err) and "inside the model folder" in err
    pdb = tmp_path / "x.pdb"
    pdb.write_text("not a structure")
    code, _, err = run(["torsions", str(pdb), "--out", str(pdb), "--overwrite"], capsys)
    assert code == 2 and one_error_line(err) and "is the input" in err and pdb.read_text() == "not a structure"


def test_demo_writes_one_folder_and_replaces_only_a_demo_folder(tmp_path, capsys):
    out = tmp_path / "demo"
    flags = ["--train-steps", "2", "--reverse-steps", "2", "--quiet"]
    assert run(["demo", "--out", str(out), *flags], capsys)[0] == 0
    assert (out / "demo_report.json").is_file() and (out / "model" / "model.json").is_file()
    code, _, err = run(["demo", "--out", str(out), *flags], capsys)
    assert code == 2 and one_error_line(err) and "already exists" in err
    assert run(["demo", "--out", str(out), "--overwrite", *flags], capsys)[0] == 0
    (tmp_path / "mine").mkdir()
    (tmp_path / "mine" / "keep.txt").write_text("x")
    code, _, err = run(["demo", "--out", str(tmp_path / "mine"), "--overwrite", *flags], capsys)
    assert code == 2 and one_error_line(err) and listing(tmp_path / "mine") == ["keep.txt"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["demo", "mine"]


# ----- devices, threads, processes, mapped data ----------------------------------------------------------
def test_device_reaches_fit_sample_and_log_prob(tmp_path, capsys, monkeypatch, angles_csv):
    from heatwalk.core.model import Model

    seen = []
    real_fit, real_sample, real_log_prob = heatwalk.fit, Model.sample, Model.log_prob
    monkeypatch.setattr(heatwalk, "fit", lambda *a, **k: seen.append(("fit", k["device"])) or real_fit(*a, **k))
    monkeypatch.setattr(Model, "sample", lambda self, *a, **k: seen.append(("sample", k["device"]))
                        or real_sample(self, *a, **k))
    monkeypatch.setattr(Model, "log_prob", lambda self, *a, **k: seen.append(("log_prob", k["device"]))
                        or real_log_prob(self, *a, **k))
    m = tmp_path / "m"
    assert run(["fit", str(angles_csv), "--space", "torus", "--out", str(m), "--device", "auto", *TINY], capsys)[0] == 0
    assert run(["sample", str(m), "--n", "3", "--out", str(tmp_path / "s.csv"), "--reverse-steps", "2", "--quiet",
                "--device", "cpu"], capsys)[0] == 0
    assert run(["evaluate", str(m), str(angles_csv), "--out", str(tmp_path / "r"), "--reverse-steps", "2",
                "--likelihood-points", "2", "--quiet"], capsys)[0] == 0
    expected = torch.device("cuda", 0) if torch.cuda.is_available() else torch.device("cpu")
    assert seen == [("fit", expected), ("sample", torch.device("cpu")), ("sample", torch.device("cpu")),
                    ("log_prob", torch.device("cpu"))]


@pytest.mark.skipif(torch.cuda.is_available(), reason="this machine has a CUDA GPU, so --device cuda is valid")
def test_a_device_this_machine_lacks_is_refused_before_any_work(tmp_path, capsys, angles_csv):
    for device, message in (("cuda", "no CUDA GPU"), ("mps", "MPS has no float64"), ("tpu", "device must be")):
        code, _, err = run(["fit", str(angles_csv), "--space", "torus", "--out", str(tmp_path / "m"),
                            "--device", device, *TINY], capsys)
        assert code == 2 and one_error_line(err) and message in err, err
    assert not (tmp_path / "m").exists()


def test_threads_flag_sets_torch_threads_and_documents_its_default(tmp_path, capsys, monkeypatch, torus_model):
    from heatwalk.core import devices

    calls = []
    monkeypatch.setattr(devices, "set_threads", lambda n: calls.append(n) or torch.get_num_threads())
    model, data = torus_model
    assert run(["sample", str(model), "--n", "2", "--out", str(tmp_path / "s.csv"), "--reverse-steps", "2",
                "--threads", "1", "--quiet"], capsys)[0] == 0
    assert calls == [1]
    with pytest.raises(SystemExit):
        main(["fit", "--help"])
    text = " ".join(capsys.readouterr().out.split())
    assert "--threads N torch intra-op threads (default: torch's own choice, the number of physical cores" in text


def test_only_the_main_process_writes_the_model(tmp_path, capsys, monkeypatch, angles_csv):
    from heatwalk.core import parallel

    monkeypatch.setattr(parallel, "is_main_process", lambda: False)
    code, out, err = run(["fit", str(angles_csv), "--space", "torus", "--out", str(tmp_path / "m"), *TINY], capsys)
    assert code == 0 and out == "" and not (tmp_path / "m").exists()


def test_large_array_files_are_memory_mapped_and_train_the_same_model(tmp_path, capsys, monkeypatch):
    from heatwalk.io import arrays

    rng = np.random.default_rng(4)
    x = rng.uniform(-3, 3, (64, 2))
    np.save(tmp_path / "big.npy", x)
    (tmp_path / "same.csv").write_text("".join(f"{a!r},{b!r}\n" for a, b in x.tolist()))
    given = []
    real_fit = heatwalk.fit
    monkeypatch.setattr(heatwalk, "fit",
                        lambda space, data, **k: given.append(type(data)) or real_fit(space, data, **k))
    monkeypatch.setattr(arrays, "MEMMAP_MIN_BYTES", 1)  # every array file counts as large
    for name in ("big.npy", "same.csv"):
        code, _, err = run(["fit", str(tmp_path / name), "--space", "torus", "--out", str(tmp_path / (name + ".m")),
                            *TINY], capsys)
        assert code == 0, err
    assert given[0] is np.memmap and given[1] is torch.Tensor
    a = heatwalk.load(tmp_path / "big.npy.m").network.state_dict()
    b = heatwalk.load(tmp_path / "same.csv.m").network.state_dict()
    assert all(torch.equal(a[k], b[k]) for k in a)  # rows read per batch train to the same weights, bit for bit
    code, _, err = run(["fit", str(tmp_path / "big.npy"), "--space", "torus", "--degrees", "--out",
                        str(tmp_path / "d"), *TINY], capsys)
    assert code == 2 and one_error_line(err) and "--degrees cannot be applied" in err
    monkeypatch.setattr(arrays, "MEMMAP_MIN_BYTES", 10**12)
    code, _, err = run(["fit", str(tmp_path / "big.npy"), "--space", "torus", "--out", str(tmp_path / "small"),
                        *TINY], capsys)
    assert code == 2 and one_error_line(err)  # a small .npy is not a table format: refused, not half-read
