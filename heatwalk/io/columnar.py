"""Binary tables: Parquet files (pyarrow) and numpy NPZ archives.

Rows are numbered from 1 in messages (``row 5``), as a spreadsheet would
show them; ``InputError.row`` stays 0-based.

Parquet: every column has a name; data columns must hold integers or floats
(read as float64), with no missing values and no NaN or infinity. Text
(string) columns can be ignored or be the label column; any other type
(dates, lists, booleans, ...) is refused when it is a data column.

NPZ (``numpy.savez``), one of two layouts:

- one 2-D array (n, m): its columns are named by position, ``column_1`` ...;
- named 1-D arrays of one common length n: each array is a column, named by
  its key, in the order stored.

Arrays are loaded with ``allow_pickle=False``: object arrays are refused.
"""

from __future__ import annotations

import zipfile
from pathlib import Path

import numpy as np

from heatwalk.errors import InputError
from heatwalk.io.table_base import Table, check_finite, position_names, select_columns, writable


def _table(path: Path, values: np.ndarray, names, label_values, label_name, ignored, n: int) -> Table:
    check_finite(values, names, lambda i: f"{path}, row {i + 1}")
    return Table(values=values, names=list(names), lines=np.arange(1, n + 1, dtype=np.int64), ignored=ignored,
                 labels=label_values, label_name=label_name, path=path, unit="row")


def _need_numbers(path: Path, name: str, j: int, kind: str, columns_given: bool) -> InputError:
    hint = "" if columns_given else "; to leave it out, name the data columns with columns=[...]"
    return InputError(f"{path}, column {j + 1} ({name}): holds {kind}, expected numbers (integers or floats)"
                      f"{hint}", field=name)


def read_parquet(path: Path, *, columns=None, labels=None, need_data: bool = True, label_what: str = "label") -> Table:
    """Read a Parquet file's columns (see the module docstring)."""
    try:
        import pyarrow as pa
        import pyarrow.parquet as pq
    except ImportError:
        raise InputError(f"{path}: reading Parquet needs pyarrow, which is not installed: pip install pyarrow",
                         field=str(path)) from None
    try:
        schema = pq.read_schema(path)
    except (pa.ArrowException, OSError) as e:
        raise InputError(f"{path}: not a readable Parquet file ({e}); expected a Parquet table") from None
    names = list(schema.names)
    if not names:
        raise InputError(f"{path}: the Parquet file has no columns")
    data, label, ignored = select_columns(path, names, columns, labels, header=True, need_data=need_data)
    for j in data:
        t = schema.field(j).type
        if not (pa.types.is_integer(t) or pa.types.is_floating(t)):
            raise _need_numbers(path, names[j], j, f"values of type {t}", columns is not None)
    wanted = [names[j] for j in data] + ([names[label]] if label is not None else [])
    try:
        table = pq.read_table(path, columns=wanted)
    except (pa.ArrowException, OSError) as e:
        raise InputError(f"{path}: the Parquet data cannot be read ({e})") from None
    n = table.num_rows
    if n == 0:
        raise InputError(f"{path}: no data rows (the Parquet table has 0 rows)")
    for k, j in enumerate(data + ([label] if label is not None else [])):
        col = table.column(k)
        if col.null_count:
            i = int(np.flatnonzero(col.is_null().to_numpy(zero_copy_only=False))[0])
            raise InputError(f"{path}, row {i + 1}, column {j + 1} ({names[j]}): missing value (null), "
                             f"expected {'a number' if j in data else 'a ' + label_what}", row=i, field=names[j])
    label_values = table.column(len(data)).to_numpy() if label is not None else None
    if data:
        # pyarrow's own conversion puts columns of one type in one block: to_numpy is then a view of it
        frame = table.select(list(range(len(data)))).to_pandas()
        values = writable(frame.to_numpy(dtype=np.float64))
        del frame
    else:
        values = np.empty((n, 0))
    return _table(path, values, [names[j] for j in data], label_values,
                  None if label is None else names[label], ignored, n)


def _npz_columns(path: Path, archive) -> tuple[list[str], list[np.ndarray]]:
    keys = list(archive.files)
    if not keys:
        raise InputError(f"{path}: the NPZ archive holds no arrays")
    arrays = [archive[k] for k in keys]
    if len(arrays) == 1 and arrays[0].ndim == 2:
        a = arrays[0]
        return position_names(a.shape[1]), [a[:, j] for j in range(a.shape[1])]
    for k, a in zip(keys, arrays):
        if a.ndim != 1:
            raise InputError(f"{path}: array {k!r} has shape {a.shape}; expected one 2-D array, or named 1-D "
                             "arrays of one length (one per column)", field=k)
        if len(a) != len(arrays[0]):
            raise InputError(f"{path}: array {k!r} has {len(a)} rows but {keys[0]!r} has {len(arrays[0])}; "
                             "expected columns of one length", field=k)
    return keys, arrays


def read_npz(path: Path, *, columns=None, labels=None, need_data: bool = True, label_what: str = "label") -> Table:
    """Read the columns of an NPZ archive (see the module docstring)."""
    try:
        with np.load(path, allow_pickle=False) as archive:
            names, arrays = _npz_columns(path, archive)
    except (zipfile.BadZipFile, OSError, EOFError) as e:
        raise InputError(f"{path}: not a readable NPZ archive ({e}); expected arrays saved by numpy.savez") from None
    except ValueError as e:
        raise InputError(f"{path}: an array cannot be loaded ({e}); expected numeric or text arrays "
                         "(object arrays are refused)") from None
    data, label, ignored = select_columns(path, names, columns, labels, header=True, need_data=need_data)
    for j in data:
        if arrays[j].dtype.kind not in "iuf":
            raise _need_numbers(path, names[j], j, f"values of dtype {arrays[j].dtype}", columns is not None)
    n = len(arrays[0])
    if n == 0:
        raise InputError(f"{path}: no data rows (the arrays have length 0)")
    values = np.empty((n, len(data)), dtype=np.float64, order="F")
    for k, j in enumerate(data):
        values[:, k] = arrays[j]
    return _table(path, values, [names[j] for j in data],
                  None if label is None else arrays[label], None if label is None else names[label], ignored, n)
