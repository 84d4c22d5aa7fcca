"""Atomic writing: every file or folder is written under a temporary name and renamed into place.

So an interrupted or failed write never leaves a half-written result, and an
existing result is never overwritten unless asked.
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
from contextlib import contextmanager
from pathlib import Path

from heatwalk.errors import InputError


@contextmanager
def atomic_path(path, *, overwrite: bool = True):
    """Yield a temporary file path beside ``path``; on success rename it to ``path``."""
    path = Path(path)
    if path.exists() and not overwrite:
        raise InputError(f"{path} already exists (refusing to overwrite)", field=str(path))
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    os.close(fd)
    try:
        yield Path(tmp)
        os.replace(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.remove(tmp)


@contextmanager
def atomic_dir(path, *, overwrite: bool = False):
    """Yield a temporary folder beside ``path``; on success it replaces ``path``."""
    path = Path(path)
    if path.exists() and not overwrite:
        raise InputError(f"{path} already exists (refusing to overwrite; choose another output)", field=str(path))
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent))
    try:
        yield tmp
        if path.exists():
            old = path.with_name(f".{path.name}.old")
            if old.exists():
                shutil.rmtree(old)
            os.replace(path, old)
            os.replace(tmp, path)
            shutil.rmtree(old)
        else:
            os.replace(tmp, path)
    finally:
        if tmp.exists():
            shutil.rmtree(tmp)


def write_json(path, obj) -> None:
    with atomic_path(path) as tmp:
        tmp.write_text(json.dumps(obj, indent=2, sort_keys=True) + "\n")
