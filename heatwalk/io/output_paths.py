"""Checks of an output path made before any work, so a long run never ends in a refusal to write.

:func:`check_output_path` is what a command calls first, with every file or
folder the command reads (data, model, checkpoint folder) as ``inputs``.
"""

from __future__ import annotations

import os
from collections.abc import Iterable, Mapping
from pathlib import Path

from heatwalk.errors import InputError
from heatwalk.io.atomic import check_replaceable

OUTPUT_KINDS = ("file", "folder")


def _inside(inner: Path, outer: Path) -> bool:
    return inner != outer and inner.is_relative_to(outer)


def _same(a: Path, b: Path) -> bool:
    if a == b:
        return True
    try:
        return a.exists() and b.exists() and os.path.samefile(a, b)
    except OSError:
        return False


def _labelled(inputs) -> list[tuple[str, Path]]:
    items = inputs.items() if isinstance(inputs, Mapping) else (("input", p) for p in inputs)
    return [(str(label), Path(p)) for label, p in items if p is not None]


def _check_parent(path: Path) -> None:
    parent = path.absolute().parent
    if not parent.exists():
        raise InputError(f"output {path}: the folder {parent} does not exist (create it first)", field="out")
    if not parent.is_dir():
        raise InputError(f"output {path}: {parent} is a file, not a folder", field="out")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise InputError(f"output {path}: the folder {parent} is not writable", field="out")


def check_output_path(path, *, kind: str, overwrite: bool, inputs: Iterable | Mapping = ()) -> Path:
    """Check before any work that ``path`` can receive a new ``kind`` ("file" or "folder"); returns it as a Path.

    Refused with :class:`InputError` (field ``"out"``), in this order:

    - an empty path; a parent folder that does not exist, is a file or is not writable;
    - ``path`` equal to one of ``inputs``, inside an input folder, or containing an input (replacing the
      output would delete it). ``inputs`` is an iterable of paths or a mapping ``{label: path}`` (the
      label names the input in the message, e.g. ``{"data": ..., "checkpoint folder": ...}``); None
      entries are skipped;
    - an existing ``path`` without ``overwrite``; with ``overwrite``, one that the new output may not
      replace (:func:`heatwalk.io.atomic.check_replaceable`: a file only by a file, a folder only when it
      is a heatwalk model or report folder or empty).

    Symbolic links are resolved before comparing, and an existing file reached by two names counts as
    the same.
    """
    if kind not in OUTPUT_KINDS:
        raise ValueError(f"kind must be one of {OUTPUT_KINDS}, got {kind!r}")
    if path is None or str(path) == "":
        raise InputError("output path is empty", field="out")
    path = Path(path)
    _check_parent(path)
    _check_inputs(path, _labelled(inputs))
    if path.exists() or path.is_symlink():
        if not overwrite:
            raise InputError(f"output {path} already exists (pass overwrite / --overwrite to replace it)",
                             field="out")
        try:
            check_replaceable(path, kind)
        except InputError as e:
            raise InputError(f"output {e.message}", field="out") from None
    return path


def _check_inputs(path: Path, inputs: list[tuple[str, Path]]) -> None:
    out = path.resolve()
    for label, p in inputs:
        src = p.resolve()
        if _same(out, src):
            raise InputError(f"output {path} is the {label} {p}; choose another output", field="out")
        if _inside(out, src):
            raise InputError(f"output {path} is inside the {label} folder {p}; choose an output outside it",
                             field="out")
        if _inside(src, out):
            raise InputError(f"the {label} {p} is inside the output {path}; writing the output would delete it: "
                             f"choose an output outside it", field="out")
