"""Reading and writing symbol sequences (FASTA, or one sequence per line) for ``Categories`` spaces.

Policies
--------
- Files are UTF-8 text, optionally gzip-compressed (told by the first bytes,
  whatever the name); a leading byte-order mark is accepted. Control
  characters other than tab, LF and CR (NUL included) are refused, naming the
  line, the record and the column.
- Symbols are single characters, case-sensitive (``uppercase=True`` folds
  lower case first). Whitespace inside FASTA sequence lines is ignored; in
  text files each line is one sequence with surrounding whitespace stripped.
- ``stop_symbol`` (e.g. ``"*"``, which ends protein records translated from
  genes): one trailing stop symbol is removed from each record that has it.
  Otherwise a trailing ``*`` is a symbol like any other.
- Alphabet: given explicitly (a string or list of K distinct characters, state
  k = alphabet[k]), or inferred as the sorted set of symbols that occur. K < 2
  is an error. The alphabet is stored in the space config, hence with every
  saved model.
- Symbols outside a given alphabet follow ``unknown_symbols``:
  ``"reject"`` (default: an error naming the symbol, record and column),
  ``"drop"`` (the record is left out; the names of the dropped records are
  reported) or ``"replace:X"`` (each such symbol becomes ``X``, a symbol of
  the alphabet; the count is reported).
- Length: :func:`read_records` returns records of any lengths.
  :func:`read_sequences` needs one length L (``length=`` fixes it; otherwise
  the first record's); a record of another length is an error naming it;
  nothing is truncated or padded.
- Empty records (a FASTA header with no sequence, a blank line between text
  lines) are errors. Blank lines at the end of a text file are ignored.
- Format: ``"fasta"``, ``"text"`` or ``"auto"`` (FASTA when the first
  non-blank character is ``>``).

Writing: FASTA (``.fasta``, ``.fa``, ``.faa``, wrapped at 60 columns) or text
(``.txt``), gzip-compressed when the name ends in ``.gz``; any other
extension is refused (:func:`heatwalk.io.formats.check_output_format`).

Records and columns in messages are 1-based, as in an editor; ``InputError.row``
is the 0-based record index.
"""

from __future__ import annotations

import gzip
from dataclasses import dataclass, field
from pathlib import Path

import torch

from heatwalk.checks import check_positive_int
from heatwalk.errors import InputError
from heatwalk.io.atomic import atomic_path
from heatwalk.io.formats import check_output_format
from heatwalk.io.sequence_records import (POLICIES, SequenceRecords, apply_policy, parse_fasta, parse_policy,
                                          parse_text, remove_stops)
from heatwalk.io.source import decode_text, read_bytes
from heatwalk.spaces.alphabet import check_alphabet, encode_strings
from heatwalk.spaces.categories import Categories

__all__ = ["SequenceSet", "SequenceRecords", "read_records", "read_sequences", "write_records", "write_sequences",
           "FORMATS", "POLICIES"]

FORMATS = ("auto", "fasta", "text")
#: FASTA sequence lines written by ``write_sequences`` are wrapped at this width
FASTA_WIDTH = 60


@dataclass
class SequenceSet:
    """Sequences read from a file: ``codes`` (n, L) int64, the ``alphabet`` and one name per record.

    ``dropped`` names the records left out by ``unknown_symbols="drop"``; ``replaced`` counts the
    symbols changed by ``"replace:X"``; ``stops_removed`` the trailing stop symbols removed.
    """

    codes: torch.Tensor
    alphabet: list[str]
    names: list[str]
    dropped: list[str] = field(default_factory=list)
    replaced: int = 0
    stops_removed: int = 0

    @property
    def K(self) -> int:
        return len(self.alphabet)

    @property
    def L(self) -> int:
        return int(self.codes.shape[1])

    def space(self, process: str | None = None, rates=None):
        """The :class:`Categories` space of these sequences (alphabet included)."""
        return Categories(self.K, self.L, process=process, rates=rates, alphabet="".join(self.alphabet))


def _given_alphabet(alphabet, uppercase: bool):
    if alphabet is None:
        return None
    symbols = list(alphabet)
    if uppercase:
        symbols = [c.upper() if isinstance(c, str) else c for c in symbols]
    return check_alphabet(symbols, len(symbols))


def read_records(path, *, format: str = "auto", alphabet=None, uppercase: bool = False,
                 unknown_symbols: str = "reject", stop_symbol: str | None = None) -> SequenceRecords:
    """Read the records of a FASTA or text file, of any lengths (see the module's policies).

    Parameters
    ----------
    path : file to read (UTF-8, plain or gzip-compressed)
    format : "auto", "fasta" or "text"
    alphabet : string or list of distinct single characters the symbols must come from; ``None``
        accepts every symbol
    uppercase : fold symbols to upper case first
    unknown_symbols : "reject", "drop" or "replace:X", for symbols outside ``alphabet``
    stop_symbol : one character removed from the end of each record that ends with it

    Returns
    -------
    SequenceRecords (names, sequences, lines, lengths; dropped / replaced / stops_removed)
    """
    if format not in FORMATS:
        raise InputError(f"format must be one of {FORMATS}, got {format!r}", field="format")
    symbols = _given_alphabet(alphabet, uppercase)
    parse_policy(unknown_symbols, symbols)
    text = decode_text(read_bytes(path), path)
    if format == "auto":
        format = "fasta" if text.lstrip().startswith(">") else "text"
    rec = (parse_fasta if format == "fasta" else parse_text)(text, str(path))
    if uppercase:
        rec.sequences = [s.upper() for s in rec.sequences]
    remove_stops(rec, stop_symbol, path)
    return apply_policy(rec, symbols, unknown_symbols, path)


