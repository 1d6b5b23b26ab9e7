"""Approximate ring-inversion barriers by coordinate driving at GFN2-xTB (tblite).

For one saturated six-membered ring of a model compound:

1. Start: both chairs from `chairs.both_chairs` (ETKDG + MMFF94, forced flip, rotor
   scan); the ``N_BEST`` lowest MMFF94 conformers of each chair are re-optimised at
   GFN2-xTB with the optimiser of `xtb.py`; the lowest one whose ring is still a chair
   is the start (relaxed, unconstrained).
2. Drive one endocyclic torsion from its chair value through 0 degrees to the opposite
   sign (``GRID``: 10-degree steps away from the top, 5-degree steps for
   |torsion| <= 20 degrees, then 2.5-degree points either side of the highest point).
   At every point the GFN2-xTB energy plus a harmonic restraint
   ``0.5 * K_RESTRAINT * (phi - target)**2`` on that one torsion is minimised over all
   Cartesian coordinates (scipy L-BFGS-B, analytic gradients), starting from the
   previous point's geometry. The energy recorded is the GFN2-xTB energy without the
   restraint term.
3. Barrier = highest recorded energy along the path - energy of the start, kJ/mol.
   The distinct ring torsions (by the molecule's symmetry, up to ``MAX_TORSIONS``, the
   ones farthest from substituted ring atoms first) are driven in turn and the lowest
   barrier is kept. The last point is released (restraint off, free re-optimisation):
   when it falls into a non-chair minimum, that is the twist-boat energy.
4. Hysteresis check: the chosen torsion is driven back from the last point over the
   same targets. When that backward sweep returns to the starting chair,
   ``gfn2_barrier_envelope_kjmol`` is the highest point of the lower envelope of the
   two sweeps (the lower energy at each target): where the relaxed path jumps, the
   forward sweep runs on along a metastable branch and the envelope is the closer
   estimate of the saddle. When it does not (``backward_end``: the ring turned the
   torsion back by pseudorotation inside the twist-boat family and stayed off-chair),
   the envelope is left empty: the lower branch then belongs to another valley.
   ``gfn2_barrier_kjmol`` is always the forward maximum.

Checks per path: the driven torsion reached its target within ``MAX_DEVIATION_DEG``
at every point, no four-coordinate atom changed its handedness (no stereocentre pushed
through itself) and no bond stretched by more than 20 %. The other ring torsions at
the top are reported, with the RMS distance of the best four consecutive ring atoms
from their own plane (a half-chair has four nearly coplanar atoms).

This is an approximation: ring inversion runs over a surface of at least two ring
torsions, and driving one of them follows a relaxed path that need not pass through
the saddle; the value is an electronic energy (no zero-point, thermal or entropy
terms), not the free energy that dynamic NMR measures.

    python -m libconf.compute.barrier_scan --out datasets/computed/barrier_scan.csv
    python -m libconf.compute.barrier_scan --out datasets/computed/barrier_scan.csv --summary
"""

from __future__ import annotations

import argparse
import csv
import math
import os
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .csvrows import finished_keys

GENERATOR = "libconf.compute.barrier_scan 2"
LEVEL = "GFN2-xTB"
SEED = 20261201
N_CONFORMERS = 24
KEEP = 2
N_BEST = 2  # GFN2-xTB re-optimised starts per chair
K_RESTRAINT = 2.0  # Eh/rad^2 on the driven torsion
GTOL = 2e-4  # Eh/bohr, largest gradient component (restraint included)
MAX_STEPS = 800
MAX_TORSIONS = 3
MAX_DEVIATION_DEG = 2.0
# |target| in degrees, from the chair side through 0 to the other side (the sign is that of
# the chair value; 0 and below cross over)
GRID = (50.0, 40.0, 30.0, 20.0, 15.0, 10.0, 5.0, 0.0, -5.0, -10.0, -15.0, -20.0, -30.0, -40.0, -50.0, -60.0)
REFINE = 2.5  # extra points either side of the highest one
HARTREE_KJ = 2625.4996
HARVEST = Path(__file__).resolve().parents[2] / "datasets" / "computed" / "harvest.parquet"
N_HARVEST = 10

