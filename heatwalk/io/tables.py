"""Reading points from CSV files and writing samples, with errors that name file, line and column.

CSV layout read by :func:`read_table`: comma-separated numbers, one point per
line; an optional first line of column names (recognised when none of its
cells parses as a number); blank lines and lines starting with ``#`` are
skipped. Every data line must have the same number of cells.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np
import torch

from heatwalk.errors import InputError
from heatwalk.io.atomic import atomic_path
from heatwalk.spaces.base import Space


def _is_number(cell: str) -> bool:
    try:
        float(cell)
        return True
    except ValueError:
        return False


def read_table(path) -> tuple[np.ndarray, list[str] | None, list[int]]:
    """Read a numeric CSV file.

    Returns
    -------
    rows : float64 array (n, m)
    header : the column names, or None
    lines : the 1-based line number of each row (for error messages)
    """
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: no such file")
    try:
        text = path.read_text()
    except UnicodeDecodeError as e:
        raise InputError(f"{path}: not a text file ({e})") from None
    header = None
    rows: list[list[float]] = []
    lines: list[int] = []
    width = None
    for lineno, record in enumerate(csv.reader(text.splitlines()), start=1):
        cells = [c.strip() for c in record]
        if not cells or all(c == "" for c in cells) or cells[0].startswith("#"):
            continue
        if header is None and not rows and not any(_is_number(c) for c in cells):
            header = cells
            width = len(cells)
            continue
        if width is None:
            width = len(cells)
        if len(cells) != width:
            what = "the header" if header is not None else "the first row"
            raise InputError(f"{path}, line {lineno}: {len(cells)} columns, but {what} has {width}", row=len(rows))
        values = []
        for j, c in enumerate(cells):
            try:
                v = float(c)
            except ValueError:
                name = f" ({header[j]})" if header else ""
                raise InputError(f"{path}, line {lineno}, column {j + 1}{name}: {c!r} is not a number",
                                 row=len(rows), field=str(j)) from None
            if not math.isfinite(v):
                name = f" ({header[j]})" if header else ""
                raise InputError(f"{path}, line {lineno}, column {j + 1}{name}: value {c!r} is not finite",
                                 row=len(rows), field=str(j))
            values.append(v)
        rows.append(values)
        lines.append(lineno)
    if not rows:
        raise InputError(f"{path}: no data rows (the file is empty or has only a header)")
    return np.asarray(rows, dtype=np.float64), header, lines


def read_points(path, space: Space, **options) -> torch.Tensor:
    """Read a CSV file of points on ``space``; ``options`` go to ``space.from_rows`` (e.g. ``degrees=True``).

    Errors name the file, the line and the problem.
    """
    return points_from_table(path, space, read_table(path), **options)


def points_from_table(path, space: Space, table, **options) -> torch.Tensor:
    """Points on ``space`` from a table returned by :func:`read_table` (errors located in ``path``)."""
    rows, _, lines = table
    space.check_file_options(options)
    expected = space.n_columns_for(**options)
    if rows.shape[1] != expected:
        raise InputError(f"{path}: {rows.shape[1]} columns per row, but {space!r} with options {options or '{}'} "
                         f"needs {expected}")
    try:
        return space.from_rows(rows, **options)
    except InputError as e:
        if e.row is not None and 0 <= e.row < len(lines):
            raise e.located(f"{path}, line {lines[e.row]}") from None
        raise e.located(str(path)) from None


def write_points(path, space: Space, x: torch.Tensor, *, overwrite: bool = False, **options) -> Path:
    """Write points as CSV with a header, atomically (temporary file, then rename)."""
    rows = space.to_rows(x, **options)
    header = space.column_names(**options)
    path = Path(path)
    with atomic_path(path, overwrite=overwrite) as tmp:
        with open(tmp, "w", newline="") as f:
            w = csv.writer(f)
            w.writerow(header)
            for r in rows.tolist():
                w.writerow([repr(float(v)) for v in r])
    return path
