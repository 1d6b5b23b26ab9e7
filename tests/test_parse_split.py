"""`analyze` validates a SMILES with RDKit's rejecting sanitisation steps first and runs
the annotating ones only for a molecule that may carry a saturated six-membered ring
(libconf/engine.py, `_parse_for_analysis`). Both halves together must accept and reject
exactly what one full sanitisation (`parse_smiles`) does, with the same reason, and give
the same rings."""

import json
import os

import pytest
from rdkit import RDConfig

from libconf.engine import analyze, parse_smiles
from libconf.errors import InputError

TRICKY = [
    "C1CC",  # unclosed ring
    "c1ccccc1C(C)(C)(C)(C)C",  # pentavalent carbon
    "c1cccc1",  # cannot be kekulized
    "c1cc[n]c1",
    "c1ccc[nH]1",
    "C1CCCCC1[H]",
    "[H]C1CCCCC1",
    "[2H]C1CCCCC1",  # an H that RemoveHs keeps
    "C1=CC2CCCCC2C=C1",
    "C1=CC=C2CCCCC2=C1",  # tetralin in Kekulé form: the fusion bond reads single before aromaticity
    "c1ccc2c(c1)CCCC2",
    "O=N(=O)C1CCCCC1",  # nitro group rewritten by the clean-up step
    "C1CC[N+]CC1",
    "B1CCCCC1",
    "C[Si](C)(C)C1CCCCC1",
    "[Na+].[Cl-]",
    "F[P-](F)(F)(F)(F)F",
    "CN(C)C[C-]12C3=C4C5=C1[Fe++]23456789[C-]%10C6=C7C8=C9%10",  # needs the organometallic clean-up
    "CC(C)(C)[C@H]1CC[C@@H](C)CC1",
    "C1CCCCC1.c1cccnc1",
]


def _outcome(smiles):
    try:
        parse_smiles(smiles)
        full = None
    except InputError as exc:
        full = exc.reason
    try:
        res = analyze(smiles)
        split = None
    except InputError as exc:
        res, split = None, exc.reason
    return full, split, res


def _nci():
    path = os.path.join(RDConfig.RDDataDir, "NCI", "first_5K.smi")
    if not os.path.exists(path):
        pytest.skip("RDKit's NCI sample is not installed")
    with open(path) as fh:
        return [line.split()[0] for line in fh if line.strip()][:2500]


@pytest.mark.parametrize("smiles", TRICKY)
def test_split_sanitisation_accepts_and_rejects_like_full_sanitisation(smiles):
    full, split, res = _outcome(smiles)
    assert split == full
    if res is not None:
        ref = analyze(parse_smiles(smiles))
        assert [r.to_dict() for r in res.rings] == [r.to_dict() for r in ref.rings]


def test_split_sanitisation_on_a_real_library():
    # RDKit's bundled NCI sample (rdkit/Data/NCI/first_5K.smi): open data, mixed quality
    diffs = []
    for s in _nci():
        full, split, res = _outcome(s)
        if full != split:
            diffs.append((s, full, split))
        elif res is not None and res.rings:
            ref = analyze(parse_smiles(s))
            a = json.dumps([r.to_dict() for r in res.rings], default=str)
            b = json.dumps([r.to_dict() for r in ref.rings], default=str)
            if a != b:
                diffs.append((s, "rings differ", ""))
    assert diffs == []


@pytest.mark.parametrize(
    ("smiles", "n_rings"),
    [
        ("C12CCC(CC1)CC2", 3),  # bicyclo[2.2.2]octane: three six-membered rings
        ("C1CCC2(CC1)CCCCC2", 2),  # spiro[5.5]undecane
        ("O=C1CCCCC1", 1),  # cyclohexanone: ring bonds all single
        ("C1CCOCC1", 1),
        ("c1ccc2c(c1)CCCC2", 0),  # tetralin: the fusion bond is aromatic
        ("c1ccccc1", 0),
    ],
)
def test_saturated_ring_prefilter_agrees_with_the_ring_search(smiles, n_rings):
    # the pre-test (RDKit's saturated-ring count, then a substructure search) says yes
    # for every molecule the ring search finds a ring in, and no for these without one
    from libconf.chem.rings import has_saturated_six_ring, saturated_six_rings

    mol = parse_smiles(smiles)
    assert len(saturated_six_rings(mol)) == n_rings
    assert has_saturated_six_ring(mol) == (n_rings > 0)


def test_saturated_ring_prefilter_never_hides_a_ring_in_a_real_library():
    # RDKit's bundled NCI sample (rdkit/Data/NCI/first_5K.smi)
    from libconf.chem.rings import has_saturated_six_ring, saturated_six_rings

    missed = []
    for s in _nci():
        try:
            mol = parse_smiles(s)
        except InputError:
            continue
        if saturated_six_rings(mol) and not has_saturated_six_ring(mol):
            missed.append(s)
    assert missed == []


def _atom_state(mol):
    return [(a.GetIsAromatic(), a.GetTotalNumHs(), a.GetNumExplicitHs()) for a in mol.GetAtoms()], [
        b.GetIsAromatic() for b in mol.GetBonds()
    ]


def test_finishing_steps_match_full_sanitisation_on_a_real_library():
    """`_finish` (RDKit's aromaticity call plus the H adjustment redone for aromatic
    heteroatoms, for SMILES without stereo marks) leaves every atom aromatic or not and with
    the H count that one full SanitizeMol gives; checked on RDKit's bundled NCI sample as
    written and in Kekulé form (where pyrrole-type N atoms keep their H only through that
    adjustment)."""
    from rdkit import Chem

    from libconf.engine import _VALIDATE, _finish

    written = _nci()
    kekule = []
    for s in written:
        m = Chem.MolFromSmiles(s)
        if m is not None:
            Chem.Kekulize(m, clearAromaticFlags=True)
            kekule.append(Chem.MolToSmiles(m, kekuleSmiles=True))
    n = adjusted = 0
    for s in written + kekule + TRICKY:
        full = Chem.MolFromSmiles(s, sanitize=False)
        split = Chem.MolFromSmiles(s, sanitize=False)
        if full is None:
            continue
        try:
            Chem.SanitizeMol(full)
        except Exception:
            continue
        Chem.SanitizeMol(split, _VALIDATE)
        _finish(split, s)
        assert _atom_state(split) == _atom_state(full), s
        n += 1
        adjusted += any(a.GetIsAromatic() and a.GetNumExplicitHs() and not a.GetNoImplicit() for a in full.GetAtoms())
    assert n > 4000 and adjusted > 50
