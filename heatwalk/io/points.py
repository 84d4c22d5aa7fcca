"""Data files of points, for any space: one reader/writer per file kind a space declares.

A space declares ``file_kind`` (``"table"`` or ``"sequences"``) and its
``file_options`` / ``build_options``; :data:`FILE_KINDS` maps the file kind to
the object that reads and writes such files, so the command line never tests
which space it has:

- ``read_new(path, space_cls, options, **table)`` -> (space, points, facts):
  the space is built from what the file holds (a table's column count, a
  sequence file's alphabet and length) — the file is read once; ``facts`` says
  what was read (data column names, ignored columns, the label column's values);
- ``read(path, space, options, columns=None)`` -> points on a known space (a
  fitted model's), selecting the model's columns by name when the file has them;
- ``write(path, space, x, options, overwrite, names=None)``;
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
from heatwalk.io.table_base import position_names
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

    def read_new(self, path, space_cls, options: dict, *, columns=None, labels=None, delimiter=None):
        file_opts, build_opts = split_options(space_cls, options)
        table = read_table(path, columns=columns, labels=labels, delimiter=delimiter)
        if table.values.shape[1] == 0:
            raise InputError(f"{path}: no data columns are left (all were ignored or used as labels)",
                             field="columns")
        space = space_cls.from_table(table.values.shape[1], **file_opts, **build_opts)
        facts = {"columns": list(table.names), "ignored": list(table.ignored), "labels": table.labels,
                 "label_column": table.label_name}
        return space, points_from_table(path, space, table, **file_opts), facts

    def read(self, path, space, options: dict, *, columns=None, delimiter=None):
        if columns is not None:
            try:
                table = read_table(path, columns=list(columns), delimiter=delimiter)
            except InputError:
                table = read_table(path, delimiter=delimiter)
                if table.names != position_names(len(table.names)) or len(table.names) != len(columns):
                    raise InputError(f"{path}: the model was fitted on columns {', '.join(columns)}; this file "
                                     f"has {', '.join(table.names)}", field="columns") from None
        else:
            table = read_table(path, delimiter=delimiter)
        return points_from_table(path, space, table, **options)

    def write(self, path, space, x, options: dict, overwrite: bool, names=None) -> Path:
        return write_points(path, space, x, overwrite=overwrite, names=names, **options)


class SequenceFiles:
    """FASTA or one-sequence-per-line text files (:mod:`heatwalk.io.sequence_files`)."""

    def check_output(self, path):
        return check_output_format(path, "sequences")

    @staticmethod
    def _reader_options(options: dict) -> dict:
        out = {k: v for k, v in options.items() if k != "sequence_format"}
        out["format"] = options.get("sequence_format") or "auto"
        return out

    def read_new(self, path, space_cls, options: dict, *, columns=None, labels=None, delimiter=None):
        if columns is not None or labels is not None or delimiter is not None:
            raise InputError(f"{path}: columns, labels and delimiter apply to tables, not to sequence files",
                             field="columns" if columns is not None else "labels" if labels is not None
                             else "delimiter")
        file_opts, build_opts = split_options(space_cls, options)
        seqs = read_sequences(path, **self._reader_options(file_opts))
        facts = {"columns": None, "ignored": [], "labels": None, "label_column": None, "records": len(seqs.names)}
        return space_cls.from_alphabet(seqs.alphabet, seqs.L, **build_opts), seqs.codes, facts

    def read(self, path, space, options: dict, *, columns=None, delimiter=None):
        keep = ("format", "uppercase", "unknown_symbols", "stop_symbol")
        opts = {k: v for k, v in self._reader_options(options).items() if k in keep}
        return read_sequences(path, alphabet=space.alphabet, length=space.L, **opts).codes

    def write(self, path, space, x, options: dict, overwrite: bool, names=None) -> Path:
        if space.alphabet is None:
            raise InputError(f"{space!r} has no alphabet: its samples cannot be written as text", field="alphabet")
        return write_sequences(path, x, space.alphabet, overwrite=overwrite)


FILE_KINDS = {"table": TableFiles(), "sequences": SequenceFiles()}


def files_for(space_or_cls):
    """The reader/writer of the file kind a space (or space class) declares."""
    return FILE_KINDS[space_or_cls.file_kind]
