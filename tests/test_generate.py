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


def test_a_newer_generator_file_supersedes_the_older_one_compound_by_compound(tmp_path):
    from libconf.compute.csvrows import superseding_rows

    cols = ["model_smiles", "gfn2_dE_kjmol", "status", "settings"]

    def write(path, rows):
        with open(path, "w", newline="") as fh:
            w = csv.writer(fh)
            w.writerow(cols)
            w.writerows(rows)

    old, new = tmp_path / "v1.csv", tmp_path / "v2.csv"
    write(
        old,
        [
            ["A", "1.0", "ok", "generator=1"],
            ["B", "2.0", "ok", "generator=1"],
            ["C", "3.0", "ok", "generator=1"],
        ],
    )
    write(new, [["B", "", "failed: no chair", "generator=2"], ["A", "5.0", "ok", "generator=2"]])
    rows = superseding_rows([new, tmp_path / "missing.csv", old])
    got = {r["model_smiles"]: (r["gfn2_dE_kjmol"], r["settings"]) for r in rows}
    # the newer file decides, whatever its status there; the older one fills in C only
    assert got == {"A": ("5.0", "generator=2"), "B": ("", "generator=2"), "C": ("3.0", "generator=1")}
    assert len(rows) == 3


def test_compounds_held_by_a_skip_in_file_are_not_recomputed(tmp_path):
    h = _harvest(tmp_path)
    earlier = tmp_path / "earlier.csv"
    run(earlier, top=1, level="mmff", jobs=1, harvest_path=h)  # the most frequent: CC1CCCCC1
    out = tmp_path / "later.csv"
    run(out, top=3, level="mmff", jobs=1, harvest_path=h, skip_in=[earlier])
    with open(out, newline="") as fh:
        assert [r["model_smiles"] for r in csv.DictReader(fh)] == ["CC1CCNCC1", "OC1CCOCC1"]
