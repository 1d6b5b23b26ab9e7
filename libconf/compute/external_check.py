"""External check: the engine's preferred chair and dG_flip against GFN2-xTB on molecules
from a library training did not use.

Library: the MOSES scaffold test split (``moses/dataset/data/test_scaffolds.csv.gz`` in
the molsets 0.3.1 wheel; read from the wheel with zipfile). Its Bemis-Murcko scaffolds do
not occur in the MOSES train split, whose first 200,000 records (with RDKit's NCI subset)
are what the harvest and the training data were built from.

Selection (seeded, reproducible): the library rows are shuffled with ``random.Random(seed)``
and read in that order; a molecule is kept if it has at most ``max_heavy`` heavy atoms; a
ring of it is a candidate when the engine (``libconf.analyze``, medium ``nonpolar``: the
closest of its media to a gas-phase calculation) calls it chair-mobile and analysable:
not ``bridged``, not ``fixed``, ``stereo_status`` ``complete``, dG_flip > 0 (two chairs
distinct in energy), and at least one heavy substituent whose face the configuration
fixes (the 3D signature below needs one). Candidates are binned by dG_flip (0-2, 2-5,
5-10, >10 kJ/mol), at most ``n / 4`` per bin and one ring per molecule, and computed
round-robin over the bins, so a run stopped early stays stratified. Every skipped ring is
counted with its reason.

Computation (reusing ``libconf.compute.chairs`` and ``libconf.compute.xtb``, as
``libconf audit`` does): both chairs in 3D (ETKDG + MMFF94, forced flips, rotor scan,
N inversion), the ``n_best`` conformers of each chair that a GFN2-xTB single point on the
MMFF94 geometry puts lowest re-optimised at GFN2-xTB (tblite, gas phase); a chair's energy is its lowest usable optimum (converged,
still that chair, the reference group still axial/equatorial as it started).

Label-free chair signature: for each 3D chair, the set of heavy ring substituents with a
fixed face that are axial in its best GFN2-xTB structure (``axial_chair0`` /
``axial_chair1``; atom indices of the stored SMILES). ``evaluate`` recomputes the engine
now, takes the engine's major chair as the set of fixed-face substituents whose
``axial_fraction`` exceeds 0.5, finds the 3D chair with that signature, and compares

    dG_flip (engine, >= 0)   with   dE = E(3D chair the engine calls minor) - E(3D chair it calls major)

so nothing of the engine's own chair numbering is stored or trusted. A computed
reference is a reference, not the truth (gas-phase electronic energies of single minima;
GFN2-xTB's own errors: datasets/computed/README.md).

    python -m libconf.compute.external_check --out datasets/computed/external_check_v2.csv --n 100
    python -m libconf.compute.external_check --out datasets/computed/external_check_v2.csv --evaluate

(``external_check.csv`` holds version 1, computed with thinner sampling; ``--evaluate``
reads either.)
"""

from __future__ import annotations

import argparse
import csv
import io
import math
import os
import random
import sys
import time
import zipfile
from dataclasses import dataclass, field
from pathlib import Path

from .csvrows import finished_keys

CHECKER = "libconf.compute.external_check 2"
LIBRARY_MEMBER = "moses/dataset/data/test_scaffolds.csv.gz"
DEFAULT_WHEEL = Path("/tmp/bench/molsets-0.3.1-py3-none-any.whl")
SEED = 20261201
# version 1 (external_check.csv) used 20 / 4 / 2 by MMFF94's order; version 2
# (external_check_v2.csv) samples as the training generator does since its version 3:
# 48 embeddings, 8 minima per chair, the 4 lowest by GFN2-xTB single point re-optimised
N_CONFORMERS = 48
KEEP = 8
N_BEST = 4
PRERANK = True
GTOL = 1e-4
MAX_HEAVY = 22
MEDIUM = "nonpolar"
CLEAR_KJ = 2.0  # rings with |dE| above this count for the preferred-chair agreement
BINS = ((0.0, 2.0), (2.0, 5.0), (5.0, 10.0), (10.0, math.inf))
COLUMNS = [
    "id",
    "library_row",
    "smiles",
    "ring_index",
    "ring_atoms",
    "ring_class",
    "bin",
    "engine_dG_flip_kjmol",
    "engine_major_3d",
    "reference_atom",
    "fixed_face_atoms",
    "axial_chair0",
    "axial_chair1",
    "gfn2_dE_1m0_kjmol",
    "gfn2_dE_minor_minus_major_kjmol",
    "mmff94_dE_1m0_kjmol",
    "n_usable_chair0",
    "n_usable_chair1",
    "gfn2_E_chair0_eh",
    "gfn2_E_chair1_eh",
    "status",
    "seconds",
    "settings",
]


