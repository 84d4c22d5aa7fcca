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

import zipfile
from pathlib import Path

from heatwalk.errors import InputError
from heatwalk.io import arrays
from heatwalk.io.formats import check_output_format
from heatwalk.io.sequence_files import read_records, write_records
from heatwalk.spaces.alphabet import check_alphabet, encode_strings


def recs_alphabet(recs, opts: dict) -> list[str]:
    """The alphabet of records read with ``opts``: the given one, else the sorted symbols that occur."""
    if opts.get("alphabet") is not None:
        symbols = [c.upper() for c in opts["alphabet"]] if opts.get("uppercase") else list(opts["alphabet"])
    else:
        symbols = sorted(set("".join(recs.sequences)))
    if len(symbols) < 2:
        raise InputError(f"the alphabet has {len(symbols)} symbol(s) {''.join(symbols)!r}; a categorical model "
                         "needs at least 2", field="alphabet")
    return check_alphabet(symbols, len(symbols))


def encode_records(recs, space, where: str):
    """Codes (n, L) of the records on ``space`` (padded with the end state of a variable-length space)."""
    lengths = recs.lengths
    if space.end_state is None and bool((lengths != space.L).any()):
        i = int((lengths != space.L).nonzero()[0][0])
        raise InputError(f"{where}: record {i + 1} ({recs.names[i]!r}) has length {int(lengths[i])}, but the model's "
                         f"sequences have length {space.L}", row=i, field="length")
    return space.validate(encode_strings(recs.sequences, space.alphabet, length=space.L, where=where,
                                         end=space.end_state))
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


def mapped_array_file(path) -> bool:
    """Whether ``fit`` reads the table ``path`` memory-mapped: a ``.npy`` file, or a ``.npz`` archive holding one
    array, of at least :data:`heatwalk.io.arrays.MEMMAP_MIN_BYTES` bytes.

    Its rows are then read batch by batch (:mod:`heatwalk.core.data_source`), never the whole file, and they
    are taken as stored: the points in the space's own coordinates (what the space reads with its default
    reading options, e.g. radians, unit vectors, row-major rotation matrices). Smaller files, and archives of
    named columns, are read whole by :func:`heatwalk.io.tables.read_table`.
    """
    path = Path(path)
    if path.suffix.lower() not in (".npy", ".npz") or not path.is_file():
        return False
    if path.stat().st_size < arrays.MEMMAP_MIN_BYTES:
        return False
    if path.suffix.lower() == ".npy":
        return True
    try:
        with zipfile.ZipFile(path) as archive:
            return sum(name.endswith(".npy") for name in archive.namelist()) == 1
    except (zipfile.BadZipFile, OSError):
        return False


