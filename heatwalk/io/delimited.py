"""Delimited text tables (CSV, TSV, ...): pandas parses, a streaming scan keeps every line accounted for.

Layout
------
- One row per line; cells separated by one character, stated
  (``delimiter=``) or detected from the first kept line: the most frequent of
  ``,`` tab ``;`` ``|`` (a comma when none occurs, a one-column file; a tab
  for a ``.tsv`` file).
- Blank lines and lines whose first non-blank character is ``#`` are skipped.
- The first kept line is a header when none of its cells reads as a number;
  otherwise the columns are named by position (``column_1``, ...).
- Every line has as many cells as the first kept line. Data cells are decimal
  numbers, spaces around them allowed; empty cells, NaN and infinities are
  errors. Cells may be quoted with ``"`` (a quote inside is doubled) but may
  not span lines.
- UTF-8, a leading byte-order mark accepted; a gzip-compressed file is read
  as it is (told by its first bytes). NUL bytes and carriage returns that do
  not end a line are refused; so is a line longer than 16 MiB.

How it is read
--------------
1. A light scan (:mod:`heatwalk.io.line_scan`) counts lines and delimiters,
   finds the skipped lines at the top and the first kept line, and refuses
   bad bytes.
2. pandas' C parser reads the rest into float64 columns (text columns as
   strings). The result is kept only if it has one row per remaining line,
   the delimiter count is (width - 1) per row, and every value is finite.
3. Otherwise a full scan finds every skipped line and pandas reads again
   without them; if that fails too, a line-by-line check in Python finds the
   first problem in file order and names its line, column number, column
   name, the cell and what was expected. If that check finds nothing, the
   parser's own message is reported (never a silent result).
"""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from heatwalk.errors import InputError
from heatwalk.io.line_scan import SUSPECT, Scan, pieces, scan_lines
from heatwalk.io.source import is_gzip, where_in_text
from heatwalk.io.table_base import Table, cell_problem, position_names, select_columns, writable

#: delimiters tried, in order of preference on a tie, when none is stated
DELIMITERS = (",", "\t", ";", "|")
_PANDAS_EXACT = int(pd.__version__.split(".")[0]) >= 3  # before 3.0 the default float parser is not exact


def _chooser(suffix: str):
    """The rule that picks the delimiter from the first kept line (see the module's layout)."""
    def choose(first: str) -> str:
        if suffix in (".tsv", ".tab"):
            return "\t"
        best = max(DELIMITERS, key=lambda d: first.count(d))
        return best if first.count(best) else ","
    return choose


def _split(line: str, delimiter: str, where: str) -> list[str]:
    if '"' not in line:
        return [c.strip() for c in line.split(delimiter)]
    try:
        cells = next(csv.reader([line], delimiter=delimiter, strict=True))
    except csv.Error as e:
        raise InputError(f"{where}: quoted cell not read ({e}); expected quotes closed on the same line, "
                         'a quote inside a quoted cell doubled ("")') from None
    return [c.strip() for c in cells]


def _is_number(cell: str) -> bool:
    return cell_problem(cell) is None or cell_problem(cell).startswith("value")


def _check_delimiter(delimiter) -> None:
    if delimiter is None:
        return
    if not isinstance(delimiter, str) or len(delimiter) != 1 or delimiter in '"\n\r#':
        raise InputError(f"delimiter must be one character other than a quote, '#' or a line break, "
                         f"got {delimiter!r}", field="delimiter")


def _layout(path: Path, scan: Scan):
    """(header cells or None, names, width) from the first kept line."""
    if scan.first is None:
        raise InputError(f"{path}: no data rows (the file is empty or has only a header)")
    if scan.first_text is None:
        _diagnose_decode(path)
        raise InputError(f"{path}, line {scan.first + 1}: not UTF-8 text (expected a UTF-8 text file)")
    cells = _split(scan.first_text, scan.delimiter, f"{path}, line {scan.first + 1}")
    if any(_is_number(c) for c in cells):
        return None, position_names(len(cells)), len(cells)
    return cells, [c if c else f"column_{j + 1}" for j, c in enumerate(cells)], len(cells)


def _diagnose_decode(path: Path) -> None:
    for p in pieces(path):
        text = p.bytes()
        try:
            text.decode("utf-8")
        except UnicodeDecodeError as e:
            line, column = where_in_text(text, e.start)
            raise InputError(f"{path}, line {p.line + line}, column {column}: byte 0x{text[e.start]:02x} is not "
                             "UTF-8 text (expected a UTF-8 text file)", field=str(column - 1)) from None