COLUMNS = [
    "smiles",
    "name",
    "ring_class",
    "gfn2_barrier_kjmol",
    "gfn2_barrier_envelope_kjmol",
    "torsion_driven",
    "torsions_tried",
    "n_points",
    "start_torsion_deg",
    "top_target_deg",
    "top_achieved_deg",
    "max_deviation_deg",
    "top_torsions",
    "top_rms4_angstrom",
    "end_target_deg",
    "end_kjmol",
    "released_shape",
    "released_kjmol",
    "backward_end",
    "status",
    "seconds",
    "settings",
]

# Model compounds named in issue #4 (bare rings, monosubstituted, gem-dimethyl, cis/trans).
COMPOUNDS: list[tuple[str, str]] = [
    ("C1CCCCC1", "cyclohexane"),
    ("C1CCNCC1", "piperidine"),
    ("CN1CCCCC1", "N-methylpiperidine"),
    ("C1CCOCC1", "oxane"),
    ("C1CCSCC1", "thiane"),
    ("C1COCOC1", "1,3-dioxane"),
    ("C1COCCO1", "1,4-dioxane"),
    ("C1COCCN1", "morpholine"),
    ("C1CNCCN1", "piperazine"),
    ("O=C1CCCCC1", "cyclohexanone"),
    ("C=C1CCCCC1", "methylenecyclohexane"),
    ("CC1CCCCC1", "methylcyclohexane"),
    ("CC(C)(C)C1CCCCC1", "tert-butylcyclohexane"),
    ("c1ccc(C2CCCCC2)cc1", "phenylcyclohexane"),
    ("FC1CCCCC1", "fluorocyclohexane"),
    ("ClC1CCCCC1", "chlorocyclohexane"),
    ("OC1CCCCC1", "cyclohexanol"),
    ("COC1CCCCC1", "methoxycyclohexane"),
    ("COC(=O)C1CCCCC1", "methyl cyclohexanecarboxylate"),
    ("N#CC1CCCCC1", "cyclohexanecarbonitrile"),
    ("CC1(C)CCCCC1", "1,1-dimethylcyclohexane"),
    ("C[C@H]1CC[C@@H](C)CC1", "cis-1,4-dimethylcyclohexane"),
    ("C[C@H]1CC[C@H](C)CC1", "trans-1,4-dimethylcyclohexane"),
    ("C[C@H]1CCCC[C@@H]1C", "cis-1,2-dimethylcyclohexane"),
    ("C[C@@H]1CCCC[C@@H]1C", "trans-1,2-dimethylcyclohexane"),
    ("C[C@H]1CCC[C@@H](C)C1", "cis-1,3-dimethylcyclohexane"),
    ("C[C@@H]1CCC[C@@H](C)C1", "trans-1,3-dimethylcyclohexane"),
    ("CC(C)(C)[C@H]1CC[C@@H](C(C)(C)C)CC1", "cis-1,4-di-tert-butylcyclohexane"),
]


def settings_string() -> str:
    grid = "/".join(f"{g:g}" for g in GRID)
    return (
        f"generator={GENERATOR.split()[-1]};level={LEVEL} (tblite {_tblite_version()});seed={SEED};"
        f"n_conformers={N_CONFORMERS};keep={KEEP};n_best={N_BEST};k_restraint={K_RESTRAINT:g}Eh/rad2;"
        f"gtol={GTOL:g};grid={grid};refine={REFINE:g};max_torsions={MAX_TORSIONS}"
    )


def _tblite_version() -> str:
    try:
        from .xtb import tblite_version

        return tblite_version()
    except Exception:  # noqa: BLE001 - the version is only a label here
        return "unknown"


# --------------------------------------------------------------------------- restraint


