"""Tables of numbers in and out: CSV / TSV, Parquet and NPZ, with errors that name file, line and column.

Reading (:func:`read_table`) tells the format from the file's first bytes:
Parquet (``PAR1``), NPZ (a zip archive), otherwise delimited text, gzipped or
not (:mod:`heatwalk.io.delimited` describes the text layout,
:mod:`heatwalk.io.columnar` the binary ones). It returns a
:class:`~heatwalk.io.table_base.Table`: float64 values of the data columns,
their names, the line (text) or row (binary) of each row, the ignored columns
and, when asked, the raw values of a label column. Which columns are data:
:mod:`heatwalk.io.table_base`.

Writing (:func:`write_table`) picks the format from the extension
(:mod:`heatwalk.io.formats`), checked before any work, and writes atomically
(a temporary file renamed into place); an existing file is replaced only with
``overwrite=True``. Floats are written in full precision: a table written and
read back gives the same float64 values, bit for bit.

:func:`read_points` / :func:`write_points` put a space's rows through these.
"""

from __future__ import annotations

import dataclasses
import itertools
from pathlib import Path

import numpy as np
import torch

from heatwalk.errors import InputError
from heatwalk.io.atomic import atomic_path
from heatwalk.io.columnar import read_npz, read_parquet
from heatwalk.io.delimited import read_delimited
from heatwalk.io.formats import check_output_format
from heatwalk.io.source import PARQUET_MAGIC, ZIP_MAGIC, check_readable, magic
from heatwalk.io.table_base import Table
from heatwalk.spaces.alphabet import shown_states
from heatwalk.spaces.base import Space

__all__ = ["Table", "read_table", "read_column", "table_column_names", "write_table", "read_points",
           "points_from_table", "write_points", "check_output_format"]


def _reader_of(path: Path):
    head = magic(path, 4)
    if head == PARQUET_MAGIC:
        return read_parquet
    if head == ZIP_MAGIC:
        return read_npz
    return read_delimited


def read_table(path, *, columns=None, labels=None, delimiter: str | None = None, text_columns=()) -> Table:
    """Read a table of numbers from a CSV / TSV, Parquet or NPZ file.

    Parameters
    ----------
    path : the file; its format is told by its first bytes, not its name
    columns : None (every column is data, except ``labels``) or the names of the data columns,
        in the order wanted; the other columns are ignored and listed in ``Table.ignored``
    labels : name of a column read as it is stored (text files: the stripped cell text), one per row
    delimiter : text files only: the one-character cell separator; None detects it
    text_columns : data columns (0-based among the data columns) read as text, e.g. named states
        (``Table.text``; each is read in a pass of its own over the file)

    Returns
    -------
    Table with ``values`` (n, m) float64, all finite (0 in the text columns).

    Raises
    ------
    InputError naming the file, the line (text) or row (Parquet, NPZ), the column number and name,
    what is wrong and what was expected.
    """
    path = check_readable(path)
    reader = _reader_of(path)
    if delimiter is not None and reader is not read_delimited:
        raise InputError(f"{path}: delimiter applies to text tables, but this is a "
                         f"{'Parquet' if reader is read_parquet else 'NPZ'} file", field="delimiter")
    kwargs = {"delimiter": delimiter} if reader is read_delimited else {}
    if not text_columns:
        return reader(path, columns=columns, labels=labels, **kwargs)
    return _with_text_columns(path, reader, kwargs, columns, labels, sorted(set(text_columns)))