def settings_string(
    seed: int = SEED,
    medium: str = MEDIUM,
    max_heavy: int = MAX_HEAVY,
    solvent: str | None = None,
    cross_seed: bool = False,
    sampling_seed: int | None = None,
) -> str:
    level = f"GFN2-xTB ALPB({solvent})" if solvent else "GFN2-xTB gas"
    return (
        f"checker={CHECKER.split()[-1]};level={level};seed={seed};n_conformers={N_CONFORMERS};"
        f"keep={KEEP};n_best={N_BEST};gtol={GTOL:g};selection_medium={medium};max_heavy={max_heavy}"
        + (";prerank=gfn2-single-point" if PRERANK else "")
        + (";cross_seed=1" if cross_seed else "")
        + (f";sampling_seed={sampling_seed}" if sampling_seed not in (None, seed) else "")
    )


# --------------------------------------------------------------------------- library


def read_library(wheel: Path) -> list[str]:
    """SMILES of the scaffold test split, in file order."""
    import pandas as pd

    wheel = Path(wheel)
    if not wheel.is_file():
        raise SystemExit(
            f"{wheel} not found: fetch it with `pip download --no-deps molsets==0.3.1 -d DIR` "
            "and pass --wheel DIR/molsets-0.3.1-py3-none-any.whl"
        )
    with zipfile.ZipFile(wheel) as z:
        raw = z.read(LIBRARY_MEMBER)
    return pd.read_csv(io.BytesIO(raw), compression="gzip")["SMILES"].tolist()


# --------------------------------------------------------------------------- selection


@dataclass
class Pick:
    library_row: int
    smiles: str
    ring_index: int
    ring_atoms: list[int]
    ring_class: str
    dG_flip: float
    bin: int
    reference_atom: int

    @property
    def key(self) -> str:
        return f"{self.library_row}:{self.ring_index}"


@dataclass
class Selection:
    picks: list[Pick]
    scanned: int = 0
    too_large: int = 0
    unparsed: int = 0
    no_ring: int = 0
    skipped: dict[str, int] = field(default_factory=dict)
    candidates_per_bin: list[int] = field(default_factory=lambda: [0] * len(BINS))

    def skip(self, why: str) -> None:
        self.skipped[why] = self.skipped.get(why, 0) + 1

    def summary(self) -> str:
        lines = [
            f"scanned {self.scanned} library rows (seeded order): {self.unparsed} unparsed, "
            f"{self.too_large} above the heavy-atom limit, {self.no_ring} without a saturated six-membered ring",
            "rings skipped: "
            + (", ".join(f"{k} {v}" for k, v in sorted(self.skipped.items())) if self.skipped else "none"),
            "candidates per dG_flip bin (0-2, 2-5, 5-10, >10 kJ/mol): "
            + ", ".join(str(c) for c in self.candidates_per_bin),
            f"picked {len(self.picks)} rings",
        ]
        return "\n".join(lines)


def _bin(dg: float) -> int:
    return next(i for i, (lo, hi) in enumerate(BINS) if lo <= dg < hi)


def fixed_face_heavy(ring) -> list:
    """Substituents of an engine ring that keep their face through a ring flip: set by the
    configuration (up/down) or on an untagged atom whose configuration does not matter
    (face ``unassigned`` in a ring with complete stereo). Not those on a ring N (they
    invert) nor on a planar atom."""
    return [s for s in ring.substituents if s.face in ("up", "down", "unassigned")]


