"""Property-based and hostile-input tests of `libconf.analyze`: whatever comes in, the
answer is a result or an InputError with a reason, never another exception or a hang."""

import os
import random

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from rdkit import Chem, RDConfig

import libconf
from libconf import InputError

SMILES_ALPHABET = "CNOSPFIBrcnos()[]=#@+-/\\%0123456789H.*:$~ "
FUZZ = settings(max_examples=250, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def _check(smiles):
    try:
        res = libconf.analyze(smiles)
    except InputError as exc:
        assert exc.reason and exc.stage in ("read", "parse", "analyse")
        return None
    assert res.n_sat6_rings == len(res.rings)
    for ring in res.rings:
        assert ring.lock_class in ("mobile", "biased", "anchored", "fixed", "trapped")
        if ring.dG_flip_kjmol is not None:
            assert ring.dG_flip_kjmol >= 0
            assert 0.0 <= ring.major_chair_fraction <= 1.0
        for s in ring.substituents:
            assert s.face in ("up", "down", "invertible", "planar", "unassigned")
            assert s.axial_fraction is None or -1e-9 <= s.axial_fraction <= 1 + 1e-9
    return res


@FUZZ
@given(st.text(alphabet=SMILES_ALPHABET, max_size=80))
def test_random_smiles_like_text_never_crashes(text):
    _check(text)


@FUZZ
@given(st.text(max_size=60))
def test_random_unicode_never_crashes(text):
    _check(text)


def _pool():
    path = os.path.join(RDConfig.RDDataDir, "NCI", "first_5K.smi")
    with open(path) as fh:
        return [line.split()[0] for _, line in zip(range(800), fh)]


POOL = _pool()


@FUZZ
@given(
    st.integers(0, len(POOL) - 1),
    st.lists(
        st.tuples(
            st.integers(0, 200),
            st.sampled_from(SMILES_ALPHABET),
            st.sampled_from(["insert", "delete", "replace"]),
        ),
        max_size=4,
    ),
)
def test_mutated_real_smiles_never_crash(index, edits):
    s = list(POOL[index])
    for pos, ch, op in edits:
        if not s:
            break
        pos %= len(s)
        if op == "insert":
            s.insert(pos, ch)
        elif op == "delete":
            del s[pos]
        else:
            s[pos] = ch
    _check("".join(s))


HOSTILE = {
    "fullerene C60": "c12c3c4c5c1c1c6c7c2c2c8c3c3c9c4c4c%10c5c5c1c1c6c6c%11c7c2c2c7c8c3c3c8c9c4c4c9c%10c5c5c1c1c6c6c%11c2c2c7c3c3c8c4c4c9c5c1c1c6c2c3c41",
    "dodecahedrane": "C12C3C4C5C1C1C6C7C2C2C3C3C8C4C4C5C1C1C6C6C7C2C3C8C4C16",
    "cubane": "C12C3C4C1C5C2C3C45",
    "diamantane": "C1C2CC3C4CC5CC(C4)C3C1C5C2",
    "triamantane-like cage": "C1C2CC3C4C1C1C5C2C2CC6C3C3C7CC4C1C1CC5C2C6C3C71",
    "ferrocene (organometallic)": "[cH-]1cccc1.[cH-]1cccc1.[Fe+2]",
    "Grignard": "C1CCC(CC1)[Mg]Br",
    "radical": "C1CC[CH]CC1",
    "carbene-like": "C1CC[C]CC1",
    "isotopes": "[2H]C1([2H])CC[13CH](C)CC1",
    "charges": "C[N+]1(C)CCCCC1.[Cl-]",
    "explicit hydrogens": "[H]C1([H])C([H])([H])C([H])([H])C([H])([H])C([H])([H])C1([H])[H]",
    "query atom": "[#6]1[#6][#6][#6][#6][#6]1",
    "dummy atoms": "*C1CCC(*)CC1",
    "reaction arrow": "CC>>CO",
    "disconnected salts": "CC1CCCCC1.O.O.[Na+].[Cl-]",
    "long chain": "C" * 400,
    "too big": "C1CCCCC1" + "C" * 600,
    "deep branching": "C" + "(C" * 200 + ")" * 200,
    "very long line": "C1CCCCC1" * 2000,
    "nested rings": "C1CC2CCC3CCC4CCC5CCC6CCC7CCCCC7CC6CC5CC4CC3CC2C1",
    "spiro chain": "C1CCC2(CC1)CCC1(CC2)CCC2(CC1)CCCCC2",
    "all stereo open": "CC1CC(C)CC(C)C1C(C)C1CC(O)C(O)C(O)C1",
    "empty": "",
    "whitespace": " \t ",
    "NUL": "C1CC\x00CCC1",
}


@pytest.mark.parametrize("name", sorted(HOSTILE))
def test_hostile_molecules_end_as_results_or_reasons(name):
    _check(HOSTILE[name])


def test_cages_and_limits_behave():
    assert libconf.analyze(HOSTILE["diamantane"]).rings and all(
        r.lock_class == "fixed" for r in libconf.analyze(HOSTILE["diamantane"]).rings
    )
    with pytest.raises(InputError, match="heavy atoms"):
        libconf.analyze(HOSTILE["too big"])


def test_many_open_stereocentres_are_capped():
    # six stereocentres on one ring: 2^5 assignments after mirror symmetry, capped at 8 here
    smi = "CC1C(C)C(C)C(C)C(C)C1C"
    res = libconf.analyze(smi, max_stereo_assignments=8)
    ring = res.rings[0]
    assert ring.stereo_status == "none"
    assert ring.n_stereo_assignments <= 8


def test_random_stereoisomers_of_a_ring_rich_molecule_are_all_analysed():
    from rdkit.Chem.EnumerateStereoisomers import EnumerateStereoisomers, StereoEnumerationOptions

    rng = random.Random(5)
    mol = Chem.MolFromSmiles("OC1CC2CCC3C(CCC4CC(O)CCC43C)C2(C)CC1")
    opts = StereoEnumerationOptions(onlyUnassigned=False, maxIsomers=40, rand=rng.randrange(1 << 30))
    n = 0
    for iso in EnumerateStereoisomers(mol, options=opts):
        _check(Chem.MolToSmiles(iso))
        n += 1
    assert n >= 20