class TableFiles:
    """Tables of numbers (CSV, TSV, Parquet, NPZ), one point per row (:mod:`heatwalk.io.tables`)."""

    def check_output(self, path):
        return check_output_format(path, "table")

    def read_new(self, path, space_cls, options: dict, *, columns=None, labels=None, delimiter=None):
        file_opts, build_opts = split_options(space_cls, options)
        if mapped_array_file(path):
            return self._read_mapped(path, space_cls, file_opts, build_opts, columns, labels, delimiter)
        text_columns = space_cls.table_text_columns(**file_opts)
        try:
            table = read_table(path, columns=columns, labels=labels, delimiter=delimiter, text_columns=text_columns)
        except InputError as e:
            if not text_columns or "is not a number" not in e.message:
                raise
            which = ", ".join(str(c + 1) for c in text_columns)
            raise InputError(f"{e.message} (the factors take the data columns in order, and data column"
                             f"{'s' if len(text_columns) > 1 else ''} {which} hold named states: name the columns in "
                             f"factor order with columns / --columns)", row=e.row, field=e.field) from None
        if table.values.shape[1] == 0:
            raise InputError(f"{path}: no data columns are left (all were ignored or used as labels)",
                             field="columns")
        text = {"text": table.text} if text_columns else {}
        space = space_cls.from_table(table.values.shape[1], **file_opts, **build_opts, **text)
        facts = {"columns": list(table.names), "ignored": list(table.ignored), "labels": table.labels,
                 "label_column": table.label_name}
        return space, points_from_table(path, space, table, **file_opts), facts

    @staticmethod
    def _read_mapped(path, space_cls, file_opts, build_opts, columns, labels, delimiter):
        """(space, memory-mapped points, facts) of a large array file (see :func:`mapped_array_file`)."""
        given = {"columns": columns, "labels": labels, "delimiter": delimiter, **file_opts}
        refused = [(name, value) for name, value in given.items() if value not in (None, False)]
        if refused:
            name, value = refused[0]
            value = ",".join(map(str, value)) if isinstance(value, (list, tuple)) else value
            raise InputError(f"{path}: a numpy array file of {arrays.MEMMAP_MIN_BYTES} bytes or more is read "
                             f"memory-mapped, its rows as the points are stored (the default reading options); "
                             f"{name}={value!r} cannot be applied to it: convert the file first", field=name)
        rows = arrays.open_array(path)
        if rows.ndim == 1:  # one column
            rows = rows.reshape(-1, 1)
        if rows.ndim != 2:
            raise InputError(f"{path}: holds an array of shape {tuple(rows.shape)}; a table of points is a 2-D "
                             f"array (one row per point)", field="data")
        space = space_cls.from_table(rows.shape[1], **build_opts)
        if rows.shape[1] != space.n_columns:
            raise InputError(f"{path}: {rows.shape[1]} columns per row, but {space!r} stores {space.n_columns}",
                             field="columns")
        points = rows.reshape(rows.shape[0], *space.ambient_shape)  # a view: nothing is read
        facts = {"columns": list(space.column_names()), "ignored": [], "labels": None, "label_column": None,
                 "memory_mapped": True}
        return space, points, facts

    def read(self, path, space, options: dict, *, columns=None, delimiter=None):
        text_columns = tuple(space.column_states(**options))
        if columns is not None:
            try:
                table = read_table(path, columns=list(columns), delimiter=delimiter, text_columns=text_columns)
            except InputError:
                table = read_table(path, delimiter=delimiter, text_columns=text_columns)
                if table.names != position_names(len(table.names)) or len(table.names) != len(columns):
                    raise InputError(f"{path}: the model was fitted on columns {', '.join(columns)}; this file "
                                     f"has {', '.join(table.names)}", field="columns") from None
        else:
            table = read_table(path, delimiter=delimiter, text_columns=text_columns)
        return points_from_table(path, space, table, **options)

    def write(self, path, space, x, options: dict, overwrite: bool, names=None, as_given=None) -> Path:
        return write_points(path, space, x, overwrite=overwrite, names=names, as_given=as_given, **options)


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
        opts = self._reader_options(file_opts)
        length = opts.pop("length", None)
        recs = read_records(path, **opts)
        alphabet = recs_alphabet(recs, opts)
        lengths = recs.lengths
        variable = bool((lengths != lengths[0]).any()) or (length is not None and bool((lengths < length).any()))
        L = int(lengths.max()) if length is None else length
        space = space_cls.from_alphabet(alphabet, L, variable_length=variable, **build_opts)
        codes = encode_records(recs, space, str(path))
        facts = {"columns": None, "ignored": [], "labels": None, "label_column": None, "records": len(recs.names),
                 "dropped_records": len(recs.dropped), "lengths": [int(lengths.min()), int(lengths.max())]}
        return space, codes, facts

    def read(self, path, space, options: dict, *, columns=None, delimiter=None):
        keep = ("format", "uppercase", "unknown_symbols", "stop_symbol")
        opts = {k: v for k, v in self._reader_options(options).items() if k in keep}
        recs = read_records(path, alphabet=space.alphabet, **opts)
        return encode_records(recs, space, str(path))

    def write(self, path, space, x, options: dict, overwrite: bool, names=None, as_given=None) -> Path:
        """``as_given`` (fixed values of table columns) does not apply: a fixed symbol is written as itself."""
        if space.alphabet is None:
            raise InputError(f"{space!r} has no alphabet: its samples cannot be written as text", field="alphabet")
        return write_records(path, space.decode(x), overwrite=overwrite)


FILE_KINDS = {"table": TableFiles(), "sequences": SequenceFiles()}


def files_for(space_or_cls):
    """The reader/writer of the file kind a space (or space class) declares."""
    return FILE_KINDS[space_or_cls.file_kind]
