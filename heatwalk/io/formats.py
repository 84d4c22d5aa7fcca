"""Output formats by file extension, checked before any work is done.

Tables (named columns of numbers, and text columns such as labels):

=============  =====================================================
``.csv``       comma-separated text with a header line
``.tsv``       tab-separated text with a header line
``.parquet``   Apache Parquet (needs pyarrow)
``.npz``       numpy archive of named 1-D arrays, one per column
=============  =====================================================

Sequences: FASTA (``.fasta``, ``.fa``, ``.faa``) or one sequence per line
(``.txt``, ``.text``), each optionally gzip-compressed (``.gz`` after it).

A command that writes a file calls :func:`check_output_format` on the output
path first, so an unknown extension is refused before anything is read,
fitted or sampled. Readers do not use the extension: they tell the format
from the file's first bytes (:mod:`heatwalk.io.source`).
"""

from __future__ import annotations

from pathlib import Path

from heatwalk.errors import InputError

TABLE_FORMATS = {".csv": "csv", ".tsv": "tsv", ".parquet": "parquet", ".npz": "npz"}
SEQUENCE_FORMATS = {".fasta": "fasta", ".fa": "fasta", ".faa": "fasta", ".txt": "text", ".text": "text"}
KINDS = ("table", "sequences")


def _suffixes(path: Path) -> tuple[str, bool]:
    """(the format suffix in lower case, whether a ``.gz`` follows it)."""
    name = path.name.lower()
    gz = name.endswith(".gz")
    if gz:
        name = name[:-3]
    return Path(name).suffix, gz


def _expected(kind: str) -> str:
    if kind == "table":
        return ", ".join(TABLE_FORMATS)
    return ", ".join(SEQUENCE_FORMATS) + " (each optionally followed by .gz)"


def check_output_format(path, kind: str) -> tuple[str, bool]:
    """The format of an output file of ``kind`` ("table" or "sequences") told by its extension.

    Returns
    -------
    (format, gzip) : format is "csv", "tsv", "parquet" or "npz" for tables, "fasta" or "text" for
        sequences; gzip tells whether the file is to be gzip-compressed (sequences only).

    Raises
    ------
    InputError
        for an unknown extension, a sequence file named like a table (``.csv``), a compressed
        table, or Parquet without pyarrow installed.
    """
    if kind not in KINDS:
        raise InputError(f"kind must be one of {KINDS}, got {kind!r}", field="kind")
    path = Path(path)
    suffix, gz = _suffixes(path)
    shown = suffix + (".gz" if gz else "") or "(no extension)"
    if kind == "table":
        if gz or suffix not in TABLE_FORMATS:
            raise InputError(f"{path}: cannot write a table as {shown!r}; expected the extension "
                             f"{_expected(kind)}", field=str(path))
        fmt = TABLE_FORMATS[suffix]
        if fmt == "parquet":
            _need_pyarrow(path)
        return fmt, False
    if suffix not in SEQUENCE_FORMATS:
        hint = " (a table format: sequences are written as FASTA or text)" if suffix in TABLE_FORMATS else ""
        raise InputError(f"{path}: cannot write sequences as {shown!r}{hint}; expected the extension "
                         f"{_expected(kind)}", field=str(path))
    return SEQUENCE_FORMATS[suffix], gz


def _need_pyarrow(path: Path) -> None:
    try:
        import pyarrow  # noqa: F401  (pandas' Parquet engine)
    except ImportError:
        raise InputError(f"{path}: Parquet files need pyarrow, which is not installed: pip install pyarrow",
                         field=str(path)) from None
