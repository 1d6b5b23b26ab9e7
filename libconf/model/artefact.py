"""The fitted A-value model as plain data: a JSON file of regression trees.

The file holds numbers and strings only (tree arrays, feature names, calibration,
metrics). Loading it parses JSON and nothing else, so a tampered or foreign file
cannot run code; in addition its SHA-256 must match the digest recorded in
``SHA256SUMS`` beside it, or the load is refused.

Prediction walks all trees of an ensemble at once with numpy (one step per tree
level), then adds the leaf values in tree order, so the result is the same float as a
tree-by-tree walk. The engine memoises one prediction per group-in-context, but in a
drug-like library most large groups occur once, so a call must stay cheap.
"""

from __future__ import annotations

import hashlib
import json
import os
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np

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
        return self.base + self.rate * self.leaf_sum(np.asarray(x, dtype=float))

    def leaf_sum(self, x: np.ndarray) -> float:
        """Sum of the leaf values ``x`` reaches, added in tree order."""
        return float(sum(_leaves(self._packed(), x)))

    def _packed(self):
        """The trees as padded (tree, node) arrays, a leaf linking to itself, plus flat
        copies whose links are flat indices (see `_flatten`)."""
        packed = self.__dict__.get("_arrays")
        if packed is None:
            n = max(len(t[0]) for t in self.trees)
            shape = (len(self.trees), n)
            left = np.zeros(shape, dtype=np.intp)
            right = np.zeros(shape, dtype=np.intp)
            feature = np.zeros(shape, dtype=np.intp)
            threshold = np.zeros(shape)
            value = np.zeros(shape)
            depth = 0
            for k, (lt, rt, ft, th, va) in enumerate(self.trees):
                m = len(lt)
                idx = np.arange(m)
                lt_, rt_ = np.array(lt), np.array(rt)
                leaf = lt_ == -1
                left[k, :m] = np.where(leaf, idx, lt_)
                right[k, :m] = np.where(leaf, idx, rt_)
                feature[k, :m] = np.where(leaf, 0, np.array(ft))
                threshold[k, :m] = th
                value[k, :m] = va
                depth = max(depth, _depth(lt, rt))
            packed = _flatten((left, right, feature, threshold, value, depth))
            object.__setattr__(self, "_arrays", packed)  # frozen dataclass: a private cache
        return packed


def _leaves(packed, x: np.ndarray) -> list[float]:
    """The leaf value ``x`` reaches in every tree of ``packed``, in tree order."""
    depth = packed[5]
    fl, fr, ff, ft, fv, pos = packed[6]
    for _ in range(depth):
        pos = np.where(x[ff[pos]] <= ft[pos], fl[pos], fr[pos])
    return fv[pos].tolist()


def _flatten(packed):
    """``packed`` plus flat arrays whose links are flat indices (cheaper to gather)."""
    left, right, feature, threshold, value, depth = packed
    n = left.shape[1]
    offset = (np.arange(left.shape[0]) * n)[:, None]
    flat = (
        (left + offset).ravel(),
        (right + offset).ravel(),
        feature.ravel(),
        threshold.ravel(),
        value.ravel(),
    )
    return (*packed, (*flat, offset.ravel()))


def _stack(ensembles: list[Trees]):
    """Several ensembles' packed arrays as one (they may differ in node count)."""
    parts = [e._packed() for e in ensembles]
    n = max(p[0].shape[1] for p in parts)

    def pad(a, fill_self):
        if a.shape[1] == n:
            return a
        extra = np.zeros((a.shape[0], n - a.shape[1]), dtype=a.dtype)
        if fill_self:
            extra[:] = np.arange(a.shape[1], n)
        return np.hstack([a, extra])

    arrays = [np.vstack([pad(p[i], i < 2) for p in parts]) for i in range(5)]
    return _flatten((*arrays, max(p[5] for p in parts)))


def _depth(left, right, node: int = 0) -> int:
    if left[node] == -1:
        return 0
    return 1 + max(_depth(left, right, left[node]), _depth(left, right, right[node]))


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
        x = np.asarray(x, dtype=float)
        u = self.uncertainty_floor
        if self.low is None or self.high is None:
            return self.mean.predict(x), u
        # the three ensembles walked in one pass; each summed in its own tree order
        packed = self.__dict__.get("_stacked")
        if packed is None:
            packed = _stack([self.mean, self.low, self.high])
            object.__setattr__(self, "_stacked", packed)
        leaves = _leaves(packed, x)
        k, j = len(self.mean.trees), len(self.mean.trees) + len(self.low.trees)
        a = self.mean.base + self.mean.rate * sum(leaves[:k])
        lo = self.low.base + self.low.rate * sum(leaves[k:j])
        hi = self.high.base + self.high.rate * sum(leaves[j:])
        return a, max(u, 0.5 * abs(hi - lo))


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
