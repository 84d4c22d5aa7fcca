"""Writing results never loses data: what --overwrite may replace, output-path checks, stale temporaries, modes."""

import os
import stat
import time

import pytest

from heatwalk import InputError
from heatwalk.io.atomic import (LEGACY_STALE_AGE_SECONDS, atomic_dir, atomic_path, check_replaceable, folder_kind,
                                stale_temporaries)
from heatwalk.io.output_paths import check_output_path
from heatwalk.notices import HeatwalkWarning


def _tree(root):
    """Every path under root with its bytes (files) or None (folders): a snapshot to compare."""
    out = {}
    for dirpath, dirnames, filenames in os.walk(root):
        for d in dirnames:
            out[os.path.relpath(os.path.join(dirpath, d), root)] = None
        for f in filenames:
            p = os.path.join(dirpath, f)
            out[os.path.relpath(p, root)] = open(p, "rb").read()
    return out


def _write_folder(path, files):
    with atomic_dir(path, overwrite=True) as tmp:
        for name, text in files.items():
            (tmp / name).write_text(text)


def _model_folder(path):
    path.mkdir()
    (path / "model.json").write_text("{}")
    (path / "weights.safetensors").write_bytes(b"x")


# ----- what may be replaced ---------------------------------------------------------------------------------
def test_overwrite_refuses_a_folder_heatwalk_did_not_write(tmp_path):
    # the reported loss: `fit data.csv --out data --overwrite` deleted the data folder
    data = tmp_path / "data"
    data.mkdir()
    (data / "torus.csv").write_text("a,b\n0.1,0.2\n")
    (data / "notes.txt").write_text("mine")
    before = _tree(tmp_path)
    with pytest.raises(InputError, match="heatwalk did not write .*2 entries: notes.txt, torus.csv"):
        _write_folder(data, {"model.json": "{}"})
    assert _tree(tmp_path) == before  # nothing changed, no temporary left


@pytest.mark.parametrize("kind", ["model", "model_pt", "report", "empty"])
def test_overwrite_replaces_model_report_and_empty_folders(tmp_path, kind):
    out = tmp_path / "out"
    out.mkdir()
    if kind.startswith("model"):
        (out / "model.json").write_text("{}")
        (out / ("weights.pt" if kind == "model_pt" else "weights.safetensors")).write_bytes(b"old")
    elif kind == "report":
        (out / "evaluation.json").write_text("{}")
    assert folder_kind(out) == kind.split("_")[0]
    _write_folder(out, {"model.json": "new", "weights.safetensors": "new"})
    assert _tree(out) == {"model.json": b"new", "weights.safetensors": b"new"}
    assert sorted(os.listdir(tmp_path)) == ["out"]  # the old folder set aside is gone, no temporary left


def test_a_model_json_alone_does_not_make_a_model_folder(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "model.json").write_text("{}")
    assert folder_kind(out) is None
    with pytest.raises(InputError, match="did not write"):
        check_replaceable(out, "folder")


def test_without_overwrite_an_existing_output_is_refused(tmp_path):
    out = tmp_path / "m"
    _model_folder(out)
    with pytest.raises(InputError, match="already exists"):
        with atomic_dir(out) as tmp:
            (tmp / "x").write_text("never")
    assert sorted(os.listdir(out)) == ["model.json", "weights.safetensors"]


def test_a_file_is_never_replaced_by_a_folder_and_a_folder_never_by_a_file(tmp_path):
    f = tmp_path / "existing.txt"
    f.write_text("user data")
    with pytest.raises(InputError, match="is a file; refusing to replace a file by a folder"):
        _write_folder(f, {"model.json": "{}"})
    assert f.read_text() == "user data"
    d = tmp_path / "folder"
    d.mkdir()
    with pytest.raises(InputError, match="is a folder; refusing to replace a folder by a file"):
        with atomic_path(d, overwrite=True) as tmp:
            tmp.write_text("x")
    assert d.is_dir()
    assert sorted(os.listdir(tmp_path)) == ["existing.txt", "folder"]
    with atomic_path(f, overwrite=True) as tmp:  # a file by a file: allowed
        tmp.write_text("new")
    assert f.read_text() == "new"


def test_an_unrelated_dot_old_folder_is_kept(tmp_path):
    # the old code deleted `.NAME.old` before setting the replaced folder aside under that fixed name
    out = tmp_path / "m"
    _model_folder(out)
    keep = tmp_path / ".m.old"
    keep.mkdir()
    (keep / "precious.txt").write_text("keep me")
    _write_folder(out, {"model.json": "{}", "weights.safetensors": "new"})
    assert (keep / "precious.txt").read_text() == "keep me"
    assert (out / "weights.safetensors").read_text() == "new"


def test_the_parent_of_an_output_that_is_a_file_is_an_input_error(tmp_path):
    f = tmp_path / "file"
    f.write_text("x")
    with pytest.raises(InputError, match="is a file, not a folder"):
        with atomic_path(f / "out.csv") as tmp:
            tmp.write_text("x")


