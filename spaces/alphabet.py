"""Alphabets of symbols naming the states of a finite space, and strings <-> state codes.

An alphabet is K distinct single characters; state k is ``alphabet[k]``.
Characters that cannot be written in FASTA or one-per-line text files
(whitespace, ``>``) are refused.
"""

from __future__ import annotations

import torch

from heatwalk.errors import InputError


def check_alphabet(alphabet, K: int):
    """Return ``alphabet`` as a list of K distinct single characters (None stays None); raises InputError."""
    if alphabet is None:
        return None
    if isinstance(alphabet, str):
        symbols = list(alphabet)
    else:
        symbols = list(alphabet)
        for i, s in enumerate(symbols):
            if not isinstance(s, str) or len(s) != 1:
                raise InputError(f"alphabet: symbol {i} is {s!r}, expected a single character", field="alphabet")
    if len(symbols) != K:
        raise InputError(f"alphabet: has {len(symbols)} symbols, expected K = {K}", field="alphabet")
    seen = set()
    for s in symbols:
        if s in seen:
            raise InputError(f"alphabet: symbol {s!r} appears twice", field="alphabet")
        if s.isspace() or s == ">":
            raise InputError(f"alphabet: symbol {s!r} cannot be written in FASTA or text files", field="alphabet")
        seen.add(s)
    return symbols


def encode_strings(seqs: list[str], alphabet: list[str], length: int | None = None,
                   where: str = "sequences", end: int | None = None) -> torch.Tensor:
    """Strings -> (n, L) int64 codes over ``alphabet``; errors name the record and column (1-based).

    With ``end`` (the end-state code of a variable-length space), records of any length up to L are
    padded with it; otherwise every record must have length L.
    """
    if not seqs:
        raise InputError(f"{where}: no sequences")
    index = {s: k for k, s in enumerate(alphabet)}
    L = (len(seqs[0]) if end is None else max(map(len, seqs))) if length is None else length
    # cpu: codes parsed from text are made on the CPU; fit and Model move them
    codes = torch.full((len(seqs), L), -1 if end is None else end, dtype=torch.int64)
    for i, s in enumerate(seqs):
        if not s:
            raise InputError(f"{where}: record {i + 1} is empty", row=i)
        if end is not None and len(s) > L:
            raise InputError(f"{where}: record {i + 1} has length {len(s)}, longer than the maximum {L}", row=i,
                             field="length")
        if end is None and len(s) != L:
            raise InputError(f"{where}: record {i + 1} has length {len(s)}, expected {L} "
                             f"({'given' if length is not None else 'the length of record 1'}; "
                             "all sequences must have the same length)", row=i, field="length")
        try:  # cpu: as above
            codes[i, :len(s)] = torch.tensor([index[c] for c in s], dtype=torch.int64)
        except KeyError:
            j = next(j for j, c in enumerate(s) if c not in index)
            raise InputError(f"{where}: record {i + 1}, column {j + 1}: unknown symbol {s[j]!r} "
                             f"(alphabet: {''.join(alphabet)!r})", row=i, field=str(j)) from None
    return codes
