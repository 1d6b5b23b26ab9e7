"""Calibration of the project's computed chair energies against tabulated experiment."""

from libconf.compute.calibrate import HERE, fit, pairs


def test_gfn2_values_correlate_with_experimental_a_values():
    # experimental A-values: Reich compilation and the primary papers named in
    # datasets/computed/level_of_theory_groups.csv; computed: GFN2-xTB (tblite)
    rows = pairs(HERE / "level_of_theory.csv", None)
    assert len(rows) >= 40
    f = fit(rows)
    assert 0.5 < f["slope"] < 1.5
    assert f["r2"] > 0.5
    assert f["mae_calibrated_kjmol"] <= f["mae_raw_kjmol"] + 1e-9


def test_mmff94_fits_worse_than_gfn2():
    # MMFF94 mis-signs several polar groups (datasets/computed/README.md)
    gfn2 = fit(pairs(HERE / "level_of_theory.csv", None, "gfn2_dE_kjmol"))
    mmff = fit(pairs(HERE / "level_of_theory.csv", None, "mmff94_dE_kjmol"))
    assert gfn2["mae_raw_kjmol"] < mmff["mae_raw_kjmol"]
