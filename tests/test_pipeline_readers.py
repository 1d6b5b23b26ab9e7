"""Readers: what counts as a record, ids, and bad input turned into error records."""

from __future__ import annotations

import gzip
import shutil
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from libconf.pipeline.failures import FatalError, UsageError
from libconf.pipeline.readers import (
    RAW_LIMIT_BYTES,
    InputSpec,
    detect_format,
    estimate_records,
    probe_columns,
    read_records,
)

DATA = Path(__file__).parent / "data" / "pipeline"


def spec_for(path: Path | str, smiles_column=None, id_column=None) -> InputSpec:
    fmt, compressed, stem = detect_format(str(path))
    spec = InputSpec(str(path), str(path), fmt, compressed, stem)
    probe_columns(spec, smiles_column, id_column)
    return spec


def records(path, **kw):
    spec = spec_for(path, **kw)
    return spec, list(read_records(spec))


def test_format_is_taken_from_the_name_including_gz():
    assert detect_format("a/lib.smi.gz") == ("smiles", True, "lib")
    assert detect_format("LIB.SDF") == ("sdf", False, "LIB")
    assert detect_format("x.tsv") == ("tsv", False, "x")
    with pytest.raises(UsageError, match="cannot tell the file format"):
        detect_format("lib.xlsx")
    with pytest.raises(UsageError, match="gzipped Parquet"):
        detect_format("lib.parquet.gz")


def test_smiles_file_skips_comments_blank_lines_and_header_but_numbers_records():
    spec, recs = records(DATA / "mixed.smi")
    assert [r.input_row for r in recs] == list(range(8))
    assert spec.skipped_lines == 5  # 2 comments, header, blank, whitespace-only
    assert [r.mol_id for r in recs] == [
        "QR-0001",
        "QR-0002",
        "QR-0003",
        "QR-0004",
        "mixed:4",
        "mixed:5",
        "mixed:6",
        "beta glucose QR-0008",
    ]
    assert recs[1].text == "O[C@@H]1CCCC[C@H]1N"  # tab-separated id
    kinds = [r.kind for r in recs]
    assert kinds == ["smiles"] * 4 + ["error", "smiles", "error", "smiles"]


def test_non_utf8_line_becomes_a_read_error_naming_the_byte():
    _, recs = records(DATA / "mixed.smi")
    bad = recs[4]
    assert bad.stage == "read"
    assert "not valid UTF-8" in bad.reason and "0xE9" in bad.reason and "line 9" in bad.reason
    assert "C1CCOCC1" in bad.raw  # the record text survives, with a replacement mark


def test_gzipped_file_gives_the_same_records(tmp_path):
    gz = tmp_path / "mixed.smi.gz"
    with open(DATA / "mixed.smi", "rb") as src, gzip.open(gz, "wb") as dst:
        shutil.copyfileobj(src, dst)
    _, plain = records(DATA / "mixed.smi")
    _, packed = records(gz)
    assert [r[1:] for r in packed] == [r[1:] for r in plain]


def test_csv_quoted_commas_multiline_fields_and_short_rows():
    spec, recs = records(DATA / "quoted.csv")
    assert spec.smiles_column == "smiles" and spec.id_column == "compound_id"
    assert [r.mol_id for r in recs] == ["QR-C001", "QR-C002", "QR-C003", "QR-C004", "QR-C005", "quoted:5"]
    assert recs[0].text == "O[C@H]1CC[C@H](C(C)(C)C)CC1"
    assert recs[3].text == "C1CCNCC1"  # after a quoted field spanning two lines
    assert "over two lines" in recs[3].raw
    assert recs[4].kind == "error" and "no value in the SMILES column" in recs[4].reason
    assert spec.skipped_lines == 2  # header and blank line


def test_tsv_auto_detects_columns_by_header_name():
    spec, recs = records(DATA / "library.tsv")
    assert (spec.smiles_column, spec.id_column) == ("SMILES", "Name")
    assert [r.mol_id for r in recs] == ["QR-T001", "QR-T002", "QR-T003"]
    assert spec.skipped_lines == 2


def test_named_columns_override_detection_and_a_wrong_name_lists_the_columns(tmp_path):
    spec, recs = records(DATA / "quoted.csv", smiles_column="smiles", id_column="name")
    assert recs[1].mol_id == "1,3-dioxane, 2-phenyl"
    with pytest.raises(UsageError, match="'compound_id', 'name', 'smiles', 'note'"):
        spec_for(DATA / "quoted.csv", smiles_column="structure")
    nohead = tmp_path / "plain.csv"
    nohead.write_text("a,b\n1,2\n")
    with pytest.raises(UsageError, match="cannot find the SMILES column"):
        spec_for(nohead)