def read_sequences(path, *, format: str = "auto", alphabet=None, length: int | None = None,
                   uppercase: bool = False, unknown_symbols: str = "reject",
                   stop_symbol: str | None = None) -> SequenceSet:
    """Read equal-length sequences from a FASTA or one-per-line text file (see the module's policies).

    Parameters
    ----------
    path : file to read (UTF-8, plain or gzip-compressed)
    format : "auto", "fasta" or "text"
    alphabet : string or list of distinct single characters; ``None`` infers the sorted set of symbols
    length : required sequence length L; ``None`` takes the first record's
    uppercase : fold symbols to upper case before encoding
    unknown_symbols : "reject", "drop" or "replace:X", for symbols outside a given ``alphabet``
    stop_symbol : one character removed from the end of each record that ends with it
    """
    if length is not None:
        check_positive_int("length", length)
    rec = read_records(path, format=format, alphabet=alphabet, uppercase=uppercase,
                       unknown_symbols=unknown_symbols, stop_symbol=stop_symbol)
    given = _given_alphabet(alphabet, uppercase)
    symbols = sorted(set("".join(rec.sequences))) if given is None else given
    if len(symbols) < 2:
        raise InputError(f"{path}: the alphabet has {len(symbols)} symbol(s) {''.join(map(str, symbols))!r}; "
                         "a categorical model needs at least 2", field="alphabet")
    symbols = check_alphabet(symbols, len(symbols))
    codes = encode_strings(rec.sequences, symbols, length=length, where=str(path))
    return SequenceSet(codes=codes, alphabet=list(symbols), names=rec.names, dropped=rec.dropped,
                       replaced=rec.replaced, stops_removed=rec.stops_removed)


def _check_record(i: int, name: str, s: str) -> None:
    if not isinstance(s, str) or not s:
        raise InputError(f"sequences to write: record {i + 1} is {s!r}, expected a non-empty string", row=i)
    bad = next((j for j, c in enumerate(s) if c.isspace() or c == ">" or not c.isprintable()), None)
    if bad is not None:
        raise InputError(f"sequences to write: record {i + 1}, column {bad + 1}: symbol {s[bad]!r} cannot be "
                         "written in FASTA or text files", row=i, field=str(bad))
    if "\n" in name or "\r" in name:
        raise InputError(f"sequences to write: the name of record {i + 1} holds a line break: {name!r}", row=i,
                         field="names")


def write_records(path, sequences, names=None, *, format: str | None = None, prefix: str = "sample",
                  overwrite: bool = False) -> Path:
    """Write strings (any lengths) as FASTA (wrapped at 60 columns) or one per line, atomically.

    The format follows the extension (``.fasta``/``.fa``/``.faa`` or ``.txt``, ``.gz`` after it to
    compress); ``format`` ("fasta" or "text"), when given, must agree with it. ``names`` default to
    ``{prefix}{i}`` with i from 1. Refuses to replace an existing file unless ``overwrite``.
    """
    path = Path(path)
    fmt, gz = check_output_format(path, "sequences")
    if format is not None and format != fmt:
        raise InputError(f"{path}: format {format!r} does not match the extension, which gives {fmt!r}",
                         field="format")
    sequences = list(sequences)
    n = len(sequences)
    if names is None:
        names = [f"{prefix}{i + 1}" for i in range(n)]
    elif len(names) != n:
        raise InputError(f"names: got {len(names)} names for {n} sequences", field="names")
    lines = []
    for i, (name, s) in enumerate(zip(names, sequences)):
        _check_record(i, str(name), s)
        if fmt == "fasta":
            lines.append(f">{name}")
            lines.extend(s[k:k + FASTA_WIDTH] for k in range(0, len(s), FASTA_WIDTH))
        else:
            lines.append(s)
    data = ("\n".join(lines) + "\n").encode("utf-8")
    with atomic_path(path, overwrite=overwrite) as tmp:
        tmp.write_bytes(gzip.compress(data, mtime=0) if gz else data)
    return path


def write_sequences(path, codes, alphabet, *, format: str | None = None, names=None, prefix: str = "sample",
                    overwrite: bool = False) -> Path:
    """Write sequences (n, L) of codes over ``alphabet`` with :func:`write_records` (format by extension)."""
    check_output_format(path, "sequences")
    alphabet = list(alphabet)
    codes = torch.as_tensor(codes)
    if codes.dim() != 2 or codes.is_floating_point():
        raise InputError(f"sequences to write: expected an integer (n, L) tensor, got {tuple(codes.shape)} "
                         f"{codes.dtype}")
    bad = (codes < 0) | (codes >= len(alphabet))
    if bool(bad.any()):
        i, j = map(int, bad.nonzero()[0])
        raise InputError(f"sequences to write: row {i}, position {j}: code {int(codes[i, j])} is not a state "
                         f"of the alphabet (K = {len(alphabet)})", row=i, field=str(j))
    strings = ["".join(alphabet[k] for k in row) for row in codes.tolist()]
    return write_records(path, strings, names, format=format, prefix=prefix, overwrite=overwrite)