def _with_text_columns(path: Path, reader, kwargs: dict, columns, labels, text_columns: list[int]) -> Table:
    """:func:`read_table` with the data columns ``text_columns`` read as text: the numbers in one pass, each text
    column in a pass of its own (as a label column), put together in the data columns' order."""
    names = list(columns) if columns is not None else _data_column_names(path, reader, kwargs, labels)
    outside = [p for p in text_columns if not 0 <= p < len(names)]
    if outside:
        raise InputError(f"{path}: data column {outside[0] + 1} should hold named states, but the table has "
                         f"{len(names)} data columns ({', '.join(map(str, names))})", field="columns")
    if labels is not None and labels in [names[p] for p in text_columns]:
        raise InputError(f"{path}: column {labels!r} is both the label column and a data column of named states",
                         field=str(labels))
    numeric = [n for j, n in enumerate(names) if j not in text_columns]
    table = reader(path, columns=numeric, labels=labels, need_data=False, **kwargs)
    text = {}
    for p in text_columns:
        cells = reader(path, columns=[], labels=names[p], need_data=False, label_what="state name", **kwargs).labels
        text[p] = np.asarray([v.decode() if isinstance(v, bytes) else str(v) for v in cells.tolist()], dtype=object)
        if len(text[p]) != len(table.lines):
            raise InputError(f"{path}: column {names[p]!r} has {len(text[p])} rows, the numeric columns "
                             f"{len(table.lines)}", field=str(names[p]))
    values = np.zeros((len(table.lines), len(names)), dtype=np.float64)
    values[:, [j for j in range(len(names)) if j not in text_columns]] = table.values
    named = {str(names[p]) for p in text_columns}
    return dataclasses.replace(table, values=values, names=[str(n) for n in names], text=text,
                               ignored=[n for n in table.ignored if str(n) not in named])


def _data_column_names(path: Path, reader, kwargs: dict, labels) -> list[str]:
    """The names of the data columns of ``columns=None``: every column but the label column, in file order."""
    return list(reader(path, columns=[], labels=labels, need_data=False, **kwargs).ignored)


def table_column_names(path, *, delimiter: str | None = None) -> list[str]:
    """Every column name of a table file, in file order (``column_1`` … for a text file without a header)."""
    path = check_readable(path)
    reader = _reader_of(path)
    kwargs = {"delimiter": delimiter} if reader is read_delimited else {}
    return _data_column_names(path, reader, kwargs, None)


def read_column(path, name: str, *, delimiter: str | None = None) -> np.ndarray:
    """The raw values of one column, one per row of :func:`read_table` on the same file.

    Text files give the stripped cell strings (an empty cell is an error); Parquet and NPZ give the
    stored values (e.g. int64 class numbers or strings). Other columns are not checked.
    """
    path = check_readable(path)
    reader = _reader_of(path)
    kwargs = {"delimiter": delimiter} if reader is read_delimited else {}
    return reader(path, columns=[], labels=name, need_data=False, **kwargs).labels


def _columns_of(data, names) -> dict[str, np.ndarray]:
    if isinstance(data, dict):
        if names is not None:
            raise InputError("write_table: names are the keys of the dict of columns; do not pass names too",
                             field="names")
        cols = {str(k): np.asarray(v) for k, v in data.items()}
    else:
        values = np.asarray(data.detach().cpu() if isinstance(data, torch.Tensor) else data)
        if values.ndim != 2:
            raise InputError(f"write_table: expected a 2-D array (n, m) of values, got shape {values.shape}",
                             field="data")
        if names is None or len(names) != values.shape[1]:
            raise InputError(f"write_table: expected {values.shape[1]} column names, got "
                             f"{None if names is None else len(names)}", field="names")
        cols = {str(n): values[:, j] for j, n in enumerate(names)}
        if len(cols) != len(names):
            raise InputError(f"write_table: column names must be distinct, got {list(names)}", field="names")
    if not cols:
        raise InputError("write_table: no columns to write", field="data")
    lengths = {k: len(v) if v.ndim == 1 else None for k, v in cols.items()}
    first = next(iter(cols))
    for k, v in cols.items():
        if v.ndim != 1 or len(v) != lengths[first]:
            raise InputError(f"write_table: column {k!r} has shape {v.shape}, expected ({lengths[first]},) "
                             "like every column", field=k)
    return cols


def _refuse_numeric_names(path: Path, cols) -> None:
    """A text table's header must read back as a header: no name may be empty, padded or a number."""
    for k in cols:
        try:
            float(k)
            numeric = True
        except ValueError:
            numeric = False
        if numeric or not k or k.strip() != k:
            raise InputError(f"{path}: column name {k!r} would not read back as a header name (it is a number, "
                             "empty, or has spaces around it); choose another name", field=k)


