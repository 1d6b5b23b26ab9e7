"""Finding saturated six-membered rings, naming them, numbering them, and
describing how they are joined to the rest of the ring system."""

from __future__ import annotations

from dataclasses import dataclass, field

from rdkit import Chem
from rdkit.Chem.rdMolDescriptors import CalcNumSaturatedRings

SINGLE = Chem.BondType.SINGLE
DOUBLE = Chem.BondType.DOUBLE
# Hantzsch-Widman seniority: the senior heteroatom gets locant 1.
SENIORITY = {8: 6, 16: 5, 34: 4, 7: 3, 15: 2, 14: 1}
KNOWN_RING_ELEMENTS = {6, 7, 8, 16, 14}
ELEMENT = {6: "C", 7: "N", 8: "O", 16: "S", 14: "Si"}

PAIR_CLASSES = {
    ("N", "N", 3): "piperazine",
    ("N", "N", 2): "hexahydropyrimidine",
    ("N", "O", 3): "morpholine",
    ("N", "O", 2): "1,3-oxazinane",
    ("N", "S", 3): "thiomorpholine",
    ("O", "O", 2): "1,3-dioxane",
    ("O", "O", 3): "1,4-dioxane",
    ("S", "S", 2): "1,3-dithiane",
}
SINGLE_CLASSES = {"O": "oxane", "N": "piperidine", "S": "thiane", "Si": "silinane"}


@dataclass
class Bridge:
    """A constraint from a partner ring sharing atoms with this ring.

    kind: ``fusion`` (shares one bond), ``bridge13`` (a short bridge across
    1,3-positions: both bonds axial), ``bridge14`` (across 1,4: a boat).
    ``ends`` are ring indices (0..5) of the two atoms; ``partners`` the exocyclic
    atoms of the partner ring bonded to them.
    """

    kind: str
    ends: tuple[int, int]
    partners: tuple[int, int]
    partner_size: int
    bridge_length: int


@dataclass
class Ring:
    atoms: list[int]  # ring order, atoms[i] has locant i + 1
    ring_class: str
    topology: str
    planar: list[int] = field(default_factory=list)  # ring indices of trigonal atoms
    planar_kinds: dict[int, str] = field(default_factory=dict)
    hetero: list[tuple[int, str]] = field(default_factory=list)  # (ring index, element)
    bridges: list[Bridge] = field(default_factory=list)
    spiro_atoms: list[int] = field(default_factory=list)
    n_alkyl_on_n: int = 0


# A cheap C++ test first: most library molecules have no such ring at all.
_SAT6 = Chem.MolFromSmarts("[!a;R]1-;@[!a;R]-;@[!a;R]-;@[!a;R]-;@[!a;R]-;@[!a;R]-;@1")


def has_saturated_six_ring(mol: Chem.Mol) -> bool:
    """Cheap pre-test (C++ only): RDKit's count of saturated rings of the ring perception
    (about 3 µs; zero for two thirds of a drug-like library), then one substructure
    search (about 10 µs). A six-membered ring `saturated_six_rings` would report is one of
    the perceived rings and saturated, so the count cannot be zero for it."""
    if not CalcNumSaturatedRings(mol):
        return False
    return mol.HasSubstructMatch(_SAT6)


def saturated_six_rings(mol: Chem.Mol, view=None, pretested: bool = False) -> list[tuple[int, ...]]:
    """Six-membered rings (RDKit's symmetrised SSSR) with only single, non-aromatic bonds.

    ``pretested``: the caller has just seen `has_saturated_six_ring` say yes on this
    molecule as it is now, so the substructure search is not repeated."""
    if not pretested and not mol.HasSubstructMatch(_SAT6):
        return []
    out = []
    if view is not None:
        nbrs, arom = view.nbrs, view.arom
        for atoms in mol.GetRingInfo().AtomRings():
            if len(atoms) != 6 or any(arom[a] for a in atoms):
                continue
            if all(dict(nbrs[atoms[i]]).get(atoms[i - 1]) == 1.0 for i in range(6)):
                out.append(atoms)
        return out
    ri = mol.GetRingInfo()
    for atoms, bonds in zip(ri.AtomRings(), ri.BondRings()):
        if len(atoms) != 6:
            continue
        if any(mol.GetBondWithIdx(b).GetBondType() != SINGLE for b in bonds):
            continue
        if any(mol.GetAtomWithIdx(a).GetIsAromatic() for a in atoms):
            continue
        out.append(atoms)
    return out


