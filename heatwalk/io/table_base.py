"""What every table reader returns, and the choice of data columns shared by all of them.

A file's columns are either *data* (numbers, read as float64), the *label*
column (raw values, e.g. a residue name or a class number) or *ignored*:

- ``columns=None``: every column is data, except the label column;
- ``columns=[...]``: exactly these columns, in this order, are data; every
  other column (text columns included) is ignored and its name reported;
- ``labels="name"``: that column is read as it is stored, one value per row.

A file without a header line names its columns by position,
``column_1``, ``column_2``, ... (see :func:`position_names`).
"""

from __future__ import annotations

import difflib
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from heatwalk.errors import InputError
from heatwalk.io.source import show


@dataclass(frozen=True)
class Table:
    """Rows of numbers read from a file.

    Attributes
    ----------
    values : float64 array (n, m), every entry finite (column-major when that saved a copy)
    names : the m data column names, in the order of ``values``
    lines : int64 array (n,): the 1-based line of each row in a text file, or the 1-based row
        number in a Parquet / NPZ file (see ``unit``)
    ignored : names of the file's columns that were not read
    labels : the label column's raw values (n,), when asked for with ``labels=``; else None
    label_name : that column's name
    path : the file read
    unit : "line" (text files) or "row" (Parquet, NPZ)
    text : {data column (0-based): its cells as text (n,)} for the data columns read as text (named
        states, ``read_table(text_columns=...)``); ``values`` holds 0 there until the space's state
        codes replace it (:func:`heatwalk.io.tables.points_from_table`). None when no column was.
    """

    values: np.ndarray
    names: list[str]
    lines: np.ndarray
    ignored: list[str] = field(default_factory=list)
    labels: np.ndarray | None = None
    label_name: str | None = None
    path: Path | None = None
    unit: str = "line"
    text: dict | None = None

    @property
    def shape(self) -> tuple[int, int]:
        return tuple(self.values.shape)

    def where(self, i: int) -> str:
        """Location of row ``i`` (0-based) for messages, e.g. ``'data.csv, line 7'``."""
        return f"{self.path}, {self.unit} {int(self.lines[i])}"


def writable(values: np.ndarray) -> np.ndarray:
    """``values`` made writable: a read-only view of a frame this reader made and drops is released to
    the caller (its base is writable and no one else holds it); otherwise a copy."""
    if not values.flags.writeable:
        try:
            values.flags.writeable = True
        except ValueError:
            values = values.copy()
    return values


def position_names(m: int) -> list[str]:
    """Names of the columns of a file without a header line: column_1 ... column_m."""
    return [f"column_{j + 1}" for j in range(m)]


def _check_names(where, names: list[str], header: bool) -> None:
    seen: dict[str, int] = {}
    for j, name in enumerate(names):
        if name in seen:
            raise InputError(f"{where}: column {j + 1} is named {name!r} like column {seen[name] + 1}; "
                             "expected distinct column names", field=name)
        seen[name] = j


def _unknown(where, name, names: list[str], header: bool, what: str) -> InputError:
    if not header:
        return InputError(f"{where}: {what} {name!r} is not a column: the file has no header line, so its "
                          f"columns are named by position ({names[0]} ... {names[-1]})", field=name)
    near = difflib.get_close_matches(str(name), names, n=1, cutoff=0.5)
    hint = f"; did you mean {near[0]!r}?" if near else ""
    shown = ", ".join(names[:12]) + (", ..." if len(names) > 12 else "")
    return InputError(f"{where}: {what} {name!r} is not in the header (columns: {shown}){hint}", field=str(name))


def select_columns(where, names: list[str], columns=None, labels=None, *, header: bool = True,
                   need_data: bool = True):
    """Indices of the data columns, of the label column, and the ignored names.

    Parameters
    ----------
    where : the file, for messages
    names : every column name of the file, in file order
    columns : None (every column but the labels) or a list of names giving the data columns and their order
    labels : None or the name of the label column
    header : whether the names come from a header line (else they are position names)
    need_data : refuse a selection without data columns (``False`` to read the label column alone)

    Returns
    -------
    (data, label, ignored) : list of file column indices, index or None, list of names
    """
    _check_names(where, names, header)
    index = {n: j for j, n in enumerate(names)}
    label = None
    if labels is not None:
        if labels not in index:
            raise _unknown(where, labels, names, header, "the label column")
        label = index[labels]
    if columns is None:
        data = [j for j in range(len(names)) if j != label]
    else:
        if isinstance(columns, str):
            raise InputError(f"columns must be a list of column names, got the string {columns!r}",
                             field="columns")
        columns = list(columns)
        if not columns and need_data:
            raise InputError(f"{where}: columns is empty; name at least one data column", field="columns")
        data = []
        for name in columns:
            if name not in index:
                raise _unknown(where, name, names, header, "column")
            if index[name] in data:
                raise InputError(f"{where}: column {name!r} is named twice in columns", field=str(name))
            if index[name] == label:
                raise InputError(f"{where}: column {name!r} is both a data column and the label column",
                                 field=str(name))
            data.append(index[name])
    if not data and need_data:
        raise InputError(f"{where}: no data column (the only column is the label column {labels!r})",
                         field="columns")
    ignored = [names[j] for j in range(len(names)) if j not in data and j != label]
    return data, label, ignored


def cell_problem(cell: str) -> str | None:
    """Why a text cell is not a finite number (None when it is one), in the words of the messages."""
    s = cell.strip()
    if not s:
        return "empty cell, expected a number"
    try:
        if "_" in s or not s.isascii():
            raise ValueError
        v = float(s)
    except ValueError:
        return f"{show(s)} is not a number"
    if not math.isfinite(v):
        return f"value {show(s)} is not finite, expected a finite number"
    return None


def check_finite(values: np.ndarray, names: list[str], where_row, order=None) -> None:
    """Raise InputError at the first non-finite entry (row-major; ``order`` = column numbers in the file)."""
    bad = ~np.isfinite(values)
    if not bad.any():
        return
    rows = np.flatnonzero(bad.any(axis=1))
    i = int(rows[0])
    cols = np.flatnonzero(bad[i])
    j = int(cols[0]) if order is None else int(min(cols, key=lambda c: order[c]))
    number = j + 1 if order is None else order[j] + 1
    raise InputError(f"{where_row(i)}, column {number} ({names[j]}): value {float(values[i, j])!r} is not "
                     "finite, expected a finite number", row=i, field=names[j])