def select(
    smiles: list[str], n: int = 100, seed: int = SEED, max_heavy: int = MAX_HEAVY, medium: str = MEDIUM
) -> Selection:
    """Stratified, seeded selection of rings (see the module docstring)."""
    from rdkit import Chem, RDLogger

    import libconf

    RDLogger.DisableLog("rdApp.*")
    quota = math.ceil(n / len(BINS))
    order = list(range(len(smiles)))
    random.Random(seed).shuffle(order)
    per_bin: list[list[Pick]] = [[] for _ in BINS]
    sel = Selection(picks=[])
    for row in order:
        if all(len(b) >= quota for b in per_bin):
            break
        sel.scanned += 1
        smi = smiles[row]
        mol = Chem.MolFromSmiles(smi)
        if mol is None:
            sel.unparsed += 1
            continue
        if mol.GetNumHeavyAtoms() > max_heavy:
            sel.too_large += 1
            continue
        res = libconf.analyze(smi, medium=medium)
        if not res.rings:
            sel.no_ring += 1
            continue
        chosen = None
        for ring in res.rings:
            if ring.topology == "bridged":
                sel.skip("bridged")
            elif ring.lock_class == "fixed":
                sel.skip("fixed by topology")
            elif ring.stereo_status != "complete":
                sel.skip(f"stereo {ring.stereo_status} (unassigned stereocentre)")
            elif ring.dG_flip_kjmol is None:
                sel.skip("no dG_flip")
            elif ring.dG_flip_kjmol <= 0.0:
                sel.skip("chairs equal in energy (dG_flip 0)")
            elif not fixed_face_heavy(ring):
                sel.skip("no substituent keeping its face (only ring-N or planar ones)")
            elif chosen is not None:
                sel.skip("second ring of a picked molecule")
            else:
                b = _bin(ring.dG_flip_kjmol)
                sel.candidates_per_bin[b] += 1
                if len(per_bin[b]) >= quota:
                    sel.skip("bin full")
                    continue
                ref = max(fixed_face_heavy(ring), key=lambda s: abs(s.a_value_kjmol or 0.0))
                chosen = Pick(
                    row,
                    smi,
                    ring.ring_id,
                    list(ring.ring_atoms),
                    ring.ring_class,
                    float(ring.dG_flip_kjmol),
                    b,
                    int(ref.first_atom),
                )
                per_bin[b].append(chosen)
    # round-robin over the bins: a run stopped early keeps the spread of dG_flip
    for i in range(quota):
        for b in per_bin:
            if i < len(b):
                sel.picks.append(b[i])
    return sel


# --------------------------------------------------------------------------- computation


def tracked_atoms(pair) -> list[int]:
    """Heavy ring substituents with a face in 3D (on a ring atom with two exocyclic
    neighbours), less symmetry-equivalent geminal pairs (gem-dimethyl: which of the two
    methyls is axial is not a property of the chair)."""
    from rdkit import Chem

    ranks = list(Chem.CanonicalRankAtoms(pair.mol, breakTies=False))
    ring = set(pair.ring)
    out = []
    for a in pair.ring:
        exo = [x.GetIdx() for x in pair.mol.GetAtomWithIdx(a).GetNeighbors() if x.GetIdx() not in ring]
        if len(exo) != 2 or ranks[exo[0]] == ranks[exo[1]]:
            continue
        out += [x for x in exo if pair.mol.GetAtomWithIdx(x).GetAtomicNum() > 1 and x in pair.faces]
    return sorted(out)


def _axial_set(pair, pos, atoms) -> list[int]:
    """Those of ``atoms`` (exocyclic, bonded to the ring) axial at geometry ``pos``."""
    from .chairs import placement

    return sorted(x for x in atoms if placement(pos, pair.ring, pair._position(x), x)[0] == "axial")


def _fmt(atoms) -> str:
    return ";".join(str(a) for a in atoms)


def _parse(text: str) -> set[int]:
    return {int(t) for t in str(text).split(";") if t.strip() not in ("", "nan")}


