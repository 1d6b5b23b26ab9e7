"""Both chairs of one saturated six-membered ring, in 3D, with MMFF94 energies.

Conventions (the same ones the engine uses without coordinates):

* The ring is traversed in the order of ``ring_atoms`` (positions 0..5). Its
  normal is taken by the right-hand rule over that traversal,
  ``n = sum_i (r_i - c) x (r_{i+1} - c)`` with ``c`` the ring centroid; "up"
  means along ``n``.
* An atom *puckers* up or down by the sign of its displacement from the ring's
  mean plane along ``n``. In a chair the six displacements alternate.
* **Chair 0** is the chair in which ring position 0 puckers up; then even
  positions pucker up and odd ones down. **Chair 1** is its ring flip.
* An atom's axial bond points the way the atom puckers. So a substituent on
  face ``f`` of position ``k`` is axial in chair 0 iff ``(k even) == (f up)``,
  and its face is the pucker direction when it is axial, the opposite one when
  it is equatorial.
* A ring is a chair when its six endocyclic torsions alternate in sign and all
  have a magnitude of at least ``min_torsion`` (40 degrees by default;
  cyclohexane's chair torsions are about 55 degrees, common practice).
  Anything else is reported as ``TWIST`` (twist-boat, boat, half-chair,
  envelope).

Sampling, in this order (all minimised with MMFF94):

1. ETKDG embeddings. A ring atom carrying two different exocyclic neighbours but no
   chiral tag (the CH of a monosubstituted cyclohexane) gets a tag first, so that every
   conformer has its substituents on the same faces and the two chairs are the only
   difference that matters. Untagged fusion / bridgehead atoms are not tagged (a wrong
   tag can make a cage impossible to embed); their faces are taken from the lowest
   embedded chair. Conformers with any watched substituent off its face are dropped.
2. Forced flips: from the best conformers of each chair, MMFF94 with the six ring
   torsions held at 0, then half, then all of the mirror-image pattern (each torsion's
   sign reversed), then released and re-minimised; kept only if it is the other chair
   with every substituent still on its face. This fills a chair sampling missed and
   carries rotamers across.
3. Other saturated six-membered rings sharing no atom with this one (a cyclohexyl
   substituent) are flipped the same way.
4. N inversion: a substituent on a three-connected ring N is turned rigidly to its
   mirror position about the C-N-C plane (a rotation, so stereocentres in it keep their
   configuration).
5. Rotor scan: each acyclic ring-substituent bond is turned in ``rotor_step`` steps.

Several distinct minima per chair are kept, so that the best one is a minimum over
rotamers, not an artefact of one embedding.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from rdkit import Chem
from rdkit.Chem import AllChem

from ..chem.substituents import face_from_tag

KCAL_TO_KJ = 4.184
TWIST = -1  # chair label of a conformer whose ring is not a chair
_CW = Chem.ChiralType.CHI_TETRAHEDRAL_CW
_UNTAGGED = (Chem.ChiralType.CHI_UNSPECIFIED, Chem.ChiralType.CHI_OTHER)


# --------------------------------------------------------------------------- geometry


def dihedral(p0: np.ndarray, p1: np.ndarray, p2: np.ndarray, p3: np.ndarray) -> float:
    """Torsion angle p0-p1-p2-p3 in degrees, in (-180, 180]."""
    b0, b1, b2 = p0 - p1, p2 - p1, p3 - p2
    b1n = b1 / np.linalg.norm(b1)
    v = b0 - np.dot(b0, b1n) * b1n
    w = b2 - np.dot(b2, b1n) * b1n
    x = np.dot(v, w)
    y = np.dot(np.cross(b1n, v), w)
    return float(np.degrees(np.arctan2(y, x)))


def ring_torsions(pos: np.ndarray, ring: tuple[int, ...]) -> np.ndarray:
    """The six endocyclic torsions; element i is about the bond ring[i]-ring[i+1]."""
    r = [pos[a] for a in ring]
    return np.array([dihedral(r[i - 1], r[i], r[(i + 1) % 6], r[(i + 2) % 6]) for i in range(6)])


def ring_normal(pos: np.ndarray, ring: tuple[int, ...]) -> tuple[np.ndarray, np.ndarray]:
    """(centroid, unit right-hand normal) of the ring traversed in ``ring`` order."""
    r = pos[list(ring)]
    c = r.mean(axis=0)
    n = sum(np.cross(r[i] - c, r[(i + 1) % 6] - c) for i in range(6))
    return c, n / np.linalg.norm(n)


def puckers(pos: np.ndarray, ring: tuple[int, ...]) -> np.ndarray:
    """Signed displacement (angstrom) of each ring atom from the mean plane, along the normal."""
    c, n = ring_normal(pos, ring)
    return np.array([float(np.dot(pos[a] - c, n)) for a in ring])


def chair_label(pos: np.ndarray, ring: tuple[int, ...], min_torsion: float = 40.0) -> int:
    """0 or 1 for the two chairs (see the module docstring), TWIST otherwise."""
    tau = ring_torsions(pos, ring)
    signs = np.sign(tau)
    if np.any(np.abs(tau) < min_torsion) or np.any(signs * np.roll(signs, 1) >= 0):
        return TWIST
    z = puckers(pos, ring)
    # a chair's displacements alternate; anything else is not a chair whatever the torsions say
    if np.any(np.sign(z) * np.roll(np.sign(z), 1) >= 0):
        return TWIST
    return 0 if z[0] > 0 else 1


def placement(pos: np.ndarray, ring: tuple[int, ...], k: int, atom: int) -> tuple[str, str]:
    """(axial|equatorial, up|down) of exocyclic ``atom`` bonded to ring position ``k``.

    Valid for a chair. Axial: the bond's component along the normal, taken in the
    direction the ring atom puckers, exceeds 0.5 of its length (about 1 for an axial
    bond and about -1/3 for an equatorial one in an ideal chair, common practice).
    """
    _, n = ring_normal(pos, ring)
    z = puckers(pos, ring)[k]
    b = pos[atom] - pos[ring[k]]
    along = float(np.dot(b, n)) / float(np.linalg.norm(b)) * (1.0 if z > 0 else -1.0)
    axial = along > 0.5
    pucker_up = z > 0
    up = pucker_up if axial else not pucker_up
    return ("axial" if axial else "equatorial"), ("up" if up else "down")


# --------------------------------------------------------------------------- results


@dataclass(frozen=True)
class ChairConformer:
    """One MMFF94-optimised conformer whose ring is the chair ``chair``."""

    chair: int
    energy_kj: float  # MMFF94, kJ/mol
    positions: np.ndarray  # (n_atoms, 3) angstrom, atom order of ChairPair.mol
    torsions: tuple[float, ...]  # the six ring torsions, degrees
    placements: dict[int, str]  # exocyclic atom index -> axial | equatorial
    forced: bool  # reached by constrained flip from the other chair


@dataclass
class ChairPair:
    """Both chairs of one ring; conformers of each sorted by MMFF94 energy."""

    mol: Chem.Mol  # with explicit hydrogens; heavy atoms keep the input's indices
    ring: tuple[int, ...]
    chairs: dict[int, list[ChairConformer]]
    faces: dict[int, str]  # exocyclic atom index -> up | down (same in every conformer)
    n_embedded: int = 0
    n_twist: int = 0  # embeddings that ended off-chair after MMFF94
    n_forced: int = 0  # conformers kept from a forced flip
    n_rotamer_starts: int = 0  # rotor-scan starts that stayed in their chair
    n_side_ring_flips: int = 0  # flips of another six-membered ring that kept this one's chair
    n_invertomer_starts: int = 0  # N-inversion starts that stayed in their chair
    notes: list[str] = field(default_factory=list)
    watched: set[int] = field(default_factory=set)  # exocyclic atoms whose face is configured

    def keeps_faces(self, positions: np.ndarray) -> bool:
        """Every watched substituent on its configured face. A forced flip through the flat
        ring can push a ring CH through itself: that is another stereoisomer, not a chair."""
        geo = _conformer_faces(positions, self.ring, self.mol)
        return all(geo.get(a) == self.faces.get(a) for a in self.watched)

    def best(self, chair: int) -> ChairConformer:
        if not self.chairs.get(chair):
            raise LookupError(f"no conformer of chair {chair}")
        return self.chairs[chair][0]

    def axial_chair(self, atom: int) -> int:
        """The chair (0/1) in which exocyclic ``atom`` is axial, from the face convention.

        Only for a substituent with a fixed face (on a ring atom with two exocyclic
        neighbours); one on a ring N takes either position by N inversion.
        """
        if atom not in self.faces:
            raise ValueError(f"atom {atom} has no fixed face (a substituent on a ring N inverts)")
        k, f = self._position(atom), self.faces[atom]
        return 0 if (k % 2 == 0) == (f == "up") else 1

    def delta_mmff_kj(self, atom: int) -> float:
        """E(chair with ``atom`` axial) - E(chair with it equatorial), MMFF94, kJ/mol."""
        ax = self.axial_chair(atom)
        return self.best(ax).energy_kj - self.best(1 - ax).energy_kj

    def _position(self, atom: int) -> int:
        for k, a in enumerate(self.ring):
            if self.mol.GetBondBetweenAtoms(a, atom) is not None:
                return k
        raise ValueError(f"atom {atom} is not bonded to the ring")


# --------------------------------------------------------------------------- input


def _check_ring(mol: Chem.Mol, ring: tuple[int, ...]) -> None:
    if len(ring) != 6 or len(set(ring)) != 6:
        raise ValueError("ring_atoms must be six distinct atom indices")
    n = mol.GetNumAtoms()
    if any(not 0 <= a < n for a in ring):
        raise ValueError("ring_atoms holds an index outside the molecule")
    for i in range(6):
        b = mol.GetBondBetweenAtoms(ring[i], ring[(i + 1) % 6])
        if b is None:
            raise ValueError(f"ring atoms {ring[i]} and {ring[(i + 1) % 6]} are not bonded (order matters)")
        if b.GetBondType() != Chem.BondType.SINGLE or b.GetIsAromatic():
            raise ValueError("the ring is not saturated (every endocyclic bond must be single)")


def _pin_faces(mh: Chem.Mol, ring: tuple[int, ...]) -> tuple[dict[int, str], set[int]]:
    """Fix the face of every ring substituent that has one; return (faces, atoms to watch).

    A ring atom with two different exocyclic neighbours and no chiral tag gets one (the
    CH of a monosubstituted ring). Not when one of its exocyclic bonds is a ring bond (a
    fusion or bridgehead atom): a wrong tag there can make a cage impossible to embed, so
    its face is left to the geometry and taken from the lowest embedded chair. Two
    equivalent exocyclic neighbours (gem-dimethyl, CH2) have no face worth keeping.
    """
    ring_set = set(ring)
    ranks = list(Chem.CanonicalRankAtoms(mh, breakTies=False))
    faces: dict[int, str] = {}
    watch: set[int] = set()
    for k, a in enumerate(ring):
        atom = mh.GetAtomWithIdx(a)
        exo = [n.GetIdx() for n in atom.GetNeighbors() if n.GetIdx() not in ring_set]
        if len(exo) != 2 or ranks[exo[0]] == ranks[exo[1]]:
            continue  # a ring N/O/S with a lone pair, a trigonal atom, or two equal groups
        watch.update(exo)
        if atom.GetChiralTag() in _UNTAGGED:
            if any(mh.GetBondBetweenAtoms(a, x).IsInRing() for x in exo):
                continue
            atom.SetChiralTag(_CW)
        prev, nxt = ring[k - 1], ring[(k + 1) % 6]
        for x in exo:
            f = face_from_tag(atom, prev, nxt, x)
            if f is not None:
                faces[x] = f
    return faces, watch


def _conformer_faces(pos: np.ndarray, ring: tuple[int, ...], mh: Chem.Mol) -> dict[int, str]:
    """Faces from geometry: the substituent lies above its geminal partner or below it."""
    _, n = ring_normal(pos, ring)
    ring_set = set(ring)
    out = {}
    for a in ring:
        exo = [x.GetIdx() for x in mh.GetAtomWithIdx(a).GetNeighbors() if x.GetIdx() not in ring_set]
        if len(exo) == 2:
            s, t = exo
            d = float(np.dot(pos[s] - pos[t], n))
            out[s], out[t] = ("up", "down") if d > 0 else ("down", "up")
    return out


# --------------------------------------------------------------------------- MMFF94


def _mmff(mh: Chem.Mol, props, conf_id: int):
    ff = AllChem.MMFFGetMoleculeForceField(mh, props, confId=conf_id)
    if ff is None:
        raise ValueError("MMFF94 has no parameters for this molecule")
    return ff


def _relax(mh: Chem.Mol, props, conf_id: int, max_iters: int = 10000) -> float:
    """Unconstrained MMFF94 minimisation to convergence; energy in kcal/mol."""
    ff = _mmff(mh, props, conf_id)
    for _ in range(5):
        if ff.Minimize(maxIts=max_iters) == 0:
            break
    return float(ff.CalcEnergy())


def _force_flip(mh: Chem.Mol, props, conf_id: int, rings: list[tuple[int, ...]], k_torsion: float) -> None:
    """Drive every ring of ``rings`` into the mirror-image torsion pattern of its current form."""
    pos = mh.GetConformer(conf_id).GetPositions()
    targets = [(r, -ring_torsions(pos, r)) for r in rings]
    # in steps, through the flat ring: a direct jump to the far pattern can stall at a twist-boat
    for frac in (0.0, 0.5, 1.0):
        ff = _mmff(mh, props, conf_id)
        for r, target in targets:
            for i in range(6):
                quad = (r[i - 1], r[i], r[(i + 1) % 6], r[(i + 2) % 6])
                t = frac * float(target[i])
                ff.MMFFAddTorsionConstraint(*quad, False, t, t, k_torsion)
        ff.Minimize(maxIts=5000)


def _record(mh, ring, cid, energy_kcal, forced, min_torsion) -> ChairConformer | None:
    pos = mh.GetConformer(cid).GetPositions()
    label = chair_label(pos, ring, min_torsion)
    if label == TWIST:
        return None
    ring_set = set(ring)
    places = {}
    for k, a in enumerate(ring):
        for x in mh.GetAtomWithIdx(a).GetNeighbors():
            if x.GetIdx() not in ring_set:
                places[x.GetIdx()] = placement(pos, ring, k, x.GetIdx())[0]
    return ChairConformer(
        chair=label,
        energy_kj=energy_kcal * KCAL_TO_KJ,
        positions=pos.copy(),
        torsions=tuple(float(t) for t in ring_torsions(pos, ring)),
        placements=places,
        forced=forced,
    )


def _distinct(confs: list[ChairConformer], keep: int, tol_kj: float = 0.01) -> list[ChairConformer]:
    out: list[ChairConformer] = []
    for c in sorted(confs, key=lambda c: c.energy_kj):
        if all(abs(c.energy_kj - o.energy_kj) > tol_kj for o in out):
            out.append(c)
        if len(out) == keep:
            break
    return out


def _rotor_bonds(mh: Chem.Mol, ring: tuple[int, ...]) -> list[tuple[int, int, list[int]]]:
    """(ring atom, first atom, atoms that move) for each acyclic ring-substituent bond worth turning."""
    ring_set = set(ring)
    out = []
    for a in ring:
        for x in mh.GetAtomWithIdx(a).GetNeighbors():
            b = mh.GetBondBetweenAtoms(a, x.GetIdx())
            if x.GetIdx() in ring_set or b.IsInRing() or x.GetDegree() < 2:
                continue
            side, stack = {x.GetIdx()}, [x.GetIdx()]
            while stack:
                for y in mh.GetAtomWithIdx(stack.pop()).GetNeighbors():
                    if y.GetIdx() != a and y.GetIdx() not in side:
                        side.add(y.GetIdx())
                        stack.append(y.GetIdx())
            out.append((a, x.GetIdx(), sorted(side)))
    return out


def _invertible_nitrogens(mh: Chem.Mol, ring: tuple[int, ...]) -> list[tuple[int, int, list[int]]]:
    """(ring N, its exocyclic neighbour, atoms on that side) for each three-connected ring N."""
    ring_set = set(ring)
    out = []
    for a in ring:
        atom = mh.GetAtomWithIdx(a)
        if atom.GetAtomicNum() != 7 or atom.GetDegree() != 3 or atom.GetIsAromatic():
            continue
        exo = [x.GetIdx() for x in atom.GetNeighbors() if x.GetIdx() not in ring_set]
        if len(exo) != 1 or mh.GetBondBetweenAtoms(a, exo[0]).IsInRing():
            continue
        side, stack = {exo[0]}, [exo[0]]
        while stack:
            for y in mh.GetAtomWithIdx(stack.pop()).GetNeighbors():
                if y.GetIdx() != a and y.GetIdx() not in side:
                    side.add(y.GetIdx())
                    stack.append(y.GetIdx())
        out.append((a, exo[0], sorted(side)))
    return out


def _inverted(pos: np.ndarray, ring: tuple[int, ...], n_atom: int, x: int, moving: list[int]) -> np.ndarray:
    """Positions with the N substituent turned rigidly to its mirror position about the C-N-C plane.

    A rotation, not a reflection, so stereocentres in the substituent keep their configuration.
    """
    k = ring.index(n_atom)
    o = pos[n_atom]
    m = np.cross(pos[ring[k - 1]] - o, pos[ring[(k + 1) % 6]] - o)
    m = m / np.linalg.norm(m)
    u = pos[x] - o
    u = u / np.linalg.norm(u)
    v = u - 2 * np.dot(u, m) * m
    axis = np.cross(u, v)
    if np.linalg.norm(axis) < 1e-6:
        return pos.copy()  # the substituent lies in the plane: nothing to invert
    axis = axis / np.linalg.norm(axis)
    t = np.arccos(np.clip(np.dot(u, v), -1.0, 1.0))
    kx = np.array([[0, -axis[2], axis[1]], [axis[2], 0, -axis[0]], [-axis[1], axis[0], 0]])
    rot = np.eye(3) + np.sin(t) * kx + (1 - np.cos(t)) * (kx @ kx)  # Rodrigues
    new = pos.copy()
    new[moving] = (pos[moving] - o) @ rot.T + o
    return new


def _turned(pos: np.ndarray, axis_from: int, axis_to: int, moving: list[int], degrees: float) -> np.ndarray:
    """Positions with ``moving`` rotated rigidly about the bond axis_from -> axis_to."""
    o = pos[axis_from]
    u = pos[axis_to] - o
    u = u / np.linalg.norm(u)
    t = np.radians(degrees)
    k = np.array([[0, -u[2], u[1]], [u[2], 0, -u[0]], [-u[1], u[0], 0]])
    rot = np.eye(3) + np.sin(t) * k + (1 - np.cos(t)) * (k @ k)  # Rodrigues
    new = pos.copy()
    new[moving] = (pos[moving] - o) @ rot.T + o
    return new


def _flip(mh, props, flip_ring, ring, src: ChairConformer, k_torsion: float, min_torsion: float):
    """Flip ``flip_ring`` of ``src`` (forced, then released); classify ``ring`` afterwards."""
    cid = mh.AddConformer(Chem.Conformer(mh.GetNumAtoms()), assignId=True)
    conf = mh.GetConformer(cid)
    for i, q in enumerate(src.positions):
        conf.SetAtomPosition(i, q.tolist())
    # a ring fused to this one (sharing a bond) flips with it, as in cis-decalin
    fused = [
        r
        for r in _six_rings(mh)
        if r != flip_ring and len(set(r) & set(flip_ring)) >= 2 and chair_label(src.positions, r) != TWIST
    ]
    _force_flip(mh, props, cid, [flip_ring, *fused], k_torsion)
    e = _relax(mh, props, cid)
    rec = _record(mh, ring, cid, e, True, min_torsion)
    mh.RemoveConformer(cid)
    return rec


def _six_rings(mh: Chem.Mol) -> list[tuple[int, ...]]:
    """Every saturated six-membered ring, in ring order."""
    out = []
    for r in mh.GetRingInfo().AtomRings():
        if len(r) != 6:
            continue
        try:
            _check_ring(mh, tuple(r))
        except ValueError:
            continue
        out.append(tuple(r))
    return out


def _other_six_rings(mh: Chem.Mol, ring: tuple[int, ...]) -> list[tuple[int, ...]]:
    """Saturated six-membered rings sharing no atom with ``ring``."""
    return [r for r in _six_rings(mh) if not set(r) & set(ring)]


def force_flip(
    pair: ChairPair, conformer: ChairConformer, k_torsion: float = 200.0, min_torsion: float = 40.0
) -> ChairConformer | None:
    """The other chair, forced from ``conformer``: MMFF94 with the ring torsions held at
    the mirror-image pattern, then released and re-optimised freely.

    Returns the released minimum if its ring is a chair (the flipped one, normally),
    None if it relaxed off-chair or a watched substituent left its configured face.
    """
    mh = Chem.Mol(pair.mol)
    props = AllChem.MMFFGetMoleculeProperties(mh)
    if props is None:
        raise ValueError("MMFF94 has no parameters for this molecule")
    rec = _flip(mh, props, pair.ring, pair.ring, conformer, k_torsion, min_torsion)
    return rec if rec is not None and pair.keeps_faces(rec.positions) else None


def both_chairs(
    mol: Chem.Mol,
    ring_atoms: tuple[int, ...] | list[int],
    n_conformers: int = 30,
    seed: int = 20261201,
    keep: int = 4,
    min_torsion: float = 40.0,
    max_forced: int = 4,
    k_torsion: float = 200.0,
    rotor_step: float | None = 30.0,
) -> ChairPair:
    """Build both chairs of the ring ``ring_atoms`` (in ring order) of ``mol``.

    Returns up to ``keep`` distinct MMFF94 minima per chair, lowest first (sampling:
    see the module docstring; ``max_forced`` conformers of each chair are force-flipped,
    ``rotor_step`` None switches the rotor scan off). A chair the topology forbids
    (trans ring fusion, cages) or that no start reaches stays empty.
    ``seed`` fixes the ETKDG embedding, so a call is reproducible.

    >>> from rdkit import Chem
    >>> pair = both_chairs(Chem.MolFromSmiles("CC1CCCCC1"), (1, 2, 3, 4, 5, 6), n_conformers=10)
    >>> pair.delta_mmff_kj(0) > 0  # the methyl prefers equatorial
    True
    """
    ring = tuple(int(a) for a in ring_atoms)
    _check_ring(mol, ring)
    mh = Chem.AddHs(mol)
    faces, watch = _pin_faces(mh, ring)
    params = AllChem.ETKDGv3()
    params.randomSeed = int(seed)
    params.pruneRmsThresh = 0.1
    cids = list(AllChem.EmbedMultipleConfs(mh, numConfs=int(n_conformers), params=params))
    if not cids:
        params.useRandomCoords = True
        cids = list(AllChem.EmbedMultipleConfs(mh, numConfs=int(n_conformers), params=params))
    if not cids:
        raise ValueError("ETKDG could not embed the molecule")
    props = AllChem.MMFFGetMoleculeProperties(mh)
    if props is None:
        raise ValueError("MMFF94 has no parameters for this molecule")
    pair = ChairPair(
        mol=Chem.Mol(mh, confId=-1),
        ring=ring,
        chairs={0: [], 1: []},
        faces=faces,  # completed below; the watched atoms' faces are final once sampling starts
        n_embedded=len(cids),
        watched=watch,
    )
    pair.mol.RemoveAllConformers()

    found: dict[int, list[ChairConformer]] = {0: [], 1: []}

    def on_faces(rec: ChairConformer | None, how: str) -> bool:
        # a forced flip through the flat ring can push a ring CH through itself (inverting
        # the atom): such a structure is a different stereoisomer, not a chair of this one
        if rec is None:
            return False
        if not pair.keeps_faces(rec.positions):
            pair.notes.append(f"{how}: a substituent off its configured face; dropped")
            return False
        return True

    embedded = []
    for cid in cids:
        e = _relax(mh, props, cid)
        rec = _record(mh, ring, cid, e, False, min_torsion)
        if rec is None:
            pair.n_twist += 1
        else:
            embedded.append(rec)
    if embedded and watch - set(faces):
        # faces no tag fixes (untagged fusion / bridgehead atoms): those of the lowest chair
        low = min(embedded, key=lambda r: r.energy_kj)
        geo = _conformer_faces(low.positions, ring, mh)
        faces.update({a: geo[a] for a in watch - set(faces)})
        pair.notes.append("faces of untagged fusion/bridgehead atoms taken from the lowest embedded chair")
    for rec in embedded:
        if on_faces(rec, "embedding"):
            found[rec.chair].append(rec)

    # each chair also from forced flips of the best conformers of the other one: it fills a
    # chair sampling missed and carries the other chair's rotamers across
    sampled = {c: _distinct(found[c], max_forced) for c in (0, 1)}
    for target in (0, 1):
        for src in sampled[1 - target]:
            rec = _flip(mh, props, ring, ring, src, k_torsion, min_torsion)
            if rec is not None and rec.chair == target and on_faces(rec, "forced flip"):
                found[target].append(rec)
                pair.n_forced += 1
            else:
                pair.notes.append(f"forced chair {target} from chair {1 - target} did not hold")

    # other saturated six-membered rings (a cyclohexyl substituent) have two chairs of their
    # own, which ETKDG leaves to chance: flip each from the best conformers of both chairs
    for other in _other_six_rings(mh, ring):
        for c in (0, 1):
            for src in _distinct(found[c], keep):
                rec = _flip(mh, props, other, ring, src, k_torsion, min_torsion)
                if rec is not None and rec.chair == c and on_faces(rec, "side-ring flip"):
                    found[c].append(rec)
                    pair.n_side_ring_flips += 1

    # a substituent on a pyramidal ring N takes either position by N inversion (fast next
    # to ring inversion): start each kept conformer from the other invertomer as well
    for n_atom, x, moving in _invertible_nitrogens(mh, ring):
        for c in (0, 1):
            for src in _distinct(found[c], keep):
                cid = mh.AddConformer(Chem.Conformer(mh.GetNumAtoms()), assignId=True)
                conf = mh.GetConformer(cid)
                for i, q in enumerate(_inverted(src.positions, ring, n_atom, x, moving)):
                    conf.SetAtomPosition(i, q.tolist())
                e = _relax(mh, props, cid)
                rec = _record(mh, ring, cid, e, src.forced, min_torsion)
                mh.RemoveConformer(cid)
                if rec is not None and rec.chair == c and on_faces(rec, "N inversion"):
                    found[c].append(rec)
                    pair.n_invertomer_starts += 1

    # ETKDG leaves rotamers of the ring-substituent bonds to chance: turn each one
    # systematically from the best conformers of each chair and re-optimise
    rotors = _rotor_bonds(mh, ring) if rotor_step else []
    for c in (0, 1):
        for src in _distinct(found[c], keep) if rotors else []:
            for a, x, moving in rotors:
                for deg in np.arange(rotor_step, 360.0, rotor_step):
                    cid = mh.AddConformer(Chem.Conformer(mh.GetNumAtoms()), assignId=True)
                    conf = mh.GetConformer(cid)
                    for i, q in enumerate(_turned(src.positions, a, x, moving, float(deg))):
                        conf.SetAtomPosition(i, q.tolist())
                    e = _relax(mh, props, cid)
                    rec = _record(mh, ring, cid, e, src.forced, min_torsion)
                    mh.RemoveConformer(cid)
                    if rec is not None and rec.chair == c and on_faces(rec, "rotor scan"):
                        found[c].append(rec)
                        pair.n_rotamer_starts += 1

    for c in (0, 1):
        pair.chairs[c] = _distinct(found[c], keep)
    if any(pair.chairs[c] for c in (0, 1)):
        sample = next(pair.chairs[c][0] for c in (0, 1) if pair.chairs[c])
        geo = _conformer_faces(sample.positions, ring, mh)
        pair.faces = {a: faces.get(a, geo[a]) for a in geo}
    return pair
