"""`libconf audit` against RDKit's MMFF94 (a general reference force field) on textbook
rings, and its detection of a deliberately wrong prediction."""

import io
import json
import shutil

import pyarrow.compute as pc
import pyarrow.parquet as pq
import pytest

import libconf
from libconf.audit import AuditError, audit

# A-values well above MMFF94's known errors (Reich compilation: CH3 1.74, tBu ~4.9,
# iPr 2.21, Ph 2.8 kcal/mol), so the preferred chair is not in doubt at either level.
TEXTBOOK = [
    "CC1CCCCC1 methylcyclohexane",
    "CC(C)(C)C1CCCCC1 tert-butylcyclohexane",
    "CC(C)C1CCCCC1 isopropylcyclohexane",
    "c1ccc(cc1)C1CCCCC1 phenylcyclohexane",
    "C[C@@H]1C[C@H](C)CCC1 cis-1,3-dimethylcyclohexane",
    "C[C@H]1CC[C@H](C)CC1 trans-1,4-dimethylcyclohexane",
]


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    base = tmp_path_factory.mktemp("audit")
    src = base / "textbook.smi"
    src.write_text("\n".join(TEXTBOOK) + "\n")
    out = base / "run"
    libconf.annotate([str(src)], str(out), jobs=1)
    return out


def test_audit_agrees_on_textbook_rings(run_dir):
    buf = io.StringIO()
    s = audit(run_dir, sample=10, n_conformers=8, out=buf, progress=False)
    assert s["computed"] == len(TEXTBOOK)
    assert s["preferred_chair_agreement"] == 1.0
    assert s["spearman_rho"] > 0.8
    text = buf.getvalue()
    assert "reference, not the truth" in text
    assert (run_dir / "audit" / "rings.csv").is_file()
    assert json.loads((run_dir / "audit" / "summary.json").read_text())["level"].startswith("MMFF94")


def test_audit_detects_an_injected_wrong_prediction(run_dir, tmp_path):
    bad = tmp_path / "bad"
    shutil.copytree(run_dir, bad, ignore=shutil.ignore_patterns("audit"))
    # claim that methylcyclohexane keeps its methyl axial (95 %)
    for part in (bad / "substituents").glob("part-*.parquet"):
        t = pq.read_table(part)
        mask = pc.equal(t.column("mol_id"), "methylcyclohexane")
        frac = pc.if_else(mask, 0.95, t.column("axial_fraction"))
        pq.write_table(t.set_column(t.schema.get_field_index("axial_fraction"), "axial_fraction", frac), part)
    buf = io.StringIO()
    s = audit(bad, sample=10, n_conformers=8, out=buf, progress=False)
    assert s["preferred_chair_agreement"] < 1.0
    worst_line = [ln for ln in buf.getvalue().splitlines() if "vs" in ln and "methylcyclohexane" in ln]
    assert worst_line, buf.getvalue()


def test_audit_refuses_a_directory_that_is_not_a_run(tmp_path):
    with pytest.raises(AuditError, match="manifest.json"):
        audit(tmp_path, out=io.StringIO(), progress=False)


def test_audit_at_gfn2_xtb_agrees_on_methylcyclohexane(tmp_path):
    # GFN2-xTB (tblite) puts the methyl equatorial (about 6 kJ/mol; datasets/computed/),
    # experiment 7.3 kJ/mol (Wiberg et al. 1999)
    pytest.importorskip("tblite.interface", reason="tblite is not installed (pip install tblite)")
    src = tmp_path / "one.smi"
    src.write_text("CC1CCCCC1 methylcyclohexane\n")
    out = tmp_path / "run"
    libconf.annotate([str(src)], str(out), jobs=1)
    s = audit(out, sample=1, n_conformers=4, level="xtb", out=io.StringIO(), progress=False)
    assert s["computed"] == 1
    assert s["preferred_chair_agreement"] == 1.0
    assert s["level"].startswith("GFN2-xTB")
