"""Substituent-in-context features for the A-value regression model.

A row describes one group on one ring carbon: the group itself (taken from its group
SMILES, the ``*`` marking the ring atom) and its ring context (which heteroatoms sit
how many bonds away along the ring). The same function serves training (on the model
compounds of ``datasets/computed``) and prediction (in the engine, memoised per
group and context), so the two can never drift apart.
"""

from __future__ import annotations

from functools import lru_cache

from rdkit import Chem

_ELEMENTS = (6, 7, 8, 16, 9, 17, 35, 53, 14, 15)
_CONTEXT_ELEMENTS = ("O", "N", "S")

GROUP_FEATURES = [f"first_is_{Chem.GetPeriodicTable().GetElementSymbol(z)}" for z in _ELEMENTS] + [
    "first_is_other",
    "first_aromatic",
    "first_sp",
    "first_sp2",
    "first_sp3",
    "first_h",
    "first_heavy_degree",
    "first_charge",
    "first_in_ring",
    "first_double_to_o",
    "first_double_to_c_or_n",
    "first_triple",
    "shell2_heavy",
    "shell3_heavy",
    "shell2_max_degree",
    "shell2_branching",
    "heavy_atoms",
    "n_hetero",
    "n_halogen",
    "n_aromatic",
    "first_donor",
    "shell2_donor",
    "shell2_acceptor_o",
    "shell2_hetero",
    "first_period",
    "shell2_in_ring",
]
CONTEXT_FEATURES = [f"{el}_at_{d}" for d in (1, 2, 3) for el in _CONTEXT_ELEMENTS]
FEATURE_NAMES = tuple(GROUP_FEATURES + CONTEXT_FEATURES)


@lru_cache(maxsize=4_096)  # bounded; called only when the context cache misses
def group_features(key: str) -> tuple[float, ...] | None:
    """Features of a group SMILES with one ``*``; None when it cannot be read."""
    if key.count("*") != 1:
        return None
    mol = Chem.MolFromSmiles(key)
    if mol is None:
        return None
    star = next(a for a in mol.GetAtoms() if a.GetAtomicNum() == 0)
    if star.GetDegree() != 1:
        return None
    first = star.GetNeighbors()[0]
    z = first.GetAtomicNum()
    hyb = first.GetHybridization()
    dist = Chem.GetDistanceMatrix(mol)[star.GetIdx()]
    heavy = [a for a in mol.GetAtoms() if a.GetAtomicNum() > 1 and a.GetIdx() != star.GetIdx()]
    shell2 = [a for a in heavy if dist[a.GetIdx()] == 2]
    shell3 = [a for a in heavy if dist[a.GetIdx()] == 3]

    def heavy_degree(a):
        return sum(1 for n in a.GetNeighbors() if n.GetAtomicNum() > 1)

    def bonds(a, order, to=None):
        n = 0
        for b in a.GetBonds():
            o = b.GetOtherAtom(a)
            if b.GetBondType() == order and (to is None or o.GetAtomicNum() in to):
                n += 1
        return n

    row = [1.0 if z == e else 0.0 for e in _ELEMENTS]
    row.append(0.0 if z in _ELEMENTS else 1.0)
    row += [
        float(first.GetIsAromatic()),
        float(hyb == Chem.HybridizationType.SP),
        float(hyb == Chem.HybridizationType.SP2 or first.GetIsAromatic()),
        float(hyb == Chem.HybridizationType.SP3),
        float(first.GetTotalNumHs()),
        float(heavy_degree(first) - 1),  # not counting the ring atom
        float(first.GetFormalCharge()),
        float(first.IsInRing()),
        float(bonds(first, Chem.BondType.DOUBLE, (8, 16))),
        float(bonds(first, Chem.BondType.DOUBLE, (6, 7))),
        float(bonds(first, Chem.BondType.TRIPLE)),
        float(len(shell2)),
        float(len(shell3)),
        float(max((heavy_degree(a) for a in shell2), default=0)),
        float(sum(max(0, heavy_degree(a) - 1) for a in shell2)),
        float(len(heavy)),
        float(sum(1 for a in heavy if a.GetAtomicNum() not in (6, 1))),
        float(sum(1 for a in heavy if a.GetAtomicNum() in (9, 17, 35, 53))),
        float(sum(1 for a in heavy if a.GetIsAromatic())),
        float(z in (7, 8, 16) and first.GetTotalNumHs() > 0),
        float(sum(1 for a in shell2 if a.GetAtomicNum() in (7, 8) and a.GetTotalNumHs() > 0)),
        float(sum(1 for a in shell2 if a.GetAtomicNum() == 8)),
        float(sum(1 for a in shell2 if a.GetAtomicNum() not in (6, 1))),
        float(_period(z)),
        float(sum(1 for a in shell2 if a.IsInRing())),
    ]
    return tuple(row)


def _period(z: int) -> int:
    return 1 if z <= 2 else 2 if z <= 10 else 3 if z <= 18 else 4 if z <= 36 else 5


def context_features(rels: tuple) -> tuple[float, ...]:
    """Counts of ring O/N/S at 1, 2 and 3 bonds from the substituted ring carbon;
    ``rels`` is the engine's tuple of (element, ring distance)."""
    row = [0.0] * len(CONTEXT_FEATURES)
    for el, d in rels:
        if el in _CONTEXT_ELEMENTS and 1 <= d <= 3:
            row[(d - 1) * len(_CONTEXT_ELEMENTS) + _CONTEXT_ELEMENTS.index(el)] += 1.0
    return tuple(row)


def features(key: str, rels: tuple) -> tuple[float, ...] | None:
    g = group_features(key)
    return None if g is None else g + context_features(rels)


# ring class -> [(locant, element)] of its ring heteroatoms (the engine's numbering)
RING_HETERO = {
    "cyclohexane": [],
    "piperidine": [(1, "N")],
    "oxane": [(1, "O")],
    "thiane": [(1, "S")],
    "silinane": [(1, "Si")],
    "piperazine": [(1, "N"), (4, "N")],
    "morpholine": [(1, "O"), (4, "N")],
    "thiomorpholine": [(1, "S"), (4, "N")],
    "1,3-dioxane": [(1, "O"), (3, "O")],
    "1,4-dioxane": [(1, "O"), (4, "O")],
    "1,3-dithiane": [(1, "S"), (3, "S")],
    "hexahydropyrimidine": [(1, "N"), (3, "N")],
    "1,3-oxazinane": [(1, "O"), (3, "N")],
}


def rels_for(ring_class: str, locant: int) -> tuple | None:
    """The engine's (element, ring distance) tuple for a group at ``locant`` of a bare
    ring of ``ring_class``; None for a class without a template."""
    from ..chem.energy import ring_distance

    het = RING_HETERO.get(ring_class)
    if het is None:
        return None
    return tuple((el, ring_distance(h - 1, locant - 1)) for h, el in het)
