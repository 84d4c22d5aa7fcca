"""Reading and writing data files and results (atomic writes, tables, sequence files)."""
