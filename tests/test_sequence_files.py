"""Sequence files: records of any length, gzip, BOM, control characters, the unknown-symbol policy, writers.

Files are made here with plain Python text and the standard library's gzip; expected lengths and
symbols are those the test generated (numpy's generator), compared exactly.
"""

from __future__ import annotations

import gzip

import numpy as np
import pytest
import torch

from heatwalk import InputError
from heatwalk.io.sequence_files import read_records, read_sequences, write_records, write_sequences

PROTEIN = "ACDEFGHIKLMNPQRSTVWY"


def fasta(names, seqs, width=60):
    out = []
    for n, s in zip(names, seqs):
        out.append(f">{n}\n")
        out.extend(s[i:i + width] + "\n" for i in range(0, len(s), width))
    return "".join(out)


def random_records(seed=0, n=40):
    rng = np.random.default_rng(seed)
    lengths = rng.integers(10, 301, size=n)
    lengths[:2] = (10, 300)  # both ends of the range are present
    seqs = ["".join(rng.choice(list(PROTEIN), size=k)) for k in lengths]
    return [f"protein_{i} from a made-up sample" for i in range(n)], seqs, lengths


def test_fasta_with_lengths_10_to_300(tmp_path):
    names, seqs, lengths = random_records()
    p = tmp_path / "p.faa"
    p.write_text(fasta(names, seqs, width=70))
    rec = read_records(p, alphabet=PROTEIN)
    assert rec.names == names and rec.sequences == seqs
    np.testing.assert_array_equal(rec.lengths, lengths)
    first_lines = np.cumsum([0] + [1 + -(-k // 70) for k in lengths[:-1]]) + 2
    assert rec.lines == first_lines.tolist()
    with pytest.raises(InputError, match=r"record 2 has length 300, expected 10"):
        read_sequences(p)


def test_gzip_is_told_by_its_first_bytes(tmp_path):
    names, seqs, _ = random_records(1, 5)
    data = gzip.compress(fasta(names, seqs).encode())
    for name in ("p.fasta.gz", "p.fasta", "p.txt"):
        (tmp_path / name).write_bytes(data)
        assert read_records(tmp_path / name).sequences == seqs
    (tmp_path / "cut.fa.gz").write_bytes(data[: len(data) // 2])
    with pytest.raises(InputError, match=r"gzip-compressed content cannot be read"):
        read_records(tmp_path / "cut.fa.gz")
    (tmp_path / "t.txt.gz").write_bytes(gzip.compress(b"ACGT\nTTGA\n"))
    assert read_sequences(tmp_path / "t.txt.gz").codes.tolist() == [[0, 1, 2, 3], [3, 3, 2, 0]]


def test_bom_nul_and_control_characters(tmp_path):
    (tmp_path / "bom.fa").write_bytes(b"\xef\xbb\xbf>a\nACGT\n>b\nTTGA\n")
    assert read_sequences(tmp_path / "bom.fa").names == ["a", "b"]
    (tmp_path / "nul.fa").write_bytes(b">a\nACGT\n>b\nAC\n GT\x00A\n")
    with pytest.raises(InputError, match=r"nul.fa, line 5, record 2, column 5: control character U\+0000 \(NUL\)") as e:
        read_records(tmp_path / "nul.fa")
    assert e.value.row == 1 and e.value.field == "4"
    (tmp_path / "bel.txt").write_bytes(b"ACGT\nAC\x07T\n")
    with pytest.raises(InputError, match=r"line 2, record 2, column 3: control character U\+0007 \(BEL\)"):
        read_records(tmp_path / "bel.txt")
    (tmp_path / "head.fa").write_bytes(b">a\x1b[31m\nACGT\n")
    with pytest.raises(InputError, match=r"line 1, the header of record 1: control character U\+001B \(ESC\)"):
        read_records(tmp_path / "head.fa")
    (tmp_path / "bad.fa").write_bytes(b">a\nAC\xe9GT\n")
    with pytest.raises(InputError, match=r"line 2, column 3: byte 0xe9 is not UTF-8 text"):
        read_records(tmp_path / "bad.fa")
    with pytest.raises(InputError, match=r"is a folder, expected a data file"):
        read_records(tmp_path)


def test_unknown_symbol_policies(tmp_path):
    p = tmp_path / "u.fa"
    p.write_text(">a\nACGT\n>b\nACXT\nNA\n>c\nGGTT\n")
    with pytest.raises(InputError, match=r"u.fa, line 4: record 2, column 3: unknown symbol 'X' "
                                         r"\(alphabet: 'ACGT'; unknown_symbols='drop'") as e:
        read_records(p, alphabet="ACGT")
    assert e.value.row == 1 and e.value.field == "2"
    dropped = read_records(p, alphabet="ACGT", unknown_symbols="drop")
    assert dropped.names == ["a", "c"] and dropped.dropped == ["b"] and dropped.lines == [2, 7]
    replaced = read_records(p, alphabet="ACGT", unknown_symbols="replace:A")
    assert replaced.sequences == ["ACGT", "ACATAA", "GGTT"] and replaced.replaced == 2
    s = read_sequences(p, alphabet="ACGT", unknown_symbols="drop")
    assert s.codes.tolist() == [[0, 1, 2, 3], [2, 2, 3, 3]] and s.dropped == ["b"]
    with pytest.raises(InputError, match=r"the replacement 'Z' is not in the alphabet"):
        read_records(p, alphabet="ACGT", unknown_symbols="replace:Z")
    with pytest.raises(InputError, match=r"unknown_symbols must be 'reject', 'drop' or 'replace:X'"):
        read_records(p, alphabet="ACGT", unknown_symbols="map:A")
    with pytest.raises(InputError, match=r"all 3 records have symbols outside the alphabet 'XY'"):
        read_records(p, alphabet="XY", unknown_symbols="drop")


def test_trailing_stop_symbol(tmp_path):
    p = tmp_path / "stops.faa"
    p.write_text(">g1\nMKVL*\n>g2\nMKA\n>g3\nMAVL*\n")
    with pytest.raises(InputError, match=r"record 1, column 5: unknown symbol '\*' .*stop_symbol='\*'"):
        read_records(p, alphabet=PROTEIN)
    rec = read_records(p, alphabet=PROTEIN, stop_symbol="*")
    assert rec.sequences == ["MKVL", "MKA", "MAVL"] and rec.stops_removed == 2
    assert read_records(p, alphabet=PROTEIN, unknown_symbols="drop").names == ["g2"]
    (tmp_path / "same.faa").write_text(">g1\nMKV*\n>g2\nMKA*\n")
    inferred = read_sequences(tmp_path / "same.faa", stop_symbol="*")
    assert inferred.alphabet == list("AKMV") and inferred.L == 3 and inferred.stops_removed == 2
    (tmp_path / "only.faa").write_text(">g\n*\n")
    with pytest.raises(InputError, match=r"record 1 \('g'\) is empty once its stop symbol '\*' is removed"):
        read_records(tmp_path / "only.faa", stop_symbol="*")
    with pytest.raises(InputError, match=r"stop_symbol must be one character"):
        read_records(p, stop_symbol="**")


def test_uppercase_folds_symbols_and_alphabet(tmp_path):
    p = tmp_path / "l.txt"
    p.write_text("acgt\nACGA\n")
    s = read_sequences(p, alphabet="acgt", uppercase=True)
    assert s.alphabet == list("ACGT") and s.codes.tolist() == [[0, 1, 2, 3], [0, 1, 2, 0]]


def test_writers_by_extension_and_round_trips(tmp_path):
    names, seqs, _ = random_records(2, 12)
    out = write_records(tmp_path / "r.fa.gz", seqs, names)
    assert (tmp_path / "r.fa.gz").read_bytes()[:2] == b"\x1f\x8b"
    back = read_records(out)
    assert back.names == names and back.sequences == seqs
    assert write_records(tmp_path / "r2.fa.gz", seqs, names).read_bytes() == out.read_bytes()  # reproducible
    txt = write_records(tmp_path / "r.txt", seqs)
    assert txt.read_text() == "".join(s + "\n" for s in seqs)
    codes = torch.tensor([[0, 1, 2], [2, 1, 0]])
    write_sequences(tmp_path / "c.faa", codes, "XYZ")
    assert read_sequences(tmp_path / "c.faa", alphabet="XYZ").codes.tolist() == codes.tolist()
    with pytest.raises(InputError, match=r"cannot write sequences as '.csv' \(a table format"):
        write_sequences(tmp_path / "c.csv", codes, "XYZ")
    with pytest.raises(InputError, match=r"format 'text' does not match the extension, which gives 'fasta'"):
        write_records(tmp_path / "m.fasta", seqs, format="text")
    with pytest.raises(InputError, match=r"record 2, column 2: symbol ' ' cannot be written"):
        write_records(tmp_path / "w.fasta", ["AC", "A C"])
    with pytest.raises(InputError, match="already exists"):
        write_records(tmp_path / "r.txt", seqs)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["c.faa", "r.fa.gz", "r.txt", "r2.fa.gz"]
