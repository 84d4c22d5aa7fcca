"""Data files of points, for any space: one reader/writer per file kind a space declares.

A space declares ``file_kind`` (``"table"`` or ``"sequences"``) and its
``file_options`` / ``build_options``; :data:`FILE_KINDS` maps the file kind to
the object that reads and writes such files, so the command line never tests
which space it has:

- ``read_new(path, space_cls, options)`` -> (space, points): the space is
  built from what the file holds (a table's column count, a sequence file's
  alphabet and length) — the file is read once;
- ``read(path, space, options)`` -> points on a known space (a fitted model's);
- ``write(path, space, x, options, overwrite)``;
- ``check_output(path)`` -> the output format, or InputError for an extension this file kind cannot
  be written as (call it before any work).

``options`` are the reading options (``file_options``) plus, for
``read_new``, the space-building options (``build_options``).
"""

from __future__ import annotations

from pathlib import Path

from heatwalk.errors import InputError
from heatwalk.io.formats import check_output_format
from heatwalk.io.sequence_files import read_sequences, write_sequences
from heatwalk.io.tables import points_from_table, read_table, write_points


def split_options(space_cls, options: dict) -> tuple[dict, dict]:
    """(file options, build options) of ``options``; anything the space does not declare is refused."""
    file_names = {o.name for o in space_cls.file_options}
    build_names = {o.name for o in space_cls.build_options}
    unknown = sorted(set(options) - file_names - build_names)
    if unknown:
        space_cls.check_file_options({unknown[0]: options[unknown[0]]})
    return ({k: v for k, v in options.items() if k in file_names},
            {k: v for k, v in options.items() if k in build_names})


class TableFiles:
    """Tables of numbers (CSV, TSV, Parquet, NPZ), one point per row (:mod:`heatwalk.io.tables`)."""

    def check_output(self, path):
        return check_output_format(path, "table")

    def read_new(self, path, space_cls, options: dict):
        file_opts, build_opts = split_options(space_cls, options)
        table = read_table(path)
        space = space_cls.from_table(table.values.shape[1], **file_opts, **build_opts)
        return space, points_from_table(path, space, table, **file_opts)

    def read(self, path, space, options: dict):
        return points_from_table(path, space, read_table(path), **options)

    def write(self, path, space, x, options: dict, overwrite: bool) -> Path:
        return write_points(path, space, x, overwrite=overwrite, **options)


class SequenceFiles:
    """FASTA or one-sequence-per-line text files (:mod:`heatwalk.io.sequence_files`)."""

    def check_output(self, path):
        return check_output_format(path, "sequences")

    @staticmethod
    def _reader_options(options: dict) -> dict:
        out = {k: v for k, v in options.items() if k != "sequence_format"}
        out["format"] = options.get("sequence_format") or "auto"
        return out

    def read_new(self, path, space_cls, options: dict):
        file_opts, build_opts = split_options(space_cls, options)
        seqs = read_sequences(path, **self._reader_options(file_opts))
        return space_cls.from_alphabet(seqs.alphabet, seqs.L, **build_opts), seqs.codes

    def read(self, path, space, options: dict):
        opts = {k: v for k, v in self._reader_options(options).items() if k in ("format", "uppercase")}
        return read_sequences(path, alphabet=space.alphabet, length=space.L, **opts).codes

    def write(self, path, space, x, options: dict, overwrite: bool) -> Path:
        if space.alphabet is None:
            raise InputError(f"{space!r} has no alphabet: its samples cannot be written as text", field="alphabet")
        return write_sequences(path, x, space.alphabet, overwrite=overwrite)


FILE_KINDS = {"table": TableFiles(), "sequences": SequenceFiles()}


def files_for(space_or_cls):
    """The reader/writer of the file kind a space (or space class) declares."""
    return FILE_KINDS[space_or_cls.file_kind]
