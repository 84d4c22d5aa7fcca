"""Tables in and out: CSV / TSV / Parquet / NPZ readers and writers, their errors, and property tests.

References outside heatwalk: files are written by numpy (``np.savez``), pandas (``to_parquet``,
``to_csv``) or plain Python text, and values are compared with Python's ``float`` of the cell text
(``float(repr(x)) == x`` exactly for every finite double: Python's shortest-repr guarantee, Python
docs "Floating Point Arithmetic", repr since 3.1). Every comparison of values is exact (tolerance 0).
"""

from __future__ import annotations

import gzip
import math
import re

import numpy as np
import pandas as pd
import pytest
import torch
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from heatwalk import InputError
from heatwalk.io import source
from heatwalk.io.formats import check_output_format
from heatwalk.io.tables import Table, read_column, read_points, read_table, write_points, write_table
from heatwalk.spaces import Torus

WIDE = "residue,phi,psi,omega\nALA,-63.5,-41.2,179.1\nGLY,80.25,-170.0,-178.6\nPRO,-70.0,150.5,3.5\n"


def write(tmp_path, name, content) -> str:
    p = tmp_path / name
    p.write_bytes(content if isinstance(content, bytes) else content.encode("utf-8"))
    return str(p)


# ----- selection of columns ------------------------------------------------------------------------
def test_wide_csv_selects_columns_and_reports_ignored(tmp_path):
    t = read_table(write(tmp_path, "wide.csv", WIDE), columns=["phi", "psi"])
    assert isinstance(t, Table) and t.values.dtype == np.float64
    np.testing.assert_array_equal(t.values, [[-63.5, -41.2], [80.25, -170.0], [-70.0, 150.5]])
    assert t.names == ["phi", "psi"] and t.ignored == ["residue", "omega"]
    assert t.lines.tolist() == [2, 3, 4] and t.labels is None
    again = read_table(tmp_path / "wide.csv", columns=["omega", "phi"], labels="residue")
    np.testing.assert_array_equal(again.values[:, 0], [179.1, -178.6, 3.5])
    assert again.ignored == ["psi"] and again.labels.tolist() == ["ALA", "GLY", "PRO"]
    assert read_column(tmp_path / "wide.csv", "residue").tolist() == ["ALA", "GLY", "PRO"]


def test_text_column_without_columns_is_an_error_naming_it(tmp_path):
    with pytest.raises(InputError) as e:
        read_table(write(tmp_path, "wide.csv", WIDE))
    msg = str(e.value)
    assert "wide.csv, line 2, column 1 (residue): 'ALA' is not a number" in msg and "columns=" in msg
    assert e.value.row == 0 and e.value.field == "0"


def test_labels_leave_the_other_columns_as_data(tmp_path):
    t = read_table(write(tmp_path, "lab.csv", "class,x,y\n3,0.5,1.5\n7,2.5,3.5\n"), labels="class")
    assert t.names == ["x", "y"] and t.labels.tolist() == ["3", "7"] and t.label_name == "class"


def test_selection_errors(tmp_path):
    p = write(tmp_path, "wide.csv", WIDE)
    with pytest.raises(InputError, match=r"column 'phii' is not in the header .*did you mean 'phi'\?"):
        read_table(p, columns=["phii"])
    with pytest.raises(InputError, match=r"columns is empty; name at least one data column"):
        read_table(p, columns=[])
    with pytest.raises(InputError, match=r"column 'phi' is named twice in columns"):
        read_table(p, columns=["phi", "phi"])
    with pytest.raises(InputError, match=r"both a data column and the label column"):
        read_table(p, columns=["phi"], labels="phi")
    with pytest.raises(InputError, match=r"must be a list of column names"):
        read_table(p, columns="phi")
    dup = write(tmp_path, "dup.csv", "a,b,a\n1,2,3\n")
    with pytest.raises(InputError, match=r"column 3 is named 'a' like column 1; expected distinct column names"):
        read_table(dup)


