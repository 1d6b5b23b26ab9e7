"""``RingConformationFeatures``: SMILES in, the molecule-level ring descriptors out.

A scikit-learn transformer for QSAR pipelines. Each SMILES gives one row of eleven
floats: the ten molecule columns of the ``molecules`` table, then ``has_sat6_ring``::

    n_sat6_rings, n_locked_rings, locked_scaffold, max_dG_flip_kjmol,
    min_dG_flip_kjmol, max_barrier_kjmol, min_barrier_kjmol, axial_strain_kjmol,
    n_axial_major, n_stereo_undefined_rings, has_sat6_ring

Molecules without a saturated six-membered ring: the counts (``n_sat6_rings``,
``n_locked_rings``, ``n_axial_major``, ``n_stereo_undefined_rings``) and the two flags
are 0, and the energy columns (``*_kjmol``), which have no value there, take
``fill_value`` (default 0.0). The same fill applies to the flip energies of a molecule
whose rings are all ``fixed`` (trans-fused or bridged: no ring flip, so no flip energy);
``n_locked_rings`` and ``locked_scaffold`` tell those apart from a mobile ring.

Invalid SMILES (parse or valence errors, empty strings, ``None``/NaN entries, records
beyond the engine's limits): a row of NaN by default (``on_error="nan"``; follow with
``sklearn.impute.SimpleImputer`` or a model that accepts NaN), or a ``ValueError``
naming the row and the reason with ``on_error="raise"``. Entries that are not strings
at all (numbers) are a programming error and raise ``TypeError``.

Scikit-learn conformance: ``tests/test_sklearn_features.py`` runs
``sklearn.utils.estimator_checks.check_estimator`` on it. The checks that feed random
numeric matrices (this transformer only takes SMILES) are declared as expected failures
in :data:`EXPECTED_FAILED_CHECKS`, each with the reason; the same properties are tested
there with SMILES input.
"""

from __future__ import annotations

import math
import numbers

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator, TransformerMixin
from sklearn.utils.validation import check_is_fitted

from .results import MoleculeResult

#: Molecule-level columns of the ``molecules`` table, in this order.
MOLECULE_FEATURES = MoleculeResult.COLUMNS
FEATURE_NAMES = (*MOLECULE_FEATURES, "has_sat6_ring")
#: Columns with no value for a molecule without a ring: filled with ``fill_value``.
ENERGY_FEATURES = tuple(c for c in MOLECULE_FEATURES if c.endswith("_kjmol"))
_COUNT_FEATURES = tuple(c for c in MOLECULE_FEATURES if c not in ENERGY_FEATURES)

ON_ERROR = ("nan", "raise")

_NUMERIC_INPUT = (
    "feeds a random numeric matrix of several columns; this transformer takes one column "
    "of SMILES strings and refuses anything else (the property is tested with SMILES in "
    "tests/test_sklearn_features.py)"
)
#: Checks of ``sklearn.utils.estimator_checks`` that cannot apply to a SMILES-only
#: transformer, with the reason (``check_estimator(expected_failed_checks=...)``).
#: Every other check that scikit-learn yields for it passes.
EXPECTED_FAILED_CHECKS: dict[str, str] = {
    **{
        name: _NUMERIC_INPUT
        for name in (
            "check_fit_score_takes_y",
            "check_estimators_overwrite_params",
            "check_dont_overwrite_parameters",
            "check_estimators_fit_returns_self",
            "check_readonly_memmap_input",
            "check_n_features_in_after_fitting",
            "check_positive_only_tag_during_fit",
            "check_estimators_dtypes",
            "check_dtype_object",
            "check_pipeline_consistency",
            "check_estimators_pickle",
            "check_f_contiguous_array_estimator",
            "check_transformer_data_not_an_array",
            "check_transformer_general",
            "check_methods_sample_order_invariance",
            "check_methods_subset_invariance",
            "check_fit2d_1sample",
            "check_fit2d_1feature",
            "check_dict_unchanged",
            "check_fit_idempotent",
            "check_fit_check_is_fitted",
            "check_n_features_in",
            "check_fit2d_predict1d",
        )
    },
    "check_fit1d": (
        "expects 1-D input to be refused; a 1-D list of SMILES is this transformer's main "
        "input (its numbers are refused with TypeError, not ValueError)"
    ),
}