def compute_one(
    p: Pick, settings: str, seed: int = SEED, solvent: str | None = None, cross_seed: bool = False
) -> dict:
    """Both chairs of one picked ring at MMFF94 and GFN2-xTB; one CSV row.

    ``solvent``: tblite's ALPB implicit solvent by name (gas phase without);
    ``cross_seed``: each chair also re-optimised from the other chair's best optimum,
    forced through the flip (`libconf.compute.xtb.cross_seeded`, as training generator 4)."""
    from rdkit import Chem

    from .chairs import both_chairs
    from .xtb import HARTREE_KJ, axial_minus_equatorial

    t0 = time.perf_counter()
    out = dict.fromkeys(COLUMNS, "")
    out.update(
        id=f"test_scaffolds:{p.library_row}",
        library_row=p.library_row,
        smiles=p.smiles,
        ring_index=p.ring_index,
        ring_atoms=_fmt(p.ring_atoms),
        ring_class=p.ring_class,
        bin=f"{BINS[p.bin][0]:g}-{BINS[p.bin][1]:g}",
        engine_dG_flip_kjmol=f"{p.dG_flip:.3f}",
        reference_atom=p.reference_atom,
        settings=settings,
    )
    try:
        mol = Chem.MolFromSmiles(p.smiles)
        pair = both_chairs(mol, tuple(p.ring_atoms), n_conformers=N_CONFORMERS, seed=seed, keep=KEEP)
        if not pair.chairs[0] or not pair.chairs[1]:
            raise ValueError("a chair was not reached in 3D")
        heavy_fixed = tracked_atoms(pair)
        out["fixed_face_atoms"] = _fmt(heavy_fixed)
        out["mmff94_dE_1m0_kjmol"] = f"{pair.best(1).energy_kj - pair.best(0).energy_kj:.3f}"
        res = axial_minus_equatorial(
            pair,
            p.reference_atom,
            n_best=N_BEST,
            solvent=solvent,
            gtol=GTOL,
            prerank=PRERANK,
            cross_seed=cross_seed,
        )
        ax = pair.axial_chair(p.reference_atom)
        by_chair = {ax: res.axial, 1 - ax: res.equatorial}
        best = {}
        for c in (0, 1):
            usable = [o for o in by_chair[c] if o.usable]
            out[f"n_usable_chair{c}"] = len(usable)
            if usable:
                best[c] = min(usable, key=lambda o: o.result.energy_eh)
        if len(best) < 2:
            out["status"] = "no usable GFN2-xTB optimum for one chair"
        else:
            sig = {c: _axial_set(pair, best[c].result.positions, heavy_fixed) for c in (0, 1)}
            out["axial_chair0"], out["axial_chair1"] = _fmt(sig[0]), _fmt(sig[1])
            out["gfn2_E_chair0_eh"] = f"{best[0].result.energy_eh:.8f}"
            out["gfn2_E_chair1_eh"] = f"{best[1].result.energy_eh:.8f}"
            d10 = (best[1].result.energy_eh - best[0].result.energy_eh) * HARTREE_KJ
            out["gfn2_dE_1m0_kjmol"] = f"{d10:.3f}"
            major = engine_major_3d(p.smiles, p.ring_atoms, sig[0], sig[1], heavy_fixed, MEDIUM)
            if major is not None:
                out["engine_major_3d"] = major
                out["gfn2_dE_minor_minus_major_kjmol"] = f"{(d10 if major == 0 else -d10):.3f}"
            out["status"] = "ok" if sig[0] != sig[1] else "chairs with the same axial set"
    except Exception as exc:  # one failed ring is recorded, the run goes on
        out["status"] = f"failed: {type(exc).__name__}: {exc}"[:300]
    out["seconds"] = f"{time.perf_counter() - t0:.1f}"
    return out


def done_keys(out_path: Path, settings: str) -> set[str]:
    return finished_keys(out_path, settings, lambda r: f"{r['library_row']}:{r['ring_index']}")


def run(
    out_path: Path,
    n: int = 100,
    seed: int = SEED,
    wheel: Path = DEFAULT_WHEEL,
    max_heavy: int = MAX_HEAVY,
    stop_at: float | None = None,
    solvent: str | None = None,
    cross_seed: bool = False,
    jobs: int = 1,
    sampling_seed: int | None = None,
) -> Selection:
    """Select, then compute the picked rings not yet in ``out_path``, appending one row each
    as it finishes (with ``jobs`` > 1, in the order the worker processes finish them).

    ``seed`` fixes the selection; ``sampling_seed`` (default: ``seed``) the 3D embedding,
    so a second run with another sampling seed repeats the same rings with independent
    conformer sampling (`compare_references` then measures how far the reference itself
    reproduces)."""
    settings = settings_string(seed, MEDIUM, max_heavy, solvent, cross_seed, sampling_seed)
    embed_seed = seed if sampling_seed is None else sampling_seed
    done = done_keys(out_path, settings)
    sel = select(read_library(wheel), n=n, seed=seed, max_heavy=max_heavy)
    print(sel.summary(), flush=True)
    todo = [p for p in sel.picks if p.key not in done]
    print(f"{len(done)} rings already in {out_path}, {len(todo)} to compute", flush=True)
    out_path.parent.mkdir(parents=True, exist_ok=True)
    if not out_path.exists():
        with open(out_path, "w", newline="", encoding="utf-8") as fh:
            csv.DictWriter(fh, fieldnames=COLUMNS).writeheader()
    def rows():
        if jobs <= 1:
            for p in todo:
                if stop_at is not None and time.time() >= stop_at:
                    print("stop time reached; resume with the same command", flush=True)
                    return
                yield compute_one(p, settings, embed_seed, solvent, cross_seed)
            return
        from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait

        queue = list(reversed(todo))
        with ProcessPoolExecutor(jobs) as pool:
            running = set()
            while queue or running:
                while queue and len(running) < jobs and (stop_at is None or time.time() < stop_at):
                    running.add(pool.submit(compute_one, queue.pop(), settings, embed_seed, solvent, cross_seed))
                if not running:
                    print("stop time reached; resume with the same command", flush=True)
                    return
                finished, running = wait(running, return_when=FIRST_COMPLETED)
                for fut in finished:
                    yield fut.result()

    for i, row in enumerate(rows(), 1):
        # opened per row: a file replaced on disk meanwhile (a checkout) gets the row, not a lost inode
        with open(out_path, "a", newline="", encoding="utf-8") as fh:
            csv.DictWriter(fh, fieldnames=COLUMNS).writerow(row)
        print(
            f"[{i}/{len(todo)}] {row['id']} ring {row['ring_index']} dG_flip {row['engine_dG_flip_kjmol']} "
            f"gfn2 {row['gfn2_dE_minor_minus_major_kjmol'] or '-'} {row['status']} {row['seconds']} s",
            flush=True,
        )
    return sel