# ----- modes follow the umask ---------------------------------------------------------------------------------
@pytest.mark.parametrize("umask", [0o022, 0o077, 0o002])
def test_modes_follow_the_umask(tmp_path, umask):
    # expected modes: those of open() and mkdir() under the umask, 0666 & ~umask and 0777 & ~umask (POSIX)
    old = os.umask(umask)
    try:
        with atomic_path(tmp_path / "a.csv") as tmp:
            tmp.write_text("x")
        _write_folder(tmp_path / "m", {"model.json": "{}"})
    finally:
        os.umask(old)
    assert stat.S_IMODE(os.stat(tmp_path / "a.csv").st_mode) == 0o666 & ~umask
    assert stat.S_IMODE(os.stat(tmp_path / "m").st_mode) == 0o777 & ~umask
    assert stat.S_IMODE(os.stat(tmp_path / "m" / "model.json").st_mode) == 0o666 & ~umask


# ----- stale temporaries ---------------------------------------------------------------------------------
def _dead_pid():
    pid = os.fork()
    if pid == 0:
        os._exit(0)
    os.waitpid(pid, 0)
    return pid  # reaped: no process has this id (until the system reuses it)


def test_stale_temporaries_of_a_dead_process_are_removed_with_a_warning(tmp_path):
    dead = _dead_pid()
    stale_file = tmp_path / f".ckpt.pt.{dead}-abcd1234.tmp"
    stale_file.write_bytes(b"x" * 1000)
    stale_dir = tmp_path / f".ckpt.pt.{dead}-zzzz9999.tmp"
    stale_dir.mkdir()
    (stale_dir / "part").write_text("half")
    live = tmp_path / f".ckpt.pt.{os.getpid()}-live0000.tmp"  # ours: a write in progress, kept
    live.write_text("x")
    other = tmp_path / f".other.pt.{dead}-abcd1234.tmp"  # another name: not ours to touch
    other.write_text("x")
    user = tmp_path / ".ckpt.pt.backup"  # not our pattern
    user.write_text("x")
    with pytest.warns(HeatwalkWarning, match="removed the (file|folder) .*a temporary left by an interrupted write"):
        with atomic_path(tmp_path / "ckpt.pt") as tmp:
            tmp.write_text("new")
    assert sorted(os.listdir(tmp_path)) == sorted(["ckpt.pt", live.name, other.name, user.name])


def test_legacy_temporaries_are_removed_only_when_old(tmp_path):
    young = tmp_path / ".ckpt.pt.k3j4h5g6.tmp"  # the old mkstemp name, no process id
    young.write_text("x")
    old = tmp_path / ".ckpt.pt.a1b2c3d4.tmp"
    old.write_text("x")
    past = time.time() - LEGACY_STALE_AGE_SECONDS - 60
    os.utime(old, (past, past))
    assert stale_temporaries(tmp_path / "ckpt.pt") == [old]


def test_a_set_aside_old_folder_is_kept_while_the_result_is_missing(tmp_path):
    dead = _dead_pid()
    aside = tmp_path / f".m.{dead}-0a1b2c3d.old.tmp"
    _model_folder(aside)
    with pytest.warns(HeatwalkWarning, match="holds the previous m.*left in place"):
        assert stale_temporaries(tmp_path / "m") == [aside]
        _write_folder(tmp_path / "m", {"model.json": "{}", "weights.safetensors": "x"})
    assert aside.is_dir()
    with pytest.warns(HeatwalkWarning, match="removed the folder"):
        _write_folder(tmp_path / "m", {"model.json": "{}", "weights.safetensors": "y"})
    assert not aside.exists()


# ----- output paths checked before any work ---------------------------------------------------------------
def test_check_output_path_refusals(tmp_path, monkeypatch):
    data = tmp_path / "data"
    data.mkdir()
    csv = data / "x.csv"
    csv.write_text("1\n")
    ckpt = tmp_path / "run" / "ckpt"
    ckpt.mkdir(parents=True)
    cases = [
        (dict(path=tmp_path / "missing" / "m", kind="folder"), "does not exist"),
        (dict(path=csv / "m", kind="folder"), "is a file, not a folder"),
        (dict(path=csv, kind="file"), "already exists"),
        (dict(path=data, kind="folder", overwrite=True), "did not write"),
        (dict(path=csv, kind="folder", overwrite=True), "refusing to replace a file by a folder"),
        (dict(path=data / "out.csv", kind="file", inputs={"data": data}), "inside the data folder"),
        (dict(path=tmp_path / "run", kind="folder", inputs={"checkpoint folder": ckpt}),
         "checkpoint folder .* is inside the output"),
        (dict(path=ckpt / "m", kind="folder", inputs={"checkpoint folder": ckpt}), "inside the checkpoint folder"),
        (dict(path=tmp_path / "link.csv", kind="file", overwrite=True, inputs=[csv]), "is the input"),
    ]
    os.symlink(csv, tmp_path / "link.csv")
    for kwargs, message in cases:
        kwargs.setdefault("overwrite", False)
        with pytest.raises(InputError, match=message):
            check_output_path(**kwargs)
    assert check_output_path(tmp_path / "new", kind="folder", overwrite=False, inputs=[csv, None]) == tmp_path / "new"
    # a folder that cannot be written (simulated: the tests may run as root, who may write anywhere)
    monkeypatch.setattr(os, "access", lambda p, mode: False)
    with pytest.raises(InputError, match="is not writable"):
        check_output_path(tmp_path / "new", kind="folder", overwrite=False)
