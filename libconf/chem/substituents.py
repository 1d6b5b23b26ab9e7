"""Exocyclic substituents of a ring: their group SMILES, their face, their kind.

The face of a substituent follows from the atom's chiral tag and the order of
its bonds, without 3D coordinates. RDKit's convention: looking from the first
bonded neighbour, the others run clockwise (CW) or anticlockwise (CCW) in bond
order, an implicit hydrogen (or lone pair) counting as the last neighbour;
CCW means det(v0, v1, v2) > 0 for the bond vectors of the first three.
With the ring traversed in `Ring.atoms` order and its normal taken by the right
hand rule, a substituent s on ring atom c (ring neighbours p before, n after)
is on the upper face when det(p - c, n - c, s - c) < 0.
"""

from __future__ import annotations

from dataclasses import dataclass

from rdkit import Chem

from .molview import MolView
from .rings import Ring

CW = Chem.ChiralType.CHI_TETRAHEDRAL_CW
CCW = Chem.ChiralType.CHI_TETRAHEDRAL_CCW
HALOGENS = {9, 17, 35, 53}


@dataclass
class Substituent:
    ring_index: int  # 0..5 in Ring.atoms
    ring_atom: int
    first_atom: int
    group: str  # canonical SMILES with * at each attachment to this ring
    key: str  # group without stereo marks, for table look-ups
    face: str  # up | down | invertible | planar | unassigned
    partner_ring: bool = False  # bond belongs to a fused / bridged / spiro partner ring
    group_class: str | None = None  # coarse class, filled in when a rule needs it
    first_element: int = 6
    piece: int = -1  # which cut-out piece the group is (shared by both ends of a bridge)


def _permutation_parity(seq: list[int], ref: list[int]) -> int:
    pos = [ref.index(x) for x in seq]
    parity = 0
    for i in range(len(pos)):
        while pos[i] != i:
            j = pos[i]
            pos[i], pos[j] = pos[j], pos[i]
            parity ^= 1
    return parity


def face_from_tag(atom: Chem.Atom, prev: int, nxt: int, sub: int) -> str | None:
    """'up' / 'down' for substituent ``sub`` on ring atom ``atom``, or None if untagged."""
    tag = atom.GetChiralTag()
    if tag != CW and tag != CCW:
        return None
    idx = atom.GetIdx()
    nbrs = [b.GetOtherAtomIdx(idx) for b in atom.GetBonds()]
    if len(nbrs) == 3:
        nbrs.append(-1)  # implicit H or lone pair
    if len(nbrs) != 4 or prev not in nbrs or nxt not in nbrs:
        return None
    other = [x for x in nbrs if x != prev and x != nxt and x != sub]
    if len(other) != 1:
        return None
    ccw = (tag == CCW) ^ bool(_permutation_parity([prev, nxt, sub, other[0]], nbrs))
    return "down" if ccw else "up"


def group_class(mol: Chem.Mol, first: Chem.Atom, ring_atom: int) -> str:
    """A coarse class for a group no table lists, from its first atom."""
    z = first.GetAtomicNum()
    if first.GetFormalCharge() > 0 and z == 7:
        return "ammonium"
    nbrs = [n for n in first.GetNeighbors() if n.GetIdx() != ring_atom]
    bonds = [b for b in first.GetBonds() if b.GetOtherAtomIdx(first.GetIdx()) != ring_atom]
    btypes = {b.GetBondType() for b in bonds}
    if z == 6:
        if first.GetIsAromatic():
            return "aryl"
        if Chem.BondType.TRIPLE in btypes:
            return "alkynyl"
        if Chem.BondType.DOUBLE in btypes:
            dbl = [b.GetOtherAtom(first) for b in bonds if b.GetBondType() == Chem.BondType.DOUBLE]
            if any(a.GetAtomicNum() in (8, 16) for a in dbl):
                if any(
                    n.GetAtomicNum() in (7, 8) and b.GetBondType() == Chem.BondType.SINGLE
                    for n, b in zip(nbrs, bonds)
                ):
                    return "carboxyl_derivative"
                return "acyl"
            return "vinyl"
        heavy = len(nbrs)
        if heavy >= 3:
            return "tertiary_alkyl"
        if heavy == 2:
            return "secondary_alkyl"
        if heavy == 1:
            n = nbrs[0]
            if n.GetIsAromatic():
                return "benzylic_methylene"
            return "primary_alkyl" if n.GetAtomicNum() == 6 else "hetero_methylene"
        return "methyl"
    if z == 8:
        for n in nbrs:
            if n.GetAtomicNum() == 6 and any(b.GetBondType() == Chem.BondType.DOUBLE for b in n.GetBonds()):
                return "acyloxy"
        return "ether_oxygen"
    if z == 7:
        for n in nbrs:
            if n.GetIsAromatic():
                return "aryl_nitrogen"
            if any(
                b.GetBondType() == Chem.BondType.DOUBLE and b.GetOtherAtom(n).GetIdx() != first.GetIdx()
                for b in n.GetBonds()
            ):
                return "amido"
        if first.GetIsAromatic():
            return "aryl_nitrogen"
        return "amino"
    if z == 16:
        if Chem.BondType.DOUBLE in btypes:
            return "sulfonyl"
        return "thio"
    if z == 14:
        return "silyl"
    if z == 15:
        return "phosphorus"
    return "other"


def ring_substituents(view: MolView, ring: Ring) -> list[Substituent]:
    """Every non-H exocyclic substituent of the ring, with its group and face."""
    mol = view.mol
    atoms = ring.atoms
    ring_set = set(atoms)
    partner_atoms = {p for br in ring.bridges for p in br.partners}
    spiro = set(ring.spiro_atoms)
    planar = set(ring.planar)
    z = view.z
    out = []
    for k, a in enumerate(atoms):
        exo = [(o, order) for o, order in view.nbrs[a] if o not in ring_set]
        if not exo:
            continue
        atom = mol.GetAtomWithIdx(a)
        for o, order in exo:
            group, members = view.group_smiles(ring_set, a, o)
            partner = o in partner_atoms or k in spiro or group.count("*") > 1
            tetrahedral_s = z[a] in (16, 15)  # S=O of a sulfoxide has a face
            if k in planar or (order != 1.0 and not tetrahedral_s):
                face = "planar"
            elif z[a] == 7 and not (atom.GetFormalCharge() > 0 and atom.GetTotalNumHs() == 0):
                face = "invertible"
            else:
                face = face_from_tag(atom, atoms[k - 1], atoms[(k + 1) % 6], o) or "unassigned"
            # the class of an N-substituent feeds the barrier's N-alkyl term; others on demand
            cls = group_class(mol, mol.GetAtomWithIdx(o), a) if z[a] == 7 else None
            out.append(Substituent(k, a, o, group, group, face, partner, cls, z[o], min(members)))
    return out