def write_table(path, data, names=None, *, overwrite: bool = False) -> Path:
    """Write named columns as CSV, TSV, Parquet or NPZ (by the extension), atomically.

    Parameters
    ----------
    path : output file; ``.csv``, ``.tsv``, ``.parquet`` or ``.npz``
    data : a 2-D array (n, m) with ``names`` (m names), or a dict name -> 1-D array (numbers or text)
    overwrite : replace an existing file (default: refuse)

    Floats are written in full precision (CSV / TSV: the shortest text that reads back to the same
    double). A NaN is written as ``nan``, which :func:`read_table` refuses in a data column.
    """
    import pandas as pd

    path = Path(path)
    fmt, _ = check_output_format(path, "table")
    cols = _columns_of(data, names)
    if fmt in ("csv", "tsv"):
        _refuse_numeric_names(path, cols)
    with atomic_path(path, overwrite=overwrite) as tmp:
        if fmt == "npz":
            with open(tmp, "wb") as f:                      # text as fixed-width unicode: an object array pickles
                np.savez(f, **{k: v.astype(str) if v.dtype == object else v for k, v in cols.items()})
        elif fmt == "parquet":
            pd.DataFrame(cols).to_parquet(tmp, index=False)
        else:
            pd.DataFrame(cols).to_csv(tmp, sep="\t" if fmt == "tsv" else ",", index=False, na_rep="nan",
                                      lineterminator="\n")
    return path


def read_points(path, space: Space, **options) -> torch.Tensor:
    """Read a table of points on ``space``; ``options`` go to ``space.from_rows`` (e.g. ``degrees=True``).

    Errors name the file, the line and the problem.
    """
    return points_from_table(path, space, read_table(path), **options)


def points_from_table(path, space: Space, table, **options) -> torch.Tensor:
    """Points on ``space`` from a :class:`Table` (or a ``(rows, header, lines)`` triple), errors located."""
    if isinstance(table, Table):
        rows, lines, unit = table.values, table.lines, table.unit
    else:
        rows, _, lines = table
        unit = "line"
    space.check_file_options(options)
    expected = space.n_columns_for(**options)
    if rows.shape[1] != expected:
        read_with = ", ".join(f"{k}={v!r}" for k, v in options.items()) or "its default reading options"
        raise InputError(f"{path}: {rows.shape[1]} columns per row, but {space!r} read with {read_with} needs "
                         f"{expected}{_options_for_columns(space, rows.shape[1])}", field="columns")
    states = space.column_states(**options)
    if states:
        rows = _state_codes(path, table, states, lines, unit)
    try:
        return space.from_rows(rows, **options)
    except InputError as e:
        if e.row is not None and 0 <= e.row < len(lines):
            names = table.names if isinstance(table, Table) else table[1]
            e = in_file_terms(e, names)
            where = f"{path}, {unit} {int(lines[e.row])}"
            if e.message.startswith("column "):                 # "data.csv, line 7, column 2 (psi): …"
                raise InputError(f"{where}, {e.message}", row=e.row, field=e.field) from None
            raise e.located(where) from None
        raise e.located(str(path)) from None


def in_file_terms(error: InputError, names, numbered: bool = True) -> InputError:
    """A space's error about row i, column j of its rows (0-based, ``field`` = str(j)), reworded for a message
    that already names the line: "row i, column j: …" becomes "column j+1 (name): …" (``numbered=False``:
    "name: …"), and "row i: …" loses its row. Other messages are kept."""
    message, row = error.message, error.row
    field = error.field
    if field is not None and field.isdigit() and int(field) < len(names):
        j = int(field)
        named = "" if names[j] == f"column_{j + 1}" else f" ({names[j]})"      # a file without a header
        message = message.replace(f"row {row}, column {j}: ",
                                  f"column {j + 1}{named}: " if numbered else f"{names[j]}: ", 1)
        field = str(names[j])
    elif message.startswith(f"row {row}: "):
        message = message[len(f"row {row}: "):]
    return InputError(message, row=row, field=field)


