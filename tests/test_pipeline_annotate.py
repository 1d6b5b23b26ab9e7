"""annotate end to end with the real engine: accounting, order, guards, refusals."""

from __future__ import annotations

import gzip
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pyarrow.parquet as pq
import pytest

from libconf.pipeline.failures import FatalError, UsageError
from libconf.pipeline.run import annotate
from libconf.pipeline.tables import SCHEMAS, TABLES

ROOT = Path(__file__).resolve().parents[1]
DATA = Path(__file__).parent / "data" / "pipeline"
DEMO = ROOT / "datasets" / "demo" / "quillan_ridge_library.smi.gz"
sys.path.insert(0, str(DATA))
import paced_engine  # noqa: E402

#: Records per curated file, and how many of them must be errors (by stage).
EXPECTED = {
    "mixed.smi": (8, {"read": 2, "parse": 2}),
    "quoted.csv": (6, {"read": 1, "parse": 1}),
    "library.tsv": (3, {}),
    "broken.sdf": (6, {"read": 1, "parse": 2}),
}


def env_with_path() -> dict:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(ROOT), str(DATA), env.get("PYTHONPATH", "")])
    return env


def run_cli(*args, stdin: bytes | None = None, cwd=None) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "libconf.pipeline.cli", "annotate", *map(str, args)],
        input=stdin,
        capture_output=True,
        env=env_with_path(),
        cwd=cwd,
        timeout=300,
    )


def tables(out: Path) -> dict[str, pd.DataFrame]:
    return {t: pd.read_parquet(out / t) for t in TABLES}


def assert_same_tables(a: Path, b: Path) -> None:
    ta, tb = tables(a), tables(b)
    for t in TABLES:
        pd.testing.assert_frame_equal(ta[t], tb[t], check_exact=True, obj=t)


def assert_accounting(out: Path, expected_rows: dict[str, int]) -> None:
    """Every record: exactly one row in molecules or errors; records in input order."""
    t = tables(out)
    keys = pd.concat([t["molecules"], t["errors"]])[["input_file", "input_row"]]
    assert not keys.duplicated().any(), "a record has two rows"
    for name, n in expected_rows.items():
        rows = sorted(keys.loc[keys.input_file == name, "input_row"])
        assert rows == list(range(n)), f"{name}: rows {rows}"
    assert set(keys.input_file) == set(expected_rows)
    for table in ("molecules", "errors"):
        order = list(zip(t[table].input_file.map(list(expected_rows).index), t[table].input_row, strict=True))
        assert order == sorted(order), f"{table} not in input order"


@pytest.fixture
def curated(tmp_path) -> list[Path]:
    """The curated files, copied (and two gzipped) so that names are short."""
    paths = []
    for name in EXPECTED:
        dst = tmp_path / "in" / name
        dst.parent.mkdir(exist_ok=True)
        shutil.copy(DATA / name, dst)
        paths.append(dst)
    return paths


def test_every_record_gives_one_molecule_or_error_row(curated, tmp_path):
    out = tmp_path / "run"
    summary = annotate(curated, out, jobs=2, chunk_size=2)
    names = {str(p): n for p, (n, _) in zip(curated, EXPECTED.values(), strict=True)}
    assert_accounting(out, names)
    t = tables(out)
    for p, (_, stages) in zip(curated, EXPECTED.values(), strict=True):
        errs = t["errors"][t["errors"].input_file == str(p)]
        assert errs.stage.value_counts().to_dict() == stages, p.name
    assert summary["records"] == sum(names.values()) == summary["molecules"] + summary["errors"]
    assert summary["skipped_lines"] == 5 + 2 + 2  # smi, csv, tsv
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["status"] == "finished"
    assert manifest["counts"]["records"] == summary["records"]
    assert [i["sha256"] for i in manifest["inputs"]][0] == __import__("hashlib").sha256(
        curated[0].read_bytes()
    ).hexdigest()


def test_error_reasons_name_the_problem(curated, tmp_path):
    out = tmp_path / "run"
    annotate(curated, out, jobs=1, chunk_size=100)
    errs = tables(out)["errors"].set_index("mol_id")
    assert errs.loc["QR-0003", "reason"].startswith("SMILES parse error")
    assert "valence" in errs.loc["QR-0004", "reason"]
    assert errs.loc["QR-0004", "raw"] == "CC1CCN(C)(C)CC1 QR-0004"
    assert "UTF-8" in errs.loc["mixed:4", "reason"]
    assert "valence error on C2" in errs.loc["QR-S006 pentavalent carbon", "reason"]
    assert "truncated" in errs.loc["QR-S005", "reason"]
    assert errs.loc["QR-S003", "stage"] == "parse"