def test_headerless_numeric_csv_names_columns_by_position(tmp_path):
    p = write(tmp_path, "plain.csv", "0.1,0.2,0.3\n0.4,0.5,0.6\n")
    t = read_table(p)
    assert t.names == ["column_1", "column_2", "column_3"]
    np.testing.assert_array_equal(t.values, [[0.1, 0.2, 0.3], [0.4, 0.5, 0.6]])
    sel = read_table(p, columns=["column_3", "column_1"])
    np.testing.assert_array_equal(sel.values, [[0.3, 0.1], [0.6, 0.4]])
    assert sel.ignored == ["column_2"]
    with pytest.raises(InputError, match=r"no header line, so its columns are named by position"):
        read_table(p, columns=["phi"])


# ----- layouts ---------------------------------------------------------------------------------------
def test_tsv_and_stated_delimiters(tmp_path):
    t = read_table(write(tmp_path, "a.tsv", "phi\tpsi\n1.5\t-2.5\n3\t4\n"))
    assert t.names == ["phi", "psi"] and t.values.tolist() == [[1.5, -2.5], [3.0, 4.0]]
    semi = write(tmp_path, "b.txt", "x;y\n1;2\n")
    assert read_table(semi).values.tolist() == [[1.0, 2.0]]  # detected
    assert read_table(semi, delimiter=";").names == ["x", "y"]
    with pytest.raises(InputError, match=r"delimiter must be one character"):
        read_table(semi, delimiter=";;")


def test_comments_blank_lines_crlf_bom_gzip_and_quotes(tmp_path):
    t = read_table(write(tmp_path, "c.csv", "# made by hand\n\nx,y\n1,2\n   \n# note\n3,4\n\n\n"))
    assert t.values.tolist() == [[1.0, 2.0], [3.0, 4.0]] and t.lines.tolist() == [4, 7]
    assert read_table(write(tmp_path, "w.csv", "x,y\r\n1,2\r\n3,4\r\n")).lines.tolist() == [2, 3]
    bom = read_table(write(tmp_path, "bom.csv", b"\xef\xbb\xbfphi,psi\n1,2\n"))
    assert bom.names == ["phi", "psi"]
    gz = read_table(write(tmp_path, "z.csv.gz", gzip.compress(b"x,y\n1,2\n")))
    assert gz.values.tolist() == [[1.0, 2.0]]
    q = read_table(write(tmp_path, "q.csv", 'name,x\n"Smith, J",1\n"O""Hara",2\n'), labels="name")
    assert q.labels.tolist() == ["Smith, J", 'O"Hara'] and q.values.tolist() == [[1.0], [2.0]]


# ----- bad input: message content ----------------------------------------------------------------------
BAD = [
    ("phi,psi\n1,2\n3,abc\n", {}, r"bad.csv, line 3, column 2 \(psi\): 'abc' is not a number"),
    ("1,2\nnan,2\n", {}, r"line 2, column 1: value 'nan' is not finite, expected a finite number"),
    ("1,2\n3,-inf\n", {}, r"line 2, column 2: value '-inf' is not finite"),
    ("1,2\n3,1e999\n", {}, r"line 2, column 2: value '1e999' is not finite"),
    ("1,2\n3,\n", {}, r"line 2, column 2: empty cell, expected a number"),
    ("1,2\n3,4,5\n", {}, r"line 2: 3 columns, but the first row has 2"),
    ("a,b,c\n1,2,3\n4,5\n", {"columns": ["a"]}, r"line 3: 2 columns, but the header has 3"),
    ("a,b,c\n1,2,3\n4,5,6,7\n8,9\n", {"columns": ["a"]}, r"line 3: 4 columns, but the header has 3"),
    ("", {}, r"no data rows \(the file is empty or has only a header\)"),
    ("\n# only a comment\n", {}, r"no data rows"),
    ("phi,psi\n", {}, r"no data rows"),
    ("x,y\n1,2\n3,4\x005\n", {}, r"line 3, column 4: a NUL byte \(0x00\)"),
    ("x,y\r1,2\r", {}, r"line 1, column 4: a carriage return .* does not end a line"),
    (b"x,y\n1,2\n3,\xff\n", {}, r"line 3, column 3: byte 0xff is not UTF-8 text"),
    ('x,y\n1,"2\n3",4\n', {}, r"line 2: quoted cell not read"),
    ("name,x\nA,1\n,2\n", {"labels": "name"}, r"line 3, column 1 \(name\): empty label cell"),
]


