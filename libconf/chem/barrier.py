"""Ring-inversion barrier by increments, Eyring rate, and lock classes."""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from functools import lru_cache

from ..parameters import Parameters
from ..results import Contribution
from .energy import Site
from .rings import Ring

K_B = 1.380649e-23  # J/K
H_PLANCK = 6.62607015e-34  # J s
R_KJ = 8.314462618e-3

# Barrier base classes: a carbonyl or lactam ring takes the base of its parent
# heterocycle, and the trigonal atom enters as its own term.
BASE_CLASS = {"cyclohexanone": "cyclohexane", "lactam": "piperidine", "lactone": "oxane"}
ALKYL_CLASSES = {
    "methyl",
    "primary_alkyl",
    "secondary_alkyl",
    "tertiary_alkyl",
    "benzylic_methylene",
    "hetero_methylene",
}


@dataclass
class LockThresholds:
    """Lock-class limits (science: major chair < 90 % mobile, >= 99 % anchored)."""

    biased: float = 0.90
    anchored: float = 0.99
    trapped_half_life_s: float = 1000.0


def planar_terms(P: Parameters, ring: Ring, field_name: str) -> list[Contribution]:
    """Flattening terms of trigonal ring atoms (first one in full, later ones in part)."""
    out = []
    share = P.barrier_terms["further_planar_atom_share"]["energy_kjmol"]
    kinds = list(ring.planar_kinds.values())
    n_flat = kinds.count("flattened_pair")
    kinds = [k for k in kinds if k != "flattened_pair"] + ["flattened_pair"] * (n_flat // 2)
    order = {"ring_carbonyl": 0, "flattened_pair": 1, "exocyclic_alkene": 2, "planar_nitrogen": 3}
    for n, kind in enumerate(sorted(kinds, key=order.get)):
        row = P.barrier_terms[kind]
        e = row[field_name] * (1.0 if n == 0 else share)
        out.append(Contribution(-1, kind, kind.replace("_", " "), e, row["source"]))
    return out


def twist_boat_energy(
    P: Parameters, ring: Ring, sites: list[Site], temperature: float, gauche_kjmol: float = 0.0
) -> float:
    """Twist-boat free energy above a strain-free chair: ring-class dH, planar
    terms, the twist family's entropy, a small share of each group's A-value, and
    the vicinal gauche terms (neighbouring groups stay roughly gauche in a twist)."""
    cls = BASE_CLASS.get(ring.ring_class, ring.ring_class)
    base = P.barriers.get(cls, P.barriers["other"])
    g = base["twist_boat_dh_kjmol"] + sum(c.energy_kjmol for c in planar_terms(P, ring, "twist_boat_kjmol"))
    g -= temperature * P.constants["twist_boat_ds"] / 1000.0
    share = P.constants["twist_boat_share"]
    g += share * sum(max(s.a, 0.0) for s in sites if not s.constrained)
    g += gauche_kjmol
    return max(g, 0.0)


@lru_cache(maxsize=64)
def _computed_base_correction(cls: str, models_env: str | None) -> tuple[float, str, float] | None:
    """(kJ/mol, reference, uncertainty) for a ring class whose tabulated base barrier is
    only an estimate by analogy: the model file's correction from GFN2-xTB coordinate
    driving of the parent ring, scaled to experiment on the classes with measured barriers."""
    from ..model.artefact import load_model

    model = load_model()
    b = (model.meta.get("barrier") or {}) if model is not None else {}
    c = (b.get("corrections") or {}).get(cls)
    if c is None:
        return None
    ref = (
        f"regression model {model.digest[:12]}: {b['slope']:.2f} x GFN2-xTB driven barrier of the parent "
        f"ring relative to cyclohexane, fitted on {b['n']} ring classes with measured barriers"
    )
    return float(c["correction_kjmol"]), ref, float(b["uncertainty_kjmol"])


def barrier_estimate(
    P: Parameters, ring: Ring, sites: list[Site], dg_flip: float, n_cis_fusions: int
) -> tuple[float, float, list[Contribution]]:
    """Barrier from the major chair: base + corrections + a share of dG_flip."""
    cls = BASE_CLASS.get(ring.ring_class, ring.ring_class)
    base = P.barriers.get(cls, P.barriers["other"])
    terms = [Contribution(-1, "base", f"{cls} ring inversion", base["base_kjmol"], base["source"])]
    u2 = base["uncertainty_kjmol"] ** 2
    if base.get("status") == "estimate":
        corr = _computed_base_correction(cls, os.environ.get("LIBCONF_MODELS"))
        if corr is not None:
            terms.append(Contribution(-1, "computed_base", f"{cls}: computed correction", corr[0], corr[1]))
            u2 = corr[2] ** 2
    terms += planar_terms(P, ring, "energy_kjmol")
    for _ in range(n_cis_fusions):
        row = P.barrier_terms["cis_fusion"]
        terms.append(Contribution(-1, "cis_fusion", "cis ring fusion", row["energy_kjmol"], row["source"]))
    for s in sites:
        if s.constrained:
            continue
        atom_is_n = any(h == s.k and el == "N" for h, el in ring.hetero)
        if atom_is_n and s.sub.face == "invertible" and s.sub.group_class in ALKYL_CLASSES:
            row = P.barrier_terms["n_alkyl"]
            terms.append(
                Contribution(-1, "n_alkyl", f"N-alkyl ({s.sub.group})", row["energy_kjmol"], row["source"])
            )
        elif s.sub.key in ("*Cl", "*F"):
            row = P.barrier_terms["chloro" if s.sub.key == "*Cl" else "fluoro"]
            terms.append(
                Contribution(-1, row["term"], f"{s.k + 1}-{s.name}", row["energy_kjmol"], row["source"])
            )
    share = P.constants["barrier_dG_share"]
    if dg_flip:
        terms.append(
            Contribution(
                -1,
                "dG_share",
                f"{share:g} x {dg_flip:.1f} kJ/mol (dG_flip, at most the climb to the twist-boat)",
                share * dg_flip,
                P.constant_sources["barrier_dG_share"],
            )
        )
    for c in terms[1:]:
        row = P.barrier_terms.get(c.rule)
        if row:
            u2 += row["uncertainty_kjmol"] ** 2
    total = max(sum(c.energy_kjmol for c in terms), P.constants["barrier_floor"])
    return total, math.sqrt(u2), terms


def eyring_rate(barrier_kjmol: float, temperature: float) -> float:
    """k = (k_B T / h) exp(-dG_act / RT), in s-1."""
    return K_B * temperature / H_PLANCK * math.exp(-barrier_kjmol / (R_KJ * temperature))


def lock_class(major_fraction: float, half_life_s: float, th: LockThresholds) -> str:
    if half_life_s >= th.trapped_half_life_s:
        return "trapped"
    if major_fraction >= th.anchored:
        return "anchored"
    if major_fraction >= th.biased:
        return "biased"
    return "mobile"
