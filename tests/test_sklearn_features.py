"""RingConformationFeatures: scikit-learn conformance, input forms, invalid and ring-free rows.

scikit-learn's own estimator checks run below. Those that feed random numeric matrices
cannot apply to a transformer of SMILES strings; they are declared in
``libconf.sklearn.EXPECTED_FAILED_CHECKS`` (with the reason), and
``test_only_the_declared_checks_fail_and_for_the_stated_reason`` pins that they fail
only because the input is refused, and that every other check passes. The properties
those checks would have tested are tested here with SMILES.
"""

from __future__ import annotations

import pickle

import numpy as np
import pandas as pd
import pytest
from sklearn.base import clone
from sklearn.compose import ColumnTransformer
from sklearn.impute import SimpleImputer
from sklearn.linear_model import Ridge
from sklearn.pipeline import Pipeline, make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.utils.estimator_checks import check_estimator, parametrize_with_checks

from libconf.sklearn import EXPECTED_FAILED_CHECKS, FEATURE_NAMES, RingConformationFeatures

COL = {name: k for k, name in enumerate(FEATURE_NAMES)}

#: Invented library: ring-bearing, ring-free, locked and invalid records.
SMILES = [
    "CC1CCCCC1",  # methylcyclohexane
    "c1ccccc1",  # benzene: no saturated six-membered ring
    "O[C@H]1CC[C@H](C(C)(C)C)CC1",  # trans-4-tert-butylcyclohexanol
    "C1CC[C@H]2CCCC[C@@H]2C1",  # trans-decalin
    "C1CC(",  # parse error
    "CN1CCN(CC1)C(=O)c1ccccc1",
    "OC[C@H]1O[C@@H](O)[C@H](O)[C@@H](O)[C@@H]1O",
    "CCO",
]


@parametrize_with_checks(
    [RingConformationFeatures()], expected_failed_checks=lambda est: EXPECTED_FAILED_CHECKS
)
def test_sklearn_estimator_checks(estimator, check):
    check(estimator)


def test_only_the_declared_checks_fail_and_for_the_stated_reason():
    results = check_estimator(
        RingConformationFeatures(), on_fail=None, expected_failed_checks=EXPECTED_FAILED_CHECKS
    )
    status = {}
    for r in results:
        status.setdefault(r["check_name"], set()).add(r["status"])
        if r["status"] == "xfail":
            exc = r["exception"]
            text = f"{exc} {exc.__cause__} {exc.__context__}"
            assert "SMILES" in text or "1-D" in r["expected_to_fail_reason"], (r["check_name"], text)
    failed = sorted(name for name, s in status.items() if "failed" in s)
    assert failed == []
    passed = {name for name, s in status.items() if s == {"passed"}}
    for must in (
        "check_no_attributes_set_in_init",
        "check_get_params_invariance",
        "check_set_params",
        "check_estimators_unfitted",
        "check_transformers_unfitted",
        "check_estimator_sparse_array",
        "check_estimators_empty_data_messages",
        "check_parameters_default_constructible",
        "check_estimator_repr",
    ):
        assert must in passed, must
    # a declared check that started to pass should leave the list
    assert {name for name, s in status.items() if "xfail" in s} == set(EXPECTED_FAILED_CHECKS)


@pytest.fixture(scope="module")
def features() -> np.ndarray:
    return RingConformationFeatures().fit_transform(SMILES)


def test_output_is_fixed_width_float_with_names(features):
    t = RingConformationFeatures().fit(SMILES)
    assert features.shape == (len(SMILES), 11) and features.dtype == np.float64
    assert list(t.get_feature_names_out()) == [
        "n_sat6_rings",
        "n_locked_rings",
        "locked_scaffold",
        "max_dG_flip_kjmol",
        "min_dG_flip_kjmol",
        "max_barrier_kjmol",
        "min_barrier_kjmol",
        "axial_strain_kjmol",
        "n_axial_major",
        "n_stereo_undefined_rings",
        "has_sat6_ring",
    ]
    assert list(t.get_feature_names_out(["x"])) == list(FEATURE_NAMES)
    with pytest.raises(ValueError, match="length 1"):
        t.get_feature_names_out(["a", "b"])


