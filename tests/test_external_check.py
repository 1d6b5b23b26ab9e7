"""External check of the engine against GFN2-xTB on a library training did not use
(datasets/computed/external_check.csv and, sampled more densely, external_check_v2.csv,
made by libconf.compute.external_check).

Fast: only the engine is re-run (libconf.analyze on the stored SMILES); the stored 3D
energies are read, not recomputed.
"""

import csv
from pathlib import Path

import pytest

from libconf.compute.external_check import CLEAR_KJ, COLUMNS, evaluate

CSV = Path(__file__).resolve().parents[1] / "datasets" / "computed" / "external_check.csv"
CSV_V2 = CSV.with_name("external_check_v2.csv")
CSV_V3 = CSV.with_name("external_check_v3.csv")

# Issue #4 thresholds (project requirement, not a literature value).
MIN_AGREEMENT = 0.90
MIN_SPEARMAN = 0.80
# Measured on the committed CSVs with the engine and model of 2026-12-02 (datasets/computed/README.md).
MEASURED = "agreement 0.712 (73 rings with |dE| > 2 kJ/mol), Spearman 0.32, medium nonpolar"
MEASURED_V2 = "agreement 0.710 (62 rings with |dE| > 2 kJ/mol), Spearman 0.27, medium nonpolar"
# version 3: GFN2-xTB with ALPB water, cross-seeded chairs; engine medium water
MEASURED_V3 = "agreement 0.774 (62 rings with |dE| > 2 kJ/mol), Spearman 0.31, medium water"


def _rows():
    with open(CSV, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def _write(path, rows):
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=COLUMNS)
        w.writeheader()
        w.writerows(rows)
    return path


@pytest.fixture(scope="module")
def measured():
    return evaluate(CSV)


@pytest.fixture(scope="module")
def measured_v2():
    return evaluate(CSV_V2)


@pytest.fixture(scope="module")
def measured_v3():
    return evaluate(CSV_V3, medium="water")


def test_water_reference_names_its_level_and_evaluates_to_numbers(measured_v3):
    assert measured_v3["level"] == "GFN2-xTB ALPB(water) cross-seeded"
    assert measured_v3["compared"] >= 80
    assert 0.0 <= measured_v3["agreement"] <= 1.0
    assert -1.0 <= measured_v3["spearman"] <= 1.0


def test_settings_string_records_solvent_and_cross_seeding():
    from libconf.compute.external_check import _level_of, settings_string

    assert "level=GFN2-xTB gas" in settings_string()
    assert "cross_seed" not in settings_string()
    s = settings_string(solvent="water", cross_seed=True)
    assert "level=GFN2-xTB ALPB(water)" in s and s.endswith(";cross_seed=1")
    assert _level_of(s) == "GFN2-xTB ALPB(water) cross-seeded"


def test_committed_csv_evaluates_to_numbers(measured):
    assert measured["compared"] >= 20
    assert measured["clear_rings"] >= 10
    assert 0.0 <= measured["agreement"] <= 1.0
    assert -1.0 <= measured["spearman"] <= 1.0
    assert measured["mae_kjmol"] >= 0.0
    assert len(measured["worst"]) == 10


def test_methylcyclohexane_row_is_read_the_right_way_round(tmp_path):
    # Methyl prefers equatorial, A = 1.74 kcal/mol (Eliel, Wilen & Mander 1994, ch. 11;
    # common practice). 3D chair 0 has the methyl (atom 0) axial and lies 7 kJ/mol above
    # chair 1 (an invented demo value near GFN2-xTB's 6.3, datasets/computed/README.md).
    row = dict.fromkeys(COLUMNS, "")
    row.update(
        id="demo:0",
        smiles="CC1CCCCC1",
        ring_index=0,
        ring_atoms="1;2;3;4;5;6",
        fixed_face_atoms="0",
        axial_chair0="0",
        axial_chair1="",
        gfn2_dE_1m0_kjmol="-7.0",
        status="ok",
    )
    s = evaluate(_write(tmp_path / "one.csv", [row]))
    assert s["compared"] == 1 and s["agreement"] == 1.0
    assert s["rows_detail"][0].dE == pytest.approx(7.0)
    row["gfn2_dE_1m0_kjmol"] = "7.0"  # the computed reference now says methyl axial
    s = evaluate(_write(tmp_path / "two.csv", [row]))
    assert s["agreement"] == 0.0 and s["rows_detail"][0].dE == pytest.approx(-7.0)


def test_an_injected_wrong_sign_lowers_the_agreement(measured, tmp_path):
    rows = _rows()
    # flip the sign of the computed chair difference of every clear ring (as if the
    # reference had the chairs the wrong way round)
    for r in rows:
        if r["gfn2_dE_1m0_kjmol"] and abs(float(r["gfn2_dE_1m0_kjmol"])) > CLEAR_KJ:
            r["gfn2_dE_1m0_kjmol"] = str(-float(r["gfn2_dE_1m0_kjmol"]))
    bad = evaluate(_write(tmp_path / "flipped.csv", rows))
    assert bad["agreement"] < measured["agreement"]
    assert bad["spearman"] < measured["spearman"]


