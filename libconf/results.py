"""Result records of one analysed molecule.

Field names are the column names of the output tables (see README, "Outputs");
``to_dict`` gives exactly those columns, so the batch writer, ``explain --json``
and Python users see one vocabulary.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field


@dataclass
class SubstituentResult:
    ring_id: int
    ring_atom: int
    position: int
    first_atom: int
    group: str
    face: str  # up | down | invertible | planar | unassigned
    axial_fraction: float | None
    a_value_kjmol: float | None
    a_value_source: str | None  # table | model
    # Not table columns: carried for `explain`.
    name: str = ""
    source_ref: str = ""
    axial_in_chair: tuple[bool | None, bool | None] = (None, None)

    COLUMNS = (
        "ring_id",
        "ring_atom",
        "position",
        "first_atom",
        "group",
        "face",
        "axial_fraction",
        "a_value_kjmol",
        "a_value_source",
    )

    def to_dict(self) -> dict:
        return {k: getattr(self, k) for k in self.COLUMNS}


@dataclass
class Contribution:
    """One named energy term in one chair (for `explain`)."""

    chair: int
    rule: str
    detail: str
    energy_kjmol: float
    source: str = ""


@dataclass
class RingResult:
    ring_id: int
    ring_atoms: list[int]
    ring_class: str
    topology: str  # isolated | spiro | fused | bridged
    n_planar_ring_atoms: int
    stereo_status: str  # complete | partial | none
    dG_flip_kjmol: float | None
    dG_flip_min_kjmol: float | None
    dG_flip_max_kjmol: float | None
    major_chair_fraction: float | None
    twist_boat_fraction: float | None
    barrier_kjmol: float | None
    flip_rate_per_s: float | None
    flip_half_life_s: float | None
    lock_class: str
    lock_reason: str
    value_source: str  # table | model | mixed | none
    uncertainty_kjmol: float | None
    # Extra columns of our own (documented in the README).
    fusion: str | None = None  # cis | trans | unassigned, for fused rings
    major_chair: int | None = None  # 0 or 1, in ring_atoms numbering
    chair_energies_kjmol: tuple[float | None, float | None] = (None, None)
    twist_boat_energy_kjmol: float | None = None
    n_stereo_assignments: int = 1
    substituents: list[SubstituentResult] = field(default_factory=list)
    contributions: list[Contribution] = field(default_factory=list)
    barrier_terms: list[Contribution] = field(default_factory=list)

    #: Columns written to the `rings` table, in order.
    COLUMNS = (
        "ring_id",
        "ring_atoms",
        "ring_class",
        "topology",
        "fusion",
        "n_planar_ring_atoms",
        "stereo_status",
        "dG_flip_kjmol",
        "dG_flip_min_kjmol",
        "dG_flip_max_kjmol",
        "major_chair_fraction",
        "twist_boat_fraction",
        "barrier_kjmol",
        "flip_rate_per_s",
        "flip_half_life_s",
        "lock_class",
        "lock_reason",
        "value_source",
        "uncertainty_kjmol",
    )

    @property
    def is_locked(self) -> bool:
        return self.lock_class in ("anchored", "fixed", "trapped")

    def to_dict(self, with_details: bool = False) -> dict:
        d = {k: getattr(self, k) for k in self.COLUMNS}
        d["ring_atoms"] = list(self.ring_atoms)
        if with_details:
            d["major_chair"] = self.major_chair
            d["chair_energies_kjmol"] = list(self.chair_energies_kjmol)
            d["twist_boat_energy_kjmol"] = self.twist_boat_energy_kjmol
            d["n_stereo_assignments"] = self.n_stereo_assignments
            d["substituents"] = [s.to_dict() for s in self.substituents]
            d["contributions"] = [asdict(c) for c in self.contributions]
            d["barrier_terms"] = [asdict(c) for c in self.barrier_terms]
        return d


@dataclass
class MoleculeResult:
    smiles: str
    n_heavy_atoms: int
    temperature: float
    medium: str
    rings: list[RingResult] = field(default_factory=list)

    #: Molecule-level columns (besides mol_id / input_file / input_row).
    COLUMNS = (
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
    )

    @property
    def n_sat6_rings(self) -> int:
        return len(self.rings)

    @property
    def n_locked_rings(self) -> int:
        return sum(r.is_locked for r in self.rings)

    @property
    def locked_scaffold(self) -> bool:
        return self.n_locked_rings > 0

    def _extreme(self, attr: str, fn) -> float:
        vals = [getattr(r, attr) for r in self.rings if getattr(r, attr) is not None]
        return float(fn(vals)) if vals else math.nan

    @property
    def max_dG_flip_kjmol(self) -> float:
        return self._extreme("dG_flip_kjmol", max)

    @property
    def min_dG_flip_kjmol(self) -> float:
        return self._extreme("dG_flip_kjmol", min)

    @property
    def max_barrier_kjmol(self) -> float:
        return self._extreme("barrier_kjmol", max)

    @property
    def min_barrier_kjmol(self) -> float:
        return self._extreme("barrier_kjmol", min)

    @property
    def axial_strain_kjmol(self) -> float:
        if not self.rings:
            return math.nan
        total = 0.0
        for r in self.rings:
            if r.major_chair is not None and r.chair_energies_kjmol[r.major_chair] is not None:
                total += r.chair_energies_kjmol[r.major_chair]
        return total

    @property
    def n_axial_major(self) -> float:
        if not self.rings:
            return math.nan
        # ring bonds of a fused, bridging or spiro partner ring (two attachments) are not groups
        return float(
            sum(
                s.axial_fraction or 0.0 for r in self.rings for s in r.substituents if s.group.count("*") == 1
            )
        )

    @property
    def n_stereo_undefined_rings(self) -> int:
        return sum(r.stereo_status != "complete" for r in self.rings)

    def molecule_row(self) -> dict:
        return {k: getattr(self, k) for k in self.COLUMNS}

    def to_dict(self) -> dict:
        d = {"smiles": self.smiles, "temperature": self.temperature, "medium": self.medium}
        d.update(self.molecule_row())
        d["rings"] = [r.to_dict(with_details=True) for r in self.rings]
        return d