def test_values_agree_with_textbook_conformational_facts(features):
    me = features[0]
    # Methyl A-value 1.74 kcal/mol = 7.3 kJ/mol (Eliel & Wilen, Stereochemistry of
    # Organic Compounds, Wiley 1994, ch. 11): the flip costs that, ~95 % equatorial.
    assert me[COL["n_sat6_rings"]] == 1 and me[COL["has_sat6_ring"]] == 1
    assert me[COL["max_dG_flip_kjmol"]] == pytest.approx(7.3, abs=0.5)
    assert me[COL["n_axial_major"]] == pytest.approx(0.05, abs=0.02)
    # Cyclohexane ring inversion barrier ~43 kJ/mol (10.3 kcal/mol, Anet & Bourn,
    # J. Am. Chem. Soc. 1967); a methyl group adds little.
    assert 40 <= me[COL["max_barrier_kjmol"]] <= 50
    # trans-4-tert-Butylcyclohexanol: the tert-butyl group holds the chair (Winstein &
    # Holness, J. Am. Chem. Soc. 1955), so the scaffold counts as locked.
    assert features[2, COL["locked_scaffold"]] == 1 and features[2, COL["n_locked_rings"]] == 1
    # trans-Decalin cannot ring-flip (Eliel & Wilen 1994): both rings locked.
    assert features[3, COL["n_locked_rings"]] == 2


def test_ring_free_molecules_count_zero_and_take_fill_value(features):
    for row in (1, 7):  # benzene, ethanol
        assert features[row, COL["has_sat6_ring"]] == 0
        for name in ("n_sat6_rings", "n_locked_rings", "locked_scaffold", "n_axial_major"):
            assert features[row, COL[name]] == 0, name
        for name in ("max_dG_flip_kjmol", "min_barrier_kjmol", "axial_strain_kjmol"):
            assert features[row, COL[name]] == 0.0, name
    filled = RingConformationFeatures(fill_value=-1.0).fit_transform(["c1ccccc1", "CC1CCCCC1"])
    assert filled[0, COL["max_dG_flip_kjmol"]] == -1.0 and filled[0, COL["n_sat6_rings"]] == 0
    assert filled[1, COL["max_dG_flip_kjmol"]] == pytest.approx(7.3, abs=0.5)
    # a valid molecule never has NaN, whatever the fill
    assert not np.isnan(np.delete(features, 4, axis=0)).any()


def test_invalid_smiles_give_nan_rows_or_raise_with_the_reason(features):
    assert np.isnan(features[4]).all()
    t = RingConformationFeatures().fit(["C"])
    out = t.transform(["", None, np.nan, "C1CC(", "C[N](C)(C)(C)C"])
    assert np.isnan(out).all()
    strict = RingConformationFeatures(on_error="raise").fit(SMILES[:2])
    with pytest.raises(ValueError, match=r"row 4 \('C1CC\('\): SMILES parse error"):
        strict.transform(SMILES)
    assert not np.isnan(strict.transform(SMILES[:4])).any()


def test_every_input_form_gives_the_same_matrix(features):
    t = RingConformationFeatures().fit(SMILES)
    forms = [
        np.array(SMILES, dtype=object),
        np.array(SMILES),  # unicode dtype
        pd.Series(SMILES, index=range(100, 108)),
        pd.DataFrame({"smiles": SMILES}),
        np.array(SMILES, dtype=object).reshape(-1, 1),
        tuple(SMILES),
    ]
    for form in forms:
        np.testing.assert_array_equal(t.transform(form), features)


def test_wrong_input_is_refused_at_the_edge():
    t = RingConformationFeatures().fit(["C"])
    with pytest.raises(TypeError, match="SMILES strings"):
        t.transform(np.arange(3.0))
    with pytest.raises(TypeError, match="SMILES strings"):
        t.transform(["CC", 3])
    with pytest.raises(ValueError, match="one column"):
        t.transform(pd.DataFrame({"a": ["C"], "b": ["C"]}))
    with pytest.raises(ValueError, match="single string"):
        t.transform("CC1CCCCC1")
    with pytest.raises(ValueError, match="medium"):
        RingConformationFeatures(medium="gas").fit(["C"])
    with pytest.raises(ValueError, match="temperature"):
        RingConformationFeatures(temperature=-5).fit(["C"])
    with pytest.raises(ValueError, match="on_error"):
        RingConformationFeatures(on_error="ignore").fit(["C"])
    with pytest.raises(Exception, match="not fitted"):
        RingConformationFeatures().transform(["C"])


