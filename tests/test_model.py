"""The A-value regression model: its code-free file, the hash check, the engine's use of
it, and its measured quality (held-out whole substituents; leave-one-substituent-out on
the experimental table, whose rows carry their sources in datasets/parameters/a_values.csv)."""

from __future__ import annotations

import json
import os
import pickle
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from libconf import analyze
from libconf.chem import barrier, energy
from libconf.model import artefact
from libconf.model.features import FEATURE_NAMES, features, rels_for

ROOT = Path(__file__).resolve().parents[1]
MODELS = ROOT / "models"


def _fresh_caches():
    artefact._load.cache_clear()
    energy._a_value_in_context.cache_clear()
    barrier._computed_base_correction.cache_clear()


@pytest.fixture
def models_env(monkeypatch, tmp_path):
    """A private copy of models/ that a test may damage."""
    folder = tmp_path / "models"
    shutil.copytree(MODELS, folder)
    monkeypatch.setenv("LIBCONF_MODELS", str(folder))
    _fresh_caches()
    yield folder
    monkeypatch.delenv("LIBCONF_MODELS")
    _fresh_caches()


def test_json_trees_predict_as_scikit_learn():
    from sklearn.ensemble import GradientBoostingRegressor

    rng = np.random.default_rng(0)
    X = rng.integers(0, 4, size=(200, 6)).astype(float)
    y = X[:, 0] * 2 - X[:, 3] + rng.normal(0, 0.1, 200)
    for loss, kw in (("squared_error", {}), ("quantile", {"alpha": 0.84})):
        m = GradientBoostingRegressor(n_estimators=40, max_depth=3, loss=loss, random_state=0, **kw).fit(X, y)
        d = artefact.trees_to_dict(m, float(m.init_.predict(X[:1])[0]), m.learning_rate)
        trees = artefact._trees(json.loads(json.dumps(d)))
        ours = np.array([trees.predict(x) for x in X])
        assert np.allclose(ours, m.predict(X), atol=1e-4)


def test_shipped_model_matches_its_recorded_hash_and_names_its_features():
    sums = artefact.recorded_digests(MODELS)
    assert sums[artefact.MODEL_FILE] == artefact.sha256_file(MODELS / artefact.MODEL_FILE)
    m = artefact.read_model(MODELS / artefact.MODEL_FILE, sums[artefact.MODEL_FILE])
    assert m.feature_names == FEATURE_NAMES
    a, u = m.predict(features("*C(=O)NC", rels_for("cyclohexane", 1)))
    assert -5 < a < 15 and u > 0


def test_altered_model_file_is_refused(models_env):
    p = models_env / artefact.MODEL_FILE
    raw = bytearray(p.read_bytes())
    raw[raw.index(b'"rate":') + 8] ^= 1  # one digit of one learning rate
    p.write_bytes(bytes(raw))
    with pytest.raises(artefact.ModelFileError, match="does not match its recorded SHA-256"):
        artefact.load_model()


def test_model_without_recorded_hash_is_refused(models_env):
    (models_env / "SHA256SUMS").unlink()
    with pytest.raises(artefact.ModelFileError, match="no SHA-256 recorded"):
        artefact.load_model()


class _Payload:
    def __init__(self, target):
        self.target = target

    def __reduce__(self):
        return (Path.touch, (Path(self.target),))


def test_a_pickle_with_a_matching_hash_runs_no_code(models_env, tmp_path):
    """Even a file whose hash was re-recorded (someone with write access) is parsed as
    JSON only: a pickle that would create a file when unpickled does nothing."""
    marker = tmp_path / "code-ran"
    p = models_env / artefact.MODEL_FILE
    p.write_bytes(pickle.dumps(_Payload(marker)))
    artefact.record_digest(p)
    with pytest.raises(artefact.ModelFileError, match="not a valid libconf model file"):
        artefact.load_model()
    assert not marker.exists()


def test_tree_links_outside_the_tree_are_refused():
    bad = {
        "base": 0,
        "rate": 1,
        "trees": [
            {"left": [5, -1], "right": [1, -1], "feature": [0, 0], "threshold": [0, 0], "value": [0, 1]}
        ],
    }
    with pytest.raises(artefact.ModelFileError):
        artefact._trees(bad)


def _sub(res, key):
    for r in res.rings:
        for s in r.substituents:
            if s.group == key:
                return s
    raise AssertionError(key)


def test_engine_uses_the_table_where_it_can_and_the_model_otherwise():
    # methyl on cyclohexane is tabulated (7.3 kJ/mol, Eliel, Wilen & Mander 1994; a_values.csv)
    me = _sub(analyze("C[C@H]1CC[C@@H](C(=O)NC)CC1"), "*C")
    assert me.a_value_source == "table" and me.a_value_kjmol == pytest.approx(7.3, abs=0.2)
    res = analyze("C[C@H]1CC[C@@H](C(=O)NC)CC1")
    amide = _sub(res, "*C(=O)NC")
    assert amide.a_value_source == "model" and "regression model" in amide.source_ref
    assert res.rings[0].value_source == "mixed"
    assert 0 < res.rings[0].uncertainty_kjmol < 8


def test_without_a_model_file_untabulated_groups_fall_back_to_analogy(monkeypatch, tmp_path):
    monkeypatch.setenv("LIBCONF_MODELS", str(tmp_path))
    _fresh_caches()
    try:
        s = _sub(analyze("CNC(=O)C1CCCCC1"), "*C(=O)NC")
        assert s.a_value_source == "model"
        assert "analogy" in s.source_ref
    finally:
        monkeypatch.delenv("LIBCONF_MODELS")
        _fresh_caches()
    s = _sub(analyze("CNC(=O)C1CCCCC1"), "*C(=O)NC")
    assert "regression model" in s.source_ref


