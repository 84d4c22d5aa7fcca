"""Parsing FASTA and one-per-line text into records, and the policy for symbols outside the alphabet.

Records and columns in messages are 1-based, as in an editor; ``InputError.row``
is the 0-based record index and ``InputError.field`` the 0-based column.
"""

from __future__ import annotations

import re
import unicodedata
from dataclasses import dataclass, field

import numpy as np

from heatwalk.errors import InputError
from heatwalk.io.source import show

#: control characters refused anywhere in a sequence file (Unicode category Cc except tab, LF, CR)
_CONTROL = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f]")
#: ASCII names of common control characters (unicodedata has no names for category Cc)
_CONTROL_NAMES = {"\x00": "NUL", "\x07": "BEL", "\x08": "BS", "\x0b": "VT", "\x0c": "FF", "\x1b": "ESC",
                  "\x7f": "DEL"}
#: what the policy for symbols outside the alphabet may be
POLICIES = ("reject", "drop", "replace:X")


@dataclass
class SequenceRecords:
    """Records of a sequence file, of any lengths.

    Attributes
    ----------
    names : one name per record (FASTA header text; ``seq{i}`` for text files)
    sequences : the symbol strings
    lines : 1-based line of each record's first sequence line
    dropped : names of records left out by ``unknown_symbols="drop"``
    replaced : number of symbols changed by ``unknown_symbols="replace:X"``
    stops_removed : number of records whose trailing stop symbol was removed
    """

    names: list[str]
    sequences: list[str]
    lines: list[int]
    dropped: list[str] = field(default_factory=list)
    replaced: int = 0
    stops_removed: int = 0
    _spans: list[list[tuple[int, int]]] = field(default_factory=list, repr=False)

    @property
    def lengths(self) -> np.ndarray:
        """int64 array (n,) of the record lengths."""
        return np.array([len(s) for s in self.sequences], dtype=np.int64)

    def line_of(self, i: int, column: int) -> int:
        """1-based line holding 0-based ``column`` of record ``i``."""
        line = self.lines[i]
        for offset, lineno in (self._spans[i] if self._spans else []):
            if offset <= column:
                line = lineno
        return line


def _control_error(where, lineno: int, line: str, m, record: int | None, column: int | None) -> InputError:
    ch = m.group()
    name = unicodedata.name(ch, None) or _CONTROL_NAMES.get(ch, "a control character")
    if record is None:
        place = ""
    elif column is None:
        place = f", the header of record {record}"
    else:
        place = f", record {record}, column {column}"
    return InputError(f"{where}, line {lineno}{place}: control character U+{ord(ch):04X} ({name}); expected "
                      "sequence symbols (is this a binary file?)", row=None if record is None else record - 1,
                      field=None if column is None else str(column - 1))


def parse_fasta(text: str, where) -> SequenceRecords:
    """Records of FASTA text: ``>name`` lines, each followed by sequence lines (whitespace ignored)."""
    rec = SequenceRecords([], [], [])
    parts: list[list[str]] = []
    header_line: list[int] = []
    check = _CONTROL.search(text) is not None
    for lineno, raw in enumerate(text.splitlines(), start=1):
        m = _CONTROL.search(raw) if check else None
        line = raw.strip()
        if line.startswith(">"):
            if m:
                raise _control_error(where, lineno, raw, m, len(parts) + 1, None)
            if parts and not parts[-1]:
                raise InputError(f"{where}, line {header_line[-1]}: record {len(parts)} ({rec.names[-1]!r}) is empty",
                                 row=len(parts) - 1)
            rec.names.append(line[1:].strip() or f"record{len(rec.names) + 1}")
            parts.append([])
            header_line.append(lineno)
            rec._spans.append([])
            rec.lines.append(lineno + 1)
        elif line:
            if not parts:
                raise InputError(f"{where}, line {lineno}: sequence text before the first '>' header "
                                 "(not a FASTA file? use the text format)")
            done = sum(len(p) for p in parts[-1])
            if m:
                col = done + len("".join(raw[:m.start()].split())) + 1
                raise _control_error(where, lineno, raw, m, len(parts), col)
            if not parts[-1]:
                rec.lines[-1] = lineno
            rec._spans[-1].append((done, lineno))
            parts[-1].append("".join(line.split()))
        elif m:
            raise _control_error(where, lineno, raw, m, None, None)
    if not parts:
        raise InputError(f"{where}: no FASTA records found")
    if not parts[-1]:
        raise InputError(f"{where}, line {header_line[-1]}: record {len(parts)} ({rec.names[-1]!r}) is empty",
                         row=len(parts) - 1)
    rec.sequences = ["".join(p) for p in parts]
    return rec