def _exo_double_partner(view, a: int, ring_set: set[int]) -> int | None:
    for b, order in view.nbrs[a]:
        if order == 2.0 and b not in ring_set:
            return b
    return None


def _is_acceptor(atom: Chem.Atom, exclude: int) -> str | None:
    """Why a neighbour of a nitrogen makes that nitrogen planar, if it does."""
    if atom.GetIsAromatic():
        return "aryl"
    z = atom.GetAtomicNum()
    for b in atom.GetBonds():
        other = b.GetOtherAtom(atom)
        if other.GetIdx() == exclude:
            continue
        bt = b.GetBondType()
        if bt == DOUBLE and other.GetAtomicNum() in (7, 8, 16):
            if z == 16:
                return "sulfonyl"
            if z == 7:
                return "nitroso"
            return "acyl"
    return None


def planar_nitrogen_kind(mol: Chem.Mol, atom: Chem.Atom) -> str | None:
    """Amide, sulfonamide, aniline-type or nitroso nitrogen: trigonal, no axial bond."""
    if (
        atom.GetAtomicNum() != 7
        or atom.GetFormalCharge() != 0
        or atom.GetDegree() + atom.GetTotalNumHs() != 3
    ):
        return None
    for nb in atom.GetNeighbors():
        kind = _is_acceptor(nb, atom.GetIdx())
        if kind:
            return kind
    return None


def _numbering(zs, ring, carbonyl_idx, substituted, lactam_hetero):
    """Choose start and direction: senior heteroatom (or carbonyl C) gets locant 1,
    then lowest locants for heteroatoms, the lactam carbonyl and substituents."""
    sen = [SENIORITY.get(z, 0 if z == 6 else 1) for z in zs]
    best_sen = max(sen)
    if lactam_hetero is not None:
        starts = [lactam_hetero]
    elif best_sen > 0:
        starts = [i for i in range(6) if sen[i] == best_sen]
    elif carbonyl_idx:
        starts = carbonyl_idx
    else:
        starts = substituted or [0]
    hetero = [i for i in range(6) if sen[i] > 0]
    best_key, best_order = None, None
    for s in starts:
        for d in (1, -1):
            # locant of ring index i under this numbering: ((i - s) * d) % 6
            key = (
                sorted(((i - s) * d) % 6 for i in hetero),
                [-sen[(s + d * n) % 6] for n in range(6)] if len(hetero) > 1 else 0,
                sorted(((i - s) * d) % 6 for i in carbonyl_idx),
                sorted(((i - s) * d) % 6 for i in substituted),
                [ring[(s + d * n) % 6] for n in range(6)],
            )
            if best_key is None or key < best_key:
                best_key, best_order = key, key[4]
    return best_order


