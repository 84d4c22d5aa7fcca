"""Bad input files on the command line: a matrix of files x spaces x commands, each refused the same way.

The contract (heatwalk.frontend.cli.main): exit status 2, exactly one line on standard error starting
``heatwalk: error:``, nothing created or changed where the output would go, and the input file untouched
(hashed before and after). Commands run in-process (``main([...])``) to keep the matrix fast.
"""

import hashlib
import math
import os
import stat
from pathlib import Path

import numpy as np
import pytest

from heatwalk.frontend.cli import main

SPACES = ("torus", "sphere", "so3", "simplex", "categories")
FIT_FLAGS = ["--train-steps", "2", "--batch-size", "8", "--hidden", "8", "--quiet"]
EVAL_FLAGS = ["--reverse-steps", "2", "--likelihood-points", "2", "--quiet"]


# ----- valid data per space ---------------------------------------------------------------------------
def _rotation(a: float) -> list[float]:
    c, s = math.cos(a), math.sin(a)
    return [c, -s, 0.0, s, c, 0.0, 0.0, 0.0, 1.0]


def valid_rows(space: str) -> list[list[float]]:
    rng = np.random.default_rng(1)
    if space == "torus":
        return rng.uniform(-3, 3, (12, 2)).tolist()
    if space == "sphere":
        v = rng.normal(size=(12, 3))
        return (v / np.linalg.norm(v, axis=1, keepdims=True)).tolist()
    if space == "so3":
        return [_rotation(a) for a in rng.uniform(-3, 3, 12)]
    if space == "simplex":
        return rng.dirichlet([2.0, 3.0, 4.0], 12).tolist()
    raise ValueError(space)


def valid_text(space: str) -> str:
    if space == "categories":
        rng = np.random.default_rng(2)
        return "".join(f">r{i}\n{''.join(rng.choice(list('ACGT'), 8))}\n" for i in range(12))
    return "".join(",".join(repr(v) for v in row) + "\n" for row in valid_rows(space))


def suffix(space: str) -> str:
    return ".fasta" if space == "categories" else ".csv"


# ----- bad files: each returns the path it made, or None where the case does not apply to the space ------
def _write(path: Path, data) -> Path:
    path.write_bytes(data if isinstance(data, bytes) else data.encode())
    return path


def bad_empty(d, space):
    return _write(d / f"empty{suffix(space)}", "")


def bad_garbage(d, space):
    return _write(d / f"garbage{suffix(space)}", np.random.default_rng(3).bytes(4096))


def bad_nan_cell(d, space):
    if space == "categories":
        return None
    lines = valid_text(space).splitlines()
    cells = lines[3].split(",")
    cells[1] = "nan"
    lines[3] = ",".join(cells)
    return _write(d / "nan.csv", "\n".join(lines) + "\n")


def bad_column_count(d, space):
    if space == "categories":  # a record longer than the --length 8 declared below
        return _write(d / "ragged.fasta", valid_text(space) + ">long\nACGTACGTACGT\n")
    lines = valid_text(space).splitlines()
    lines[4] += ",0.5"
    return _write(d / "ragged.csv", "\n".join(lines) + "\n")


def bad_unreadable(d, space):
    p = _write(d / f"locked{suffix(space)}", valid_text(space))
    p.chmod(0)
    if os.access(p, os.R_OK):  # root reads it anyway: the directory and pipe cases stand in for it
        p.chmod(0o644)
        pytest.skip("this user can read a file of mode 000 (root); see the directory and pipe cases")
    return p


def bad_directory(d, space):
    p = d / f"folder{suffix(space)}"
    p.mkdir()
    return p


def bad_pipe(d, space):
    p = d / f"pipe{suffix(space)}"
    os.mkfifo(p)
    return p


def bad_huge_cell(d, space):
    if space == "categories":
        return None
    lines = valid_text(space).splitlines()
    cells = lines[2].split(",")
    cells[0] = "7" * 200_000  # a cell of 200 kB (a number of 200,000 digits: infinite as a float)
    lines[2] = ",".join(cells)
    return _write(d / "huge.csv", "\n".join(lines) + "\n")


BAD_FILES = {f.__name__[4:]: f for f in (bad_empty, bad_garbage, bad_nan_cell, bad_column_count, bad_unreadable,
                                         bad_directory, bad_pipe, bad_huge_cell)}


