"""`libconf audit`: re-check a random sample of a finished run with a 3D calculation.

For each sampled ring the run's own prediction is read from the tables (dG_flip and
the axial fractions of its substituents); both chairs are then built in 3D with the
code the training-data generator uses (`libconf.compute.chairs`: ETKDG + MMFF94,
forced flip where sampling misses a chair) and, with ``--level xtb``, re-optimised at
GFN2-xTB (tblite). Compared per ring, through one reference substituent (the one with
the largest A-value whose face is set by the configuration):

    predicted  dG_ref = G(chair with the reference group axial) - G(chair with it equatorial)
    computed   dE_ref = E(axial chair) - E(equatorial chair)

A computed reference is a reference, not the truth: MMFF94 puts several polar groups
(F, Cl, CN, C#CH, carbonyl groups) on the wrong side (see datasets/computed/), and a
gas-phase energy is not a free energy in solution.
"""

from __future__ import annotations

import csv
import json
import math
import random
import sys
import time
from dataclasses import asdict, dataclass
from pathlib import Path

import pyarrow.dataset as ds

from .chem.barrier import LockThresholds, lock_class

R_KJ = 8.314462618e-3
CLEAR_KJ = 2.0  # rings with |dE| above this count for the preferred-chair agreement
AUDIT_NOTE = (
    "A computed reference is a reference, not the truth: MMFF94 mis-signs several polar "
    "groups, and neither level includes solvent entropy or conformer free energies."
)


class AuditError(Exception):
    """The directory cannot be audited (not a run, no auditable ring, missing package)."""


@dataclass
class AuditRow:
    mol_id: str
    input_file: str
    input_row: int
    ring_id: int
    smiles: str
    ring_class: str
    reference_group: str
    reference_atom: int
    predicted_dG_ref_kjmol: float
    computed_dE_ref_kjmol: float | None
    predicted_lock_class: str
    computed_lock_class: str | None
    level: str
    seconds: float
    note: str = ""


def _load(run: Path, table: str):
    folder = run / table
    parts = sorted(str(p) for p in folder.glob("part-*.parquet"))
    if not parts:
        raise AuditError(f"{folder} has no part files: is {run} the --out directory of a finished run?")
    return ds.dataset(parts, format="parquet")


def candidates(run: Path) -> list[dict]:
    """Rings a 3D check can speak to: chair analysis done, stereo complete."""
    rings = _load(run, "rings").to_table(
        columns=[
            "mol_id",
            "input_file",
            "input_row",
            "ring_id",
            "ring_atoms",
            "ring_class",
            "lock_class",
            "stereo_status",
            "dG_flip_kjmol",
        ],
        filter=(ds.field("stereo_status") == "complete")
        & (ds.field("lock_class") != "fixed")
        & ds.field("dG_flip_kjmol").is_valid(),
    )
    return rings.to_pylist()


def _details(run: Path, picked: list[dict]) -> tuple[dict, dict]:
    rows = sorted({r["input_row"] for r in picked})
    subs = (
        _load(run, "substituents")
        .to_table(
            columns=[
                "input_file",
                "input_row",
                "ring_id",
                "first_atom",
                "group",
                "face",
                "axial_fraction",
                "a_value_kjmol",
            ],
            filter=ds.field("input_row").isin(rows),
        )
        .to_pylist()
    )
    mols = (
        _load(run, "molecules")
        .to_table(columns=["input_file", "input_row", "smiles"], filter=ds.field("input_row").isin(rows))
        .to_pylist()
    )
    by_ring: dict[tuple, list[dict]] = {}
    for s in subs:
        by_ring.setdefault((s["input_file"], s["input_row"], s["ring_id"]), []).append(s)
    smiles = {(m["input_file"], m["input_row"]): m["smiles"] for m in mols}
    return by_ring, smiles


def reference_substituent(subs: list[dict]) -> dict | None:
    """The group with the largest |A-value| whose face the configuration fixes
    (a lone substituent of a ring counts: its mirror image has the same energies)."""
    usable = [
        s
        for s in subs
        if s["face"] in ("up", "down", "unassigned")
        and s["a_value_kjmol"] is not None
        and s["axial_fraction"] is not None
        and s["group"].count("*") == 1
    ]
    return max(usable, key=lambda s: abs(s["a_value_kjmol"]), default=None)


