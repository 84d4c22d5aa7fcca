"""Reading and writing data files and results.

- :mod:`~heatwalk.io.tables`: tables of numbers (CSV / TSV, Parquet, NPZ) in and out, and points of a space;
- :mod:`~heatwalk.io.sequence_files`: FASTA and one-per-line text files of symbol sequences;
- :mod:`~heatwalk.io.formats`: output formats by extension, checked before any work;
- :mod:`~heatwalk.io.points`: the reader/writer of the file kind a space declares;
- :mod:`~heatwalk.io.atomic`: every file written under a temporary name and renamed;
- :mod:`~heatwalk.io.structures`: torsion-angle tables from protein structures.

Behind them: :mod:`~heatwalk.io.source` (opening files, magic bytes, UTF-8),
:mod:`~heatwalk.io.line_scan` and :mod:`~heatwalk.io.delimited` (text tables),
:mod:`~heatwalk.io.columnar` (Parquet, NPZ), :mod:`~heatwalk.io.table_base` (the table object and the
choice of columns), :mod:`~heatwalk.io.sequence_records` (FASTA / text parsing and the symbol policy).
"""