@pytest.mark.parametrize("content, kwargs, message", BAD)
def test_bad_csv_messages(tmp_path, content, kwargs, message):
    p = write(tmp_path, "bad.csv", content)
    with pytest.raises(InputError) as e:
        read_table(p, **kwargs)
    assert re.search(message, str(e.value)), str(e.value)
    assert str(e.value).startswith(p)


def test_huge_cells(tmp_path):
    big = "1" * 100_000 + "x"
    with pytest.raises(InputError) as e:
        read_table(write(tmp_path, "big.csv", f"x,y\n1,{big}\n"))
    msg = str(e.value)
    assert "line 2, column 2 (y)" in msg and "(a cell of 100,001 characters) is not a number" in msg
    assert len(msg) < 400  # the cell is cut in the message
    huge = tmp_path / "huge.csv"
    with open(huge, "wb") as f:
        f.write(b"x,y\n1,2\n3,")
        f.write(b"9" * (17 << 20))
    with pytest.raises(InputError, match=r"huge.csv, line 3: longer than 16 MiB \(a huge cell\?\)"):
        read_table(huge)


def test_files_of_many_pieces_keep_their_line_numbers(tmp_path):
    # about 3.5 MiB: several of the reader's 1 MiB pieces; expectations from a plain enumeration of lines
    rng = np.random.default_rng(5)
    x = rng.standard_normal((60_000, 3))
    lines = ["a,b,c"] + [",".join(repr(float(v)) for v in r) for r in x]
    lines[20_000:20_000] = ["", "# a note in the middle"]
    lines[41_000:41_000] = ["   "]
    p = write(tmp_path, "long.csv", "\n".join(lines) + "\n")
    t = read_table(p)
    kept = [i + 1 for i, ln in enumerate(lines) if ln.strip() and not ln.startswith("#")][1:]
    assert t.lines.tolist() == kept
    assert np.ascontiguousarray(t.values).tobytes() == x.tobytes()
    lines[50_000] = lines[50_000].rsplit(",", 1)[0] + ",oops"
    with pytest.raises(InputError, match=r"long.csv, line 50001, column 3 \(c\): 'oops' is not a number"):
        read_table(write(tmp_path, "long.csv", "\n".join(lines) + "\n"))
    lines[50_000] = "1,2"
    with pytest.raises(InputError, match=r"long.csv, line 50001: 2 columns, but the header has 3"):
        read_table(write(tmp_path, "long.csv", "\n".join(lines) + "\n"))


def test_folder_missing_and_unreadable_files(tmp_path, monkeypatch):
    with pytest.raises(InputError, match=r"is a folder, expected a data file"):
        read_table(tmp_path)
    with pytest.raises(InputError, match=r"no such file"):
        read_table(tmp_path / "none.csv")
    p = write(tmp_path, "locked.csv", "1,2\n")

    def refuse(*args, **kwargs):  # the tests run as root, for whom chmod 000 changes nothing
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(source, "open", refuse, raising=False)
    with pytest.raises(InputError, match=r"locked.csv: permission denied"):
        read_table(p)


