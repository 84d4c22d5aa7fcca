"""Atomic writing: every file or folder is written under a temporary name and renamed into place.

So an interrupted or failed write never leaves a half-written result, and an
existing result is never overwritten unless asked — and even then only a file
by a file, and a folder only when it is one heatwalk wrote (see
:func:`check_replaceable`).

Temporary names
---------------
A temporary beside ``DIR/NAME`` is ``DIR/.NAME.PID-TOKEN.tmp`` (a file or a
folder; PID is the writing process, TOKEN random), and a folder being replaced
is moved aside to ``DIR/.NAME.PID-TOKEN.old.tmp`` for the instant between two
renames. A process killed mid-write (SIGKILL, power loss) leaves such a name
behind; the next write of the same ``NAME`` removes those whose process is no
longer running (or that are older than :data:`STALE_AGE_SECONDS`), with a
warning line each (:mod:`heatwalk.notices`). A moved-aside old folder is only
removed when ``NAME`` exists again; otherwise it is the only copy of the
previous result and is left in place with a warning. Names written by older
heatwalk versions (``.NAME.XXXXXXXX.tmp``, no PID) are removed once older than
:data:`LEGACY_STALE_AGE_SECONDS`. The PID test assumes one machine: on a folder
shared by several machines only the age rule is safe, and it still applies.

Permissions
-----------
Files and folders get the modes an ordinary ``open`` / ``mkdir`` would give
under the process's umask (0666 & ~umask and 0777 & ~umask), not the private
0600 / 0700 of :func:`tempfile.mkstemp` and :func:`tempfile.mkdtemp`.
"""

from __future__ import annotations

import json
import os
import re
import secrets
import shutil
import tempfile
import time
from contextlib import contextmanager
from pathlib import Path

from heatwalk.errors import InputError
from heatwalk.notices import warn

#: files that make a folder a heatwalk model folder: model.json and one of the weight files
MODEL_CONFIG = "model.json"
WEIGHT_FILES = ("weights.safetensors", "weights.pt")
#: the file that makes a folder a heatwalk report folder (written by ``heatwalk evaluate``)
REPORT_FILE = "evaluation.json"
#: the file that makes a folder a heatwalk demo folder (written by ``heatwalk demo``)
DEMO_REPORT = "demo_report.json"
#: a temporary whose process still runs is stale anyway after this long (the PID may have been reused)
STALE_AGE_SECONDS = 7 * 24 * 3600.0
#: a temporary of an older heatwalk (no PID in its name) is stale after this long
LEGACY_STALE_AGE_SECONDS = 3600.0


# ----- modes ---------------------------------------------------------------------------------------
def current_umask() -> int:
    """The process's umask (read from /proc where available, so no other thread sees it changed)."""
    try:
        with open("/proc/self/status") as f:
            for line in f:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError, IndexError):
        pass
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def file_mode() -> int:
    """Mode of a new file under the umask: 0666 & ~umask."""
    return 0o666 & ~current_umask()


def folder_mode() -> int:
    """Mode of a new folder under the umask: 0777 & ~umask."""
    return 0o777 & ~current_umask()


# ----- what may be replaced -----------------------------------------------------------------------
def folder_kind(path) -> str | None:
    """``"model"``, ``"report"``, ``"demo"`` or ``"empty"`` for a folder heatwalk may replace, else None."""
    path = Path(path)
    try:
        names = {p.name for p in path.iterdir()}
    except OSError as e:
        raise InputError(f"{path}: cannot list the folder ({e.strerror or e})", field=str(path)) from None
    if not names:
        return "empty"
    if (path / MODEL_CONFIG).is_file() and any((path / w).is_file() for w in WEIGHT_FILES):
        return "model"
    if (path / REPORT_FILE).is_file():
        return "report"
    if (path / DEMO_REPORT).is_file():
        return "demo"
    return None


