"""Bad input raises one exception type with a sentence a chemist can act on."""

import json
import subprocess
import sys

import pytest
from rdkit import Chem

import libconf
from libconf import InputError


@pytest.mark.parametrize(
    "smiles,expect",
    [
        ("C1CC(", "parse error at position"),
        ("C1CCCCC", "ring-closure digit is never closed"),
        ("CN(C)(C)(C)C", "valence error on N2"),
        ("c1cccc1", "cannot be kekulized"),
        ("", "empty molecule"),
        ("   ", "empty molecule"),
    ],
)
def test_bad_smiles_raise_input_error_with_reason(smiles, expect):
    with pytest.raises(InputError) as info:
        libconf.analyze(smiles)
    assert expect in info.value.reason
    assert info.value.stage == "parse"


def test_heavy_atom_limit_is_documented_and_enforced():
    big = "C" * 30
    with pytest.raises(InputError) as info:
        libconf.analyze(big, max_heavy_atoms=20)
    assert info.value.reason == "record exceeds 20 heavy atoms (30)"
    assert info.value.stage == "analyse"
    assert libconf.engine.MAX_HEAVY_ATOMS == 500


def test_empty_mol_object_is_rejected():
    with pytest.raises(InputError, match="empty molecule"):
        libconf.analyze(Chem.Mol())


def test_non_string_input_is_rejected():
    with pytest.raises(InputError, match="expected a SMILES string"):
        libconf.analyze(12345)


def test_unknown_medium_is_a_usage_error():
    with pytest.raises(ValueError, match="medium must be one of"):
        libconf.analyze("C1CCCCC1", medium="gas")


def test_mol_from_sdf_with_explicit_hydrogens_keeps_heavy_atom_indices():
    mol = Chem.AddHs(Chem.MolFromSmiles("C[C@H]1CC[C@@H](C(C)(C)C)CC1"))
    res = libconf.analyze(mol)
    assert res.n_heavy_atoms == 11
    assert res.rings[0].lock_class == "anchored"


def run_cli(*args):
    return subprocess.run([sys.executable, "-m", "libconf", *args], capture_output=True, text=True)


def test_explain_turns_bad_input_into_one_line_and_status_2():
    proc = run_cli("explain", "C1CC(")
    assert proc.returncode == 2
    assert proc.stdout == ""
    lines = proc.stderr.strip().splitlines()
    assert lines == ["libconf explain: SMILES parse error at position 5"]


def test_explain_json_uses_table_field_names():
    proc = run_cli("explain", "C[C@H]1CC[C@@H](C(C)(C)C)CC1", "--json")
    assert proc.returncode == 0, proc.stderr
    data = json.loads(proc.stdout)
    for col in libconf.results.MoleculeResult.COLUMNS:
        assert col in data
    ring = data["rings"][0]
    for col in libconf.results.RingResult.COLUMNS:
        assert col in ring
    sub = ring["substituents"][0]
    for col in (
        "ring_id",
        "ring_atom",
        "position",
        "first_atom",
        "group",
        "face",
        "axial_fraction",
        "a_value_kjmol",
        "a_value_source",
    ):
        assert col in sub
    assert ring["lock_class"] == "anchored"


def test_explain_text_names_groups_sources_and_lock_reason():
    proc = run_cli("explain", "C[C@H]1CC[C@@H](C(C)(C)C)CC1", "--medium", "nonpolar")
    assert proc.returncode == 0
    out = proc.stdout
    assert "tert-butyl" in out and "Wiberg" in out
    assert "anchored - 4-tert-butyl equatorial" in out
    assert "do not replace experiment" in out


def test_explain_molecule_without_ring():
    proc = run_cli("explain", "CCO")
    assert proc.returncode == 0
    assert "No saturated six-membered ring" in proc.stdout


def test_explain_help_mentions_media():
    proc = run_cli("explain", "--help")
    assert proc.returncode == 0
    assert "nonpolar" in proc.stdout and "water" in proc.stdout


def test_explain_plot_writes_a_png(tmp_path):
    out = tmp_path / "chairs.png"
    proc = run_cli("explain", "C[C@@H]1C[C@H](C)CCC1", "--plot", str(out))
    assert proc.returncode == 0, proc.stderr
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
