"""Increment tables, read once from the CSV files in ``datasets/parameters``.

Every row carries its source and a status (confirmed, confirmed-secondary,
memory, derived, estimate). Values are in kJ/mol. Group SMILES are
canonicalised with RDKit on load so that they match the groups the engine cuts
out of a molecule.
"""

from __future__ import annotations

import csv
import hashlib
import os
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

from .chem.molview import group_key_from_smiles


def parameters_dir() -> Path:
    env = os.environ.get("LIBCONF_PARAMETERS")
    if env:
        return Path(env)
    here = Path(__file__).resolve().parent
    for cand in (here.parent / "datasets" / "parameters", here / "parameters_data"):
        if cand.is_dir():
            return cand
    raise FileNotFoundError(
        "libconf's parameter tables (datasets/parameters) were not found; "
        "set LIBCONF_PARAMETERS to their folder"
    )


def canonical_group(smiles: str) -> str:
    """A table group in the form the engine writes groups (see chem.molview)."""
    return group_key_from_smiles(smiles)


@dataclass(frozen=True)
class AValue:
    group: str
    name: str
    ring_class: str
    position: int | None
    medium: str
    a_value_kjmol: float
    uncertainty_kjmol: float
    t_ref_k: float | None
    ds_jmolk: float
    source: str
    status: str

    def at(self, temperature: float) -> float:
        """A-value at ``temperature``: A(T) = A(T_ref) - (T - T_ref) * dS."""
        if self.t_ref_k is None or not self.ds_jmolk:
            return self.a_value_kjmol
        return self.a_value_kjmol - (temperature - self.t_ref_k) * self.ds_jmolk / 1000.0


def _f(x: str) -> float | None:
    x = (x or "").strip()
    return float(x) if x else None


def _rows(name: str) -> list[dict]:
    with open(parameters_dir() / name, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


class Parameters:
    """All increment tables, indexed for the engine's look-ups."""

    FILES = (
        "a_values.csv",
        "context_factors.csv",
        "pair_terms.csv",
        "rule_constants.csv",
        "barriers.csv",
        "barrier_terms.csv",
        "group_classes.csv",
    )

    def __init__(self) -> None:
        self.a_values: dict[tuple, AValue] = {}
        self.names: dict[str, str] = {}
        for r in _rows("a_values.csv"):
            g = canonical_group(r["group"])
            pos = r["position"].strip()
            av = AValue(
                group=g,
                name=r["name"],
                ring_class=r["ring_class"],
                position=int(pos) if pos else None,
                medium=r["medium"],
                a_value_kjmol=float(r["a_value_kjmol"]),
                uncertainty_kjmol=float(r["uncertainty_kjmol"]),
                t_ref_k=_f(r["t_ref_k"]),
                ds_jmolk=_f(r["ds_jmolk"]) or 0.0,
                source=r["source"],
                status=r["status"],
            )
            self.a_values[(g, av.ring_class, av.position, av.medium)] = av
            self.names.setdefault(g, r["name"])
        self.context_factors = {
            (r["heteroatom"], r["relation"]): float(r["factor"]) for r in _rows("context_factors.csv")
        }
        self.pairs: dict[tuple, dict] = {}
        for r in _rows("pair_terms.csv"):
            a, b = canonical_group(r["group_a"]), canonical_group(r["group_b"])
            r = dict(
                r, energy_kjmol=float(r["energy_kjmol"]), uncertainty_kjmol=float(r["uncertainty_kjmol"])
            )
            key = (r["kind"], a, b, r["ring_class"], r["positions"], r["medium"])
            self.pairs[key] = r
            if r["kind"] != "geminal":
                self.pairs[(r["kind"], b, a, r["ring_class"], r["positions"], r["medium"])] = r
        self.constants = {r["name"]: float(r["value"]) for r in _rows("rule_constants.csv")}
        self.constant_sources = {r["name"]: r["source"] for r in _rows("rule_constants.csv")}
        self.barriers = {
            r["ring_class"]: dict(
                r,
                base_kjmol=float(r["base_kjmol"]),
                twist_boat_dh_kjmol=float(r["twist_boat_dh_kjmol"]),
                uncertainty_kjmol=float(r["uncertainty_kjmol"]),
            )
            for r in _rows("barriers.csv")
        }
        self.barrier_terms = {
            r["term"]: dict(
                r,
                energy_kjmol=float(r["energy_kjmol"]),
                twist_boat_kjmol=float(r["twist_boat_kjmol"]),
                uncertainty_kjmol=float(r["uncertainty_kjmol"]),
            )
            for r in _rows("barrier_terms.csv")
        }
        self.group_classes = {
            r["group_class"]: canonical_group(r["like_group"]) for r in _rows("group_classes.csv")
        }

    # -- look-ups -----------------------------------------------------------
    def a_value(self, group: str, ring_class: str, position: int | None, medium: str):
        """Most specific tabulated row for a group, or None."""
        av = self.a_values
        for key in (
            (group, ring_class, position, medium),
            (group, ring_class, position, "any"),
        ):
            if key in av:
                return av[key]
        return None

    def base_a_value(self, group: str, medium: str):
        av = self.a_values
        return av.get((group, "cyclohexane", None, medium)) or av.get((group, "cyclohexane", None, "any"))

    def pair(self, kind: str, a: str, b: str, ring_class: str, positions: str, medium: str):
        p = self.pairs
        for key in (
            (kind, a, b, ring_class, positions, medium),
            (kind, a, b, ring_class, positions, "any"),
            (kind, a, b, ring_class, "", medium),
            (kind, a, b, ring_class, "", "any"),
            (kind, a, b, "cyclohexane", "", medium),
            (kind, a, b, "cyclohexane", "", "any"),
        ):
            if key in p:
                return p[key]
        return None

    def digest(self) -> str:
        """sha256 over the parameter files, recorded in run manifests."""
        h = hashlib.sha256()
        for name in self.FILES:
            h.update(name.encode())
            h.update((parameters_dir() / name).read_bytes())
        return h.hexdigest()


@lru_cache(maxsize=1)
def load() -> Parameters:
    return Parameters()