# ----- what must not change -----------------------------------------------------------------------------
def fingerprint(path: Path) -> str:
    """A hash of a file's bytes, a folder's listing, or a pipe's existence (never opened: it would block)."""
    st = os.lstat(path)
    if stat.S_ISFIFO(st.st_mode):
        return f"fifo {st.st_mode:o}"
    if stat.S_ISDIR(st.st_mode):
        return "dir " + ",".join(sorted(os.listdir(path)))
    mode = st.st_mode
    if not os.access(path, os.R_OK):
        return f"unreadable {mode:o} {st.st_size} {st.st_mtime_ns}"
    return f"{mode:o} " + hashlib.sha256(path.read_bytes()).hexdigest()


def tree(folder: Path) -> dict:
    return {str(p.relative_to(folder)): fingerprint(p) for p in sorted(folder.rglob("*"))}


def run_refused(argv, capsys, watched: Path, inputs):
    before = tree(watched), [fingerprint(p) for p in inputs]
    code = main(argv)
    err = capsys.readouterr().err
    assert code == 2, err
    assert err.startswith("heatwalk: error: ") and err.count("\n") == 1, err
    assert "Traceback" not in err and len(err) < 2000, err[:2000]  # a huge cell is not echoed whole
    assert (tree(watched), [fingerprint(p) for p in inputs]) == before
    return err


def space_flags(space: str) -> list[str]:
    return ["--length", "8"] if space == "categories" else []


@pytest.fixture(scope="module")
def models(tmp_path_factory):
    """One tiny fitted model per space (2 training steps)."""
    root = tmp_path_factory.mktemp("models")
    out = {}
    for space in SPACES:
        data = _write(root / f"{space}{suffix(space)}", valid_text(space))
        folder = root / f"{space}-model"
        assert main(["fit", str(data), "--space", space, "--out", str(folder), *FIT_FLAGS]) == 0
        out[space] = folder
    return out


# ----- the matrix ----------------------------------------------------------------------------------------
@pytest.mark.parametrize("space", SPACES)
@pytest.mark.parametrize("case", list(BAD_FILES))
def test_fit_refuses_bad_file(tmp_path, capsys, space, case):
    bad = BAD_FILES[case](tmp_path, space)
    if bad is None:
        pytest.skip(f"{case} does not apply to {space} files")
    outputs = tmp_path / "outputs"
    outputs.mkdir()
    run_refused(["fit", str(bad), "--space", space, "--out", str(outputs / "model"), *space_flags(space),
                 *FIT_FLAGS], capsys, outputs, [bad])


@pytest.mark.parametrize("space", SPACES)
@pytest.mark.parametrize("case", list(BAD_FILES))
def test_evaluate_refuses_bad_file(tmp_path, capsys, models, space, case):
    bad = BAD_FILES[case](tmp_path, space)
    if bad is None:
        pytest.skip(f"{case} does not apply to {space} files")
    outputs = tmp_path / "outputs"
    outputs.mkdir()
    model = models[space]
    run_refused(["evaluate", str(model), str(bad), "--out", str(outputs / "report"), *EVAL_FLAGS], capsys,
                outputs, [bad, model / "model.json"])


@pytest.mark.parametrize("case", ["empty", "garbage", "directory", "pipe"])
def test_sample_refuses_a_bad_model(tmp_path, capsys, case):
    bad = BAD_FILES[case](tmp_path, "torus")
    outputs = tmp_path / "outputs"
    outputs.mkdir()
    run_refused(["sample", str(bad), "--n", "4", "--out", str(outputs / "s.csv"), "--reverse-steps", "2",
                 "--quiet"], capsys, outputs, [bad])


@pytest.mark.parametrize("case", ["empty", "garbage", "nan_cell", "directory", "pipe", "huge_cell"])
def test_sample_refuses_a_bad_given_table(tmp_path, capsys, models, case):
    bad = BAD_FILES[case](tmp_path, "torus")
    outputs = tmp_path / "outputs"
    outputs.mkdir()
    run_refused(["sample", str(models["torus"]), "--n", "4", "--given", str(bad), "--out", str(outputs / "s.csv"),
                 "--reverse-steps", "2", "--quiet"], capsys, outputs, [bad])


@pytest.mark.parametrize("space", SPACES)
def test_the_valid_files_of_the_matrix_are_accepted(tmp_path, capsys, models, space):
    # the matrix only means something if the same command succeeds on a good file
    good = _write(tmp_path / f"good{suffix(space)}", valid_text(space))
    assert main(["evaluate", str(models[space]), str(good), "--out", str(tmp_path / "report"), *EVAL_FLAGS]) == 0
    assert (tmp_path / "report" / "evaluation.json").is_file()
