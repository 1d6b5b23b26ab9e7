"""Generator stage 2 (chairs of harvested model compounds): picking and resuming."""

import csv

import pandas as pd

from libconf.compute.generate import pick, run


def _harvest(tmp_path):
    df = pd.DataFrame(
        {
            "group": ["*C", "*C", "*O", "*C"],
            "ring_class": ["piperidine", "cyclohexane", "oxane", "piperidine"],
            "position": [4, 1, 4, 1],
            "on_ring_nitrogen": [False, False, False, True],
            "count": [10, 30, 5, 50],
            "a_value_source": ["table", "table", "table", "table"],
            "model_smiles": ["CC1CCNCC1", "CC1CCCCC1", "OC1CCOCC1", "CN1CCCCC1"],
        }
    )
    path = tmp_path / "harvest.parquet"
    df.to_parquet(path)
    return path


def test_pick_skips_ring_nitrogen_groups_and_orders_by_count(tmp_path):
    picked = pick(pd.read_parquet(_harvest(tmp_path)), top=10)
    assert picked["model_smiles"].tolist() == ["CC1CCCCC1", "CC1CCNCC1", "OC1CCOCC1"]


def test_run_appends_and_resumes_without_recomputing(tmp_path):
    h = _harvest(tmp_path)
    out = tmp_path / "chairs.csv"
    run(out, top=2, level="mmff", jobs=1, harvest_path=h)
    run(out, top=3, level="mmff", jobs=1, harvest_path=h)
    with open(out, newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["model_smiles"] for r in rows] == ["CC1CCCCC1", "CC1CCNCC1", "OC1CCOCC1"]
    assert all(r["status"] == "ok" for r in rows)
    # methyl equatorial by MMFF94 in cyclohexane (common practice: A(CH3) ~ 7 kJ/mol)
    assert float(rows[0]["mmff94_dE_kjmol"]) > 3.0