def _state_codes(path, table, states: dict, lines, unit: str) -> np.ndarray:
    """The table's values with each named-state column's cells (``table.text``) replaced by the state codes."""
    text = table.text if isinstance(table, Table) else None
    names = table.names if isinstance(table, Table) else table[1]
    missing = [j for j in states if text is None or j not in text]
    if missing:
        j = missing[0]
        raise InputError(f"{path}: column {j + 1} ({names[j]}) holds named states, but it was read as numbers "
                         f"(read the table with text_columns={sorted(states)})", field=str(names[j]))
    rows = np.array(table.values, dtype=np.float64)
    for j, known in states.items():
        index = {name: k for k, name in enumerate(known)}
        codes = np.fromiter((index.get(v, -1) for v in text[j]), dtype=np.int64, count=len(text[j]))
        bad = np.flatnonzero(codes < 0)
        if bad.size:
            i = int(bad[0])
            raise InputError(f"{path}, {unit} {int(lines[i])}, column {names[j]}: {text[j][i]!r} is not one of the "
                             f"{len(known)} states {shown_states(known)}", row=i, field=str(names[j]))
        rows[:, j] = codes
    return rows


def _options_for_columns(space: Space, n_columns: int) -> str:
    """A hint naming the reading options (``name=value``) with which ``space`` reads ``n_columns`` columns, or ""."""
    choices = [o for o in space.file_options if o.choices]
    if not choices:
        return ""
    fits = []
    for values in itertools.product(*[(None, *o.choices) for o in choices]):
        options = {o.name: v for o, v in zip(choices, values) if v is not None}
        try:
            if options and space.n_columns_for(**options) == n_columns:
                fits.append(options)
        except InputError:
            continue
    if not fits:
        return ""
    fewest = min(len(f) for f in fits)
    ways = [", ".join(f"{k}={v!r}" for k, v in f.items()) for f in fits if len(f) == fewest]
    return f"; {n_columns} columns are read with {' or '.join(ways)}"


#: Relative and absolute tolerance under which a written value is the round trip of a fixed one through the
#: space's own units (e.g. degrees → radians → degrees moves -60 to -59.999999999999986, a few units in the
#: last place; a sampled value that is not fixed differs by far more).
ROUND_TRIP_TOLERANCE = 1e-12


def write_points(path, space: Space, x: torch.Tensor, *, overwrite: bool = False, names=None, as_given=None,
                 **options) -> Path:
    """Write points as a table with a header (format by extension), atomically.

    ``names`` replaces the space's column names (e.g. the names of the columns the model was fitted on);
    it must have one name per written column. ``as_given`` maps a column index to the values a user fixed in
    that column, in the file's units (one value, or one per point): where the written value is that value up
    to the round trip through the space's units (:data:`ROUND_TRIP_TOLERANCE`), the value is written exactly as
    given, so a fixed -60 degrees reads back as -60.0. Values that differ by more (an angle given as 270 and
    kept as -90, a quaternion written with the other sign) are written as the space writes them.
    """
    check_output_format(path, "table")
    rows = space.to_rows(x, **options)
    header = space.column_names(**options)
    if names is not None:
        if len(names) != len(header):
            raise InputError(f"{path}: {len(names)} column names for {len(header)} columns", field="names")
        header = list(names)
    values = torch.as_tensor(rows).detach().cpu().numpy().astype(np.float64)            # a writable copy
    states = space.column_states(**options)
    for j, given in (as_given or {}).items():
        if j in states:
            continue                                 # a named state is written as its name
        given = np.broadcast_to(np.asarray(given, dtype=np.float64), values[:, j].shape)
        same = np.isclose(values[:, j], given, rtol=ROUND_TRIP_TOLERANCE, atol=ROUND_TRIP_TOLERANCE)
        values[same, j] = given[same]
    if not states:
        return write_table(path, values, header, overwrite=overwrite)
    if len(set(header)) != len(header):
        raise InputError(f"{path}: column names must be distinct, got {list(header)}", field="names")
    columns = {name: (np.asarray(states[j], dtype=object)[values[:, j].astype(np.int64)] if j in states
                      else values[:, j]) for j, name in enumerate(header)}
    return write_table(path, columns, overwrite=overwrite)