class RingConformationFeatures(TransformerMixin, BaseEstimator):
    """SMILES -> fixed-width float matrix of ring-conformation descriptors.

    Parameters
    ----------
    temperature : float, default 298.15
        Kelvin; sets the chair populations and axial fractions.
    medium : {"water", "nonpolar"}, default "water"
        Solvent setting of the increments (see the README).
    fill_value : float, default 0.0
        Value of the energy columns where a molecule has no ring (or no mobile ring).
    on_error : {"nan", "raise"}, default "nan"
        Invalid SMILES give a row of NaN, or raise ``ValueError``.
    n_jobs : int or None, default None
        Worker processes (joblib); None or 1 runs in this process, -1 all cores.

    Input: a list, 1-D array or pandas Series of SMILES, or a single-column 2-D array /
    DataFrame of them. Output: ``(n_samples, 11)`` float64, columns as
    :meth:`get_feature_names_out`.

    >>> RingConformationFeatures().fit_transform(["CC1CCCCC1", "c1ccccc1"])[:, 0]
    array([1., 0.])
    """

    def __init__(
        self,
        temperature: float = 298.15,
        medium: str = "water",
        fill_value: float = 0.0,
        on_error: str = "nan",
        n_jobs: int | None = None,
    ):
        self.temperature = temperature
        self.medium = medium
        self.fill_value = fill_value
        self.on_error = on_error
        self.n_jobs = n_jobs

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.input_tags.string = True
        tags.input_tags.two_d_array = True  # a single column of SMILES
        tags.input_tags.allow_nan = True  # a missing SMILES is an invalid row, not a crash
        tags.transformer_tags.preserves_dtype = []
        return tags

    # --- scikit-learn API ---------------------------------------------------------------

    def fit(self, X, y=None):
        """Check the parameters and the input's shape; nothing is learnt."""
        self._check_params()
        smiles, names = _smiles_column(X)
        if len(smiles) == 0:
            raise ValueError("RingConformationFeatures.fit: 0 sample(s) given; a minimum of 1 is required")
        self.n_features_in_ = 1
        if names is not None:
            self.feature_names_in_ = np.asarray(names, dtype=object)
        elif hasattr(self, "feature_names_in_"):
            del self.feature_names_in_
        return self

    def transform(self, X) -> np.ndarray:
        """One row of :data:`FEATURE_NAMES` per SMILES, in input order."""
        check_is_fitted(self, "n_features_in_")
        self._check_params()
        smiles, names = _smiles_column(X)
        fitted = getattr(self, "feature_names_in_", None)
        if names is not None and fitted is not None and list(names) != list(fitted):
            raise ValueError(
                f"the SMILES column is named {names[0]!r} here but was {fitted[0]!r} at fit time"
            )
        if len(smiles) == 0:
            return np.empty((0, len(FEATURE_NAMES)), dtype=np.float64)
        blocks = _split(smiles, self.n_jobs)
        options = dict(
            temperature=float(self.temperature), medium=self.medium, fill_value=float(self.fill_value)
        )
        if len(blocks) == 1:
            parts = [_feature_block(blocks[0], **options)]
        else:
            from joblib import Parallel, delayed

            parts = Parallel(n_jobs=self.n_jobs)(delayed(_feature_block)(b, **options) for b in blocks)
        out = np.vstack([p[0] for p in parts])
        if self.on_error == "raise":
            offset = 0
            for (_, errors), block in zip(parts, blocks):
                if errors:
                    row, reason = errors[0]
                    raise ValueError(f"invalid SMILES at row {offset + row} ({block[row]!r}): {reason}")
                offset += len(block)
        return out

    def get_feature_names_out(self, input_features=None) -> np.ndarray:
        """The eleven output column names (``input_features`` is checked, not used)."""
        check_is_fitted(self, "n_features_in_")
        if input_features is not None:
            input_features = list(input_features)
            if len(input_features) != 1:
                raise ValueError(
                    f"input_features should have length 1 (one SMILES column), got {input_features}"
                )
            fitted = getattr(self, "feature_names_in_", None)
            if fitted is not None and input_features != list(fitted):
                raise ValueError(
                    f"input_features {input_features} differ from feature_names_in_ {list(fitted)}"
                )
        return np.asarray(FEATURE_NAMES, dtype=object)

    # --- validation at the edge ---------------------------------------------------------

    def _check_params(self) -> None:
        from libconf.engine import MEDIA

        t = self.temperature
        if isinstance(t, bool) or not isinstance(t, numbers.Real) or not 0 < float(t) < 10000:
            raise ValueError(f"temperature must be a number of kelvin above 0, got {t!r}")
        if self.medium not in MEDIA:
            raise ValueError(f"medium must be one of {', '.join(MEDIA)}, got {self.medium!r}")
        if isinstance(self.fill_value, bool) or not isinstance(self.fill_value, numbers.Real):
            raise ValueError(f"fill_value must be a number (NaN allowed), got {self.fill_value!r}")
        if self.on_error not in ON_ERROR:
            raise ValueError(f"on_error must be one of {', '.join(ON_ERROR)}, got {self.on_error!r}")
        if self.n_jobs is not None and (
            isinstance(self.n_jobs, bool) or not isinstance(self.n_jobs, numbers.Integral)
        ):
            raise ValueError(f"n_jobs must be None or a whole number, got {self.n_jobs!r}")