def parse_text(text: str, where) -> SequenceRecords:
    """Records of a text file: one sequence per line, surrounding whitespace stripped."""
    lines = text.splitlines()
    while lines and not lines[-1].strip():
        lines.pop()
    if not lines:
        raise InputError(f"{where}: no sequences found")
    check = _CONTROL.search(text) is not None
    seqs = []
    for i, raw in enumerate(lines):
        m = _CONTROL.search(raw) if check else None
        if m:
            raise _control_error(where, i + 1, raw, m, i + 1, len(raw[:m.start()].lstrip()) + 1)
        s = raw.strip()
        if not s:
            raise InputError(f"{where}, line {i + 1}: record {i + 1} is empty (blank line)", row=i)
        seqs.append(s)
    return SequenceRecords([f"seq{i + 1}" for i in range(len(seqs))], seqs, list(range(1, len(seqs) + 1)))


def parse_policy(unknown_symbols: str, alphabet) -> str | None:
    """The replacement symbol of ``"replace:X"`` (None for "reject" / "drop"); InputError otherwise."""
    if unknown_symbols in ("reject", "drop"):
        return None
    if isinstance(unknown_symbols, str) and unknown_symbols.startswith("replace:"):
        x = unknown_symbols[len("replace:"):]
        if len(x) != 1:
            raise InputError(f"unknown_symbols: 'replace:' must be followed by one symbol, got {unknown_symbols!r}",
                             field="unknown_symbols")
        if alphabet is not None and x not in alphabet:
            raise InputError(f"unknown_symbols: the replacement {x!r} is not in the alphabet "
                             f"{''.join(alphabet)!r}", field="unknown_symbols")
        return x
    raise InputError(f"unknown_symbols must be 'reject', 'drop' or 'replace:X' (X a symbol of the alphabet), "
                     f"got {unknown_symbols!r}", field="unknown_symbols")


def remove_stops(rec: SequenceRecords, stop_symbol: str | None, where) -> None:
    """Remove one trailing ``stop_symbol`` from each record that ends with it."""
    if stop_symbol is None:
        return
    if not isinstance(stop_symbol, str) or len(stop_symbol) != 1:
        raise InputError(f"stop_symbol must be one character such as '*', got {stop_symbol!r}", field="stop_symbol")
    for i, s in enumerate(rec.sequences):
        if s.endswith(stop_symbol):
            rec.sequences[i] = s[:-1]
            rec.stops_removed += 1
            if not rec.sequences[i]:
                raise InputError(f"{where}, line {rec.lines[i]}: record {i + 1} ({rec.names[i]!r}) is empty once "
                                 f"its stop symbol {stop_symbol!r} is removed", row=i)


def _reject(rec: SequenceRecords, i: int, s: str, allowed: set, alphabet, where) -> InputError:
    j = next(j for j, c in enumerate(s) if c not in allowed)
    hint = ""
    if j == len(s) - 1 and not s[j].isalnum():
        hint = f"; a trailing stop symbol can be removed with stop_symbol={s[j]!r}"
    return InputError(f"{where}, line {rec.line_of(i, j)}: record {i + 1}, column {j + 1}: unknown symbol "
                      f"{show(s[j])} (alphabet: {''.join(alphabet)!r}; unknown_symbols='drop' leaves such records "
                      f"out, 'replace:X' writes X instead{hint})", row=i, field=str(j))


def apply_policy(rec: SequenceRecords, alphabet, unknown_symbols: str, where) -> SequenceRecords:
    """Records with every symbol in ``alphabet`` (None: nothing to check), by the policy."""
    replacement = parse_policy(unknown_symbols, alphabet)
    if alphabet is None:
        return rec
    allowed = set(alphabet)
    keep = []
    for i, s in enumerate(rec.sequences):
        unknown = set(s) - allowed
        if not unknown:
            keep.append(i)
        elif unknown_symbols == "reject":
            raise _reject(rec, i, s, allowed, alphabet, where)
        elif unknown_symbols == "drop":
            rec.dropped.append(rec.names[i])
        else:
            rec.replaced += sum(s.count(c) for c in unknown)
            rec.sequences[i] = s.translate({ord(c): replacement for c in unknown})
            keep.append(i)
    if not keep:
        raise InputError(f"{where}: all {len(rec.sequences)} records have symbols outside the alphabet "
                         f"{''.join(alphabet)!r}; nothing is left to read", field="unknown_symbols")
    if len(keep) < len(rec.sequences):
        rec.names = [rec.names[i] for i in keep]
        rec.sequences = [rec.sequences[i] for i in keep]
        rec.lines = [rec.lines[i] for i in keep]
        rec._spans = [rec._spans[i] for i in keep] if rec._spans else []
    return rec
