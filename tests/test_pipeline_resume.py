"""Kill a run part-way (SIGKILL, no chance to clean up), resume it, get the same tables."""

from __future__ import annotations

import gzip
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest

from libconf.pipeline.run import annotate
from libconf.pipeline.tables import TABLES, part_name

ROOT = Path(__file__).resolve().parents[1]
DATA = Path(__file__).parent / "data" / "pipeline"
DEMO = ROOT / "datasets" / "demo" / "quillan_ridge_library.smi.gz"
sys.path.insert(0, str(DATA))
import paced_engine  # noqa: E402


def env_with_path() -> dict:
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(ROOT), str(DATA), env.get("PYTHONPATH", "")])
    env["LIBCONF_TEST_PACE_S"] = "0.01"
    return env


def finished_chunks(out: Path) -> int:
    try:
        return json.loads((out / "manifest.json").read_text())["finished_chunks"]
    except (OSError, ValueError, KeyError):
        return 0


def tables(out: Path) -> dict[str, pd.DataFrame]:
    return {t: pd.read_parquet(out / t) for t in TABLES}


@pytest.fixture(scope="module")
def library(tmp_path_factory) -> Path:
    """600 records of the demo library (its broken records included)."""
    path = tmp_path_factory.mktemp("lib") / "quillan_600.smi"
    with gzip.open(DEMO, "rt") as fh:
        lines = [line for line in fh if line.strip()]
    bad = [line for line in lines if "QRCL-X" in line][:2]
    good = [line for line in lines if "QRCL-0" in line][:598]
    path.write_text("".join(good[:300] + bad[:1] + good[300:] + bad[1:]))
    return path


def kill_part_way(library: Path, out: Path, at_least: int) -> None:
    proc = subprocess.Popen(
        [sys.executable, str(DATA / "paced_run.py"), str(out), str(library), "10", "2"],
        env=env_with_path(),
        start_new_session=True,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    deadline = time.monotonic() + 120
    try:
        while finished_chunks(out) < at_least:
            assert proc.poll() is None, "the paced run ended before it could be killed"
            assert time.monotonic() < deadline, "the paced run made no progress"
            time.sleep(0.02)
    finally:
        os.killpg(proc.pid, signal.SIGKILL)  # the run and its worker processes
        proc.wait()


def test_killed_run_resumes_to_the_same_tables_as_an_uninterrupted_one(library, tmp_path):
    reference = tmp_path / "reference"
    annotate([library], reference, chunk_size=10, jobs=2)

    out = tmp_path / "killed"
    kill_part_way(library, out, at_least=5)
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["status"] == "running" and 5 <= manifest["finished_chunks"] < 60
    # What a kill between two part writes leaves behind: a part of an unfinished chunk
    # and a half-written temporary file. Resume must not keep either.
    k = manifest["finished_chunks"]
    shutil.copy(out / "rings" / part_name(0), out / "rings" / part_name(k))
    (out / "errors" / f".{part_name(k)}.tmp").write_bytes(b"PAR1 half")

    res = subprocess.run(
        [
            sys.executable,
            "-m",
            "libconf.pipeline.cli",
            "annotate",
            str(library),
            "--out",
            str(out),
            "--resume",
            "--jobs",
            "2",
        ],
        env=env_with_path(),
        capture_output=True,
        timeout=300,
    )
    assert res.returncode == 0, res.stderr.decode()
    assert json.loads((out / "manifest.json").read_text())["status"] == "finished"
    got, want = tables(out), tables(reference)
    for t in TABLES:
        pd.testing.assert_frame_equal(got[t], want[t], check_exact=True, obj=t)
    assert len(got["molecules"]) + len(got["errors"]) == 600
    assert not list(out.glob("*/.*.tmp"))


def test_resume_without_a_manifest_on_an_empty_directory_starts_afresh(library, tmp_path):
    out = tmp_path / "fresh"
    out.mkdir()
    summary = annotate([library], out, chunk_size=100, jobs=1, resume=True)
    assert summary["records"] == 600


def test_interrupted_run_resumes_from_another_directory_without_naming_inputs(tmp_path, monkeypatch):
    (tmp_path / "lab").mkdir()
    lines = [f"C1CCC(C{'C' * (k % 7)})CC1 q{k}" for k in range(60)]
    lines.insert(41, f"{paced_engine.INTERRUPT_SMILES} cyclohexanol")
    (tmp_path / "lab" / "set.smi").write_text("\n".join(lines) + "\n")
    monkeypatch.chdir(tmp_path / "lab")
    annotate(["set.smi"], tmp_path / "reference", chunk_size=8, jobs=1)
    with pytest.raises(KeyboardInterrupt):
        annotate(
            ["set.smi"], tmp_path / "run", chunk_size=8, jobs=1, analyzer=paced_engine.interrupt_on_marked
        )
    manifest = json.loads((tmp_path / "run" / "manifest.json").read_text())
    assert manifest["status"] == "running" and manifest["finished_chunks"] == 5
    monkeypatch.chdir(tmp_path)
    summary = annotate([], tmp_path / "run", resume=True, jobs=2)
    assert summary["records"] == 61 and summary["resumed"]
    got, want = tables(tmp_path / "run"), tables(tmp_path / "reference")
    assert set(got["molecules"].input_file) == {"set.smi"}
    for t in TABLES:
        pd.testing.assert_frame_equal(got[t], want[t], check_exact=True, obj=t)