# ----- binary formats ------------------------------------------------------------------------------
def test_npz_layouts_written_by_numpy(tmp_path):
    a = np.arange(12, dtype=np.float64).reshape(4, 3) / 7
    np.savez(tmp_path / "one.npz", points=a)
    t = read_table(tmp_path / "one.npz")
    assert t.names == ["column_1", "column_2", "column_3"] and t.unit == "row" and t.lines.tolist() == [1, 2, 3, 4]
    np.testing.assert_array_equal(t.values, a)
    np.savez(tmp_path / "named.npz", kind=np.array(["a", "b", "c"]), x=np.array([1, 2, 3]), y=np.array([0.5, 1, 2]))
    n = read_table(tmp_path / "named.npz", columns=["y", "x"], labels="kind")
    np.testing.assert_array_equal(n.values, [[0.5, 1], [1, 2], [2, 3]])
    assert n.labels.tolist() == ["a", "b", "c"] and n.ignored == []
    with pytest.raises(InputError, match=r"column 1 \(kind\): holds values of dtype <U1, expected numbers"):
        read_table(tmp_path / "named.npz")
    np.savez(tmp_path / "ragged.npz", x=np.zeros(3), y=np.zeros(4))
    with pytest.raises(InputError, match=r"array 'y' has 4 rows but 'x' has 3"):
        read_table(tmp_path / "ragged.npz")
    np.savez(tmp_path / "nan.npz", x=np.array([1.0, np.nan]))
    with pytest.raises(InputError, match=r"nan.npz, row 2, column 1 \(x\): value nan is not finite"):
        read_table(tmp_path / "nan.npz")
    np.savez(tmp_path / "obj.npz", x=np.array([{"a": 1}], dtype=object))
    with pytest.raises(InputError, match=r"object arrays are refused"):
        read_table(tmp_path / "obj.npz")


def test_parquet_written_by_pandas(tmp_path):
    df = pd.DataFrame({"residue": ["ALA", "GLY"], "phi": [-60.5, 75.0], "n": np.array([3, 4], dtype=np.int32)})
    df.to_parquet(tmp_path / "t.parquet", index=False)
    t = read_table(tmp_path / "t.parquet", columns=["n", "phi"], labels="residue")
    np.testing.assert_array_equal(t.values, [[3, -60.5], [4, 75.0]])
    assert t.labels.tolist() == ["ALA", "GLY"] and t.unit == "row"
    classes = read_column(tmp_path / "t.parquet", "n")
    assert classes.dtype == np.int32 and classes.tolist() == [3, 4]  # stored values, as stored
    with pytest.raises(InputError, match=r"column 1 \(residue\): holds values of type (string|large_string)"):
        read_table(tmp_path / "t.parquet")
    pd.DataFrame({"x": [1.0, None, 2.0]}).to_parquet(tmp_path / "null.parquet", index=False)
    with pytest.raises(InputError, match=r"row 2, column 1 \(x\): (missing value|value nan)"):
        read_table(tmp_path / "null.parquet")
    pd.DataFrame({"x": pd.array([1, None], dtype="Int64")}).to_parquet(tmp_path / "inull.parquet", index=False)
    with pytest.raises(InputError, match=r"row 2, column 1 \(x\): missing value \(null\), expected a number"):
        read_table(tmp_path / "inull.parquet")
    (tmp_path / "fake.parquet").write_bytes(b"PAR1 but not really")
    with pytest.raises(InputError, match=r"not a readable Parquet file"):
        read_table(tmp_path / "fake.parquet")


EDGE = np.array([[0.0, -0.0, 5e-324, 1.7976931348623157e308],
                 [math.pi, -1 / 3, 1e-300, 123456789.123456789],
                 [2.0 ** -1074 * 3, 0.1, -2.5e17, 1 + 2 ** -52]])


@pytest.mark.parametrize("suffix", [".csv", ".tsv", ".parquet", ".npz"])
def test_round_trips_are_exact(tmp_path, suffix):
    path = write_table(tmp_path / f"t{suffix}", EDGE, ["a", "b", "c", "d"])
    t = read_table(path)
    assert t.names == ["a", "b", "c", "d"] and t.values.flags.writeable
    # exact: the bits of every value, the sign of zero included
    assert np.ascontiguousarray(t.values).tobytes() == np.ascontiguousarray(EDGE).tobytes()
    with pytest.raises(InputError, match="already exists"):
        write_table(path, EDGE, ["a", "b", "c", "d"])
    write_table(path, EDGE[:1], ["a", "b", "c", "d"], overwrite=True)
    assert read_table(path).values.shape == (1, 4)


