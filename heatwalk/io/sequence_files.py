"""Reading and writing symbol sequences (FASTA, or one sequence per line) for ``Categories`` spaces.

Policies
--------
- Symbols are single characters, case-sensitive (``uppercase=True`` folds
  lower case first). Whitespace inside FASTA sequence lines is ignored; in
  text files each line is one sequence with surrounding whitespace stripped.
- Alphabet: given explicitly (a string or list of K distinct characters, state
  k = alphabet[k]), or inferred as the sorted set of symbols that occur. An
  unknown symbol is an error naming the symbol, the record and the column.
  K < 2 is an error. The alphabet is stored in the space config, hence with
  every saved model.
- Length: all records must have the same length L (``length=`` fixes it;
  otherwise the first record's length is used). A record of another length is
  an error naming it; nothing is truncated or padded.
- Empty records (a FASTA header with no sequence, a blank line between text
  lines) are errors. Blank lines at the end of a text file are ignored.
- Format: ``"fasta"``, ``"text"`` or ``"auto"`` (FASTA when the first
  non-blank character is ``>``).

Records and columns in messages are 1-based, as in an editor; ``InputError.row``
is the 0-based record index.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import torch

from heatwalk.checks import check_positive_int
from heatwalk.errors import InputError
from heatwalk.io.atomic import atomic_path
from heatwalk.spaces.alphabet import check_alphabet, encode_strings
from heatwalk.spaces.categories import Categories

FORMATS = ("auto", "fasta", "text")
#: FASTA sequence lines written by ``write_sequences`` are wrapped at this width
FASTA_WIDTH = 60


@dataclass
class SequenceSet:
    """Sequences read from a file: ``codes`` (n, L) int64, the ``alphabet`` and one name per record."""

    codes: torch.Tensor
    alphabet: list[str]
    names: list[str]

    @property
    def K(self) -> int:
        return len(self.alphabet)

    @property
    def L(self) -> int:
        return int(self.codes.shape[1])

    def space(self, process: str | None = None, rates=None):
        """The :class:`Categories` space of these sequences (alphabet included)."""
        return Categories(self.K, self.L, process=process, rates=rates, alphabet="".join(self.alphabet))


def _parse_fasta(text: str, where: str):
    names, seqs, lines_at = [], [], []
    current = None
    for lineno, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        if line.startswith(">"):
            if current is not None and not seqs[-1]:
                raise InputError(f"{where}, line {lines_at[-1]}: record {len(seqs)} ({names[-1]!r}) is empty",
                                 row=len(seqs) - 1)
            names.append(line[1:].strip() or f"record{len(names) + 1}")
            seqs.append("")
            lines_at.append(lineno)
            current = len(seqs) - 1
        elif line:
            if current is None:
                raise InputError(f"{where}, line {lineno}: sequence text before the first '>' header "
                                 "(not a FASTA file? use the text format)")
            seqs[current] += "".join(line.split())
    if current is None:
        raise InputError(f"{where}: no FASTA records found")
    if not seqs[-1]:
        raise InputError(f"{where}, line {lines_at[-1]}: record {len(seqs)} ({names[-1]!r}) is empty",
                         row=len(seqs) - 1)
    return names, seqs


def _parse_text(text: str, where: str):
    lines = [ln.strip() for ln in text.splitlines()]
    while lines and not lines[-1]:
        lines.pop()
    if not lines:
        raise InputError(f"{where}: no sequences found")
    for i, ln in enumerate(lines):
        if not ln:
            raise InputError(f"{where}, line {i + 1}: record {i + 1} is empty (blank line)", row=i)
    return [f"seq{i + 1}" for i in range(len(lines))], lines


def read_sequences(path, *, format: str = "auto", alphabet=None, length: int | None = None,
                   uppercase: bool = False) -> SequenceSet:
    """Read equal-length sequences from a FASTA or one-per-line text file (see the module's policies).

    Parameters
    ----------
    path : file to read (UTF-8)
    format : "auto", "fasta" or "text"
    alphabet : string or list of distinct single characters; ``None`` infers the sorted set of symbols
    length : required sequence length L; ``None`` takes the first record's
    uppercase : fold symbols to upper case before encoding
    """
    path = Path(path)
    if format not in FORMATS:
        raise InputError(f"format must be one of {FORMATS}, got {format!r}", field="format")
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(f"{path}: no such file") from None
    except UnicodeDecodeError as e:
        raise InputError(f"{path}: not UTF-8 text ({e})") from None
    if format == "auto":
        stripped = text.lstrip()
        format = "fasta" if stripped.startswith(">") else "text"
    names, seqs = (_parse_fasta if format == "fasta" else _parse_text)(text, str(path))
    if uppercase:
        seqs = [s.upper() for s in seqs]
    symbols = sorted(set("".join(seqs))) if alphabet is None else list(alphabet)
    if uppercase:
        symbols = [c.upper() for c in symbols]
    if len(symbols) < 2:
        raise InputError(f"{path}: the alphabet has {len(symbols)} symbol(s) {''.join(map(str, symbols))!r}; "
                         "a categorical model needs at least 2", field="alphabet")
    symbols = check_alphabet(symbols, len(symbols))
    if length is not None:
        check_positive_int("length", length)
    codes = encode_strings(seqs, symbols, length=length, where=str(path))
    return SequenceSet(codes=codes, alphabet=list(symbols), names=names)


def write_sequences(path, codes, alphabet, *, format: str = "fasta", names=None, prefix: str = "sample",
                    overwrite: bool = False) -> Path:
    """Write sequences (n, L) of codes as FASTA (wrapped at 60 columns) or one per line, atomically.

    ``names`` (one per sequence) default to ``{prefix}{i}`` with i from 1. Refuses to replace an
    existing file unless ``overwrite``.
    """
    if format not in ("fasta", "text"):
        raise InputError(f"format must be 'fasta' or 'text', got {format!r}", field="format")
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
    n = codes.shape[0]
    if names is None:
        names = [f"{prefix}{i + 1}" for i in range(n)]
    elif len(names) != n:
        raise InputError(f"names: got {len(names)} names for {n} sequences", field="names")
    lines = []
    for name, row in zip(names, codes.tolist()):
        s = "".join(alphabet[k] for k in row)
        if format == "fasta":
            lines.append(f">{name}")
            lines.extend(s[i:i + FASTA_WIDTH] for i in range(0, len(s), FASTA_WIDTH))
        else:
            lines.append(s)
    path = Path(path)
    with atomic_path(path, overwrite=overwrite) as tmp:
        tmp.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path