def dihedral_and_gradient(x: np.ndarray, quad: tuple[int, int, int, int]) -> tuple[float, np.ndarray]:
    """Torsion angle (radians, the sign convention of `chairs.dihedral`) and its gradient.

    ``x`` is (n, 3) in any length unit; the gradient is (4, 3), d(phi)/d(x) for the four
    atoms in ``quad`` order, in radians per that unit (analytic, Blondel & Karplus,
    J. Comput. Chem. 1996, 17, 1132).
    """
    i, j, k, m = quad
    f = x[i] - x[j]
    g = x[j] - x[k]
    h = x[m] - x[k]
    a = np.cross(f, g)
    b = np.cross(h, g)
    gn = float(np.linalg.norm(g))
    a2 = float(np.dot(a, a))
    b2 = float(np.dot(b, b))
    phi = math.atan2(float(np.dot(np.cross(b, a), g)) / gn, float(np.dot(a, b)))
    fg = float(np.dot(f, g))
    hg = float(np.dot(h, g))
    d_i = -gn / a2 * a
    d_m = gn / b2 * b
    d_j = gn / a2 * a + fg / (a2 * gn) * a - hg / (b2 * gn) * b
    d_k = -gn / b2 * b - fg / (a2 * gn) * a + hg / (b2 * gn) * b
    return phi, np.array([d_i, d_j, d_k, d_m])


def _wrap(d: float) -> float:
    return (d + math.pi) % (2 * math.pi) - math.pi


def restraint(x: np.ndarray, quad, target_rad: float, k: float) -> tuple[float, np.ndarray]:
    """Harmonic torsion restraint 0.5 k (phi - target)^2: energy and (n, 3) gradient."""
    phi, dphi = dihedral_and_gradient(x, quad)
    d = _wrap(phi - target_rad)
    grad = np.zeros_like(x)
    grad[list(quad)] += k * d * dphi
    return 0.5 * k * d * d, grad


@dataclass(frozen=True)
class Point:
    target_deg: float
    achieved_deg: float
    energy_eh: float  # GFN2-xTB energy without the restraint
    positions: np.ndarray  # angstrom
    torsions: tuple[float, ...]
    converged: bool


def restrained_optimise(
    surface,
    positions_ang: np.ndarray,
    quad,
    target_deg: float,
    k: float = K_RESTRAINT,
    gtol: float = GTOL,
    max_steps: int = MAX_STEPS,
    ring: tuple[int, ...] | None = None,
) -> Point:
    """Minimise ``surface`` (x in bohr -> (E, grad)) plus the torsion restraint from ``positions_ang``.

    ``k=0`` is a free optimisation. Returns the last geometry either way.
    """
    from scipy.optimize import minimize

    from .chairs import dihedral, ring_torsions
    from .xtb import BOHR_ANGSTROM

    target = math.radians(target_deg)
    last = {}

    def fun(xflat):
        e, g = surface(xflat)
        last["e"] = e
        if k:
            er, gr = restraint(xflat.reshape(-1, 3), quad, target, k)
            return e + er, g + gr.ravel()
        return e, g

    x = np.asarray(positions_ang, dtype=float).ravel() / BOHR_ANGSTROM
    steps, gmax = 0, float("inf")
    for _ in range(3):
        out = minimize(
            fun, x, jac=True, method="L-BFGS-B", options={"gtol": gtol, "ftol": 1e-15, "maxiter": max_steps}
        )
        x, steps = out.x, steps + int(out.nit)
        _, g = fun(x)
        gmax = float(np.max(np.abs(g)))
        if gmax <= gtol or steps >= max_steps:
            break
    pos = x.reshape(-1, 3) * BOHR_ANGSTROM
    ach = dihedral(*(pos[a] for a in quad))
    tors = tuple(float(t) for t in ring_torsions(pos, ring)) if ring else ()
    return Point(target_deg, ach, float(last["e"]), pos, tors, gmax <= gtol)


# --------------------------------------------------------------------------- checks


def _handedness(pos: np.ndarray, centres: list[tuple[int, int, int, int]]) -> np.ndarray:
    out = []
    for c, a, b, d in centres:
        out.append(np.sign(np.dot(np.cross(pos[a] - pos[c], pos[b] - pos[c]), pos[d] - pos[c])))
    return np.array(out)


