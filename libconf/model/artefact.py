"""The fitted A-value model as plain data: a JSON file of regression trees.

The file holds numbers and strings only (tree arrays, feature names, calibration,
metrics). Loading it parses JSON and nothing else, so a tampered or foreign file
cannot run code; in addition its SHA-256 must match the digest recorded in
``SHA256SUMS`` beside it, or the load is refused.

Prediction walks the trees in plain Python: the engine memoises one prediction per
group-in-context, and a library repeats a few thousand of those, so speed per call
matters little.
"""

from __future__ import annotations

import hashlib
import json
import os
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

FORMAT = "libconf-a-value-trees/1"
MODEL_FILE = "a_value_model.json"


class ModelFileError(RuntimeError):
    """The model file is missing, altered or not a libconf model."""


def models_dir() -> Path:
    env = os.environ.get("LIBCONF_MODELS")
    if env:
        return Path(env)
    here = Path(__file__).resolve().parents[1]
    for cand in (here.parent / "models", here / "models_data"):
        if (cand / MODEL_FILE).is_file():
            return cand
    return here.parent / "models"


def sha256_file(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def recorded_digests(folder: Path) -> dict[str, str]:
    out = {}
    p = folder / "SHA256SUMS"
    if p.is_file():
        for line in p.read_text(encoding="utf-8").splitlines():
            parts = line.split()
            if len(parts) == 2 and len(parts[0]) == 64:
                out[parts[1].lstrip("*")] = parts[0].lower()
    return out


def record_digest(path: Path) -> str:
    """Write (or replace) ``path``'s line in SHA256SUMS beside it."""
    digest = sha256_file(path)
    sums = recorded_digests(path.parent)
    sums[path.name] = digest
    (path.parent / "SHA256SUMS").write_text(
        "".join(f"{d}  {n}\n" for n, d in sorted(sums.items())), encoding="utf-8"
    )
    return digest


@dataclass(frozen=True)
class Trees:
    """One boosted-tree ensemble: prediction = base + rate * sum of leaf values."""

    base: float
    rate: float
    trees: tuple  # each (left, right, feature, threshold, value) tuples

    def predict(self, x) -> float:
        s = 0.0
        for left, right, feature, threshold, value in self.trees:
            node = 0
            while left[node] != -1:
                node = left[node] if x[feature[node]] <= threshold[node] else right[node]
            s += value[node]
        return self.base + self.rate * s


@dataclass(frozen=True)
class AValueModel:
    feature_names: tuple
    mean: Trees
    low: Trees | None
    high: Trees | None
    uncertainty_floor: float
    meta: dict
    digest: str

    def predict(self, x) -> tuple[float, float]:
        """(A-value in kJ/mol, uncertainty in kJ/mol) for one feature row."""
        a = self.mean.predict(x)
        u = self.uncertainty_floor
        if self.low is not None and self.high is not None:
            lo, hi = self.low.predict(x), self.high.predict(x)
            u = max(u, 0.5 * abs(hi - lo))
        return a, u


def _trees(d: dict) -> Trees:
    if not isinstance(d, dict):
        raise ModelFileError("tree ensemble is not an object")
    out = []
    for t in d["trees"]:
        left, right = [int(v) for v in t["left"]], [int(v) for v in t["right"]]
        feature = [int(v) for v in t["feature"]]
        threshold = [float(v) for v in t["threshold"]]
        value = [float(v) for v in t["value"]]
        n = len(left)
        if not (len(right) == len(feature) == len(threshold) == len(value) == n and n):
            raise ModelFileError("tree arrays differ in length")
        for i in range(n):
            if left[i] != -1 and not (i < left[i] < n and i < right[i] < n):
                raise ModelFileError("tree links point outside the tree")
        out.append((tuple(left), tuple(right), tuple(feature), tuple(threshold), tuple(value)))
    return Trees(float(d["base"]), float(d["rate"]), tuple(out))


def read_model(path: Path, expected_digest: str | None) -> AValueModel:
    """Parse a model file; refuse it if its SHA-256 is not ``expected_digest``."""
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise ModelFileError(f"cannot read the model file {path}: {exc}") from None
    digest = hashlib.sha256(raw).hexdigest()
    if expected_digest is None:
        raise ModelFileError(f"no SHA-256 recorded for {path.name} in {path.parent / 'SHA256SUMS'}")
    if digest != expected_digest:
        raise ModelFileError(
            f"the model file {path} does not match its recorded SHA-256 "
            f"(recorded {expected_digest[:12]}…, file {digest[:12]}…); it was altered or "
            "replaced: restore it from the repository or retrain with `libconf train`"
        )
    try:
        d = json.loads(raw.decode("utf-8"))
        if d.get("format") != FORMAT:
            raise ModelFileError(f"{path} is not a {FORMAT} file")
        names = tuple(str(n) for n in d["feature_names"])
        mean = _trees(d["mean"])
        low = _trees(d["low"]) if d.get("low") else None
        high = _trees(d["high"]) if d.get("high") else None
        n = len(names)
        for ens in (mean, low, high):
            for t in ens.trees if ens else ():
                if any(f >= n for f, l_ in zip(t[2], t[0]) if l_ != -1):
                    raise ModelFileError("a tree uses a feature the file does not name")
        return AValueModel(
            names, mean, low, high, float(d["uncertainty_floor"]), dict(d.get("meta", {})), digest
        )
    except ModelFileError:
        raise
    except (ValueError, KeyError, TypeError, AttributeError) as exc:
        raise ModelFileError(f"{path} is not a valid libconf model file: {exc}") from None


@lru_cache(maxsize=4)
def _load(env_value: str | None) -> AValueModel | None:
    p = models_dir() / MODEL_FILE
    if not p.is_file():
        return None
    return read_model(p, recorded_digests(p.parent).get(p.name))


def load_model() -> AValueModel | None:
    """The shipped model (None when no model file exists: table and analogy only).
    Read once per process (per value of LIBCONF_MODELS); no file access after that."""
    return _load(os.environ.get("LIBCONF_MODELS"))


def trees_to_dict(ensemble, base: float, rate: float) -> dict:
    """A fitted scikit-learn GradientBoostingRegressor as plain arrays."""
    trees = []
    for est in ensemble.estimators_[:, 0]:
        t = est.tree_
        trees.append(
            {
                "left": t.children_left.tolist(),
                "right": t.children_right.tolist(),
                "feature": [int(f) if f >= 0 else 0 for f in t.feature],
                "threshold": [round(float(v), 6) for v in t.threshold],
                "value": [round(float(v), 6) for v in t.value[:, 0, 0]],
            }
        )
    return {"base": float(base), "rate": float(rate), "trees": trees}
