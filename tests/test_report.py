"""`libconf report`: one self-contained HTML page for a run."""

import os
import re
import shutil
import subprocess
import sys
from html.parser import HTMLParser

import pytest

import libconf
from libconf.report import reason_kind, summarise, write_report

SMILES = [
    "C[C@H]1CC[C@@H](C(C)(C)C)CC1 anchored-1",
    "[H][C@@]12CCCC[C@@]1([H])CCCC2 trans-decalin",
    "C1C2CC3CC1CC(C2)C3 adamantane",
    "CC1CCCCC1 methylcyclohexane",
    "OC[C@H]1O[C@@H](O)[C@H](O)[C@@H](O)[C@@H]1O glucose",
    "c1ccccc1 benzene",
    "C1CC( broken-1",
    "CN(C)(C)(C)C broken-2",
]


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    base = tmp_path_factory.mktemp("report")
    src = base / "lab.smi"
    src.write_text("\n".join(SMILES) + "\n")
    out = base / "run"
    libconf.annotate([str(src)], str(out), jobs=1)
    return out


class _Checker(HTMLParser):
    VOID = {"meta", "img", "br", "hr", "link", "input"}

    def __init__(self):
        super().__init__()
        self.stack, self.errors, self.tags = [], [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if tag not in self.VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"unbalanced </{tag}> (open: {self.stack[-3:]})")
        else:
            self.stack.pop()


def test_report_is_valid_self_contained_html(run_dir, tmp_path):
    path = write_report(run_dir, tmp_path / "r.html")
    page = path.read_text(encoding="utf-8")
    assert page.startswith("<!DOCTYPE html>")
    checker = _Checker()
    checker.feed(page)
    checker.close()
    assert not checker.errors
    assert not checker.stack
    # nothing to fetch: no scripts, no style sheets, every picture inline
    assert "http:" not in page and "https:" not in page and "url(" not in page
    assert not re.search(r'(?:src|href)\s*=\s*"(?!data:)', page)
    tags = checker.tags
    assert not [t for t, a in tags if t in ("script", "link", "iframe")]
    images = [a["src"] for t, a in tags if t == "img"]
    assert images and all(src.startswith("data:image/png;base64,") for src in images)


def test_report_counts_match_the_tables(run_dir):
    s = summarise(run_dir)
    assert s.n_molecules == 6
    assert s.n_rings == 1 + 2 + 4 + 1 + 1
    assert s.lock_classes["fixed"] == 6
    assert sum(s.error_reasons.values()) == 2
    assert s.n_locked == 4  # tBu-anchored, trans-decalin, adamantane, glucose
    assert sum(s.dg_hist) == s.n_rings - s.lock_classes["fixed"]


def test_report_command_and_bad_directory(run_dir, tmp_path):
    ok = subprocess.run(
        [sys.executable, "-m", "libconf", "report", str(run_dir), "-o", str(tmp_path / "a.html")],
        capture_output=True,
        text=True,
    )
    assert ok.returncode == 0, ok.stderr
    assert (tmp_path / "a.html").stat().st_size > 1000
    bad = subprocess.run(
        [sys.executable, "-m", "libconf", "report", str(tmp_path)], capture_output=True, text=True
    )
    assert bad.returncode == 2
    assert "no manifest.json" in bad.stderr


def test_error_reasons_group_by_kind():
    assert reason_kind("SMILES parse error at position 7") == reason_kind("SMILES parse error at position 12")


def _browser():
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


@pytest.mark.skipif(
    _browser() is None, reason="no headless browser here (install Debian's chromium to run this)"
)
def test_report_opens_in_a_headless_browser(run_dir, tmp_path):
    path = write_report(run_dir, tmp_path / "b.html")
    profile = tmp_path / "profile"
    proc = subprocess.run(
        [
            _browser(),
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-quic",
            "--no-first-run",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            f"--user-data-dir={profile}",
            "--enable-logging=stderr",
            "--v=0",
            "--dump-dom",
            f"file://{path}",
        ],
        capture_output=True,
        text=True,
        timeout=120,
        env={**os.environ, "HOME": str(tmp_path)},
    )
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert "Ring conformations of" in proc.stdout
    assert "Uncaught" not in proc.stderr