def _centres(mol) -> list[tuple[int, int, int, int]]:
    out = []
    for atom in mol.GetAtoms():
        nb = [n.GetIdx() for n in atom.GetNeighbors()]
        if len(nb) == 4:
            out.append((atom.GetIdx(), nb[0], nb[1], nb[2]))
    return out


def _bonds(mol) -> np.ndarray:
    return np.array([(b.GetBeginAtomIdx(), b.GetEndAtomIdx()) for b in mol.GetBonds()])


def _bond_lengths(pos: np.ndarray, bonds: np.ndarray) -> np.ndarray:
    return np.linalg.norm(pos[bonds[:, 0]] - pos[bonds[:, 1]], axis=1)


def rms4(pos: np.ndarray, ring: tuple[int, ...]) -> float:
    """Smallest RMS distance (angstrom) of four consecutive ring atoms from their best plane."""
    best = float("inf")
    for s in range(6):
        p = pos[[ring[(s + t) % 6] for t in range(4)]]
        q = p - p.mean(axis=0)
        sv = np.linalg.svd(q, compute_uv=False)
        best = min(best, float(sv[-1] / 2.0))  # sqrt(sum d^2 / 4)
    return best


# --------------------------------------------------------------------------- one compound


@dataclass
class Path_:
    bond: int  # ring position i: the torsion about ring[i]-ring[i+1]
    quad: tuple[int, int, int, int]
    points: list[Point]
    start_eh: float
    start_deg: float
    notes: list[str] = field(default_factory=list)

    @property
    def top(self) -> Point:
        return max(self.points, key=lambda p: p.energy_eh)

    @property
    def barrier_kj(self) -> float:
        return (self.top.energy_eh - self.start_eh) * HARTREE_KJ

    @property
    def max_deviation(self) -> float:
        return max(abs(p.achieved_deg - p.target_deg) for p in self.points)


def _ring_and_class(smiles: str):
    from rdkit import Chem

    from ..chem.molview import MolView
    from ..chem.rings import describe_ring, saturated_six_rings

    mol = Chem.MolFromSmiles(smiles)
    if mol is None:
        raise ValueError("unparsable SMILES")
    view = MolView(mol)
    rings = saturated_six_rings(mol, view)
    if not rings:
        raise ValueError("no saturated six-membered ring")
    ring = describe_ring(view, rings[0], mol.GetRingInfo().AtomRings())
    return mol, tuple(ring.atoms), ring.ring_class


def _rd(p: int, q: int) -> int:
    d = abs(p - q) % 6
    return min(d, 6 - d)


def torsion_classes(mh, ring: tuple[int, ...]) -> list[int]:
    """One ring position per symmetry-distinct endocyclic torsion, farthest from substituents first.

    ``mh``: the input molecule with hydrogens, carrying only the input's stereo tags (the
    face tags `both_chairs` adds to a monosubstituted CH would break its mirror symmetry).
    """
    from rdkit import Chem

    ranks = list(Chem.CanonicalRankAtoms(mh, breakTies=False, includeChirality=True))
    ring_set = set(ring)
    subst = [
        k
        for k, a in enumerate(ring)
        if any(
            n.GetIdx() not in ring_set and n.GetAtomicNum() != 1 for n in mh.GetAtomWithIdx(a).GetNeighbors()
        )
    ]
    seen, out = set(), []
    for i in range(6):
        quad = [ranks[ring[(i + d) % 6]] for d in (-1, 0, 1, 2)]
        key = min(tuple(quad), tuple(reversed(quad)))
        if key in seen:
            continue
        seen.add(key)
        # ring distance from the bond's two atoms to the nearest substituted position
        dist = min((min(_rd(i, q), _rd(i + 1, q)) for q in subst), default=0)
        out.append((-dist, i))
    return [i for _, i in sorted(out)]