def describe_ring(view, ring: tuple[int, ...], all_rings) -> Ring:
    mol = view.mol
    z = view.z
    ring_set = set(ring)
    carbonyl, planar_kind, substituted = [], {}, []
    exo_sets = []
    for i, a in enumerate(ring):
        exo = {b for b, _ in view.nbrs[a] if b not in ring_set}
        exo_sets.append(exo)
        if exo:
            substituted.append(i)
        partner = _exo_double_partner(view, a, ring_set)
        if partner is not None and z[a] in (16, 15):
            partner = None  # sulfoxide / sulfone / P=O: the ring atom stays tetrahedral
        if partner is not None:
            if z[partner] in (7, 8, 16):
                planar_kind[i] = "ring_carbonyl"
                if z[a] == 6:
                    carbonyl.append(i)
            else:
                planar_kind[i] = "exocyclic_alkene"
        elif z[a] == 7 and planar_nitrogen_kind(mol, mol.GetAtomWithIdx(a)):
            planar_kind[i] = "planar_nitrogen"
    # Ring atoms sharing one exocyclic neighbour: a fused three-membered ring.
    for i in range(6):
        j = (i + 1) % 6
        if exo_sets[i] & exo_sets[j]:
            planar_kind.setdefault(i, "flattened_pair")
            planar_kind.setdefault(j, "flattened_pair")

    zs = [z[a] for a in ring]
    lactam_hetero = None
    for i in carbonyl:
        for j in ((i + 1) % 6, (i - 1) % 6):
            if zs[j] in (7, 8) and (lactam_hetero is None or zs[j] == 7):
                lactam_hetero = j
    ordered = _numbering(zs, ring, carbonyl, substituted, lactam_hetero)
    index_of = {a: k for k, a in enumerate(ordered)}
    remap = lambda i: index_of[ring[i]]  # noqa: E731
    planar_kinds = {remap(i): kind for i, kind in planar_kind.items()}

    hetero = [(k, ELEMENT.get(z[a], "X")) for k, a in enumerate(ordered) if z[a] != 6]
    ring_class = classify(
        hetero, [remap(i) for i in carbonyl], None if lactam_hetero is None else zs[lactam_hetero]
    )

    r = Ring(
        atoms=ordered,
        ring_class=ring_class,
        topology="isolated",
        planar=sorted(planar_kinds),
        planar_kinds=planar_kinds,
        hetero=hetero,
    )
    _topology(view, r, all_rings)
    return r


def classify(hetero, carbonyl, lactam_z) -> str:
    if any(el == "X" for _, el in hetero):
        return "other"
    if lactam_z == 7:
        return "lactam"
    if lactam_z == 8:
        return "lactone"
    if not hetero:
        return "cyclohexanone" if carbonyl else "cyclohexane"
    if len(hetero) == 1:
        return SINGLE_CLASSES[hetero[0][1]]
    if len(hetero) == 2:
        (i, a), (j, b) = hetero
        d = min(abs(i - j), 6 - abs(i - j))
        return PAIR_CLASSES.get((*sorted((a, b)), d), "other")
    return "other"


def _ring_distance(i: int, j: int) -> int:
    d = abs(i - j) % 6
    return min(d, 6 - d)


def _topology(view, r: Ring, all_rings) -> None:
    ring_set = set(r.atoms)
    index_of = {a: k for k, a in enumerate(r.atoms)}
    kinds = set()
    for other in all_rings:
        shared = ring_set.intersection(other)
        if not shared or len(shared) == len(other) == 6 and shared == ring_set:
            continue
        if len(shared) == 1:
            kinds.add("spiro")
            r.spiro_atoms.append(index_of[next(iter(shared))])
            continue
        other_set = set(other)
        # End atoms: shared atoms bonded to a partner atom outside this ring.
        ends, partners = [], []
        for a in shared:
            for n, _ in view.nbrs[a]:
                if n in other_set and n not in ring_set:
                    ends.append(index_of[a])
                    partners.append(n)
        if len(ends) != 2:
            kinds.add("bridged")
            continue
        d = _ring_distance(*ends)
        length = len(other) - len(shared)
        if len(shared) == 2 and d == 1:
            kinds.add("fused")
            kind = "fusion"
        else:
            kinds.add("bridged")
            kind = {2: "bridge13", 3: "bridge14"}.get(d, "bridge_other")
        r.bridges.append(Bridge(kind, (ends[0], ends[1]), (partners[0], partners[1]), len(other), length))
    for t in ("bridged", "fused", "spiro"):
        if t in kinds:
            r.topology = t
            break
