"""Faces from the configuration alone must agree with 3D geometry.

Reference: RDKit's ETKDG embeddings (a general reference library) of random
stereoisomers of ring-bearing molecules from the NCI subset that RDKit ships
(rdkit/Data/NCI/first_5K.smi). For every substituent whose face the engine
derives from a chiral tag, the 3D structure must put it on the same side of
the ring: 100 % agreement over at least 1,000 stereoisomers.
"""

import os
import random

import numpy as np
import pytest
from rdkit import Chem, RDConfig
from rdkit.Chem import AllChem
from rdkit.Chem.EnumerateStereoisomers import EnumerateStereoisomers, StereoEnumerationOptions

from libconf.chem.molview import MolView
from libconf.chem.rings import describe_ring, saturated_six_rings
from libconf.chem.substituents import ring_substituents

N_ISOMERS = 1000


def _source_molecules():
    path = os.path.join(RDConfig.RDDataDir, "NCI", "first_5K.smi")
    out = []
    with open(path) as fh:
        for line in fh:
            smi = line.split()[0]
            mol = Chem.MolFromSmiles(smi)
            if mol is None or mol.GetNumAtoms() > 30:
                continue
            rings = saturated_six_rings(mol)
            if not rings:
                continue
            # keep molecules with at least one substituted ring atom
            if any(mol.GetAtomWithIdx(a).GetDegree() > 2 for r in rings for a in r):
                out.append(mol)
    return out


def _face_3d(mol_h, conf, ring_atoms, k, sub):
    pos = np.array([list(conf.GetAtomPosition(i)) for i in ring_atoms])
    c = pos.mean(axis=0)
    normal = sum(np.cross(pos[i] - c, pos[(i + 1) % 6] - c) for i in range(6))
    ring_set = set(ring_atoms)
    others = [
        n.GetIdx()
        for n in mol_h.GetAtomWithIdx(ring_atoms[k]).GetNeighbors()
        if n.GetIdx() not in ring_set and n.GetIdx() != sub
    ]
    if len(others) != 1:
        return None
    p = lambda i: np.array(list(conf.GetAtomPosition(i)))  # noqa: E731
    return "up" if float(np.dot(p(sub) - p(others[0]), normal)) > 0 else "down"


@pytest.mark.slow
def test_faces_agree_with_etkdg_embeddings_of_random_stereoisomers():
    rng = random.Random(20261201)
    mols = _source_molecules()
    rng.shuffle(mols)
    checked_isomers, checked_faces, disagreements, skipped = 0, 0, [], 0
    params = AllChem.ETKDGv3()
    params.randomSeed = 7
    params.maxIterations = 100
    params.timeout = 1  # seconds: impossible polycyclic isomers fail fast
    for mol in mols:
        if checked_isomers >= N_ISOMERS:
            break
        opts = StereoEnumerationOptions(
            onlyUnassigned=False, maxIsomers=8, rand=rng.randrange(1 << 30), unique=True
        )
        for iso in EnumerateStereoisomers(mol, options=opts):
            iso = Chem.MolFromSmiles(Chem.MolToSmiles(iso))  # as a user would give it
            if iso is None:
                continue
            mh = Chem.AddHs(iso)
            if AllChem.EmbedMolecule(mh, params) != 0:
                skipped += 1
                continue
            # the embedding must carry the requested configuration
            check = Chem.RemoveHs(mh)
            Chem.AssignStereochemistryFrom3D(check)
            if Chem.MolToSmiles(check) != Chem.MolToSmiles(iso):
                skipped += 1
                continue
            conf = mh.GetConformer()
            n_here = 0
            all_rings = iso.GetRingInfo().AtomRings()
            view = MolView(iso)
            for atoms in saturated_six_rings(iso):
                ring = describe_ring(view, atoms, all_rings)
                for s in ring_substituents(view, ring):
                    if s.face not in ("up", "down"):
                        continue
                    geo = _face_3d(mh, conf, ring.atoms, s.ring_index, s.first_atom)
                    if geo is None:
                        continue
                    n_here += 1
                    if geo != s.face:
                        disagreements.append((Chem.MolToSmiles(iso), s.ring_atom, s.first_atom))
            if n_here:
                checked_isomers += 1
                checked_faces += n_here
    print(f"isomers {checked_isomers}, faces {checked_faces}, skipped embeddings {skipped}")
    assert checked_isomers >= N_ISOMERS
    assert not disagreements, disagreements[:5]
