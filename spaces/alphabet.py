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


#: characters a state name may not hold: a table cell of it must read back as itself (delimiters, quotes,
#: line breaks)
STATE_NAME_FORBIDDEN = frozenset(',;\t"\'\n\r|')


def check_state_names(names, K: int) -> tuple[str, ...] | None:
    """``names`` as a tuple of K distinct state names for table cells (None stays None); raises InputError.

    A state name is any non-empty text without surrounding spaces and without the characters of
    :data:`STATE_NAME_FORBIDDEN`, e.g. a residue name ``GLY`` or a class ``wet``; state k is ``names[k]``.
    """
    if names is None:
        return None
    if isinstance(names, str) or not hasattr(names, "__iter__"):
        raise InputError(f"state_names: expected a list of {K} names, got {names!r}", field="state_names")
    names = tuple(names)
    if len(names) != K:
        raise InputError(f"state_names: has {len(names)} names, expected K = {K}", field="state_names")
    seen = set()
    for i, s in enumerate(names):
        if not isinstance(s, str) or not s or s.strip() != s:
            raise InputError(f"state_names: name {i} is {s!r}, expected non-empty text without surrounding spaces",
                             field="state_names")
        bad = sorted(set(s) & STATE_NAME_FORBIDDEN)
        if bad:
            raise InputError(f"state_names: name {i} {s!r} holds {bad[0]!r}, which a table cell cannot keep",
                             field="state_names")
        if s in seen:
            raise InputError(f"state_names: name {s!r} appears twice", field="state_names")
        seen.add(s)
    return names


def sorted_state_names(values) -> list[str]:
    """The distinct names among ``values`` (text), sorted: numerically when every one is an integer written
    in decimal (so "2" comes before "10"), else alphabetically."""
    distinct = set(values)
    try:
        return sorted(distinct, key=int) if all(v.lstrip("-").isdigit() for v in distinct) else sorted(distinct)
    except ValueError:
        return sorted(distinct)


def shown_states(names, limit: int = 12) -> str:
    """State names for a message: the first ``limit`` of them, comma-separated, then "…" when there are more."""
    names = list(names)
    return ", ".join(names[:limit]) + (", …" if len(names) > limit else "")