def test_tables_have_the_declared_schemas_and_ring_atoms_are_int32_lists(curated, tmp_path):
    out = tmp_path / "run"
    annotate(curated, out, jobs=1, chunk_size=4)
    for t in TABLES:
        parts = sorted((out / t).glob("part-*.parquet"))
        assert parts, t
        for part in parts:
            assert pq.read_schema(part).remove_metadata() == SCHEMAS[t], (t, part.name)
    rings = tables(out)["rings"]
    assert len(rings) > 0 and all(len(a) == 6 for a in rings.ring_atoms)
    mols = tables(out)["molecules"].set_index("mol_id")
    assert mols.loc["mixed:5", "n_sat6_rings"] == 0  # benzene: a molecule, no ring
    assert pd.isna(mols.loc["mixed:5", "max_dG_flip_kjmol"])


def test_gz_inputs_and_stdin_give_the_same_rows_as_plain_files(tmp_path):
    smi = (DATA / "mixed.smi").read_bytes()
    gz = tmp_path / "mixed.smi.gz"
    gz.write_bytes(gzip.compress(smi))
    sdf_gz = tmp_path / "broken.sdf.gz"
    sdf_gz.write_bytes(gzip.compress((DATA / "broken.sdf").read_bytes()))
    plain = tmp_path / "plain"
    annotate([DATA / "mixed.smi"], plain, jobs=1)
    packed = tmp_path / "packed"
    annotate([gz, sdf_gz], packed, jobs=1)
    a, b = tables(plain), tables(packed)
    cols = ["mol_id", "input_row", "smiles", "n_sat6_rings", "max_dG_flip_kjmol"]
    pd.testing.assert_frame_equal(
        a["molecules"][cols], b["molecules"].loc[b["molecules"].input_file == str(gz), cols]
    )
    assert (b["errors"].input_file == str(sdf_gz)).sum() == 3
    piped = tmp_path / "piped"
    res = run_cli("-", "--out", piped, "--jobs", "1", stdin=smi)
    assert res.returncode == 0, res.stderr.decode()
    c = tables(piped)
    assert set(c["molecules"].input_file) == {"stdin"}
    assert list(c["molecules"].mol_id)[2] == "stdin:5"  # generated ids use "stdin"
    pd.testing.assert_frame_equal(a["molecules"][cols[1:]], c["molecules"][cols[1:]])
    assert list(c["errors"].mol_id) == ["QR-0003", "QR-0004", "stdin:4", "stdin:6"]


def test_tables_do_not_depend_on_the_number_of_jobs(curated, tmp_path):
    head = tmp_path / "demo_head.smi"
    with gzip.open(DEMO, "rt") as fh:
        head.write_text("".join(next(fh) for _ in range(400)))
    inputs = [*curated, head]
    annotate(inputs, tmp_path / "one", jobs=1, chunk_size=37)
    annotate(inputs, tmp_path / "two", jobs=2, chunk_size=37)
    assert_same_tables(tmp_path / "one", tmp_path / "two")


def test_refuses_a_non_empty_directory_without_resume_or_overwrite(curated, tmp_path):
    out = tmp_path / "run"
    out.mkdir()
    (out / "notes.txt").write_text("mine")
    with pytest.raises(UsageError, match="not empty"):
        annotate(curated[:1], out)
    with pytest.raises(UsageError, match="did not write"):
        annotate(curated[:1], out, overwrite=True)  # never deletes other people's files
    assert (out / "notes.txt").read_text() == "mine"
    res = run_cli(curated[0], "--out", out)
    assert res.returncode == 2 and b"not empty" in res.stderr


def test_overwrite_replaces_an_earlier_run(curated, tmp_path):
    out = tmp_path / "run"
    annotate(curated, out, jobs=1, chunk_size=2)
    summary = annotate(curated[:1], out, jobs=1, overwrite=True)
    assert summary["records"] == 8
    assert set(tables(out)["molecules"].input_file) == {str(curated[0])}
    assert len(list((out / "molecules").glob("part-*.parquet"))) == 1


