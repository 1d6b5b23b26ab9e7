"""Barrier by coordinate driving (libconf.compute.barrier_scan): restraint, one coarse scan, resuming."""

import csv
import math

import numpy as np
import pytest

from libconf.compute import barrier_scan as bs
from libconf.compute.chairs import dihedral


def test_dihedral_gradient_matches_finite_differences():
    # analytic torsion gradient (Blondel & Karplus, J. Comput. Chem. 1996) vs central differences
    rng = np.random.default_rng(7)
    x = rng.normal(size=(6, 3)) * 1.5
    quad = (1, 2, 3, 5)
    phi, g = bs.dihedral_and_gradient(x, quad)
    assert math.degrees(phi) == pytest.approx(dihedral(*x[list(quad)]), abs=1e-9)
    h = 1e-6
    for n, a in enumerate(quad):
        for c in range(3):
            xp, xm = x.copy(), x.copy()
            xp[a, c] += h
            xm[a, c] -= h
            fd = (bs.dihedral_and_gradient(xp, quad)[0] - bs.dihedral_and_gradient(xm, quad)[0]) / (2 * h)
            assert g[n, c] == pytest.approx(fd, abs=1e-6)


def test_restraint_wraps_across_180_degrees():
    # a torsion of +179 deg restrained to -179 deg is 2 deg away, not 358 (common practice)
    x = np.array([[1.0, 0, 0], [0, 0, 0], [0, 0, 1.5], [0, 0, 0]])
    t = math.radians(179.0)
    x[3] = [math.cos(t), math.sin(t), 1.5]
    e, _ = bs.restraint(x, (0, 1, 2, 3), math.radians(-179.0), 1.0)
    assert e == pytest.approx(0.5 * math.radians(2.0) ** 2, rel=1e-6)


def test_coarse_cyclohexane_scan_at_gfn2():
    pytest.importorskip(
        "tblite.interface", reason="tblite (optional [train] extra) not importable", exc_type=ImportError
    )
    from rdkit import Chem

    from libconf.compute.xtb import BOHR_ANGSTROM, _Surface

    mol, ring, cls = bs._ring_and_class("C1CCCCC1")
    assert cls == "cyclohexane"
    mh, numbers, charge, (pos, e0, _) = bs.lowest_chair(mol, ring)
    surface = _Surface(numbers, pos / BOHR_ANGSTROM, charge, None)
    path = bs.drive(surface, mh, ring, pos, e0, 0, grid=(30.0, 10.0, 0.0, -10.0, -30.0, -50.0), refine=0)
    # every restrained point reached its target within 2 deg
    assert path.max_deviation < 2.0
    assert bs._path_checks(path, Chem.AddHs(mol), pos) == []
    # GFN2-xTB electronic barrier on a coarse grid: near the published dG 43 kJ/mol (Anet & Bourn,
    # J. Am. Chem. Soc. 1967, 89, 760) but not equal to it; 30-60 kJ/mol is a sanity window, not a fit
    assert 30.0 < path.barrier_kj < 60.0
    # past the top the ring is in the twist-boat region, below the top and above the chair
    end = (path.points[-1].energy_eh - e0) * bs.HARTREE_KJ
    assert 10.0 < end < path.barrier_kj


def test_a_file_made_with_other_settings_is_refused(tmp_path):
    out = tmp_path / "scan.csv"
    with open(out, "w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=bs.COLUMNS)
        w.writeheader()
        w.writerow({**{k: "" for k in bs.COLUMNS}, "smiles": "C1CCCCC1", "status": "ok", "settings": "other"})
    with pytest.raises(SystemExit, match="other settings"):
        bs.read_done(out, bs.settings_string())
    with pytest.raises(SystemExit, match="other settings"):
        bs.run(out, [("C1CCCCC1", "cyclohexane")])


def test_finished_smiles_are_skipped(tmp_path):
    out = tmp_path / "scan.csv"
    with open(out, "w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=bs.COLUMNS)
        w.writeheader()
        w.writerow({**{k: "" for k in bs.COLUMNS}, "smiles": "C1CCCCC1", "settings": bs.settings_string()})
    assert bs.read_done(out, bs.settings_string()) == {"C1CCCCC1"}
    bs.run(out, [("C1CCCCC1", "cyclohexane")])  # nothing left to compute: returns at once
    with open(out, newline="") as fh:
        assert len(list(csv.DictReader(fh))) == 1


def test_engine_vs_scan_fits_a_line(tmp_path):
    # invented scan values, for the demo of the fit only
    out = tmp_path / "scan.csv"
    rows = [("C1CCCCC1", "40.0"), ("C1CCOCC1", "38.0"), ("C1CCNCC1", "41.0"), ("O=C1CCCCC1", "18.0")]
    with open(out, "w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=bs.COLUMNS)
        w.writeheader()
        for smi, v in rows:
            w.writerow(
                {**{k: "" for k in bs.COLUMNS}, "smiles": smi, "gfn2_barrier_kjmol": v, "status": "ok"}
            )
    c = bs.engine_vs_scan(out)
    assert c.n == 4
    assert {r["ring_class"] for r in c.rows} == {"cyclohexane", "oxane", "piperidine", "cyclohexanone"}
    pred = [c.a + c.b * r["scan_kjmol"] for r in c.rows]
    assert sum(r["engine_kjmol"] - p for r, p in zip(c.rows, pred)) == pytest.approx(0.0, abs=1e-6)
    assert c.b > 0  # the engine also puts cyclohexanone far below the others