def test_swapped_chair_signatures_also_lower_the_agreement(measured, tmp_path):
    rows = _rows()
    for r in rows:
        r["axial_chair0"], r["axial_chair1"] = r["axial_chair1"], r["axial_chair0"]
    bad = evaluate(_write(tmp_path / "swapped.csv", rows))
    assert bad["agreement"] < measured["agreement"]


def test_denser_sampled_csv_evaluates_to_numbers(measured_v2):
    assert measured_v2["compared"] >= 20
    assert 0.0 <= measured_v2["agreement"] <= 1.0


@pytest.mark.xfail(
    strict=False, reason=f"issue #4 thresholds not met by the current engine: measured {MEASURED}"
)
def test_issue_4_thresholds(measured):
    assert measured["agreement"] >= MIN_AGREEMENT
    assert measured["spearman"] >= MIN_SPEARMAN


@pytest.mark.xfail(strict=False, reason=f"issue #4 thresholds not met: measured {MEASURED_V2}")
def test_issue_4_thresholds_denser_reference(measured_v2):
    assert measured_v2["agreement"] >= MIN_AGREEMENT
    assert measured_v2["spearman"] >= MIN_SPEARMAN


@pytest.mark.xfail(strict=False, reason=f"issue #4 thresholds not met: measured {MEASURED_V3}")
def test_issue_4_thresholds_water_reference(measured_v3):
    assert measured_v3["agreement"] >= MIN_AGREEMENT
    assert measured_v3["spearman"] >= MIN_SPEARMAN


# --- the reference against itself ---------------------------------------------------


def _ref_row(row, ring, ax0, ax1, d10):
    r = dict.fromkeys(COLUMNS, "")
    r.update(
        id=f"t:{row}", library_row=row, ring_index=ring, status="ok", gfn2_dE_1m0_kjmol=f"{d10:.3f}",
        axial_chair0=ax0, axial_chair1=ax1,
    )
    return r


def test_comparing_references_matches_chairs_by_axial_set_not_by_label(tmp_path):
    from libconf.compute.external_check import compare_references

    # run B numbers the chairs the other way round for ring 1 and sees another axial set for ring 4
    a = _write(tmp_path / "a.csv", [
        _ref_row(1, 0, "7", "", 6.0), _ref_row(2, 0, "", "3", -9.0), _ref_row(3, 0, "5", "", 3.0),
        _ref_row(4, 0, "8", "", 4.0), _ref_row(5, 0, "2", "", 1.0),
    ])
    b = _write(tmp_path / "b.csv", [
        _ref_row(1, 0, "", "7", -5.0), _ref_row(2, 0, "", "3", -12.0), _ref_row(3, 0, "5", "", -4.0),
        _ref_row(4, 0, "9", "", 4.0), _ref_row(5, 0, "2", "", 0.5),
    ])
    c = compare_references(a, b)
    assert (c["common"], c["compared"], c["unmatched"]) == (5, 4, 1)
    # A's gaps |6|, |9|, |3|, |1| against B signed as E(A's minor) - E(A's major): 5, 12, -4, 0.5
    sa = c["a_as_predictor"]
    assert sa["clear_rings"] == 3 and sa["agreement"] == pytest.approx(2 / 3)
    assert sa["spearman"] == pytest.approx(0.8)  # ranks (3,4,2,1) against (3,4,1,2)
    assert c["mad_kjmol"] == pytest.approx((1 + 3 + 7 + 0.5) / 4)


# Measured 2026-12-02 on the committed files (datasets/computed/README.md): two reference
# runs of the same rings, scored as the check scores the engine, reach neither threshold.
REFERENCE_CEILING = {
    ("external_check.csv", "external_check_v2.csv"): (0.887, 62, 0.74),  # sampling 20/4/2 vs 48/8/4, gas
    ("external_check_v2.csv", "external_check_v3.csv"): (0.887, 53, 0.72),  # gas vs ALPB water, cross-seeded
}


@pytest.mark.parametrize("names", sorted(REFERENCE_CEILING))
def test_two_reference_runs_agree_no_better_than_the_issue_asks_of_the_engine(names):
    from libconf.compute.external_check import compare_references

    agreement, clear, rho = REFERENCE_CEILING[names]
    c = compare_references(CSV.with_name(names[0]), CSV.with_name(names[1]))
    assert c["unmatched"] == 0
    s = c["a_as_predictor"]
    assert s["clear_rings"] == clear
    assert s["agreement"] == pytest.approx(agreement, abs=5e-4)
    assert s["spearman"] == pytest.approx(rho, abs=5e-3)
    assert s["agreement"] < MIN_AGREEMENT and s["spearman"] < MIN_SPEARMAN


def test_breakdowns_by_value_source_and_ring_class_partition_the_compared_rings(measured_v3):
    for part in ("by_source", "by_class"):
        rows = measured_v3[part]
        assert sum(r[1] for r in rows) == measured_v3["compared"], part
        assert sum(r[3] for r in rows) == round(measured_v3["agreement"] * measured_v3["clear_rings"]), part
    # measured 2026-12-02 (datasets/computed/README.md): cyclohexanes agree best, rings whose
    # values all come from the experimental table worst
    by = {r[0]: r for r in measured_v3["by_source"] + measured_v3["by_class"]}
    assert by["cyclohexane"][3] == by["cyclohexane"][2] == 14
    assert by["table values only"][4] < 0 < by["model values only"][4]