def _lock_from_delta(delta: float, temperature: float, th: LockThresholds) -> str:
    """Lock class from a two-chair energy difference (Boltzmann, no twist-boat)."""
    major = 1.0 / (1.0 + math.exp(-abs(delta) / (R_KJ * temperature)))
    return lock_class(major, 0.0, th)


def _spearman(x: list[float], y: list[float]) -> float | None:
    if len(x) < 3:
        return None

    def ranks(v):
        order = sorted(range(len(v)), key=lambda i: v[i])
        r = [0.0] * len(v)
        i = 0
        while i < len(order):
            j = i
            while j + 1 < len(order) and v[order[j + 1]] == v[order[i]]:
                j += 1
            for k in range(i, j + 1):
                r[order[k]] = (i + j) / 2.0
            i = j + 1
        return r

    rx, ry = ranks(x), ranks(y)
    mx, my = sum(rx) / len(rx), sum(ry) / len(ry)
    cov = sum((a - mx) * (b - my) for a, b in zip(rx, ry))
    sx = math.sqrt(sum((a - mx) ** 2 for a in rx))
    sy = math.sqrt(sum((b - my) ** 2 for b in ry))
    return cov / (sx * sy) if sx and sy else None


def compute_delta(
    smiles: str,
    ring_atoms: list[int],
    atom: int,
    level: str,
    seed: int,
    n_conformers: int,
    solvent: str | None,
) -> float:
    """dE(axial - equatorial chair) for exocyclic ``atom`` of the ring, kJ/mol."""
    from rdkit import Chem

    from .compute.chairs import both_chairs

    mol = Chem.MolFromSmiles(smiles)
    if mol is None:
        raise ValueError("the run's SMILES does not parse any more")
    pair = both_chairs(mol, tuple(ring_atoms), n_conformers=n_conformers, seed=seed)
    if level == "mmff":
        return pair.delta_mmff_kj(atom)
    from .compute.xtb import axial_minus_equatorial

    res = axial_minus_equatorial(pair, atom, n_best=2, solvent=solvent)
    if res.delta_kj is None:
        raise ValueError("GFN2-xTB: a chair did not stay a chair on re-optimisation")
    return res.delta_kj


def audit(
    run_dir,
    sample: int = 50,
    seed: int = 0,
    level: str = "mmff",
    n_conformers: int = 20,
    progress: bool | None = None,
    out=sys.stdout,
) -> dict:
    """Audit a run; writes DIR/audit/rings.csv and DIR/audit/summary.json, returns the summary."""
    run = Path(run_dir)
    if level not in ("mmff", "xtb"):
        raise AuditError(f"--level must be mmff or xtb, not {level!r}")
    if level == "xtb":
        try:
            import tblite.interface  # noqa: F401
        except ImportError:
            raise AuditError("--level xtb needs the tblite package: pip install tblite") from None
    manifest_path = run / "manifest.json"
    if not manifest_path.is_file():
        raise AuditError(f"{run} has no manifest.json: is it the --out directory of `libconf annotate`?")
    manifest = json.loads(manifest_path.read_text())
    temperature = float(manifest.get("parameters", {}).get("temperature") or 298.15)
    medium = manifest.get("parameters", {}).get("medium") or "water"
    solvent = "water" if medium == "water" else None

    pool = candidates(run)
    if not pool:
        raise AuditError("no ring to audit: every ring is fixed by its topology or has unassigned stereo")
    rng = random.Random(seed)
    picked = rng.sample(pool, min(sample, len(pool)))
    picked.sort(key=lambda r: (r["input_file"], r["input_row"], r["ring_id"]))
    by_ring, smiles = _details(run, picked)
    th = LockThresholds()

    show = sys.stderr.isatty() if progress is None else progress
    bar = None
    if show:
        from tqdm import tqdm

        bar = tqdm(total=len(picked), unit="ring", desc=f"audit ({level})", file=sys.stderr)
    rows: list[AuditRow] = []
    for r in picked:
        key = (r["input_file"], r["input_row"], r["ring_id"])
        ref = reference_substituent(by_ring.get(key, []))
        smi = smiles.get((r["input_file"], r["input_row"]), "")
        if ref is None:
            if bar:
                bar.update(1)
            continue
        predicted = r["dG_flip_kjmol"] if ref["axial_fraction"] < 0.5 else -r["dG_flip_kjmol"]
        t0 = time.perf_counter()
        computed, note = None, ""
        try:
            computed = compute_delta(
                smi, r["ring_atoms"], ref["first_atom"], level, seed + 1, n_conformers, solvent
            )
        except Exception as exc:  # a 3D failure on one ring is reported, not fatal
            note = f"{type(exc).__name__}: {exc}"[:200]
        rows.append(
            AuditRow(
                r["mol_id"],
                r["input_file"],
                r["input_row"],
                r["ring_id"],
                smi,
                r["ring_class"],
                ref["group"],
                ref["first_atom"],
                predicted,
                computed,
                r["lock_class"],
                None if computed is None else _lock_from_delta(computed, temperature, th),
                level,
                time.perf_counter() - t0,
                note,
            )
        )
        if bar:
            bar.update(1)
    if bar:
        bar.close()
    summary = summarise(rows, level, len(pool), temperature, medium)
    _write(run, rows, summary)
    print(format_summary(summary, rows), file=out)
    return summary


