"""Security properties of a batch run: no network, no writes outside the output
directory, hostile ids stored as data."""

import ast
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

import libconf

PACKAGE = Path(libconf.__file__).resolve().parent
NETWORK_MODULES = {
    "socket",
    "urllib",
    "urllib.request",
    "http",
    "http.client",
    "requests",
    "ftplib",
    "smtplib",
    "telnetlib",
    "xmlrpc",
    "asyncio.streams",
}


def test_the_package_imports_no_network_module():
    offenders = []
    for path in PACKAGE.rglob("*.py"):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.module:
                names = [node.module]
            offenders += [
                (path.name, n) for n in names if n.split(".")[0] in {m.split(".")[0] for m in NETWORK_MODULES}
            ]
    assert not offenders


@pytest.mark.skipif(
    os.geteuid() != 0 or shutil.which("unshare") is None,
    reason="needs root and unshare(1) for a network namespace",
)
def test_a_run_succeeds_with_no_network_at_all(tmp_path):
    src = tmp_path / "in.smi"
    src.write_text("CC1CCCCC1 a\nC1CC( b\n")
    out = tmp_path / "run"
    probe = subprocess.run(["unshare", "--net", "true"], capture_output=True)
    if probe.returncode != 0:
        pytest.skip("network namespaces are not available here")
    proc = subprocess.run(
        [
            "unshare",
            "--net",
            sys.executable,
            "-m",
            "libconf",
            "annotate",
            str(src),
            "--out",
            str(out),
            "--jobs",
            "2",
            "--quiet",
        ],
        capture_output=True,
        text=True,
        env={**os.environ, "PYTHONPATH": str(PACKAGE.parent)},
        timeout=300,
    )
    assert proc.returncode == 0, proc.stderr
    assert len(pd.read_parquet(out / "molecules")) == 1


def test_ids_cannot_steer_where_files_go(tmp_path):
    work = tmp_path / "work"
    work.mkdir()
    ids = ["../../escaped", "/etc/passwd", "..\\..\\x", "part-000000.parquet", "C:\\evil", "\x00nul"]
    src = work / "in.smi"
    src.write_text("".join(f"CC1CCCCC1 {i}\n" for i in ids))
    out = work / "run"
    before = {p for p in tmp_path.rglob("*")}
    libconf.annotate([str(src)], str(out), jobs=1)
    created = {p for p in tmp_path.rglob("*")} - before
    assert created and all(out in p.parents or p == out for p in created)
    got = pd.read_parquet(out / "molecules")["mol_id"].tolist()
    assert got == ids  # stored as data, byte for byte


def test_hostile_csv_ids_come_back_intact(tmp_path):
    # quotes, a real line break inside a quoted field, a NUL byte and a 1 MB id
    big = "x" * 1_000_000
    ids = ['say "hi"', "two\nlines", "nul\x00byte", big]
    lines = ["smiles,id"] + [f'CC1CCCCC1,"{i.replace(chr(34), chr(34) * 2)}"' for i in ids]
    src = tmp_path / "hostile.csv"
    src.write_text("\n".join(lines) + "\n", encoding="utf-8")
    out = tmp_path / "run"
    summary = libconf.annotate([str(src)], str(out), jobs=1)
    got = pd.read_parquet(out / "molecules")["mol_id"].tolist()
    assert summary["records"] == 4
    assert got == ids