def test_resume_refuses_changed_parameters_or_inputs(curated, tmp_path):
    out = tmp_path / "run"
    annotate(curated[:2], out, jobs=1, chunk_size=3)
    with pytest.raises(UsageError, match="--temperature"):
        annotate(curated[:2], out, resume=True, temperature=310.0)
    with pytest.raises(UsageError, match="--chunk-size"):
        annotate(curated[:2], out, resume=True, chunk_size=5)
    with open(curated[1], "a") as fh:
        fh.write("QR-C099,late addition,C1CCOCC1,\n")
    res = run_cli(*curated[:2], "--out", out, "--resume")
    assert res.returncode == 2
    assert b"has changed" in res.stderr and b"quoted.csv" in res.stderr


def test_resume_of_a_finished_run_changes_nothing(curated, tmp_path):
    out = tmp_path / "run"
    first = annotate(curated, out, jobs=1, chunk_size=4)
    before = tables(out)
    again = annotate([], out, resume=True)  # inputs and options from the manifest
    assert again["records"] == first["records"]
    for t in TABLES:
        pd.testing.assert_frame_equal(before[t], tables(out)[t])


def test_a_slow_record_becomes_an_error_row_and_the_run_goes_on(tmp_path):
    src = tmp_path / "slow.smi"
    src.write_text(f"C1CCCCC1 fast-1\n{paced_engine.SLOW_SMILES} slow\nC1CCOCC1 fast-2\n")
    for jobs in (1, 2):
        out = tmp_path / f"run{jobs}"
        summary = annotate(
            [src], out, jobs=jobs, chunk_size=1, record_timeout=0.5, analyzer=paced_engine.slow_on_marked
        )
        t = tables(out)
        assert list(t["molecules"].mol_id) == ["fast-1", "fast-2"]
        err = t["errors"].iloc[0]
        assert err.mol_id == "slow" and err.stage == "analyse"
        assert "longer than 0.5 s" in err.reason and "--record-timeout" in err.reason
        assert summary["timeouts"] == 1


def test_a_record_that_kills_its_worker_becomes_an_error_row(tmp_path):
    src = tmp_path / "crash.smi"
    lines = [f"C1CCC(C{'C' * k})CC1 m{k}" for k in range(8)]
    lines.insert(5, f"{paced_engine.CRASH_SMILES} crasher")
    src.write_text("\n".join(lines) + "\n")
    out = tmp_path / "run"
    summary = annotate([src], out, jobs=2, chunk_size=3, analyzer=paced_engine.crash_on_marked)
    assert_accounting(out, {str(src): 9})
    err = tables(out)["errors"]
    assert list(err.mol_id) == ["crasher"] and "crashed its worker" in err.reason.iloc[0]
    assert summary["molecules"] == 8 and summary["internal_errors"] == 1


def test_cli_exit_status_for_usage_and_fatal_errors(curated, tmp_path):
    res = run_cli(curated[0], "--out", tmp_path / "a", "--scheduler", "nonsense://10.0.0.5:8786")
    assert res.returncode == 2 and b"--scheduler" in res.stderr
    res = run_cli(tmp_path / "missing.smi", "--out", tmp_path / "b")
    assert res.returncode == 1 and b"missing.smi" in res.stderr
    res = run_cli(tmp_path / "lib.xlsx", "--out", tmp_path / "c")
    assert res.returncode == 2 and b"file format" in res.stderr
    res = run_cli(curated[0], "--out", tmp_path / "d", "--medium", "gas")
    assert res.returncode == 2
    res = run_cli(curated[0], "--out", tmp_path / "e", "--quiet", "--jobs", "1")
    assert res.returncode == 0 and res.stdout == b""
    res = run_cli(curated[0], "--out", tmp_path / "f", "--jobs", "1")
    assert res.returncode == 0
    assert b"8 records" in res.stdout and b"2 errors" not in res.stdout  # 4 errors
    assert b"4 errors" in res.stdout


