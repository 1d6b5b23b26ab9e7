"""The increment tables are data with provenance: every row names a source and a status."""

import csv

import pytest

import libconf
from libconf import parameters
from libconf.chem.barrier import LockThresholds

STATUSES = {"confirmed", "confirmed-secondary", "memory", "derived", "estimate"}


@pytest.mark.parametrize("name", parameters.Parameters.FILES)
def test_every_row_has_a_source_and_a_known_status(name):
    path = parameters.parameters_dir() / name
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert rows, name
    if "source" not in rows[0]:
        return  # group_classes.csv maps classes to tabulated groups; no values of its own
    for row in rows:
        assert row["source"].strip(), (name, row)
        assert row["status"] in STATUSES, (name, row)


def test_every_table_group_is_a_valid_group_smiles():
    P = parameters.load()
    for key in P.a_values:
        assert "*" in key[0]


def test_parameter_digest_is_stable():
    P = parameters.load()
    assert P.digest() == P.digest()
    assert len(P.digest()) == 64


def test_temperature_enters_the_populations():
    # Boltzmann: a higher temperature populates the minor chair more (common practice)
    cold = libconf.analyze("CC1CCCCC1", temperature=200.0).rings[0]
    warm = libconf.analyze("CC1CCCCC1", temperature=400.0).rings[0]
    assert cold.major_chair_fraction > warm.major_chair_fraction
    assert cold.flip_rate_per_s < warm.flip_rate_per_s


def test_entropy_row_makes_the_anomeric_preference_temperature_dependent():
    # 2-methoxyoxane: dS(ax - eq) = +2.7 eu (Booth, Grindley & Khedhair 1982): axial gains with T
    cold = libconf.analyze("COC1CCCCO1", medium="nonpolar", temperature=180.0).rings[0]
    warm = libconf.analyze("COC1CCCCO1", medium="nonpolar", temperature=298.15).rings[0]
    assert warm.substituents[0].a_value_kjmol < cold.substituents[0].a_value_kjmol


def test_lock_thresholds_are_configurable():
    smi = "CC1CCCCC1"  # 95 % equatorial at 298 K: biased by default
    assert libconf.analyze(smi).rings[0].lock_class == "biased"
    loose = LockThresholds(biased=0.80, anchored=0.94)
    assert libconf.analyze(smi, thresholds=loose).rings[0].lock_class == "anchored"