def lowest_chair(mol, ring, seed: int = SEED):
    """(molecule with H, GFN2-xTB-optimised positions, energy in Eh, chair label) of the lowest chair."""
    from .chairs import TWIST, both_chairs, chair_label
    from .xtb import optimise

    pair = both_chairs(mol, ring, n_conformers=N_CONFORMERS, seed=seed, keep=KEEP)
    numbers = np.array([a.GetAtomicNum() for a in pair.mol.GetAtoms()])
    charge = sum(a.GetFormalCharge() for a in pair.mol.GetAtoms())
    best = None
    for c in (0, 1):
        for conf in pair.chairs[c][:N_BEST]:
            res = optimise(numbers, conf.positions, charge=charge, gtol=1e-4)
            label = chair_label(res.positions, ring)
            if not res.converged or label == TWIST:
                continue
            if best is None or res.energy_eh < best[1]:
                best = (res.positions, res.energy_eh, label)
    if best is None:
        raise ValueError("no GFN2-xTB chair optimum")
    return pair.mol, numbers, charge, best


def drive(surface, mh, ring, start_pos, start_eh, bond: int, grid=GRID, refine=REFINE) -> Path_:
    """Drive the torsion about ring[bond]-ring[bond+1] from its chair value through 0."""
    from .chairs import dihedral

    quad = tuple(ring[(bond + d) % 6] for d in (-1, 0, 1, 2))
    phi0 = dihedral(*(start_pos[a] for a in quad))
    sign = 1.0 if phi0 > 0 else -1.0
    targets = [sign * g for g in grid if g < abs(phi0)]
    pts: list[Point] = []
    pos = start_pos
    for t in targets:
        p = restrained_optimise(surface, pos, quad, t, ring=ring)
        pts.append(p)
        pos = p.positions
    path = Path_(bond, quad, pts, start_eh, phi0)
    if refine:
        m = max(range(len(pts)), key=lambda n: pts[n].energy_eh)
        extra = []
        if 0 < m:  # between the previous point and the top, from the previous geometry
            extra.append(
                restrained_optimise(
                    surface, pts[m - 1].positions, quad, pts[m].target_deg + sign * refine, ring=ring
                )
            )
        if m < len(pts) - 1:  # just past the top, from the top geometry
            extra.append(
                restrained_optimise(
                    surface, pts[m].positions, quad, pts[m].target_deg - sign * refine, ring=ring
                )
            )
        path.points = sorted(pts + extra, key=lambda p: -sign * p.target_deg)
    return path


def drive_back(surface, path: Path_, ring) -> list[Point]:
    """From the last point of ``path`` back over its grid targets towards the chair (hysteresis check)."""
    pos = path.points[-1].positions
    out = []
    fwd = [p.target_deg for p in path.points]
    for t in reversed(fwd[:-1]):
        p = restrained_optimise(surface, pos, path.quad, t, ring=ring)
        out.append(p)
        pos = p.positions
    return out


def envelope_barrier_kj(path: Path_, back: list[Point]) -> float:
    """Highest point of the lower envelope of the forward and backward sweeps, kJ/mol.

    Where relaxed driving jumps, the forward sweep runs on past the crossing on a
    metastable branch; the lower of the two sweeps at each target is closer to the saddle.
    """
    eb = {p.target_deg: p.energy_eh for p in back}
    low = [min(p.energy_eh, eb.get(p.target_deg, p.energy_eh)) for p in path.points]
    return (max(low) - path.start_eh) * HARTREE_KJ


def _path_checks(path: Path_, mh, start_pos) -> list[str]:
    bad = []
    if path.max_deviation > MAX_DEVIATION_DEG:
        bad.append(f"driven torsion off target by {path.max_deviation:.1f} deg")
    centres = _centres(mh)
    h0 = _handedness(start_pos, centres)
    bonds = _bonds(mh)
    l0 = _bond_lengths(start_pos, bonds)
    for p in path.points:
        if centres and np.any(_handedness(p.positions, centres) != h0):
            bad.append(f"a four-coordinate atom inverted at {p.target_deg:g} deg")
            break
    for p in path.points:
        if np.max(_bond_lengths(p.positions, bonds) / l0) > 1.2:
            bad.append(f"a bond stretched > 20 % at {p.target_deg:g} deg")
            break
    if not all(p.converged for p in path.points):
        bad.append(f"{sum(not p.converged for p in path.points)} point(s) not converged")
    return bad