def check_replaceable(path, kind: str) -> None:
    """Refuse (InputError) to replace an existing ``path`` by a new ``kind`` ("file" or "folder").

    A file may replace a regular file only. A folder may replace a folder only, and only one that
    heatwalk wrote: a model folder (``model.json`` and ``weights.safetensors`` or ``weights.pt``), a
    report folder (``evaluation.json``), a demo folder (``demo_report.json``) or an empty folder.
    Symbolic links to folders are refused.
    A ``path`` that does not exist passes.
    """
    path = Path(path)
    if not (path.exists() or path.is_symlink()):
        return
    if kind == "file":
        if path.is_dir():
            raise InputError(f"{path} is a folder; refusing to replace a folder by a file (choose a file name)",
                             field=str(path))
        if not path.is_file():
            raise InputError(f"{path} is not a regular file (a device, pipe or broken link); refusing to replace it",
                             field=str(path))
        return
    if kind != "folder":
        raise ValueError(f"kind must be 'file' or 'folder', got {kind!r}")
    if not path.is_dir():
        raise InputError(f"{path} is a file; refusing to replace a file by a folder (choose a folder name)",
                         field=str(path))
    if path.is_symlink():
        raise InputError(f"{path} is a symbolic link to a folder; refusing to replace it (give the folder itself)",
                         field=str(path))
    if folder_kind(path) is None:
        shown = sorted(p.name for p in path.iterdir())
        listing = ", ".join(shown[:3]) + (", …" if len(shown) > 3 else "")
        raise InputError(f"{path} is a folder that heatwalk did not write (it holds {len(shown)} entries: {listing}); "
                         f"only a model, report or demo folder or an empty folder is replaced: choose another "
                         f"output", field=str(path))


# ----- temporaries ----------------------------------------------------------------------------------
def _temp_pattern(name: str) -> re.Pattern:
    return re.compile(rf"^\.{re.escape(name)}\.(?:(?P<pid>\d+)-)?(?P<token>[A-Za-z0-9_]{{6,}})(?P<old>\.old)?\.tmp$")


def _process_running(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OverflowError):
        return True
    return True


def stale_temporaries(path) -> list[Path]:
    """Temporaries of ``path`` left by interrupted writes (see the module docstring), oldest first."""
    path = Path(path)
    pattern = _temp_pattern(path.name)
    now = time.time()
    found = []
    try:
        entries = list(path.parent.iterdir())
    except OSError:
        return []
    for entry in entries:
        m = pattern.match(entry.name)
        if m is None:
            continue
        try:
            age = now - entry.lstat().st_mtime
        except OSError:
            continue
        if m["pid"] is None:
            stale = age > LEGACY_STALE_AGE_SECONDS
        else:
            pid = int(m["pid"])
            running = pid == os.getpid() or _process_running(pid)
            stale = not running or age > STALE_AGE_SECONDS
        if stale:
            found.append((age, entry))
    return [e for _, e in sorted(found, key=lambda a: -a[0])]


def _size(path: Path) -> int:
    if path.is_dir() and not path.is_symlink():
        return sum(p.stat().st_size for p in path.rglob("*") if p.is_file())
    return path.lstat().st_size


def remove_stale_temporaries(path) -> list[Path]:
    """Remove the stale temporaries of ``path`` (a warning line each); returns those removed."""
    path = Path(path)
    removed = []
    for entry in stale_temporaries(path):
        is_old = entry.name.endswith(".old.tmp")
        if is_old and not path.exists():
            warn(f"{entry} holds the previous {path.name}, set aside by an interrupted replacement; it was left "
                 f"in place (rename it to {path.name} to restore it)")
            continue
        is_folder = entry.is_dir() and not entry.is_symlink()
        try:
            size = _size(entry)
            if is_folder:
                shutil.rmtree(entry)
            else:
                entry.unlink()
        except OSError as e:
            warn(f"could not remove {entry}, a temporary left by an interrupted write ({e.strerror or e})")
            continue
        removed.append(entry)
        warn(f"removed the {'folder' if is_folder else 'file'} {entry}, a temporary left by an interrupted write "
             f"({size / 1e6:.1f} MB)")
    return removed