@dataclass
class _Plan:
    """How to read the kept lines: the layout and the roles of the columns."""

    path: Path
    delimiter: str
    header: int | None  # 0-based line of the header, or None
    names: list[str]
    width: int
    data: list[int]
    label: int | None
    columns_given: bool
    label_what: str = "label"      # what the label column's cells are, in messages ("state name" for named states)


def _parse(plan: _Plan, skip, blank_lines: bool, piece: bytes | None = None) -> pd.DataFrame:
    """pandas' reading of the file's lines not in ``skip`` (an int: that many first lines; or a set),
    or of the lines of one ``piece`` of it."""
    if len(plan.data) == plan.width:  # one dtype: pandas keeps one block, and to_numpy is a view of it
        dtype = np.float64
    else:
        dtype = {j: (np.float64 if j in plan.data else str) for j in range(plan.width)}
    extra = {} if _PANDAS_EXACT else {"float_precision": "round_trip"}
    if piece is None:
        source, compression = plan.path, ("gzip" if is_gzip(plan.path) else None)
    else:
        source, compression = io.BytesIO(piece), None
    return pd.read_csv(source, sep=plan.delimiter, header=None, names=list(range(plan.width)),
                       skiprows=skip or None, skip_blank_lines=blank_lines, dtype=dtype, na_filter=False,
                       engine="c", encoding="utf-8", compression=compression, quotechar='"', doublequote=True,
                       **extra)


def _values(plan: _Plan, scan: Scan, skip, blank_lines: bool, n: int):
    """(values, frame) when pandas' reading is the file's rows, all finite; else (None, its error or None)."""
    try:
        df = _parse(plan, skip, blank_lines)
    except (ValueError, pd.errors.ParserError, UnicodeDecodeError) as e:
        return None, e
    if len(df) != n:
        return None, None
    on_data = scan.count - (scan.first_text.count(plan.delimiter) if plan.header is not None else 0)
    if not scan.quotes and on_data != (plan.width - 1) * n:
        return None, None
    last = plan.width - 1
    if scan.quotes and last not in plan.data and bool((df[last].str.strip() == "").any()):
        return None, None  # a missing last cell reads as an empty one: count the cells of each line
    if plan.data == list(range(plan.width)):
        values = df.to_numpy(dtype=np.float64)
    else:
        values = df[plan.data].to_numpy(dtype=np.float64) if plan.data else np.empty((n, 0))
    if not np.isfinite(values).all():
        return None, None
    return values, df


def _row_problem(plan: _Plan, cells: list[str], lineno: int, row: int):
    where = f"{plan.path}, line {lineno}"
    if len(cells) != plan.width:
        width_from = "the header" if plan.header is not None else "the first row"
        return InputError(f"{where}: {len(cells)} columns, but {width_from} has {plan.width}", row=row)
    for j in range(plan.width):
        name = f" ({plan.names[j]})" if plan.header is not None else ""
        if j in plan.data:
            problem = cell_problem(cells[j])
            if problem is not None:
                hint = ""
                if problem.endswith("is not a number") and plan.header is not None and not plan.columns_given:
                    hint = (f"; if column {plan.names[j]!r} holds text, leave it out by naming the data "
                            "columns with columns=[...]")
                return InputError(f"{where}, column {j + 1}{name}: {problem}{hint}", row=row, field=str(j))
        elif j == plan.label and not cells[j]:
            return InputError(f"{where}, column {j + 1}{name}: empty {plan.label_what} cell, expected a "
                              f"{plan.label_what}", row=row, field=str(j))
    return None


def _line_ok(plan: _Plan, cells: list[str]) -> bool:
    """A quick yes for a good row (``float`` on each data cell); a no is explained by :func:`_row_problem`."""
    if len(cells) != plan.width:
        return False
    for j in plan.data:
        c = cells[j]
        try:
            v = float(c)
        except ValueError:
            return False
        if v - v != 0 or "_" in c or not c.isascii():  # v - v is nan for nan and +-inf
            return False
    return plan.label is None or bool(cells[plan.label].strip())


def _lines_of(p) -> list[str] | None:
    text = p.bytes()
    try:
        lines = text.decode("utf-8").split("\n")
    except UnicodeDecodeError:
        return None
    if text.endswith(b"\n"):
        lines.pop()
    return lines