def test_sklearn_api_properties_with_smiles(features):
    # what the numeric-input checks would have pinned: fit returns self, is idempotent
    # and changes nothing of the estimator's parameters; transform is order- and
    # subset-invariant, leaves the object unchanged; fit_transform == fit + transform.
    t = RingConformationFeatures(temperature=310.0)
    params = t.get_params()
    assert t.fit(SMILES) is t and t.get_params() == params and t.n_features_in_ == 1
    before = dict(t.__dict__)
    first = t.transform(SMILES)
    assert t.__dict__.keys() == before.keys()
    np.testing.assert_array_equal(t.fit(SMILES).transform(SMILES), first)
    np.testing.assert_array_equal(RingConformationFeatures(temperature=310.0).fit_transform(SMILES), first)
    perm = np.random.default_rng(7).permutation(len(SMILES))
    np.testing.assert_array_equal(t.transform([SMILES[i] for i in perm]), first[perm])
    np.testing.assert_array_equal(t.transform(SMILES[2:5]), first[2:5])
    # the temperature reaches the engine: a hotter run puts more methyl axial
    assert first[0, COL["n_axial_major"]] > features[0, COL["n_axial_major"]]
    assert RingConformationFeatures().fit(pd.DataFrame({"smi": SMILES})).feature_names_in_.tolist() == ["smi"]


def test_pickled_and_cloned_transformers_give_the_same_output(features):
    t = RingConformationFeatures(fill_value=-2.0).fit(SMILES)
    again = pickle.loads(pickle.dumps(t))
    np.testing.assert_array_equal(again.transform(SMILES), t.transform(SMILES))
    c = clone(t)
    assert c.get_params() == t.get_params() and not hasattr(c, "n_features_in_")


def test_in_a_pipeline_and_a_column_transformer():
    rng = np.random.default_rng(3)
    smiles = [SMILES[k % len(SMILES)] for k in range(40)]
    y = rng.normal(size=40)
    pipe = make_pipeline(RingConformationFeatures(), SimpleImputer(), StandardScaler(), Ridge())
    pred = pipe.fit(smiles, y).predict(smiles)
    assert pred.shape == (40,) and np.isfinite(pred).all()
    assert list(pipe[:-1].get_feature_names_out())[:2] == ["n_sat6_rings", "n_locked_rings"]
    np.testing.assert_array_equal(pickle.loads(pickle.dumps(pipe)).predict(smiles), pred)

    df = pd.DataFrame({"smiles": smiles, "logp": rng.normal(size=40)})
    for selector in ("smiles", ["smiles"]):  # a Series or a one-column frame reaches it
        ct = ColumnTransformer(
            [
                ("rings", make_pipeline(RingConformationFeatures(), SimpleImputer()), selector),
                ("num", "passthrough", ["logp"]),
            ]
        )
        model = Pipeline([("features", ct), ("ridge", Ridge())]).fit(df, y)
        names = model[:-1].get_feature_names_out()
        assert len(names) == 12 and names[0] == "rings__n_sat6_rings" and names[-1] == "num__logp"
        assert np.isfinite(model.predict(df)).all()
    out = ColumnTransformer([("rings", RingConformationFeatures(), ["smiles"])]).set_output(
        transform="pandas"
    )
    frame = out.fit_transform(df)
    assert list(frame.columns) == [f"rings__{n}" for n in FEATURE_NAMES] and frame.shape == (40, 11)


def test_n_jobs_gives_the_same_matrix_as_one_process():
    smiles = [SMILES[k % len(SMILES)] for k in range(120)]  # above the split threshold
    one = RingConformationFeatures().fit_transform(smiles)
    two = RingConformationFeatures(n_jobs=2).fit_transform(smiles)
    np.testing.assert_array_equal(one, two)
    with pytest.raises(ValueError, match=r"row 4 "):
        RingConformationFeatures(on_error="raise", n_jobs=2).fit_transform(smiles)


def test_n_jobs_works_after_a_batch_run_in_the_same_process(tmp_path):
    # annotate's worker pool and joblib.Parallel share one process-wide pool; a pool
    # of the wrong kind made every later n_jobs > 1 call fail.
    from libconf.pipeline.run import annotate

    src = tmp_path / "lib.smi"
    src.write_text("".join(f"{s} q{k}\n" for k, s in enumerate(SMILES)))
    annotate([src], tmp_path / "run", jobs=2, chunk_size=2)
    smiles = [SMILES[k % len(SMILES)] for k in range(120)]
    np.testing.assert_array_equal(
        RingConformationFeatures(n_jobs=2).fit_transform(smiles),
        RingConformationFeatures().fit_transform(smiles),
    )
