"""A streaming pass over a text file's bytes: which lines are skipped, how many delimiters, bad bytes.

The file is read in pieces of :data:`CHUNK` bytes into one reused buffer
(memory is bounded by the longest line plus a chunk, whatever the file's
size), each piece cut after its last line break, so a piece always holds
whole lines. Only C-level searches are used (``bytearray.find``, numpy
comparisons); small pieces stay in the processor's cache.

Two depths:

- light: the blank / comment lines at the top of the file (before the first
  kept line) are found; the rest of the file is only counted;
- full: every blank line (only spaces, tabs or CR) and every comment line
  (first non-blank character ``#``) is found.

Both refuse NUL bytes, carriage returns that do not end a line and lines
longer than :data:`MAX_LINE_BYTES`, naming the line and the column.
"""

from __future__ import annotations

import gzip
import zlib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from heatwalk.errors import InputError
from heatwalk.io.source import UTF8_BOM, is_gzip, where_in_text

#: bytes read per step (1 MiB: measured faster than 16 MiB pieces, which leave the cache)
CHUNK = 1 << 20
#: a line longer than this (16 MiB) is refused: no table cell is that large
MAX_LINE_BYTES = 1 << 24
#: first bytes of a line that may be blank or a comment (then the line is looked at)
SUSPECT = np.zeros(256, dtype=bool)
SUSPECT[[ord(c) for c in "\n\r\t #"]] = True


@dataclass
class Piece:
    """``buf[:end]`` holds whole lines; ``line`` is the 0-based index of its first line.

    ``buf`` is reused for the next piece: copy what must outlive the iteration.
    """

    buf: bytearray
    end: int
    line: int
    arr: np.ndarray  # uint8 view of buf[:end]
    newlines: int

    def bytes(self) -> bytes:
        return bytes(self.buf[:self.end])


def pieces(path: Path):
    """Yield the file's content as :class:`Piece` objects (gunzipped when gzip; the BOM removed)."""
    buf = bytearray(2 * CHUNK)
    view = memoryview(buf)
    have, line, start = 0, 0, True
    try:
        with (gzip.open(path, "rb") if is_gzip(path) else open(path, "rb", buffering=0)) as f:
            while True:
                if have + CHUNK > len(buf):  # a line longer than the buffer: grow it (up to the limit)
                    del view
                    buf = buf + bytearray(len(buf))
                    view = memoryview(buf)
                n = f.readinto(view[have:have + CHUNK])
                have += n
                if start and (have >= len(UTF8_BOM) or not n):
                    start = False
                    if buf.startswith(UTF8_BOM):
                        buf[:have - len(UTF8_BOM)] = buf[len(UTF8_BOM):have]
                        have -= len(UTF8_BOM)
                end = buf.rfind(b"\n", 0, have) + 1 if n else have
                if n and end == 0:
                    if have > MAX_LINE_BYTES:
                        raise InputError(f"{path}, line {line + 1}: longer than {MAX_LINE_BYTES >> 20} MiB (a huge "
                                         "cell?); expected a table of numbers")
                    continue
                if end:
                    arr = np.frombuffer(buf, dtype=np.uint8, count=end)
                    newlines = int(np.count_nonzero(arr == 10))
                    yield Piece(buf, end, line, arr, newlines)
                    del arr
                    line += newlines
                rest = have - end
                buf[:rest] = buf[end:have]
                have = rest
                if not n:
                    return
    except (OSError, EOFError, zlib.error) as e:
        raise InputError(f"{path}: the gzip-compressed content cannot be read ({e}); expected a complete gzip "
                         "file", field=str(path)) from None