def summarise(rows: list[AuditRow], level: str, pool: int, temperature: float, medium: str) -> dict:
    done = [r for r in rows if r.computed_dE_ref_kjmol is not None]
    clear = [r for r in done if abs(r.computed_dE_ref_kjmol) > CLEAR_KJ]
    agree = [r for r in clear if (r.predicted_dG_ref_kjmol > 0) == (r.computed_dE_ref_kjmol > 0)]
    mae = (
        (sum(abs(r.predicted_dG_ref_kjmol - r.computed_dE_ref_kjmol) for r in done) / len(done))
        if done
        else None
    )
    rho = _spearman([r.predicted_dG_ref_kjmol for r in done], [r.computed_dE_ref_kjmol for r in done])
    lock_agree = sum(r.predicted_lock_class == r.computed_lock_class for r in done)
    return {
        "level": {"mmff": "MMFF94 (RDKit)", "xtb": "GFN2-xTB (tblite)"}[level],
        "temperature": temperature,
        "medium": medium,
        "auditable_rings": pool,
        "sampled": len(rows),
        "computed": len(done),
        "failed": len(rows) - len(done),
        "clear_rings": len(clear),
        "preferred_chair_agreement": (len(agree) / len(clear)) if clear else None,
        "mae_kjmol": mae,
        "spearman_rho": rho,
        "lock_class_agreement": (lock_agree / len(done)) if done else None,
        "note": AUDIT_NOTE,
    }


def worst(rows: list[AuditRow], n: int = 10) -> list[AuditRow]:
    done = [r for r in rows if r.computed_dE_ref_kjmol is not None]
    return sorted(done, key=lambda r: -abs(r.predicted_dG_ref_kjmol - r.computed_dE_ref_kjmol))[:n]


def _pct(x):
    return "-" if x is None else f"{100 * x:.0f} %"


def format_summary(s: dict, rows: list[AuditRow]) -> str:
    lines = [
        f"audit against {s['level']}: {s['computed']} of {s['sampled']} sampled rings computed "
        f"({s['failed']} failed; {s['auditable_rings']} auditable rings in the run)",
        f"  preferred chair agrees for {_pct(s['preferred_chair_agreement'])} of the "
        f"{s['clear_rings']} rings with |dE| > {CLEAR_KJ:g} kJ/mol",
        f"  MAE {('-' if s['mae_kjmol'] is None else format(s['mae_kjmol'], '.1f'))} kJ/mol, "
        f"rank correlation {('-' if s['spearman_rho'] is None else format(s['spearman_rho'], '.2f'))}, "
        f"lock class agrees for {_pct(s['lock_class_agreement'])}",
        "  worst cases (predicted dG_ref vs computed dE_ref, kJ/mol; ref = reference group):",
    ]
    for r in worst(rows, 5):
        lines.append(
            f"    {r.predicted_dG_ref_kjmol:+6.1f} vs {r.computed_dE_ref_kjmol:+6.1f}  "
            f"{r.reference_group:<12} {r.mol_id}  {r.smiles}"
        )
    lines.append(f"  {AUDIT_NOTE}")
    return "\n".join(lines)


def _write(run: Path, rows: list[AuditRow], summary: dict) -> None:
    folder = run / "audit"
    folder.mkdir(exist_ok=True)
    with open(folder / "rings.csv", "w", newline="", encoding="utf-8") as fh:
        fields = list(AuditRow.__dataclass_fields__)
        w = csv.DictWriter(fh, fieldnames=fields)
        w.writeheader()
        for r in rows:
            w.writerow(asdict(r))
    (folder / "summary.json").write_text(json.dumps(summary, indent=2))