# --------------------------------------------------------------------------- evaluation


def engine_major_3d(smiles: str, ring_atoms, axial0, axial1, fixed3d=None, medium: str = MEDIUM):
    """Which 3D chair (0/1) has the axial set of the engine's major chair; None if none does
    or the engine sees no preference (dG_flip 0) or no longer analyses the ring."""
    import libconf

    ring = _engine_ring(libconf.analyze(smiles, medium=medium), ring_atoms)
    if ring is None or not ring.dG_flip_kjmol:
        return None
    return _match(ring, set(axial0), set(axial1), None if fixed3d is None else set(fixed3d))


def _engine_ring(res, ring_atoms):
    want = set(int(a) for a in ring_atoms)
    return next((r for r in res.rings if set(r.ring_atoms) == want), None)


def _match(ring, axial0: set[int], axial1: set[int], fixed3d: set[int] | None = None):
    """The 3D chair whose axial set (restricted to the substituents both sides track) is
    the engine's major chair's: fixed-face substituents with axial_fraction > 0.5."""
    subs = [s for s in fixed_face_heavy(ring) if s.axial_fraction is not None]
    atoms = {s.first_atom for s in subs}
    if fixed3d is not None:
        atoms &= fixed3d
    a0, a1 = axial0 & atoms, axial1 & atoms
    if not atoms or a0 == a1:
        return None
    major_axial = {s.first_atom for s in subs if s.first_atom in atoms and s.axial_fraction > 0.5}
    if major_axial == a0:
        return 0
    if major_axial == a1:
        return 1
    return None


@dataclass
class EvalRow:
    id: str
    smiles: str
    ring_atoms: str
    dG_flip: float | None  # engine now, >= 0
    dE: float | None  # GFN2-xTB, E(engine's minor) - E(engine's major); None when unmatched
    dE_abs: float
    note: str = ""
    mmff_1m0: float | None = None  # MMFF94 E(chair 1) - E(chair 0), 3D labels
    gfn2_1m0: float | None = None  # GFN2-xTB, the same
    value_source: str = ""  # the engine ring's: table | model | mixed
    ring_class: str = ""


_BREAKDOWN_CLASSES = ("cyclohexane", "piperidine", "morpholine")  # the classes most rings of the set fall in