def _prefix(path: Path) -> str:
    return f".{path.name}.{os.getpid()}-"


def _prepare(path: Path, kind: str, overwrite: bool) -> None:
    """Refusals before any temporary is made, the parent folder, stale temporaries."""
    if path.exists() or path.is_symlink():
        if not overwrite:
            raise InputError(f"{path} already exists (refusing to overwrite; choose another output or pass "
                             f"overwrite)", field=str(path))
        check_replaceable(path, kind)
    parent = path.parent
    if parent.exists() and not parent.is_dir():
        raise InputError(f"{path}: {parent} is a file, not a folder", field=str(path))
    try:
        parent.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise InputError(f"{path}: cannot create the folder {parent} ({e.strerror or e})", field=str(path)) from None
    remove_stale_temporaries(path)


def _cannot_write(path: Path, e: OSError) -> InputError:
    return InputError(f"cannot write {path} in {path.parent} ({e.strerror or e})", field=str(path))


@contextmanager
def atomic_path(path, *, overwrite: bool = True):
    """Yield a temporary file path beside ``path``; on success rename it to ``path``.

    An existing ``path`` is replaced only when ``overwrite`` and only when it is a regular file.
    The file ends with mode 0666 & ~umask.
    """
    path = Path(path)
    _prepare(path, "file", overwrite)
    try:
        fd, tmp = tempfile.mkstemp(prefix=_prefix(path), suffix=".tmp", dir=path.parent)
    except OSError as e:
        raise _cannot_write(path, e) from None
    try:
        os.fchmod(fd, file_mode())
    finally:
        os.close(fd)
    try:
        yield Path(tmp)
        os.replace(tmp, path)
    finally:
        if os.path.lexists(tmp):
            os.remove(tmp)


def _unique_old_name(path: Path) -> Path:
    while True:
        old = path.with_name(f"{_prefix(path)}{secrets.token_hex(4)}.old.tmp")
        if not os.path.lexists(old):
            return old


def _replace_folder(tmp: Path, path: Path) -> None:
    """Put the finished folder ``tmp`` at ``path``, setting an existing ``path`` aside under a unique name."""
    if not (path.exists() or path.is_symlink()):
        os.replace(tmp, path)
        return
    check_replaceable(path, "folder")  # again: it may have changed during the work
    old = _unique_old_name(path)
    os.replace(path, old)
    try:
        os.replace(tmp, path)
    except OSError:
        os.replace(old, path)
        raise
    shutil.rmtree(old)


@contextmanager
def atomic_dir(path, *, overwrite: bool = False):
    """Yield a temporary folder beside ``path``; on success it replaces ``path``.

    An existing ``path`` is replaced only when ``overwrite`` and only when it is a heatwalk model
    folder, report folder, demo folder or an empty folder (:func:`check_replaceable`); anything else is refused
    with :class:`InputError` before any work, and nothing is changed. The folder ends with mode
    0777 & ~umask.
    """
    path = Path(path)
    _prepare(path, "folder", overwrite)
    try:
        tmp = Path(tempfile.mkdtemp(prefix=_prefix(path), suffix=".tmp", dir=path.parent))
        os.chmod(tmp, folder_mode())
    except OSError as e:
        raise _cannot_write(path, e) from None
    try:
        yield tmp
        _replace_folder(tmp, path)
    finally:
        if tmp.exists():
            shutil.rmtree(tmp)


def write_json(path, obj, *, overwrite: bool = True) -> None:
    """Write ``obj`` as indented, key-sorted JSON, atomically."""
    with atomic_path(path, overwrite=overwrite) as tmp:
        tmp.write_text(json.dumps(obj, indent=2, sort_keys=True) + "\n")
