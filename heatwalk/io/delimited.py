"""Delimited text tables (CSV, TSV, ...): pandas parses, a streaming pre-scan keeps every line accounted for.

Layout
------
- One row per line; cells separated by one character, stated
  (``delimiter=``) or detected from the first kept line: the most frequent of
  ``,`` tab ``;`` ``|`` (a comma when none occurs, a one-column file).
- Blank lines and lines whose first non-blank character is ``#`` are skipped.
- The first kept line is a header when none of its cells reads as a number;
  otherwise the columns are named by position (``column_1``, ...).
- Every line has as many cells as the first kept line. Data cells are decimal
  numbers, spaces around them allowed; empty cells, NaN and infinities are
  errors. Cells may be quoted with ``"`` (a quote inside is doubled) but may
  not span lines.
- UTF-8, a leading byte-order mark accepted; a gzip-compressed file is read
  as it is (told by its first bytes). NUL bytes and carriage returns that do
  not end a line are refused; so is a line longer than :data:`MAX_LINE_BYTES`.

How it is read
--------------
A first pass over the bytes, in chunks of :data:`CHUNK` bytes (so memory stays
bounded by the chunk, not the file), finds the skipped lines, counts
delimiters and looks for NUL bytes and quotes, using only C-level ``bytes``
searches. pandas' C parser then reads the kept lines into float64 columns.
Every way the fast path can fail or be fooled — a parser error, a non-number,
a non-finite value, a row count or a delimiter count that disagrees with the
header — sends the file through a line-by-line check in Python that finds
the first problem in file order and names its line, column number, column
name, the cell and what was expected. If that check finds nothing, the
parser's own message is reported (never a silent result).
"""

from __future__ import annotations

import csv
import gzip
import io
import re
import zlib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from heatwalk.errors import InputError
from heatwalk.io.source import UTF8_BOM, is_gzip, show, where_in_text
from heatwalk.io.table_base import Table, cell_problem, position_names, select_columns

#: delimiters tried, in order of preference on a tie, when none is stated
DELIMITERS = (",", "\t", ";", "|")
#: bytes read per step of the pre-scan
CHUNK = 1 << 24
#: a line longer than this (16 MiB) is refused: no table cell is that large
MAX_LINE_BYTES = CHUNK
#: patterns that start a line that may have to be skipped (blank, indented, comment)
_LINE_STARTS = (b"\n\n", b"\n#", b"\n ", b"\n\t", b"\n\r")
_LONE_CR = re.compile(rb"\r(?!\n)")
_PANDAS_EXACT = int(pd.__version__.split(".")[0]) >= 3  # before 3.0 the default float parser is not exact


@dataclass
class _Scan:
    """What the pre-scan learnt about the file's lines (line indices are 0-based)."""

    n_lines: int = 0
    skipped: list[int] = field(default_factory=list)
    first: int | None = None
    first_text: str | None = None
    counts: dict[str, int] = field(default_factory=dict)
    skipped_counts: dict[str, int] = field(default_factory=dict)
    quotes: bool = False


def _opener(path: Path):
    return (lambda: gzip.open(path, "rb")) if is_gzip(path) else (lambda: open(path, "rb"))


def _chunks(path: Path):
    """Yield (bytes holding whole lines, 0-based index of its first line); the BOM is removed."""
    base, carry, start = 0, b"", True
    with _opener(path)() as f:
        while True:
            block = f.read(CHUNK)
            text = carry + block
            if start:
                text, start = (text[len(UTF8_BOM):] if text.startswith(UTF8_BOM) else text), False
            if block:
                cut = text.rfind(b"\n") + 1
                if cut == 0:
                    if len(text) > MAX_LINE_BYTES:
                        raise InputError(f"{path}, line {base + 1}: longer than {MAX_LINE_BYTES >> 20} MiB "
                                         "(a huge cell?); expected a table of numbers", row=None)
                    carry = text
                    continue
                text, carry = text[:cut], text[cut:]
            elif not text:
                return
            yield text, base
            base += text.count(b"\n")
            if not block:
                return


def _refuse_bytes(path: Path, text: bytes, base: int) -> None:
    pos = text.find(b"\0")
    what = "a NUL byte (0x00); expected text lines (is this a binary file?)"
    if pos < 0 and b"\r" in text:
        m = _LONE_CR.search(text)
        pos, what = ((m.start(), "a carriage return (0x0d) that does not end a line (old Mac line endings?); "
                      "expected lines ending in LF or CR LF") if m else (-1, ""))
    if pos >= 0:
        line, column = where_in_text(text, pos)
        raise InputError(f"{path}, line {base + line}, column {column}: {what}", field=str(column - 1))