def evaluate(csv_path, medium: str = MEDIUM) -> dict:
    """Compare the engine as it is now with the stored GFN2-xTB chair energies."""
    import libconf

    from ..audit import _spearman

    rows: list[EvalRow] = []
    levels: dict[str, tuple[float, float | None]] = {}
    n_total = n_failed = 0
    level_names: set[str] = set()
    with open(csv_path, newline="", encoding="utf-8") as fh:
        for r in csv.DictReader(fh):
            n_total += 1
            if r["status"] != "ok" or not r["gfn2_dE_1m0_kjmol"]:
                n_failed += 1
                continue
            d10 = float(r["gfn2_dE_1m0_kjmol"])
            level_names.add(_level_of(r.get("settings", "")))
            m10 = float(r["mmff94_dE_1m0_kjmol"]) if r.get("mmff94_dE_1m0_kjmol") else None
            levels[r["id"]] = (d10, m10)
            ring_atoms = [int(a) for a in r["ring_atoms"].split(";")]
            ring = _engine_ring(libconf.analyze(r["smiles"], medium=medium), ring_atoms)
            if ring is None or ring.dG_flip_kjmol is None:
                rows.append(
                    EvalRow(
                        r["id"], r["smiles"], r["ring_atoms"], None, None, abs(d10), "ring not analysed now"
                    )
                )
                continue
            dg = float(ring.dG_flip_kjmol)
            if dg == 0.0:
                rows.append(
                    EvalRow(r["id"], r["smiles"], r["ring_atoms"], 0.0, -abs(d10), abs(d10), "no preference")
                )
                continue
            major = _match(
                ring, _parse(r["axial_chair0"]), _parse(r["axial_chair1"]), _parse(r["fixed_face_atoms"])
            )
            if major is None:
                rows.append(
                    EvalRow(r["id"], r["smiles"], r["ring_atoms"], dg, None, abs(d10), "signature unmatched")
                )
                continue
            rows.append(
                EvalRow(
                    r["id"],
                    r["smiles"],
                    r["ring_atoms"],
                    dg,
                    d10 if major == 0 else -d10,
                    abs(d10),
                    value_source=ring.value_source,
                    ring_class=ring.ring_class,
                )
            )
    for x in rows:
        x.gfn2_1m0, x.mmff_1m0 = levels.get(x.id, (None, None))
    scored = [x for x in rows if x.dE is not None]
    clear = [x for x in rows if x.dE_abs > CLEAR_KJ]
    by_bin = []
    for lo, hi in BINS:
        inb = [x for x in clear if x.dG_flip is not None and lo <= x.dG_flip < hi]
        ok = [x for x in inb if x.dE is not None and x.dE > 0 and x.dG_flip]
        by_bin.append((lo, hi, len(inb), len(ok)))
    # the two 3D levels against each other (no engine involved): same preferred chair?
    both = [x for x in clear if x.mmff_1m0 is not None]
    mmff_vs_gfn2 = sum((x.mmff_1m0 > 0) == (x.gfn2_1m0 > 0) for x in both) / len(both) if both else None
    # an unmatched or no-preference ring with a clear computed gap counts as a disagreement
    agree = [x for x in clear if x.dE is not None and x.dE > 0 and x.dG_flip]
    rho = _spearman([x.dG_flip for x in scored], [x.dE for x in scored])

    def subset(label: str, keep) -> tuple:
        sub = [x for x in scored if keep(x)]
        sub_clear = [x for x in sub if x.dE_abs > CLEAR_KJ]
        ok = sum(x.dE > 0 and bool(x.dG_flip) for x in sub_clear)
        return (label, len(sub), len(sub_clear), ok, _spearman([x.dG_flip for x in sub], [x.dE for x in sub]))

    # where the engine's values come from, and which ring classes: a diagnostic, not a target
    by_source = [
        subset(label, lambda x, v=v: x.value_source == v)
        for v, label in (("table", "table values only"), ("model", "model values only"), ("mixed", "table and model"))
    ]
    by_class = [subset(c, lambda x, c=c: x.ring_class == c) for c in _BREAKDOWN_CLASSES] + [
        subset("other classes", lambda x: x.ring_class not in _BREAKDOWN_CLASSES)
    ]
    mae = sum(abs(x.dG_flip - x.dE) for x in scored) / len(scored) if scored else None
    return {
        "medium": medium,
        "level": " + ".join(sorted(level_names)) or "GFN2-xTB gas",
        "rows": n_total,
        "failed": n_failed,
        "compared": len(scored),
        "unmatched": sum(x.note in ("signature unmatched", "ring not analysed now") for x in rows),
        "no_preference": sum(x.note == "no preference" for x in rows),
        "clear_rings": len(clear),
        "agreement": len(agree) / len(clear) if clear else None,
        "spearman": rho,
        "mae_kjmol": mae,
        "by_bin": by_bin,
        "by_source": by_source,
        "by_class": by_class,
        "mmff94_vs_gfn2_agreement": mmff_vs_gfn2,
        "worst": sorted(scored, key=lambda x: -abs(x.dG_flip - x.dE))[:10],
        "rows_detail": rows,
    }