def compute_one(smiles: str, name: str = "", max_torsions: int = MAX_TORSIONS) -> dict:
    from .chairs import TWIST, chair_label
    from .xtb import _Surface

    t0 = time.perf_counter()
    out = {k: "" for k in COLUMNS}
    out.update(smiles=smiles, name=name, settings=settings_string())
    try:
        mol, ring, ring_class = _ring_and_class(smiles)
        out["ring_class"] = ring_class
        mh, numbers, charge, (start_pos, start_eh, start_label) = lowest_chair(mol, ring)
        from .xtb import BOHR_ANGSTROM

        surface = _Surface(numbers, start_pos / BOHR_ANGSTROM, charge, None)
        paths, tried = [], []
        from rdkit import Chem

        for bond in torsion_classes(Chem.AddHs(mol), ring)[:max_torsions]:
            path = drive(surface, mh, ring, start_pos, start_eh, bond)
            path.notes = _path_checks(path, mh, start_pos)
            paths.append(path)
            tried.append(
                f"{bond + 1}-{(bond + 1) % 6 + 1}:{path.barrier_kj:.2f}"
                + ("(rejected)" if path.notes else "")
            )
        out["torsions_tried"] = " ".join(tried)
        good = [p for p in paths if not p.notes]
        pick = min(good or paths, key=lambda p: p.barrier_kj)
        top = pick.top
        els = [mh.GetAtomWithIdx(a).GetSymbol() for a in ring]
        b = pick.bond
        out.update(
            gfn2_barrier_kjmol=f"{pick.barrier_kj:.2f}",
            torsion_driven=f"ring bond {b + 1}-{(b + 1) % 6 + 1} ({els[b]}{b + 1}-{els[(b + 1) % 6]}{(b + 1) % 6 + 1})"
            f" atoms {'-'.join(str(a) for a in pick.quad)}",
            n_points=len(pick.points),
            start_torsion_deg=f"{pick.start_deg:.1f}",
            top_target_deg=f"{top.target_deg:g}",
            top_achieved_deg=f"{top.achieved_deg:.2f}",
            max_deviation_deg=f"{pick.max_deviation:.2f}",
            top_torsions=" ".join(f"{t:.0f}" for t in top.torsions),
            top_rms4_angstrom=f"{rms4(top.positions, ring):.3f}",
        )
        end = pick.points[-1]
        out["end_target_deg"] = f"{end.target_deg:g}"
        out["end_kjmol"] = f"{(end.energy_eh - start_eh) * HARTREE_KJ:.2f}"
        free = restrained_optimise(surface, end.positions, pick.quad, 0.0, k=0.0, gtol=1e-4, ring=ring)
        label = chair_label(free.positions, ring)
        out["released_shape"] = "non-chair" if label == TWIST else "chair"
        out["released_kjmol"] = f"{(free.energy_eh - start_eh) * HARTREE_KJ:.2f}"
        back = drive_back(surface, pick, ring)
        back_label = chair_label(back[-1].positions, ring)
        back_notes = _path_checks(Path_(pick.bond, pick.quad, back, start_eh, 0.0), mh, start_pos)
        if back_label == start_label and not back_notes:
            out["backward_end"] = "start chair"
            out["gfn2_barrier_envelope_kjmol"] = f"{envelope_barrier_kj(pick, back):.2f}"
        else:
            # from the twist-boat side one torsion can also be turned back by pseudorotation inside
            # the twist-boat family, without returning to the chair: then there is no envelope
            shape = "non-chair" if back_label == TWIST else "other chair"
            out["backward_end"] = (
                "; ".join([shape, *back_notes]) if back_label != start_label else "; ".join(back_notes)
            )
        notes = pick.notes
        out["status"] = "ok" if not notes else "check: " + "; ".join(notes)
    except Exception as exc:  # one failed compound is recorded, the run goes on
        out["status"] = f"failed: {type(exc).__name__}: {exc}"[:300]
    out["seconds"] = f"{time.perf_counter() - t0:.1f}"
    return out