def _candidate_starts(text: bytes) -> list[int]:
    starts = [0] if text[:1] in (b"\n", b"#", b" ", b"\t", b"\r") else []
    for pat in _LINE_STARTS:
        p = text.find(pat)
        while p >= 0:
            starts.append(p + 1)
            p = text.find(pat, p + 1)
    return sorted(set(s for s in starts if s < len(text)))


def _scan_chunk(scan: _Scan, text: bytes, base: int, delims) -> None:
    for d in delims:
        scan.counts[d] = scan.counts.get(d, 0) + text.count(d.encode())
    scan.quotes = scan.quotes or b'"' in text
    skipped_here = set()
    line, at = base, 0
    for s in _candidate_starts(text):
        line += text.count(b"\n", at, s)
        at = s
        end = text.find(b"\n", s)
        body = text[s:end if end >= 0 else len(text)]
        stripped = body.strip(b" \t\r")
        if not stripped or stripped.startswith(b"#"):
            scan.skipped.append(line)
            skipped_here.add(line)
            for d in delims:
                scan.skipped_counts[d] = scan.skipped_counts.get(d, 0) + body.count(d.encode())
    n_here = text.count(b"\n") + (0 if text.endswith(b"\n") else 1)
    if scan.first is None:
        k = base
        while k in skipped_here:
            k += 1
        if k < base + n_here:
            lines = text.split(b"\n", k - base + 1)
            raw = lines[k - base]
            try:
                scan.first_text = raw.decode("utf-8").rstrip("\r")
            except UnicodeDecodeError:
                scan.first_text = None  # reported with its place by the line-by-line check
            scan.first = k
    scan.n_lines = base + n_here


def _prescan(path: Path, delimiter: str | None) -> _Scan:
    delims = DELIMITERS if delimiter is None else tuple(dict.fromkeys((delimiter, *DELIMITERS)))
    scan = _Scan()
    try:
        for text, base in _chunks(path):
            _refuse_bytes(path, text, base)
            _scan_chunk(scan, text, base, delims)
    except (OSError, EOFError, zlib.error) as e:
        raise InputError(f"{path}: the gzip-compressed content cannot be read ({e}); expected a complete "
                         "gzip file", field=str(path)) from None
    return scan


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


def _layout(path: Path, scan: _Scan, delimiter: str | None, suffix: str):
    """(delimiter, header cells or None, names, width) from the first kept line."""
    if scan.first is None:
        raise InputError(f"{path}: no data rows (the file is empty or has only a header)")
    if scan.first_text is None:
        _diagnose_decode(path)
        raise InputError(f"{path}, line {scan.first + 1}: not UTF-8 text (expected a UTF-8 text file)")
    first = scan.first_text
    if delimiter is None:
        delimiter = "\t" if suffix in (".tsv", ".tab") else max(DELIMITERS, key=lambda d: first.count(d))
        if first.count(delimiter) == 0:
            delimiter = "\t" if suffix in (".tsv", ".tab") else ","
    cells = _split(first, delimiter, f"{path}, line {scan.first + 1}")
    header = None if any(_is_number(c) for c in cells) else cells
    if header is None:
        return delimiter, None, position_names(len(cells)), len(cells)
    names = [c if c else f"column_{j + 1}" for j, c in enumerate(cells)]
    return delimiter, header, names, len(cells)


def _diagnose_decode(path: Path) -> None:
    for text, base in _chunks(path):
        try:
            text.decode("utf-8")
        except UnicodeDecodeError as e:
            line, column = where_in_text(text, e.start)
            raise InputError(f"{path}, line {base + line}, column {column}: byte 0x{text[e.start]:02x} is not "
                             "UTF-8 text (expected a UTF-8 text file)", field=str(column - 1)) from None


@dataclass
class _Plan:
    """How to read the kept lines: the layout and the roles of the columns."""

    path: Path
    delimiter: str
    header: bool
    names: list[str]
    width: int
    data: list[int]
    label: int | None
    skip: set[int]
    columns_given: bool


def _parse(plan: _Plan, scan: _Scan) -> pd.DataFrame:
    dtype = {j: (np.float64 if j in plan.data else str) for j in range(plan.width)}
    extra = {} if _PANDAS_EXACT else {"float_precision": "round_trip"}
    return pd.read_csv(plan.path, sep=plan.delimiter, header=None, names=list(range(plan.width)),
                       skiprows=plan.skip or None, skip_blank_lines=False, dtype=dtype, na_filter=False,
                       engine="c", encoding="utf-8", compression="gzip" if is_gzip(plan.path) else None,
                       quotechar='"', doublequote=True, **extra)