def test_annotate_refuses_an_altered_model_before_reading_records(tmp_path):
    folder = tmp_path / "models"
    shutil.copytree(MODELS, folder)
    p = folder / artefact.MODEL_FILE
    p.write_bytes(p.read_bytes().replace(b'"rate":', b'"rate" :', 1))
    smi = tmp_path / "in.smi"
    smi.write_text("CC1CCCCC1 one\n")
    env = dict(os.environ, LIBCONF_MODELS=str(folder))
    r = subprocess.run(
        [sys.executable, "-m", "libconf", "annotate", str(smi), "--out", str(tmp_path / "run"), "--quiet"],
        capture_output=True,
        text=True,
        env=env,
        timeout=120,
    )
    assert r.returncode == 1
    assert "does not match its recorded SHA-256" in r.stderr and str(p) in r.stderr


def test_manifest_records_the_model_hash(tmp_path):
    from libconf.pipeline.run import _versions

    assert _versions()["model_sha256"] == artefact.sha256_file(MODELS / artefact.MODEL_FILE)


@pytest.fixture(scope="module")
def training():
    from libconf.model import train

    return train, train.dataset()


@pytest.fixture(scope="module")
def loo(training):
    train, (rows, X, y, w, groups, cal) = training
    return train.leave_one_group_out_experiment(rows, X, y, w, groups)


def test_leave_one_substituent_out_signs_and_error(loo):
    """Every tabulated group on cyclohexane predicted by a model fitted without any row
    of that group (experimental values and sources: datasets/parameters/a_values.csv).
    Issue target: right sign for every |A| >= 1 kJ/mol (met) and MAE <= 1.5 (measured
    1.48; the bound here leaves a margin, the target is the next test)."""
    assert len(loo) >= 40
    wrong = [r["group"] for r in loo if abs(r["experiment"]) >= 1 and r["predicted"] * r["experiment"] <= 0]
    assert wrong == []
    mae = np.mean([abs(r["predicted"] - r["experiment"]) for r in loo])
    assert mae <= 1.8, f"leave-one-substituent-out MAE {mae:.2f} kJ/mol"


def test_leave_one_substituent_out_issue_target(loo):
    """Issue target, met with little room (1.48 kJ/mol with trainer 2 on the data as
    shipped; MODEL_CARD.md). Experimental values: datasets/parameters/a_values.csv."""
    assert np.mean([abs(r["predicted"] - r["experiment"]) for r in loo]) <= 1.5


def test_held_out_substituents_against_experimental_rows(training):
    """Held-out whole substituents (10-fold by group), scored on the experimental rows of
    those substituents (sources in datasets/parameters/a_values.csv): measured 1.82 kJ/mol;
    the bound leaves a margin for another scikit-learn build."""
    train, (rows, X, y, w, groups, cal) = training
    cv = train.grouped_cv(rows, X, y, w, groups)
    assert cv["experiment_mae_kjmol"] <= 2.2


def test_held_out_substituents_issue_target(training):
    """Issue target, met with little room: 1.40 kJ/mol on the recorded fold assignment, 1.42
    and 1.45 on two others (MODEL_CARD.md); the computed set's own twin scatter is 1.26."""
    train, (rows, X, y, w, groups, cal) = training
    assert train.grouped_cv(rows, X, y, w, groups)["computed_mae_kjmol"] <= 1.5


def test_cyclohexane_barrier_unchanged_and_only_estimated_classes_corrected():
    """Cyclohexane's barrier stays within 2 kJ/mol of the published 43 (Anet & Bourn,
    J. Am. Chem. Soc. 1967, 89, 760); a tabulated class keeps its table value, an
    estimated one (morpholine: no measured barrier found) gets the computed term."""
    ring = analyze("C1CCCCC1").rings[0]
    assert abs(ring.barrier_kjmol - 43.0) <= 2.0
    assert all(t.rule != "computed_base" for t in analyze("C1CCNCC1").rings[0].barrier_terms)
    morph = analyze("C1COCCN1").rings[0]
    assert any(t.rule == "computed_base" for t in morph.barrier_terms)


def test_model_card_matches_the_shipped_file():
    """The card is generated from the recorded metrics; it names the file's hash."""
    from libconf.model import card

    metrics = json.loads((MODELS / "a_value_model.metrics.json").read_text(encoding="utf-8"))
    assert metrics["model_sha256"] == artefact.sha256_file(MODELS / artefact.MODEL_FILE)
    text = card.render(metrics, None, None)
    assert metrics["model_sha256"] in text and "Held-out **whole substituents**" in text
    assert metrics["model_sha256"] in (MODELS / "MODEL_CARD.md").read_text(encoding="utf-8")


def test_vectorised_prediction_equals_a_tree_by_tree_walk():
    """The shipped model walked one tree at a time in plain Python (the reference) and by
    the engine's all-trees-at-once numpy walk give the same floats on the training rows."""
    from libconf.model import train

    def walk(ens, x):
        s = 0.0
        for left, right, feature, threshold, value in ens.trees:
            node = 0
            while left[node] != -1:
                node = left[node] if x[feature[node]] <= threshold[node] else right[node]
            s += value[node]
        return ens.base + ens.rate * s

    m = artefact.load_model()
    rows, X, *_ = train.dataset()
    for x in X[:200]:
        lo, hi = walk(m.low, list(x)), walk(m.high, list(x))
        ref = (walk(m.mean, list(x)), max(m.uncertainty_floor, 0.5 * abs(hi - lo)))
        assert m.predict(x) == ref