def _reference_rows(csv_path) -> dict:
    """(library_row, ring_index) -> (axial set of chair 0, of chair 1, E1 - E0 in kJ/mol)
    for the usable rows of a reference file."""
    out = {}
    with open(csv_path, newline="", encoding="utf-8") as fh:
        for r in csv.DictReader(fh):
            if r["status"] == "ok" and r["gfn2_dE_1m0_kjmol"]:
                key = (int(r["library_row"]), int(r["ring_index"]))
                out[key] = (
                    frozenset(_parse(r["axial_chair0"])),
                    frozenset(_parse(r["axial_chair1"])),
                    float(r["gfn2_dE_1m0_kjmol"]),
                )
    return out


def compare_references(csv_a, csv_b) -> dict:
    """How far two reference runs of the same rings agree, with no engine involved.

    Chairs are matched by their axial sets (as `evaluate` matches the engine's). Run A is
    then scored exactly as `evaluate` scores the engine against run B: A's gap |dE_A|
    plays dG_flip and B's dE, signed E(A's minor chair) - E(A's major), plays the
    reference; and the other way round. A predictor that reproduced one run perfectly
    could score no better than this against the other: the figures are the ceiling that
    sampling noise puts on the check's agreement and Spearman rho."""
    from ..audit import _spearman

    a, b = _reference_rows(csv_a), _reference_rows(csv_b)
    common = sorted(a.keys() & b.keys())
    pairs, unmatched = [], 0
    for key in common:
        a0, a1, da = a[key]
        b0, b1, db = b[key]
        if (b0, b1) == (a0, a1):
            pairs.append((da, db))
        elif (b0, b1) == (a1, a0):
            pairs.append((da, -db))
        else:
            unmatched += 1

    def score(pred, ref):
        # pred's gap and ref's energy of pred's minor chair minus its major chair
        gap = [abs(p) for p in pred]
        signed = [r if p > 0 else -r for p, r in zip(pred, ref)]
        clear = [s for s, r in zip(signed, ref) if abs(r) > CLEAR_KJ]
        return {
            "agreement": sum(s > 0 for s in clear) / len(clear) if clear else None,
            "clear_rings": len(clear),
            "spearman": _spearman(gap, signed),
        }

    da = [p[0] for p in pairs]
    db = [p[1] for p in pairs]
    return {
        "a": str(csv_a),
        "b": str(csv_b),
        "common": len(common),
        "compared": len(pairs),
        "unmatched": unmatched,
        "a_as_predictor": score(da, db),
        "b_as_predictor": score(db, da),
        "spearman_signed": _spearman(da, db),
        "mad_kjmol": sum(abs(x - y) for x, y in pairs) / len(pairs) if pairs else None,
    }


def format_comparison(c: dict) -> str:
    def pct(s):
        return "-" if s["agreement"] is None else f"{100 * s['agreement']:.1f} % of {s['clear_rings']}"

    def num(x):
        return "-" if x is None else f"{x:.2f}"

    return "\n".join(
        [
            f"Reference against reference: {c['a']} and {c['b']}, {c['compared']} rings with matching "
            f"chairs of {c['common']} usable in both ({c['unmatched']} with different axial sets)",
            "",
            "| scored as the check scores the engine | preferred chair agrees | Spearman rho |",
            "|---|---|---|",
            f"| first run's gaps against the second run | {pct(c['a_as_predictor'])} | {num(c['a_as_predictor']['spearman'])} |",
            f"| second run's gaps against the first run | {pct(c['b_as_predictor'])} | {num(c['b_as_predictor']['spearman'])} |",
            "",
            f"Signed E(chair 1) - E(chair 0): Spearman {num(c['spearman_signed'])}, "
            f"mean absolute difference {num(c['mad_kjmol'])} kJ/mol.",
        ]
    )


def _level_of(settings: str) -> str:
    """The level of theory a row's ``settings`` records (``level=...``)."""
    for part in settings.split(";"):
        if part.startswith("level="):
            return part[len("level="):] + (" cross-seeded" if "cross_seed=1" in settings else "")
    return "GFN2-xTB gas"