# --------------------------------------------------------------------------- run


def default_compounds(harvest_path: Path = HARVEST, n_harvest: int = N_HARVEST) -> list[tuple[str, str]]:
    """The named list plus the most frequent harvested model compounds not already in it."""
    from rdkit import Chem

    out = list(COMPOUNDS)
    have = {Chem.CanonSmiles(s) for s, _ in out}
    if harvest_path.exists() and n_harvest:
        import pandas as pd

        h = pd.read_parquet(harvest_path)
        h = h[h["model_smiles"].notna() & ~h["on_ring_nitrogen"]]
        h = h.sort_values("count", ascending=False, kind="stable").drop_duplicates("model_smiles")
        for r in h.itertuples():
            if len(out) >= len(COMPOUNDS) + n_harvest:
                break
            can = Chem.CanonSmiles(r.model_smiles)
            if can in have:
                continue
            have.add(can)
            out.append(
                (r.model_smiles, f"{r.group} on {r.ring_class} C{r.position} (harvest count {r.count})")
            )
    return out


def read_done(out_path: Path, settings: str) -> set[str]:
    """Smiles already in ``out_path``; refuses a file made with other settings."""
    return finished_keys(out_path, settings, lambda r: r["smiles"])


def run(out_path: Path, compounds: list[tuple[str, str]], limit: int | None = None) -> int:
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    settings = settings_string()
    done = read_done(out_path, settings)
    todo = [(s, n) for s, n in compounds if s not in done]
    if limit is not None:
        todo = todo[:limit]
    print(
        f"{len(compounds)} compounds, {len(done)} already done, {len(todo)} to compute",
        file=sys.stderr,
        flush=True,
    )
    new = not out_path.exists()
    t0 = time.perf_counter()
    with open(out_path, "a", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=COLUMNS)
        if new:
            w.writeheader()
        for n, (smi, name) in enumerate(todo, 1):
            row = compute_one(smi, name)
            w.writerow(row)
            fh.flush()
            el = time.perf_counter() - t0
            print(
                f"[{n}/{len(todo)}] {row['gfn2_barrier_kjmol'] or '-':>7} kJ/mol  {row['status'][:50]:<50} "
                f"{smi} ({row['seconds']} s; {el / 60:.1f} min so far)",
                file=sys.stderr,
                flush=True,
            )
    return 0


# --------------------------------------------------------------------------- engine vs scan


@dataclass
class Comparison:
    rows: list[dict]  # smiles, name, ring_class, engine_kjmol, scan_kjmol, residual_kjmol
    a: float
    b: float
    r2: float
    n: int
    by_class: dict[str, dict]  # ring_class -> n, mean residual, mean engine - scan


def engine_vs_scan(csv_path) -> Comparison:
    """Engine barrier (``analyze(smiles).rings[i].barrier_kjmol``) against the GFN2-xTB scan.

    Least squares engine = a + b * scan over the rows with status ok; residual per row
    is engine - (a + b * scan), summarised per ring class (with the plain mean of
    engine - scan beside it).
    """
    import libconf

    rows = []
    with open(csv_path, newline="", encoding="utf-8") as fh:
        for r in csv.DictReader(fh):
            if r["status"] != "ok" or not r["gfn2_barrier_kjmol"]:
                continue
            _, ring, _ = _ring_and_class(r["smiles"])
            res = libconf.analyze(r["smiles"])
            eng = next((x for x in res.rings if set(x.ring_atoms) == set(ring)), None)
            if eng is None or eng.barrier_kjmol is None:
                continue
            rows.append(
                dict(
                    smiles=r["smiles"],
                    name=r["name"],
                    ring_class=eng.ring_class,
                    engine_kjmol=float(eng.barrier_kjmol),
                    scan_kjmol=float(r["gfn2_barrier_kjmol"]),
                )
            )
    x = np.array([r["scan_kjmol"] for r in rows])
    y = np.array([r["engine_kjmol"] for r in rows])
    if len(rows) >= 2 and np.ptp(x) > 0:
        b, a = np.polyfit(x, y, 1)
        pred = a + b * x
        ss = float(np.sum((y - y.mean()) ** 2))
        r2 = 1 - float(np.sum((y - pred) ** 2)) / ss if ss else float("nan")
    else:
        a, b, r2, pred = float("nan"), float("nan"), float("nan"), np.full(len(rows), np.nan)
    by_class: dict[str, dict] = {}
    for r, p in zip(rows, pred):
        r["residual_kjmol"] = r["engine_kjmol"] - float(p)
        d = by_class.setdefault(r["ring_class"], {"n": 0, "residual": [], "engine_minus_scan": []})
        d["n"] += 1
        d["residual"].append(r["residual_kjmol"])
        d["engine_minus_scan"].append(r["engine_kjmol"] - r["scan_kjmol"])
    for d in by_class.values():
        d["mean_residual_kjmol"] = float(np.mean(d.pop("residual")))
        d["mean_engine_minus_scan_kjmol"] = float(np.mean(d.pop("engine_minus_scan")))
    return Comparison(rows, float(a), float(b), float(r2), len(rows), by_class)