def test_sdf_broken_molblock_and_truncated_last_entry_are_records():
    spec, recs = records(DATA / "broken.sdf")
    assert [r.mol_id for r in recs] == [
        "QR-S001",
        "QR-S002",
        "QR-S003",
        "QR-S004",
        "QR-S006 pentavalent carbon",
        "QR-S005",
    ]
    # The broken molblock is passed on (the parse stage names the problem); the
    # truncated one is caught while reading.
    assert [r.kind for r in recs] == ["molblock"] * 5 + ["error"]
    assert recs[5].stage == "read" and "truncated" in recs[5].reason


def test_sdf_id_from_a_data_field():
    _, recs = records(DATA / "broken.sdf", id_column="catalog_no")
    assert recs[0].mol_id == "QRCL-000" and recs[3].mol_id == "QRCL-003"


def test_sdf_without_final_separator_still_yields_the_last_entry(tmp_path):
    text = (DATA / "broken.sdf").read_text()
    first = text[: text.index("$$$$")]
    p = tmp_path / "one.sdf"
    p.write_text(first)
    _, recs = records(p)
    assert len(recs) == 1 and recs[0].kind == "molblock"


def test_parquet_streams_batches_and_reports_null_smiles(tmp_path):
    n = 10_000  # several row groups and reader batches
    smiles = ["C1CCCCC1"] * n
    smiles[5000] = None
    table = pa.table({"structure": smiles, "id": list(range(n))})
    path = tmp_path / "lib.parquet"
    pq.write_table(table, path, row_group_size=1000)
    with pytest.raises(UsageError, match="SMILES column"):
        spec_for(path)
    spec, recs = records(path, smiles_column="structure")
    assert len(recs) == n and spec.id_column == "id"
    assert recs[4999].mol_id == "4999" and recs[4999].kind == "smiles"
    assert recs[5000].kind == "error" and "null" in recs[5000].reason
    assert estimate_records(spec) == n


def test_raw_is_truncated_to_10_kb(tmp_path):
    p = tmp_path / "long.smi"
    p.write_text("C" * 50_000 + "( long\n")
    _, recs = records(p)
    assert len(recs[0].raw.encode()) <= RAW_LIMIT_BYTES


def test_damaged_gzip_is_a_fatal_error_naming_the_file(tmp_path):
    p = tmp_path / "damaged.smi.gz"
    data = gzip.compress(b"C1CCCCC1 a\n" * 2000)
    p.write_bytes(data[: len(data) // 2])
    with pytest.raises(FatalError, match="damaged.smi.gz"):
        list(read_records(spec_for(p)))


AWKWARD_CSV = (
    b"\xef\xbb\xbfsmiles,id,note\r\n"
    b"CCO,a1,plain\r\n"
    b'"C(Cl)Cl",a2,"quoted, with a comma"\r\n'
    b'C1CCCCC1,a3,"a note\nover two lines"\r\n'
    b"\r\n"
    b"CC\xff\xfeN,a4,bad bytes\r\n"
    b"CC\x00C,a5,a NUL\r\n"
    b"CC\rC,a6,stray carriage return\r\n"
    b'c1ccccc1,a7,"never closed\n'
    b"CCN,a8,last line without an end of line"
)


@pytest.mark.parametrize("block", [1, 2, 3, 5, 17, 64])
def test_block_reading_gives_the_records_of_one_large_block(tmp_path, monkeypatch, block):
    """The text readers take the file a block at a time and split plain CSV lines
    themselves (libconf/pipeline/readers.py, `_text_lines`, `_read_delimited`); block
    boundaries inside a byte-order mark, a CRLF, a quoted line break or a bad UTF-8
    sequence must change nothing."""
    import libconf.pipeline.readers as readers

    path = tmp_path / "awkward.csv"
    path.write_bytes(AWKWARD_CSV)
    smi = tmp_path / "awkward.smi"
    smi.write_bytes(b"\xef\xbb\xbfCCO one\r\n# comment\n\nCC\xffO two\nc1ccccc1 three")
    whole = [records(path)[1], records(smi)[1]]
    assert [r.mol_id for r in whole[0]][:3] == ["a1", "a2", "a3"]
    assert any(r.kind == "error" and "UTF-8" in r.reason for r in whole[0])
    monkeypatch.setattr(readers, "_BLOCK_BYTES", block)
    assert [records(path)[1], records(smi)[1]] == whole