def format_evaluation(s: dict) -> str:
    def num(x, f=".2f"):
        return "-" if x is None else format(x, f)

    lines = [
        f"Engine (medium {s['medium']}) against {s.get('level', 'GFN2-xTB gas')}, {s['compared']} rings compared "
        f"of {s['rows']} rows ({s['failed']} failed in 3D, {s['unmatched']} unmatched, "
        f"{s['no_preference']} where the engine now sees no preference)",
        "",
        "| measure | value |",
        "|---|---|",
        f"| preferred chair agrees (rings with \\|dE\\| > {CLEAR_KJ:g} kJ/mol) | "
        f"{num(None if s['agreement'] is None else 100 * s['agreement'], '.1f')} % of {s['clear_rings']} |",
        f"| Spearman rho, engine dG_flip vs dE(minor - major) | {num(s['spearman'])} |",
        f"| MAE, kJ/mol | {num(s['mae_kjmol'])} |",
        f"| (no engine) MMFF94 and GFN2-xTB prefer the same chair, rings with \\|dE\\| > {CLEAR_KJ:g} | "
        f"{num(None if s['mmff94_vs_gfn2_agreement'] is None else 100 * s['mmff94_vs_gfn2_agreement'], '.1f')} % |",
        "",
        "Agreement by the engine's dG_flip now (rings with |dE| > 2 kJ/mol):",
        "",
        "| engine dG_flip, kJ/mol | rings | agree |",
        "|---|---|---|",
        *[f"| {lo:g}-{hi:g} | {n} | {k} |" for lo, hi, n, k in s["by_bin"]],
        "",
        "By where the engine's values for the ring come from (table: published experiment; model:",
        "the regression model trained on GFN2-xTB values calibrated to experiment) and by ring class:",
        "",
        "| rings | compared | clear | agree | Spearman rho |",
        "|---|---|---|---|---|",
        *[
            f"| {label} | {n} | {nc} | {k} ({num(None if not nc else 100 * k / nc, '.0f')} %) | {num(rho)} |"
            for label, n, nc, k, rho in s.get("by_source", []) + s.get("by_class", [])
        ],
        "",
        "Worst 10 (engine dG_flip vs GFN2-xTB dE = E(engine's minor chair) - E(its major), kJ/mol):",
        "",
        "| id | SMILES | ring atoms | dG_flip | dE |",
        "|---|---|---|---|---|",
    ]
    for x in s["worst"]:
        lines.append(f"| {x.id} | `{x.smiles}` | {x.ring_atoms} | {x.dG_flip:.1f} | {x.dE:+.1f} |")
    return "\n".join(lines)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(
        prog="python -m libconf.compute.external_check", description=__doc__.split("\n")[0]
    )
    ap.add_argument("--out", type=Path, required=True, help="CSV of computed rings (appended, resumable)")
    ap.add_argument("--n", type=int, default=100, help="rings to pick (default 100)")
    ap.add_argument("--seed", type=int, default=SEED, help="selection seed (and, by default, sampling seed)")
    ap.add_argument(
        "--sampling-seed", type=int, default=None, help="seed of the 3D sampling only (same rings, new conformers)"
    )
    ap.add_argument(
        "--compare",
        type=Path,
        default=None,
        metavar="OTHER_CSV",
        help="with --out: how far two reference runs of the same rings agree (no engine involved)",
    )
    ap.add_argument("--wheel", type=Path, default=DEFAULT_WHEEL, help="the molsets 0.3.1 wheel")
    ap.add_argument("--max-heavy", type=int, default=MAX_HEAVY)
    ap.add_argument(
        "--stop-at", type=float, default=None, help="UNIX time after which no new ring is started"
    )
    ap.add_argument(
        "--solvent", default=None, help="tblite ALPB implicit solvent by name, e.g. water (default: gas phase)"
    )
    ap.add_argument(
        "--cross-seed", action="store_true", help="also start each chair from the other chair's best optimum"
    )
    ap.add_argument("--jobs", type=int, default=1, help="worker processes (one ring each; default 1)")
    ap.add_argument("--select-only", action="store_true", help="print the selection counts and stop")
    ap.add_argument("--evaluate", action="store_true", help="compare the engine now with the stored values")
    ap.add_argument("--medium", default=MEDIUM, help="engine medium for --evaluate (default nonpolar)")
    a = ap.parse_args(argv)
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    if a.compare is not None:
        print(format_comparison(compare_references(a.out, a.compare)))
        return 0
    if a.evaluate:
        print(format_evaluation(evaluate(a.out, medium=a.medium)))
        return 0
    if a.select_only:
        print(select(read_library(a.wheel), n=a.n, seed=a.seed, max_heavy=a.max_heavy).summary())
        return 0
    run(
        a.out,
        n=a.n,
        seed=a.seed,
        wheel=a.wheel,
        max_heavy=a.max_heavy,
        stop_at=a.stop_at,
        solvent=a.solvent,
        cross_seed=a.cross_seed,
        jobs=a.jobs,
        sampling_seed=a.sampling_seed,
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