def print_summary(csv_path, markdown: bool = False) -> None:
    c = engine_vs_scan(csv_path)
    with open(csv_path, newline="", encoding="utf-8") as fh:
        allrows = list(csv.DictReader(fh))
    n_ok = sum(r["status"] == "ok" for r in allrows)
    print(f"{len(allrows)} rows, {n_ok} ok, {len(allrows) - n_ok} not ok")
    for r in allrows:
        if r["status"] != "ok":
            print(f"  not ok: {r['smiles']} ({r['name']}): {r['status']}")
    print(f"engine = {c.a:.2f} + {c.b:.3f} x scan  (n = {c.n}, R2 = {c.r2:.3f}), kJ/mol")
    if markdown:
        print("| compound | ring class | GFN2-xTB scan | engine | residual |")
        print("|---|---|---|---|---|")
    for r in sorted(c.rows, key=lambda r: (r["ring_class"], r["scan_kjmol"])):
        if markdown:
            print(
                f"| {r['name']} (`{r['smiles']}`) | {r['ring_class']} | {r['scan_kjmol']:.1f} | "
                f"{r['engine_kjmol']:.1f} | {r['residual_kjmol']:+.1f} |"
            )
        else:
            print(
                f"  {r['ring_class']:<14} scan {r['scan_kjmol']:6.1f}  engine {r['engine_kjmol']:6.1f}  "
                f"residual {r['residual_kjmol']:+6.1f}  {r['smiles']}"
            )
    print("per ring class: n, mean residual of the fit, mean engine - scan (kJ/mol)")
    for k, d in sorted(c.by_class.items()):
        print(
            f"  {k:<14} {d['n']:3d} {d['mean_residual_kjmol']:+7.2f} {d['mean_engine_minus_scan_kjmol']:+7.2f}"
        )


def _read_smiles_file(path: Path) -> list[tuple[str, str]]:
    out = []
    for line in path.read_text(encoding="utf-8").splitlines():
        line = line.strip()
        if not line or line.startswith("#"):
            continue
        parts = line.split(None, 1)
        out.append((parts[0], parts[1] if len(parts) > 1 else ""))
    return out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, required=True)
    ap.add_argument(
        "--smiles-file", type=Path, help="one 'SMILES [name]' per line (default: the built-in list)"
    )
    ap.add_argument("--limit", type=int, default=None, help="compute at most N compounds this run")
    ap.add_argument("--summary", action="store_true", help="engine vs scan summary of --out, no computing")
    ap.add_argument("--markdown", action="store_true", help="with --summary: a Markdown table")
    args = ap.parse_args(argv)
    if args.summary:
        print_summary(args.out, args.markdown)
        return 0
    compounds = _read_smiles_file(args.smiles_file) if args.smiles_file else default_compounds()
    return run(args.out, compounds, args.limit)


if __name__ == "__main__":
    sys.exit(main())