def _suspect(plan: _Plan, scan: _Scan, df: pd.DataFrame, n: int) -> bool:
    """True when the parsed frame may not be the file's rows (then the line-by-line check decides)."""
    if len(df) != n:
        return True
    d = plan.delimiter
    on_data = scan.counts[d] - scan.skipped_counts.get(d, 0)
    if plan.header:
        on_data -= scan.first_text.count(d)
    if not scan.quotes and on_data != (plan.width - 1) * n:
        return True
    last = plan.width - 1
    if scan.quotes and last not in plan.data and bool((df[last].str.strip() == "").any()):
        return True  # a missing last cell reads as an empty one: count the cells of each line
    return False


def _row_problem(plan: _Plan, cells: list[str], lineno: int, row: int, width_from: str):
    where = f"{plan.path}, line {lineno}"
    if len(cells) != plan.width:
        return InputError(f"{where}: {len(cells)} columns, but {width_from} has {plan.width}", row=row)
    for j in range(plan.width):
        name = f" ({plan.names[j]})" if plan.header else ""
        if j in plan.data:
            problem = cell_problem(cells[j])
            if problem is not None:
                hint = ""
                if problem.endswith("is not a number") and plan.header and not plan.columns_given:
                    hint = (f"; if column {plan.names[j]!r} holds text, leave it out by naming the data "
                            "columns with columns=[...]")
                return InputError(f"{where}, column {j + 1}{name}: {problem}{hint}", row=row, field=str(j))
        elif j == plan.label and not cells[j]:
            return InputError(f"{where}, column {j + 1}{name}: empty label cell, expected a label",
                              row=row, field=str(j))
    return None


def _diagnose(plan: _Plan, scan: _Scan) -> InputError | None:
    """The first problem of the file in line order, or None when the line-by-line check finds none."""
    width_from = "the header" if plan.header else "the first row"
    row = 0
    for text, base in _chunks(plan.path):
        pieces = text.split(b"\n")
        if text.endswith(b"\n"):
            pieces.pop()
        for k, raw in enumerate(pieces):
            lineno = base + k
            if lineno >= scan.n_lines:
                break
            if lineno in plan.skip:
                continue
            try:
                line = raw.decode("utf-8").rstrip("\r")
            except UnicodeDecodeError as e:
                _, column = where_in_text(raw, e.start)
                return InputError(f"{plan.path}, line {lineno + 1}, column {column}: byte 0x{raw[e.start]:02x} "
                                  "is not UTF-8 text (expected a UTF-8 text file)", row=row)
            cells = _split(line, plan.delimiter, f"{plan.path}, line {lineno + 1}")
            problem = _row_problem(plan, cells, lineno + 1, row, width_from)
            if problem is not None:
                return problem
            row += 1
    return None


def read_delimited(path: Path, *, columns=None, labels=None, delimiter: str | None = None,
                   need_data: bool = True) -> Table:
    """Read a delimited text table (see the module's layout); the checks of every reader apply."""
    _check_delimiter(delimiter)
    scan = _prescan(path, delimiter)
    suffix = path.name.lower().removesuffix(".gz")
    delimiter, header, names, width = _layout(path, scan, delimiter, Path(suffix).suffix)
    data, label, ignored = select_columns(path, names, columns, labels, header=header is not None,
                                          need_data=need_data)
    skip = set(scan.skipped) | ({scan.first} if header is not None else set())
    plan = _Plan(path, delimiter, header is not None, names, width, data, label, skip, columns is not None)
    n = scan.n_lines - len(skip)
    if n == 0:
        raise InputError(f"{path}: no data rows (the file is empty or has only a header)")
    try:
        df = _parse(plan, scan)
        failure = None
    except (ValueError, pd.errors.ParserError, UnicodeDecodeError) as e:
        df, failure = None, e
    values = None
    if df is not None and not _suspect(plan, scan, df, n):
        values = df[data].to_numpy(dtype=np.float64) if data else np.empty((n, 0))
        if not np.isfinite(values).all():
            values = None
    if values is None:
        problem = _diagnose(plan, scan)
        if problem is not None:
            raise problem from None
        raise InputError(f"{path}: cannot be read as a table ({type(failure).__name__ if failure else 'check'}: "
                         f"{failure or 'row count differs from the line count'})")
    lines = np.setdiff1d(np.arange(scan.n_lines, dtype=np.int64), np.fromiter(skip, np.int64, len(skip))) + 1
    label_values = None
    if label is not None:
        label_values = df[label].str.strip().to_numpy(dtype=object)
        empty = np.flatnonzero(label_values == "")
        if empty.size:
            i = int(empty[0])
            raise InputError(f"{path}, line {lines[i]}, column {label + 1} ({names[label]}): empty label cell, "
                             "expected a label", row=i, field=names[label])
    return Table(values=values, names=[names[j] for j in data], lines=lines, ignored=ignored,
                 labels=label_values, label_name=None if label is None else names[label], path=path, unit="line")