def refuse_bytes(path: Path, p: Piece) -> None:
    """InputError at the first NUL byte or lone carriage return of the piece."""
    pos = p.buf.find(b"\0", 0, p.end)
    what = "a NUL byte (0x00); expected text lines (is this a binary file?)"
    if pos < 0 and p.buf.find(b"\r", 0, p.end) >= 0:
        cr = np.flatnonzero(p.arr == 13)
        after = p.arr[np.minimum(cr + 1, p.end - 1)]
        lone = cr[(cr + 1 >= p.end) | (after != 10)]
        if lone.size:
            pos, what = int(lone[0]), ("a carriage return (0x0d) that does not end a line (old Mac line endings?); "
                                       "expected lines ending in LF or CR LF")
    if pos >= 0:
        text = p.bytes()
        line, column = where_in_text(text, pos)
        raise InputError(f"{path}, line {p.line + line}, column {column}: {what}", field=str(column - 1))


def is_skipped(body: bytes) -> bool:
    """A blank line (spaces, tabs, CR only) or a comment line (first non-blank character ``#``)."""
    stripped = body.strip(b" \t\r")
    return not stripped or stripped.startswith(b"#")


@dataclass
class Scan:
    """What a scan learnt (line indices 0-based). ``count`` = delimiters on the kept lines."""

    delimiter: str | None
    choose: object  # first kept line (str) -> delimiter, used when none is stated
    n_lines: int = 0
    skipped: list[int] = field(default_factory=list)
    first: int | None = None
    first_text: str | None = None
    count: int = 0
    quotes: bool = False


def _skipped_in(p: Piece, full: bool, scan: Scan) -> list[bytes]:
    """Append the piece's skipped lines to ``scan.skipped``; return their bodies."""
    bodies = []
    if full:
        nl = np.flatnonzero(p.arr == 10)
        n_here = len(nl) + (0 if p.buf[p.end - 1] == 10 else 1)
        starts = np.concatenate(([0], nl + 1))[:n_here]
        ends = np.concatenate((nl, [p.end]))[:n_here]
        for k in np.flatnonzero(SUSPECT[p.arr[starts]]).tolist():
            body = bytes(p.buf[starts[k]:ends[k]])
            if is_skipped(body):
                scan.skipped.append(p.line + k)
                bodies.append(body)
        return bodies
    pos, k = 0, 0
    while scan.first is None and pos < p.end:  # light: only the lines before the first kept one
        e = p.buf.find(b"\n", pos, p.end)
        e = p.end if e < 0 else e
        body = bytes(p.buf[pos:e])
        if not is_skipped(body):
            break
        scan.skipped.append(p.line + k)
        bodies.append(body)
        pos, k = e + 1, k + 1
    return bodies


def _first_line(p: Piece, scan: Scan, skipped_here: set[int]) -> None:
    k, pos = p.line, 0
    while k in skipped_here:
        e = p.buf.find(b"\n", pos, p.end)
        pos, k = (p.end if e < 0 else e + 1), k + 1
    if pos >= p.end:
        return
    e = p.buf.find(b"\n", pos, p.end)
    raw = bytes(p.buf[pos:p.end if e < 0 else e])
    try:
        scan.first_text = raw.decode("utf-8").rstrip("\r")
    except UnicodeDecodeError:
        scan.first_text = None  # the caller reports it with its place
    scan.first = k
    if scan.delimiter is None and scan.first_text is not None:
        scan.delimiter = scan.choose(scan.first_text)


def scan_lines(path: Path, delimiter: str | None, choose, *, full: bool) -> Scan:
    """Scan the file (see the module docstring); ``choose(first_line)`` picks an unstated delimiter."""
    scan = Scan(delimiter=delimiter, choose=choose)
    for p in pieces(path):
        refuse_bytes(path, p)
        scan.quotes = scan.quotes or p.buf.find(b'"', 0, p.end) >= 0
        had_first = scan.first is not None
        bodies = _skipped_in(p, full, scan) if (full or not had_first) else []
        if not had_first:
            _first_line(p, scan, set(scan.skipped[len(scan.skipped) - len(bodies):]))
        if scan.first is not None and scan.delimiter is not None:
            d = scan.delimiter
            on_piece = int(np.count_nonzero(p.arr == ord(d))) if d.isascii() else p.bytes().count(d.encode())
            scan.count += on_piece - sum(b.count(d.encode()) for b in bodies)
        scan.n_lines = p.line + p.newlines + (0 if p.buf[p.end - 1] == 10 else 1)
    return scan