def test_unreadable_input_is_fatal_not_a_crash(tmp_path):
    p = tmp_path / "damaged.smi.gz"
    data = gzip.compress(b"C1CCCCC1 a\n" * 5000)
    p.write_bytes(data[: len(data) // 2])
    with pytest.raises(FatalError, match="damaged.smi.gz"):
        annotate([p], tmp_path / "run", jobs=1)


def test_full_disk_is_fatal_naming_the_file_and_the_run_stays_resumable(curated, tmp_path, monkeypatch):
    import errno

    from libconf.pipeline import tables as tables_module

    real_write = tables_module.pq.write_table
    calls = {"n": 0}

    def write_until_full(table, where, **kw):
        calls["n"] += 1
        if calls["n"] > 6:  # the first chunk's four parts and half of the second's
            raise OSError(errno.ENOSPC, "No space left on device")
        return real_write(table, where, **kw)

    monkeypatch.setattr(tables_module.pq, "write_table", write_until_full)
    out = tmp_path / "run"
    with pytest.raises(FatalError, match=r"part-000001\.parquet: No space left"):
        annotate(curated, out, jobs=1, chunk_size=4)
    assert not list(out.glob("*/.*.tmp"))
    monkeypatch.setattr(tables_module.pq, "write_table", real_write)
    annotate(curated, out, jobs=1, resume=True)
    annotate(curated, tmp_path / "reference", jobs=1, chunk_size=4)
    assert_same_tables(out, tmp_path / "reference")


def test_a_record_stuck_beyond_the_alarm_is_stopped_by_the_watchdog(tmp_path):
    src = tmp_path / "hang.smi"
    src.write_text(f"C1CCCCC1 a\n{paced_engine.HANG_SMILES} stuck\nC1CCOCC1 b\nC1CCNCC1 c\n")
    out = tmp_path / "run"
    summary = annotate(
        [src], out, jobs=2, chunk_size=2, record_timeout=0.25, analyzer=paced_engine.hang_on_marked
    )
    assert_accounting(out, {str(src): 4})
    err = tables(out)["errors"]
    assert list(err.mol_id) == ["stuck"]
    assert "could not be interrupted" in err.reason.iloc[0]
    assert summary["timeouts"] == 1 and summary["molecules"] == 3


def test_parquet_input_with_named_columns(tmp_path):
    import pyarrow as pa

    src = tmp_path / "vendor.parquet"
    table = pa.table(
        {
            "catalogue": ["QR-P1", "QR-P2", None, "QR-P4"],
            "structure": ["C[C@H]1CC[C@H](O)CC1", None, "C1CCOCC1", "C1CC(C"],
        }
    )
    pq.write_table(table, src, row_group_size=2)
    out = tmp_path / "run"
    summary = annotate([src], out, jobs=1, smiles_column="structure", id_column="catalogue")
    assert summary["records"] == 4 and summary["errors"] == 2
    t = tables(out)
    assert list(t["molecules"].mol_id) == ["QR-P1", "vendor:2"]
    assert list(t["errors"].stage) == ["read", "parse"]
    inputs = json.loads((out / "manifest.json").read_text())["inputs"]
    assert (inputs[0]["smiles_column"], inputs[0]["id_column"]) == ("structure", "catalogue")


def test_resume_refuses_when_the_parameter_tables_changed(curated, tmp_path):
    out = tmp_path / "run"
    annotate(curated[:1], out, jobs=1)
    manifest_path = out / "manifest.json"
    manifest = json.loads(manifest_path.read_text())
    assert len(manifest["versions"]["parameters_sha256"]) == 64
    manifest["versions"]["parameters_sha256"] = "0" * 64  # as if the tables were edited since
    manifest_path.write_text(json.dumps(manifest))
    with pytest.raises(UsageError, match="parameter tables"):
        annotate(curated[:1], out, resume=True)


def test_windows_line_endings_give_the_same_rows(tmp_path):
    plain, crlf = [], []
    for name in ("mixed.smi", "quoted.csv", "broken.sdf"):
        data = (DATA / name).read_bytes()
        (tmp_path / "lf").mkdir(exist_ok=True)
        (tmp_path / "crlf").mkdir(exist_ok=True)
        (tmp_path / "lf" / name).write_bytes(data)
        (tmp_path / "crlf" / name).write_bytes(data.replace(b"\n", b"\r\n"))
        plain.append(tmp_path / "lf" / name)
        crlf.append(tmp_path / "crlf" / name)
    annotate(plain, tmp_path / "a", jobs=1)
    annotate(crlf, tmp_path / "b", jobs=1)
    a, b = tables(tmp_path / "a"), tables(tmp_path / "b")
    for t in ("molecules", "rings", "substituents"):
        pd.testing.assert_frame_equal(a[t].drop(columns="input_file"), b[t].drop(columns="input_file"))
    pd.testing.assert_frame_equal(
        a["errors"][["mol_id", "input_row", "stage"]], b["errors"][["mol_id", "input_row", "stage"]]
    )


def test_a_run_that_failed_before_starting_does_not_block_the_next(tmp_path):
    out = tmp_path / "run"
    with pytest.raises(FatalError, match="does not exist"):
        annotate([tmp_path / "typo.smi"], out)
    annotate([DATA / "mixed.smi"], out, jobs=1)  # no --overwrite needed
    assert json.loads((out / "manifest.json").read_text())["status"] == "finished"