def test_write_table_with_a_text_column(tmp_path):
    for suffix in (".csv", ".parquet", ".npz"):
        p = write_table(tmp_path / f"m{suffix}", {"kind": np.array(["x", "y"]), "v": np.array([0.5, 1.5])})
        t = read_table(p, labels="kind")
        assert t.labels.tolist() == ["x", "y"] and t.values.tolist() == [[0.5], [1.5]]
    with pytest.raises(InputError, match=r"column name '1' would not read back as a header name"):
        write_table(tmp_path / "n.csv", np.zeros((2, 1)), ["1"])
    with pytest.raises(InputError, match=r"expected 2 column names, got 1"):
        write_table(tmp_path / "n.csv", np.zeros((2, 2)), ["a"])


# ----- output formats, checked before any work --------------------------------------------------------
def test_output_formats_by_extension(tmp_path):
    assert check_output_format("a.csv", "table") == ("csv", False)
    assert check_output_format("a.TSV", "table") == ("tsv", False)
    assert check_output_format("a.parquet", "table") == ("parquet", False)
    assert check_output_format("a.npz", "table") == ("npz", False)
    assert check_output_format("s.fa.gz", "sequences") == ("fasta", True)
    assert check_output_format("s.faa", "sequences") == ("fasta", False)
    assert check_output_format("s.txt", "sequences") == ("text", False)
    with pytest.raises(InputError, match=r"cannot write a table as '.xlsx'; expected the extension .csv, .tsv"):
        check_output_format("a.xlsx", "table")
    with pytest.raises(InputError, match=r"cannot write a table as '\(no extension\)'"):
        check_output_format("samples", "table")
    with pytest.raises(InputError, match=r"cannot write sequences as '.csv' \(a table format"):
        check_output_format("s.csv", "sequences")
    with pytest.raises(InputError, match=r"kind must be one of"):
        check_output_format("s.csv", "pictures")


def test_writers_refuse_unknown_extensions_before_any_work(tmp_path):
    class Watch(Torus):
        called = False

        def to_rows(self, x, **options):
            Watch.called = True
            return super().to_rows(x, **options)

    space = Watch(2)
    x = space.random_uniform(5, torch.Generator().manual_seed(0))
    with pytest.raises(InputError, match=r"expected the extension"):
        write_points(tmp_path / "s.json", space, x)
    assert not Watch.called and list(tmp_path.iterdir()) == []
    for suffix in (".csv", ".parquet", ".npz", ".tsv"):
        p = write_points(tmp_path / f"s{suffix}", space, x)
        torch.testing.assert_close(read_points(p, Torus(2)), x, rtol=0, atol=0)


def test_fixed_values_are_written_as_given_only_where_they_survived_the_round_trip(tmp_path):
    """Degrees through radians and back move -60 by a few units in the last place (numpy's deg2rad/rad2deg);
    ``as_given`` writes it as given. An angle given as 270° is kept by the torus as -90°, a different number:
    it is written as the space writes it (no silent rewrite of a sampled value)."""
    space = Torus(2)
    given_deg = np.array([-60.0, 270.0])
    x = torch.stack([torch.deg2rad(torch.tensor(given_deg, dtype=torch.float64)),
                     torch.tensor([0.25, -1.5], dtype=torch.float64)], dim=1)   # cpu: a test table
    x = space.project(x)                                                         # 270° kept as -90°
    p = write_points(tmp_path / "s.csv", space, x, as_given={0: given_deg}, degrees=True)
    written = np.loadtxt(p, delimiter=",", skiprows=1)
    assert written[0, 0] == -60.0
    assert written[1, 0] != 270.0 and abs(written[1, 0] - np.rad2deg(x[1, 0].item())) == 0
    np.testing.assert_allclose(written[:, 1], np.rad2deg([0.25, -1.5]), rtol=0, atol=0)


