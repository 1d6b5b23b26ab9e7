"""Readers under random and mutated input: they never crash, and every record they
yield ends as exactly one row of `molecules` or `errors` (the accounting invariant)."""

import os
import tempfile

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from rdkit import Chem

from libconf.pipeline.readers import InputSpec, detect_format, read_records
from libconf.pipeline.work import AnalysisOptions, analyse_chunk

OPTIONS = AnalysisOptions(298.15, "water", 500, 64, 5.0)
FUZZ = settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.too_slow])

MOLBLOCK = Chem.MolToMolBlock(Chem.MolFromSmiles("C[C@H]1CC[C@@H](C(C)(C)C)CC1"))
GOOD_SDF = ("cis-tBu-Me\n" + MOLBLOCK.split("\n", 1)[1] + "$$$$\n") * 3


def _run(name: str, data: bytes):
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, name)
        with open(path, "wb") as fh:
            fh.write(data)
        fmt, compressed, stem = detect_format(name)
        spec = InputSpec(name=name, path=path, format=fmt, compressed=compressed, stem=stem)
        if fmt == "csv":
            spec.smiles_column = "smiles"
        records = list(read_records(spec))
    result = analyse_chunk(0, records, OPTIONS)
    tables = result.tables
    keys = [
        (f, r)
        for t in ("molecules", "errors")
        for f, r in zip(tables[t].column("input_file").to_pylist(), tables[t].column("input_row").to_pylist())
    ]
    # exactly one row per record, never both, never neither
    assert sorted(keys) == sorted((rec.input_file, rec.input_row) for rec in records)
    assert len(set(keys)) == len(keys)
    return records, tables


@FUZZ
@given(st.binary(max_size=400))
def test_random_bytes_as_a_smiles_file(data):
    _run("junk.smi", data)


@FUZZ
@given(st.lists(st.text(max_size=40), max_size=12))
def test_random_lines_with_real_smiles_mixed_in(lines):
    body = "\n".join(["CC1CCCCC1 ok-1", *lines, "C1CCCCC1 ok-2"]) + "\n"
    records, tables = _run("mixed.smi", body.encode("utf-8", "surrogatepass"))
    ids = tables["molecules"].column("mol_id").to_pylist()
    assert "ok-1" in ids and "ok-2" in ids


@FUZZ
@given(st.binary(max_size=300))
def test_random_bytes_after_a_csv_header(data):
    _run("junk.csv", b"smiles,id\n" + data)


@FUZZ
@given(
    st.lists(
        st.tuples(st.integers(0, len(GOOD_SDF) - 1), st.sampled_from(["delete", "dup", "junk"])),
        min_size=1,
        max_size=5,
    )
)
def test_mutated_sdf(edits):
    text = GOOD_SDF
    for pos, op in edits:
        pos %= max(len(text), 1)
        if op == "delete":
            text = text[:pos] + text[pos + 7 :]
        elif op == "dup":
            text = text[:pos] + text[pos : pos + 20] + text[pos:]
        else:
            text = text[:pos] + "\x00 M  END\n$$$$ junk" + text[pos:]
    _run("mutated.sdf", text.encode())


def test_hostile_ids_survive_into_the_tables():
    nasty = ['quo"te', "new\\nline", "tab\there", "x" * 100_000]
    body = "".join(f"CC1CCCCC1 {n}\n" for n in nasty).encode()
    records, tables = _run("ids.smi", body)
    got = tables["molecules"].column("mol_id").to_pylist()
    assert got[0] == 'quo"te' and got[2] == "tab\there"
    assert len(got[3]) == 100_000
