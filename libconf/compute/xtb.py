"""GFN2-xTB energies and geometry optimisation (tblite) of chair conformers.

Needs the optional ``tblite`` package (Python API ``tblite.interface.Calculator``)
and scipy. Set OMP_NUM_THREADS before tblite is first imported (1 per worker
process when several run side by side). Energies in hartree inside, kJ/mol at the
surface (1 Eh = 2625.4996 kJ/mol, common practice). Geometry optimisation: L-BFGS (scipy)
on Cartesian coordinates with tblite's analytic gradient, converged when the
largest gradient component is below ``gtol`` (1e-4 Eh/bohr by default: 1e-3 leaves
about 0.6 kJ/mol of noise in methylcyclohexane's axial-equatorial difference, measured).
Implicit solvent: tblite's ALPB model with a named solvent (``solvent="water"``).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
from rdkit import Chem

from .chairs import TWIST, ChairConformer, ChairPair, chair_label, placement

HARTREE_KJ = 2625.4996
BOHR_ANGSTROM = 0.529177210903  # CODATA 2018
METHOD = "GFN2-xTB"


def tblite_version() -> str:
    from importlib.metadata import version

    return version("tblite")


@dataclass(frozen=True)
class XtbResult:
    positions: np.ndarray  # angstrom
    energy_eh: float
    max_gradient: float  # Eh/bohr, largest Cartesian component
    steps: int
    converged: bool


class _Surface:
    """Energy and gradient at Cartesian coordinates (bohr), reusing the wavefunction."""

    def __init__(self, numbers: np.ndarray, positions_bohr: np.ndarray, charge: int, solvent: str | None):
        from tblite.interface import Calculator

        self.calc = Calculator(METHOD, numbers, positions_bohr, charge=float(charge))
        self.calc.set("verbosity", 0)
        if solvent:
            self.calc.add("alpb-solvation", solvent)
        self.res = None
        self.n_calls = 0

    def __call__(self, x: np.ndarray) -> tuple[float, np.ndarray]:
        self.calc.update(positions=x.reshape(-1, 3))
        self.res = self.calc.singlepoint(self.res)
        self.n_calls += 1
        return float(self.res.get("energy")), np.asarray(self.res.get("gradient")).ravel().copy()


def single_point(
    numbers, positions_ang, charge: int = 0, solvent: str | None = None
) -> tuple[float, np.ndarray]:
    """GFN2-xTB energy (hartree) and gradient ((n, 3), hartree/bohr) at a geometry in angstrom."""
    x = np.asarray(positions_ang, dtype=float) / BOHR_ANGSTROM
    e, g = _Surface(np.asarray(numbers), x, charge, solvent)(x.ravel())
    return e, g.reshape(-1, 3)


def optimise(
    numbers,
    positions_ang,
    charge: int = 0,
    solvent: str | None = None,
    gtol: float = 1e-3,
    max_steps: int = 600,
) -> XtbResult:
    """Minimise the GFN2-xTB energy from ``positions_ang``; returns the last geometry either way."""
    from scipy.optimize import minimize

    x0 = np.asarray(positions_ang, dtype=float).ravel() / BOHR_ANGSTROM
    surf = _Surface(np.asarray(numbers), x0.reshape(-1, 3), charge, solvent)
    x, steps = x0, 0
    # L-BFGS can stop on its energy criterion before the gradient one: restart (fresh history) then
    for _ in range(3):
        out = minimize(
            surf,
            x,
            jac=True,
            method="L-BFGS-B",
            options={"gtol": gtol, "ftol": 1e-15, "maxiter": max_steps, "maxcor": 30},
        )
        x, steps = out.x, steps + int(out.nit)
        e, g = surf(x)
        gmax = float(np.max(np.abs(g)))
        if gmax <= gtol or steps >= max_steps:
            break
    return XtbResult(x.reshape(-1, 3) * BOHR_ANGSTROM, e, gmax, steps, gmax <= gtol)


@dataclass(frozen=True)
class ChairOptimum:
    """A chair conformer re-optimised at GFN2-xTB, with the checks that make it usable."""

    start: ChairConformer
    result: XtbResult
    chair_after: int  # chair label after optimisation (TWIST if the ring left the chair)
    placement_before: str  # axial | equatorial of the watched substituent in the MMFF94 start
    placement_after: str  # the same after optimisation ("none" off-chair or when it failed)
    error: str = ""  # why tblite failed (SCF not converged, ...), empty when it ran

    @property
    def usable(self) -> bool:
        return (
            not self.error
            and self.result.converged
            and self.chair_after == self.start.chair
            and self.placement_after == self.placement_before
        )


@dataclass(frozen=True)
class AxialEquatorial:
    """E(chair with the substituent axial) - E(chair with it equatorial), kJ/mol."""

    delta_kj: float | None  # None when one chair has no usable optimum
    axial: list[ChairOptimum]
    equatorial: list[ChairOptimum]
    solvent: str | None

    @property
    def n_usable(self) -> tuple[int, int]:
        return sum(o.usable for o in self.axial), sum(o.usable for o in self.equatorial)


def _charge(mol: Chem.Mol) -> int:
    return sum(a.GetFormalCharge() for a in mol.GetAtoms())


def _single_point_or_inf(numbers, positions, charge: int, solvent: str | None) -> float:
    """GFN2-xTB energy (hartree) for ranking; +inf when the SCF fails (ranked last)."""
    from tblite.exceptions import TBLiteRuntimeError

    try:
        return single_point(numbers, positions, charge, solvent)[0]
    except TBLiteRuntimeError:
        return float("inf")


def reoptimise_chair(
    pair: ChairPair,
    chair: int,
    atom: int,
    n_best: int | None = None,
    solvent: str | None = None,
    gtol: float = 1e-4,
    prerank: bool = False,
) -> list[ChairOptimum]:
    """GFN2-xTB re-optimisation of the ``n_best`` lowest conformers of one chair (None: all).

    All by default: the two levels order rotamers differently (seen for OH). With
    ``prerank`` the conformers are ordered by a GFN2-xTB single point on their MMFF94
    geometry first, so ``n_best`` picks GFN2-xTB's lowest rather than MMFF94's (measured
    on five amides and 2-ethylpiperidine, 10 chairs: the conformer that optimises lowest
    ranked first by single point in 9, and 4th or 5th by MMFF94 in 5).
    """
    numbers = np.array([a.GetAtomicNum() for a in pair.mol.GetAtoms()])
    charge = _charge(pair.mol)
    k = pair._position(atom)
    confs = list(pair.chairs[chair])
    if prerank and n_best is not None and len(confs) > n_best:
        confs = sorted(confs, key=lambda c: _single_point_or_inf(numbers, c.positions, charge, solvent))
    return [_reoptimised(pair, conf, atom, k, numbers, charge, solvent, gtol) for conf in confs[:n_best]]


def _reoptimised(pair, conf, atom, k, numbers, charge, solvent, gtol) -> ChairOptimum:
    from tblite.exceptions import TBLiteRuntimeError

    before = conf.placements[atom]
    try:
        res = optimise(numbers, conf.positions, charge=charge, solvent=solvent, gtol=gtol)
    except TBLiteRuntimeError as exc:
        failed = XtbResult(conf.positions, float("nan"), float("nan"), 0, False)
        return ChairOptimum(conf, failed, TWIST, before, "none", error=str(exc) or "tblite failed")
    label = chair_label(res.positions, pair.ring)
    place = placement(res.positions, pair.ring, k, atom)[0] if label != TWIST else "none"
    return ChairOptimum(conf, res, label, before, place)


def cross_seeded(
    pair: ChairPair, atom: int, source: ChairOptimum, solvent: str | None = None, gtol: float = 1e-4
) -> ChairOptimum | None:
    """The other chair, started from a GFN2-xTB optimum of this one: forced through the
    ring flip at MMFF94 (ring torsions held, then released), then re-optimised at
    GFN2-xTB. The side chain keeps the rotamer GFN2-xTB found best, which MMFF94's own
    sampling of the other chair can miss (an N-thiadiazolyl acetamide on cyclohexane:
    31 kJ/mol between chairs whose side chains differed). None when the flip did not
    give the other chair with every substituent on its configured face."""
    from .chairs import force_flip

    start = replace(source.start, positions=np.asarray(source.result.positions, dtype=float))
    flipped = force_flip(pair, start)  # None also when a substituent left its face
    if flipped is None or flipped.chair != 1 - source.start.chair:
        return None
    numbers = np.array([a.GetAtomicNum() for a in pair.mol.GetAtoms()])
    return _reoptimised(pair, flipped, atom, pair._position(atom), numbers, _charge(pair.mol), solvent, gtol)


def _lowest(opts: list[ChairOptimum]) -> ChairOptimum | None:
    usable = [o for o in opts if o.usable]
    return min(usable, key=lambda o: o.result.energy_eh) if usable else None


def axial_minus_equatorial(
    pair: ChairPair,
    atom: int,
    n_best: int | None = None,
    solvent: str | None = None,
    gtol: float = 1e-4,
    prerank: bool = False,
    cross_seed: bool = False,
) -> AxialEquatorial:
    """GFN2-xTB ΔE = E(axial chair) - E(equatorial chair) for exocyclic ``atom``, kJ/mol.

    Each chair's energy is the lowest over its ``n_best`` re-optimised conformers that
    converged and stayed in that chair (chosen by GFN2-xTB single points with ``prerank``),
    with ``cross_seed`` also over one start made from the other chair's best optimum
    (`cross_seeded`).
    """
    ax = pair.axial_chair(atom)
    axial = reoptimise_chair(pair, ax, atom, n_best, solvent, gtol, prerank)
    equatorial = reoptimise_chair(pair, 1 - ax, atom, n_best, solvent, gtol, prerank)
    if cross_seed:
        # each chair also from the other's best GFN2-xTB optimum (both seeds taken first)
        seeds = [(_lowest(equatorial), axial), (_lowest(axial), equatorial)]
        for src, into in seeds:
            if src is not None and (o := cross_seeded(pair, atom, src, solvent, gtol)) is not None:
                into.append(o)
    ea = [o.result.energy_eh for o in axial if o.usable]
    ee = [o.result.energy_eh for o in equatorial if o.usable]
    delta = (min(ea) - min(ee)) * HARTREE_KJ if ea and ee else None
    return AxialEquatorial(delta, axial, equatorial, solvent)


def single_point_delta(
    pair: ChairPair, atom: int, n_best: int | None = None, solvent: str | None = None
) -> float:
    """GFN2-xTB ΔE (kJ/mol) from single points on the MMFF94 geometries, without re-optimising.

    The cheap variant: each chair's energy is the lowest single point over its ``n_best``
    conformers (None: all). Compare with :func:`axial_minus_equatorial` to see what the
    re-optimisation is worth.
    """
    numbers = np.array([a.GetAtomicNum() for a in pair.mol.GetAtoms()])
    charge = _charge(pair.mol)
    ax = pair.axial_chair(atom)
    best = {}
    for c in (ax, 1 - ax):
        best[c] = min(
            single_point(numbers, conf.positions, charge, solvent)[0] for conf in pair.chairs[c][:n_best]
        )
    return (best[ax] - best[1 - ax]) * HARTREE_KJ