# ----- property tests -------------------------------------------------------------------------------
def _reference(text: str):
    """An independent reading of the documented layout in plain Python: array, or None for an error."""
    rows, width = [], None
    header_seen = False
    for line in text.split("\n"):
        line = line[:-1] if line.endswith("\r") else line
        s = line.strip(" \t\r")
        if not s or s.startswith("#"):
            continue
        cells = [c.strip() for c in line.split(",")]

        def number(c):
            try:
                return float(c) if c and c.isascii() and "_" not in c else None
            except ValueError:
                return None

        if width is None:
            width = len(cells)
            if not any(number(c) is not None for c in cells):
                header_seen = True
                continue
        if len(cells) != width:
            return None
        vals = [number(c) for c in cells]
        if any(v is None or not math.isfinite(v) for v in vals):
            return None
        rows.append(vals)
    del header_seen
    return np.array(rows, dtype=np.float64) if rows else None


finite = st.floats(allow_nan=False, allow_infinity=False, width=64)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.integers(1, 6).flatmap(lambda m: st.lists(st.lists(finite, min_size=m, max_size=m), min_size=1,
                                                         max_size=30)),
       st.booleans(), st.sampled_from([",", "\t", ";"]))
def test_property_random_shapes_round_trip(tmp_path, rows, header, delim):
    m = len(rows[0])
    text = (delim.join(f"c{j}" for j in range(m)) + "\n" if header else "")
    text += "".join(delim.join(repr(v) for v in r) + "\n" for r in rows)
    t = read_table(write(tmp_path, "p.csv", text))
    assert t.values.shape == (len(rows), m)
    assert np.ascontiguousarray(t.values).tobytes() == np.array(rows, dtype=np.float64).tobytes()
    assert t.lines.tolist() == list(range(1 + header, len(rows) + 1 + header))


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.integers(1, 5), st.integers(1, 20), st.data())
def test_property_nan_inf_are_located(tmp_path, m, n, data):
    i = data.draw(st.integers(0, n - 1))
    j = data.draw(st.integers(0, m - 1))
    bad = data.draw(st.sampled_from(["nan", "inf", "-inf", "NaN", "Infinity", "1e400"]))
    cells = [[repr(float(r * m + c)) for c in range(m)] for r in range(n)]
    cells[i][j] = bad
    text = "".join(",".join(r) + "\n" for r in cells)
    with pytest.raises(InputError) as e:
        read_table(write(tmp_path, "n.csv", text))
    assert f"line {i + 1}, column {j + 1}: value {bad!r} is not finite" in str(e.value)
    assert e.value.row == i


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.binary(max_size=300))
def test_property_random_bytes_give_finite_values_or_input_error(tmp_path, blob):
    try:
        t = read_table(write(tmp_path, "r.csv", blob))
    except InputError:
        return
    assert t.values.dtype == np.float64 and np.isfinite(t.values).all()
    assert len(t.lines) == t.values.shape[0]


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.text(alphabet="0123456789.,-+eE \n\r\t#naifxy", max_size=80))
def test_property_csv_like_text_agrees_with_a_plain_python_reading(tmp_path, text):
    if "\r" in text.replace("\r\n", ""):
        text = text.replace("\r", "")  # lone carriage returns are refused by design; tested above
    expected = _reference(text)
    try:
        got = read_table(write(tmp_path, "t.csv", text), delimiter=",")
    except InputError:
        assert expected is None, f"refused, but plain Python reads {expected!r}"
        return
    assert expected is not None, f"read {got.values!r}, but plain Python refuses"
    assert np.ascontiguousarray(got.values).tobytes() == np.ascontiguousarray(expected).tobytes()
