"""The harvest stage of the training-data generator."""

import os

from rdkit import RDConfig

import libconf
from libconf.compute.harvest import harvest, ring_with_group


def test_model_compounds_carry_the_group_at_the_right_locant():
    for ring_class, locant, group in [
        ("piperidine", 3, "*C"),
        ("1,3-dioxane", 5, "*C"),
        ("morpholine", 2, "*c1ccccc1"),
        ("oxane", 4, "*OC(=O)C"),
    ]:
        smi = ring_with_group(ring_class, locant, group)
        ring = libconf.analyze(smi).rings[0]
        assert ring.ring_class == ring_class
        assert [(s.position, s.group) for s in ring.substituents] == [(locant, group)]


def test_harvest_counts_substituents_and_sources():
    df, summary = harvest([os.path.join(RDConfig.RDDataDir, "NCI", "first_5K.smi")], limit=500)
    assert summary["molecules"] == 500
    assert 0.0 < summary["share_table"] < 1.0
    assert abs(summary["share_table"] + summary["share_model"] - 1.0) < 1e-9
    assert df["count"].sum() == summary["substituents_with_a_value"]
    assert set(df["a_value_source"]) <= {"table", "model"}
