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

import re
from dataclasses import dataclass

from rdkit import Chem

from .rings import Ring

CW = Chem.ChiralType.CHI_TETRAHEDRAL_CW
CCW = Chem.ChiralType.CHI_TETRAHEDRAL_CCW
_LABEL = re.compile(r"\[(\d+)\*\]")
_STEREO = re.compile(r"[@/\\]")
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
    group_class: str = "other"
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
                if any(n.GetAtomicNum() in (7, 8) and b.GetBondType() == Chem.BondType.SINGLE
                       for n, b in zip(nbrs, bonds)):
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
        return "other"
    if z == 8:
        for n in nbrs:
            if n.GetAtomicNum() == 6 and any(
                b.GetBondType() == Chem.BondType.DOUBLE for b in n.GetBonds()
            ):
                return "acyloxy"
        return "ether_oxygen"
    if z == 7:
        for n in nbrs:
            if n.GetIsAromatic():
                return "aryl_nitrogen"
            if any(b.GetBondType() == Chem.BondType.DOUBLE and b.GetOtherAtom(n).GetIdx() != first.GetIdx()
                   for b in n.GetBonds()):
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


def _strip_stereo(smiles: str) -> str:
    if not _STEREO.search(smiles):
        return smiles
    mol = Chem.MolFromSmiles(smiles.replace("*", "[1*]"), sanitize=False)
    if mol is None:
        return _STEREO.sub("", smiles)
    Chem.RemoveStereochemistry(mol)
    return _LABEL.sub("*", Chem.MolToSmiles(mol))


def ring_substituents(mol: Chem.Mol, ring: Ring) -> list[Substituent]:
    """Every non-H exocyclic substituent of the ring, with its group and face."""
    atoms = ring.atoms
    ring_set = set(atoms)
    exo = []  # (ring index, ring atom, first atom, bond index)
    for k, a in enumerate(atoms):
        atom = mol.GetAtomWithIdx(a)
        for b in atom.GetBonds():
            o = b.GetOtherAtomIdx(a)
            if o not in ring_set:
                exo.append((k, a, o, b.GetIdx()))
    if not exo:
        return []

    # Cut every exocyclic bond once; the pieces carry a label naming the bond.
    labels = []
    for n, (_, a, _, bidx) in enumerate(exo):
        begin_is_ring = mol.GetBondWithIdx(bidx).GetBeginAtomIdx() == a
        # RDKit labels the dummy that replaces the *other* end of the bond.
        labels.append((n + 1, 0) if begin_is_ring else (0, n + 1))
    pieces = Chem.FragmentOnBonds(mol, [e[3] for e in exo], addDummies=True, dummyLabels=labels)
    group_of: dict[int, tuple[str, int]] = {}
    for p, piece in enumerate(Chem.MolToSmiles(pieces).split(".")):
        found = [int(x) for x in _LABEL.findall(piece)]
        if not found or 0 in found:
            continue
        text = _LABEL.sub("*", piece)
        for lab in found:
            group_of[lab - 1] = (text, p)

    partner_atoms = {p for br in ring.bridges for p in br.partners}
    spiro = set(ring.spiro_atoms)
    planar = set(ring.planar)
    out = []
    for n, (k, a, o, bidx) in enumerate(exo):
        atom = mol.GetAtomWithIdx(a)
        first = mol.GetAtomWithIdx(o)
        group, piece = group_of.get(n, ("*", -1))
        partner = o in partner_atoms or k in spiro or group.count("*") > 1
        tetrahedral_s = atom.GetAtomicNum() in (16, 15)  # S=O of a sulfoxide has a face
        if k in planar or (mol.GetBondWithIdx(bidx).GetBondType() != Chem.BondType.SINGLE
                           and not tetrahedral_s):
            face = "planar"
        elif atom.GetAtomicNum() == 7 and not (
            atom.GetFormalCharge() > 0 and atom.GetTotalNumHs() == 0
        ):
            face = "invertible"
        else:
            face = face_from_tag(atom, atoms[k - 1], atoms[(k + 1) % 6], o) or "unassigned"
        cls = group_class(mol, first, a)
        key = group if partner else _strip_stereo(group)
        out.append(Substituent(k, a, o, group, key, face, partner, cls, first.GetAtomicNum(), piece))
    return out
