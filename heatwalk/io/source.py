"""Opening data files for reading: one place for the checks every reader makes first.

- the path must name an existing regular file (a folder or a missing file is an
  :class:`~heatwalk.errors.InputError`, and so is a file the user may not read);
- the kind of content is told by its first bytes ("magic numbers", from the
  formats' own specifications), not by the file name: gzip ``1f 8b``, Parquet
  ``PAR1``, a zip archive such as NPZ ``PK\\x03\\x04``;
- text is UTF-8; a leading UTF-8 byte-order mark (``EF BB BF``) is accepted
  and removed; a byte sequence that is not UTF-8 is an error naming the line
  and the column (1-based, in characters) where it occurs.

Cells and symbols quoted in messages are cut to :data:`SHOW_CHARS` characters
(a huge cell never floods an error message).
"""

from __future__ import annotations

import gzip
import zlib
from pathlib import Path

from heatwalk.errors import InputError

#: first bytes of a gzip member (RFC 1952, section 2.3.1)
GZIP_MAGIC = b"\x1f\x8b"
#: first bytes of a Parquet file (the Apache Parquet format specification)
PARQUET_MAGIC = b"PAR1"
#: first bytes of a zip archive's local file header (PKWARE APPNOTE), as in an NPZ file
ZIP_MAGIC = b"PK\x03\x04"
#: the UTF-8 encoding of U+FEFF, the byte-order mark some editors put first
UTF8_BOM = b"\xef\xbb\xbf"
#: cells and symbols quoted in error messages are cut to this many characters
SHOW_CHARS = 40


def show(cell: str) -> str:
    """``repr(cell)``, cut to :data:`SHOW_CHARS` characters with the full length stated when longer."""
    if len(cell) <= SHOW_CHARS:
        return repr(cell)
    return f"{cell[:SHOW_CHARS]!r}... (a cell of {len(cell):,} characters)"


def check_readable(path) -> Path:
    """``path`` as a :class:`Path` naming a regular file that can be opened; InputError otherwise."""
    path = Path(path)
    if path.is_dir():
        raise InputError(f"{path}: is a folder, expected a data file", field=str(path))
    if not path.exists():
        raise InputError(f"{path}: no such file", field=str(path))
    if not path.is_file():
        raise InputError(f"{path}: not a regular file (a device or pipe?), expected a data file", field=str(path))
    try:
        with open(path, "rb"):
            pass
    except PermissionError:
        raise InputError(f"{path}: permission denied (the file cannot be read by this user)",
                         field=str(path)) from None
    except OSError as e:
        raise InputError(f"{path}: cannot be opened ({e.strerror or e})", field=str(path)) from None
    return path


def magic(path: Path, n: int = 4) -> bytes:
    """The first ``n`` bytes of the file (fewer if it is shorter)."""
    with open(path, "rb") as f:
        return f.read(n)


def is_gzip(path: Path) -> bool:
    """True when the file starts with the gzip magic bytes, whatever its name."""
    return magic(path, 2) == GZIP_MAGIC


def read_bytes(path) -> bytes:
    """The file's content, gunzipped when it is gzip-compressed (told by its first bytes)."""
    path = check_readable(path)
    try:
        if is_gzip(path):
            with gzip.open(path, "rb") as f:
                return f.read()
        return path.read_bytes()
    except (OSError, EOFError, zlib.error) as e:
        raise InputError(f"{path}: the gzip-compressed content cannot be read ({e}); expected a complete "
                         "gzip file", field=str(path)) from None


def where_in_text(data: bytes, offset: int) -> tuple[int, int]:
    """(line, column), both 1-based, of byte ``offset`` of ``data``; the column counts characters."""
    line = data.count(b"\n", 0, offset) + 1
    start = data.rfind(b"\n", 0, offset) + 1
    column = len(data[start:offset].decode("utf-8", errors="replace")) + 1
    return line, column


def decode_text(data: bytes, where) -> str:
    """UTF-8 text of ``data`` with a leading byte-order mark removed; errors name the line and column."""
    if data.startswith(UTF8_BOM):
        data = data[len(UTF8_BOM):]
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as e:
        line, column = where_in_text(data, e.start)
        raise InputError(f"{where}, line {line}, column {column}: byte 0x{data[e.start]:02x} is not UTF-8 text "
                         "(expected a UTF-8 text file)", row=None, field=str(column - 1)) from None