def _is_missing(value) -> bool:
    return value is None or value is pd.NA or (isinstance(value, float) and math.isnan(value))


def _smiles_column(X) -> tuple[list, list[str] | None]:
    """The SMILES as a list (missing entries kept as None) and the column name, if any."""
    names = None
    if hasattr(X, "tocsr") or hasattr(X, "toarray"):
        raise TypeError("sparse input is not supported: give a column of SMILES strings")
    if isinstance(X, str):
        raise ValueError(
            "expected a sequence of SMILES, got a single string; wrap one SMILES in a list: [smiles]"
        )
    if isinstance(X, pd.DataFrame):
        if X.shape[1] != 1:
            raise ValueError(f"expected one column of SMILES, got a frame with {X.shape[1]} columns")
        column = X.columns[0]
        names = [column] if isinstance(column, str) else None
        values = X.iloc[:, 0].tolist()
    elif isinstance(X, pd.Series):
        values = X.tolist()
    else:
        if hasattr(X, "__array__") and not isinstance(X, np.ndarray):
            X = np.asarray(X)  # other array containers (memmaps are ndarrays already)
        if isinstance(X, np.ndarray):
            arr = X
        else:
            try:
                arr = np.asarray(list(X), dtype=object)
            except TypeError:
                raise TypeError(f"expected SMILES strings, got {type(X).__name__}") from None
        if arr.ndim == 2 and arr.shape[1] == 0:
            raise ValueError(f"0 feature(s) (shape={arr.shape}) while a minimum of 1 is required.")
        if arr.dtype.kind == "c":
            raise ValueError("Complex data not supported; expected SMILES strings")
        if arr.ndim == 2 and arr.shape[1] == 1:
            arr = arr[:, 0]
        elif arr.ndim != 1:
            raise ValueError(f"expected one column of SMILES, got an array of shape {arr.shape}")
        if arr.dtype.kind in "biufc":
            raise TypeError(f"expected SMILES strings, got numbers (an array of {arr.dtype})")
        values = arr.tolist()
    smiles = []
    for i, v in enumerate(values):
        if isinstance(v, str):
            smiles.append(v)
        elif _is_missing(v):
            smiles.append(None)
        else:
            raise TypeError(f"expected SMILES strings, got {type(v).__name__} {v!r} at row {i}")
    return smiles, names


def _split(smiles: list, n_jobs: int | None) -> list[list]:
    if n_jobs is None or n_jobs == 1 or len(smiles) < 100:
        return [smiles]
    from joblib import effective_n_jobs

    n = effective_n_jobs(n_jobs)
    size = max(50, -(-len(smiles) // (4 * n)))
    return [smiles[i : i + size] for i in range(0, len(smiles), size)]


def _feature_block(
    smiles: list, *, temperature: float, medium: str, fill_value: float
) -> tuple[np.ndarray, list[tuple[int, str]]]:
    """Feature rows of one block of SMILES, and (row, reason) for the invalid ones."""
    from libconf.pipeline.frame import annotate_frame

    frame = annotate_frame(
        pd.DataFrame({"smiles": smiles}, dtype=object), temperature=temperature, medium=medium
    )
    out = np.full((len(smiles), len(FEATURE_NAMES)), np.nan)
    valid = frame["error"].isna().to_numpy()
    for k, name in enumerate(MOLECULE_FEATURES):
        out[:, k] = frame[name].astype("float64").to_numpy(na_value=np.nan)
    counts = [MOLECULE_FEATURES.index(c) for c in _COUNT_FEATURES]
    energies = [MOLECULE_FEATURES.index(c) for c in ENERGY_FEATURES]
    ok = out[valid]
    block = ok[:, counts]
    block[np.isnan(block)] = 0.0  # no ring: nothing counted (n_axial_major is NaN then)
    ok[:, counts] = block
    block = ok[:, energies]
    block[np.isnan(block)] = fill_value
    ok[:, energies] = block
    ok[:, -1] = ok[:, MOLECULE_FEATURES.index("n_sat6_rings")] > 0
    out[valid] = ok
    reasons = frame["error"].to_numpy(dtype=object, na_value=None)
    errors = [(int(i), str(reasons[i])) for i in np.flatnonzero(~valid)]
    return out, errors


__all__ = ["RingConformationFeatures", "FEATURE_NAMES", "EXPECTED_FAILED_CHECKS"]