def _piece_rows(plan: _Plan, p) -> int | None:
    """The number of rows of a piece that pandas reads cleanly (no blank, comment or quoted line, the
    right cell count, finite numbers, labels present); None when the piece needs the line-by-line check."""
    if p.buf.find(b'"', 0, p.end) >= 0 or (plan.header is not None and p.line <= plan.header):
        return None
    nl = np.flatnonzero(p.arr == 10)
    n = len(nl) + (0 if p.buf[p.end - 1] == 10 else 1)
    if SUSPECT[p.arr[np.concatenate(([0], nl + 1))[:n]]].any():
        return None
    d = plan.delimiter
    if d.isascii() and int(np.count_nonzero(p.arr == ord(d))) != (plan.width - 1) * n:
        return None
    try:
        df = _parse(plan, None, False, piece=p.bytes())
    except (ValueError, pd.errors.ParserError, UnicodeDecodeError):
        return None
    ok = len(df) == n and np.isfinite(df[plan.data].to_numpy(dtype=np.float64)).all()
    if ok and plan.label is not None:
        ok = not bool((df[plan.label].str.strip() == "").any())
    return n if ok else None


def _diagnose(plan: _Plan) -> InputError | None:
    """The first problem of the file in line order, or None when the line-by-line check finds none.

    Pieces that pandas reads cleanly are counted and passed; the others are checked line by line."""
    row = 0
    for p in pieces(plan.path):
        n = _piece_rows(plan, p)
        if n is not None:
            row += n
            continue
        lines = _lines_of(p)
        if lines is None:  # a byte that is not UTF-8 in this piece: find its line
            for k, raw in enumerate(p.bytes().split(b"\n")):
                try:
                    raw.decode("utf-8")
                except UnicodeDecodeError as e:
                    _, column = where_in_text(raw, e.start)
                    return InputError(f"{plan.path}, line {p.line + k + 1}, column {column}: byte "
                                      f"0x{raw[e.start]:02x} is not UTF-8 text (expected a UTF-8 text file)")
        for k, line in enumerate(lines or []):
            lineno = p.line + k
            bare = line.strip(" \t\r")
            if lineno == plan.header or not bare or bare[0] == "#":
                continue
            line = line[:-1] if line.endswith("\r") else line
            where = f"{plan.path}, line {lineno + 1}"
            cells = line.split(plan.delimiter) if '"' not in line else _split(line, plan.delimiter, where)
            if not _line_ok(plan, cells):
                problem = _row_problem(plan, [c.strip() for c in cells], lineno + 1, row)
                if problem is not None:
                    return problem
            row += 1
    return None


def _read_rows(plan: _Plan, scan: Scan, skipped: list[int]):
    """(values, frame, kept line numbers 1-based) by the fast path, then the careful one."""
    header = {plan.header} if plan.header is not None else set()
    skip = set(skipped) | header
    n = scan.n_lines - len(skip)
    if n == 0:
        raise InputError(f"{plan.path}: no data rows (the file is empty or has only a header)")
    values, got = _values(plan, scan, len(skip), True, n)  # the skipped lines are all at the top
    if values is None:
        full = scan_lines(plan.path, plan.delimiter, None, full=True)
        again = set(full.skipped) | header
        if again != skip:
            skip, n = again, full.n_lines - len(again)
            if n == 0:
                raise InputError(f"{plan.path}: no data rows (the file is empty or has only a header)")
            values, got = _values(plan, full, skip, False, n)
        if values is None:
            problem = _diagnose(plan)
            if problem is not None:
                raise problem from None
            why = f"{type(got).__name__}: {got}" if got is not None else "its rows differ from the file's lines"
            raise InputError(f"{plan.path}: cannot be read as a table (the parser says {why})")
    keep = np.ones(scan.n_lines, dtype=bool)
    keep[sorted(skip)] = False
    return values, got, np.flatnonzero(keep) + 1


def read_delimited(path: Path, *, columns=None, labels=None, delimiter: str | None = None,
                   need_data: bool = True, label_what: str = "label") -> Table:
    """Read a delimited text table (see the module's layout); the checks of every reader apply."""
    _check_delimiter(delimiter)
    scan = scan_lines(path, delimiter, _chooser(Path(path.name.lower().removesuffix(".gz")).suffix), full=False)
    header, names, width = _layout(path, scan)
    data, label, ignored = select_columns(path, names, columns, labels, header=header is not None,
                                          need_data=need_data)
    plan = _Plan(path, scan.delimiter, scan.first if header is not None else None, names, width, data, label,
                 columns is not None, label_what)
    values, df, lines = _read_rows(plan, scan, scan.skipped)
    label_values = None
    if label is not None:
        label_values = df[label].str.strip().to_numpy(dtype=object)
        empty = np.flatnonzero(label_values == "")
        if empty.size:
            i = int(empty[0])
            raise InputError(f"{path}, line {lines[i]}, column {label + 1} ({names[label]}): empty {label_what} "
                             f"cell, expected a {label_what}", row=i, field=names[label])
    del df
    return Table(values=writable(values), names=[names[j] for j in data], lines=lines, ignored=ignored,
                 labels=label_values, label_name=None if label is None else names[label], path=path, unit="line")
