"""Chair energies from additive increments.

Each rule is a small function named after the chemistry it encodes:
`context_a_value` (A-value of a group in its ring position, with the
heteroatom context, the anomeric effect and allylic 1,3-strain next to a planar
nitrogen), `syn_axial_energy`, `gauche_energy`, `geminal_correction`.
`chair_energies` adds them up for both chairs of one face assignment.

Energies are G(axial) - G(equatorial) style increments in kJ/mol; a chair's
energy is measured from a hypothetical strain-free chair.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field
from functools import lru_cache

from rdkit import Chem

from ..parameters import Parameters
from .rings import Ring, _is_acceptor, planar_nitrogen_kind
from .substituents import HALOGENS, Substituent

R_KJ = 8.314462618e-3  # kJ mol-1 K-1
RELATION = {0: "self", 1: "alpha", 2: "beta", 3: "gamma"}


def ring_distance(i: int, j: int) -> int:
    d = abs(i - j) % 6
    return min(d, 6 - d)


@dataclass
class Site:
    """A substituent prepared for the energy sums."""

    sub: Substituent
    a: float  # effective A-value (kJ/mol): G(axial) - G(equatorial)
    u: float  # its uncertainty
    source: str  # table | model
    ref: str  # literature source of the value
    name: str
    notes: list[str] = field(default_factory=list)
    constrained: bool = False  # bond held by a fusion / bridge: outside the sums

    @property
    def k(self) -> int:
        return self.sub.ring_index


def _exo_nitrogen_kind(mol: Chem.Mol, n_atom: Chem.Atom, ring_set: set[int]) -> str | None:
    for nb in n_atom.GetNeighbors():
        if nb.GetIdx() in ring_set:
            continue
        kind = _is_acceptor(nb, n_atom.GetIdx())
        if kind:
            return kind
    return None


def anomeric_term(P: Parameters, z: int, medium: str) -> tuple[float, str] | None:
    """Extra axial stabilisation of an electronegative group (first atom z) next to a ring O."""
    if z == 8:
        kind = "O"
    elif z in HALOGENS:
        kind = "halogen"
    elif z == 16:
        kind = "S"
    elif z == 7:
        kind = "N"
    else:
        return None
    name = f"anomeric_{kind}_{medium}"
    return P.constants[name], P.constant_sources[name]


def context_a_value(
    P: Parameters, mol: Chem.Mol, ring: Ring, sub: Substituent, medium: str, temperature: float
) -> Site:
    """A-value of one substituent in its ring position (the heart of the table look-up)."""
    k = sub.ring_index
    cls = ring.ring_class
    allylic = _allylic_partner(P, mol, ring, k, set(ring.atoms)) if ring.planar_kinds else None
    rels = tuple((el, ring_distance(h, k)) for h, el in ring.hetero)
    tabulated = (not allylic and P.a_value(sub.key, cls, k + 1, medium) is not None) or (
        not sub.partner_ring and P.base_a_value(sub.key, medium) is not None
    )
    group_class = None if tabulated else ensure_group_class(mol, sub)
    c_atom = mol.GetAtomWithIdx(sub.ring_atom).GetAtomicNum() == 6 if rels else True
    a, u, source, ref, name, notes = _a_value_in_context(
        P,
        sub.key,
        cls,
        k + 1,
        medium,
        temperature,
        sub.partner_ring,
        rels,
        c_atom,
        allylic,
        sub.first_element,
        group_class,
    )
    return Site(sub, a, u, source, ref, name, list(notes))


def ensure_group_class(mol: Chem.Mol, sub: Substituent) -> str:
    """The coarse class of a group (computed only when a rule needs it)."""
    if sub.group_class is None:
        from .substituents import group_class

        sub.group_class = group_class(mol, mol.GetAtomWithIdx(sub.first_atom), sub.ring_atom)
    return sub.group_class


@lru_cache(maxsize=16_384)  # bounded: a worker's memory must not grow with the library
def _a_value_in_context(
    P: Parameters,
    key: str,
    cls: str,
    locant: int,
    medium: str,
    temperature: float,
    partner_ring: bool,
    rels: tuple,
    c_atom: bool,
    allylic: str | None,
    first_element: int,
    group_class: str | None,
):
    """(a, u, source, ref, name, notes) for a group in a ring context; memoised, since a
    library repeats the same few hundred group/context combinations."""
    row = None if allylic else P.a_value(key, cls, locant, medium)
    if row is not None:
        return (
            row.at(temperature),
            row.uncertainty_kjmol,
            "table",
            row.source,
            row.name,
            (f"tabulated for {cls} position {locant}",),
        )
    notes: list[str] = []
    base = None if partner_ring else P.base_a_value(key, medium)
    if base is not None:
        a, u, source, ref, name = (
            base.at(temperature),
            base.uncertainty_kjmol,
            "table",
            base.source,
            base.name,
        )
    else:
        learned = None if partner_ring or not c_atom else _model_value(key, rels)
        name = "ring bond" if partner_ring else (group_class or "other").replace("_", " ")
        if learned is not None:
            return _with_model_value(P, learned, name, rels, medium, allylic, first_element)
        like = P.group_classes.get(group_class, P.group_classes["other"])
        base = P.base_a_value(like, medium)
        a, u = base.at(temperature), P.constants["group_model_uncertainty"]
        source, ref = "model", f"by analogy with {base.name} ({base.source})"
        notes.append(f"not tabulated: taken as {base.name}-like")

    anomeric = None
    if c_atom and any(el == "O" and d == 1 for el, d in rels):
        anomeric = anomeric_term(P, first_element, medium)

    factor = 1.0
    for el, d in rels:
        rel = RELATION[d]
        if anomeric is not None and el == "O" and rel == "alpha":
            continue
        if allylic and el == "N" and rel == "alpha":
            continue
        f = P.context_factors.get((el, rel))
        if f is not None:
            factor *= f
    if factor != 1.0:
        a *= factor
        u = math.hypot(u * factor, 0.25 * abs(a))
        notes.append(f"heteroatom context x{factor:.2f}")
    if anomeric is not None:
        a -= anomeric[0]
        u = math.hypot(u, 1.5)
        notes.append(f"anomeric effect -{anomeric[0]:.1f} kJ/mol")
        ref += f"; anomeric term: {anomeric[1]}"
    if allylic:
        a, u, ref = _allylic_strain(P, allylic, a, u, ref, notes)
    return a, u, source, ref, name, tuple(notes)


def _allylic_strain(P: Parameters, allylic: str, a: float, u: float, ref: str, notes: list[str]):
    """Allylic 1,3-strain with the group on the planar ring N next to it: (a, u, ref)."""
    strain = P.constants.get(f"allylic_strain_{allylic}", P.constants["allylic_strain_other"])
    notes.append(f"allylic 1,3-strain with the N-{allylic} group -{strain:.1f} kJ/mol")
    ref += f"; allylic strain: {P.constant_sources.get(f'allylic_strain_{allylic}', '')}"
    return a - strain, math.hypot(u, 3.0), ref


def _model_value(key: str, rels: tuple) -> tuple[float, float, str] | None:
    """(A, uncertainty, model id) from the regression model, or None outside its reach."""
    from ..model.artefact import load_model
    from ..model.features import features

    model = load_model()
    if model is None:
        return None
    x = features(key, rels)
    if x is None:
        return None
    a, u = model.predict(x)
    return a, u, model.digest[:12]


def _with_model_value(
    P: Parameters, learned, name: str, rels: tuple, medium: str, allylic, first_element: int
):
    """A model A-value in context. The model was trained on ring contexts (heteroatom
    neighbours, anomeric positions) in the gas phase calibrated to experiment, so the
    context factors are not applied again; in water the anomeric stabilisation is
    weakened by the tabulated nonpolar-to-water difference; allylic strain, which the
    bare model compounds do not contain, is added as for tabulated groups."""
    a, u, tag = learned
    notes = ["not tabulated: regression model on the group and its ring context"]
    ref = f"regression model {tag} (GFN2-xTB chair energies calibrated to experiment; models/MODEL_CARD.md)"
    if medium == "water" and any(el == "O" and d == 1 for el, d in rels):
        polar = anomeric_term(P, first_element, "water")
        apolar = anomeric_term(P, first_element, "nonpolar")
        if polar is not None and apolar is not None and apolar[0] != polar[0]:
            a += apolar[0] - polar[0]
            u = math.hypot(u, 1.0)
            notes.append(f"anomeric effect weakened in water +{apolar[0] - polar[0]:.1f} kJ/mol")
    if allylic:
        a, u, ref = _allylic_strain(P, allylic, a, u, ref, notes)
    return a, u, "model", ref, name, tuple(notes)


def _allylic_partner(P: Parameters, mol: Chem.Mol, ring: Ring, k: int, ring_set: set[int]) -> str | None:
    """Allylic 1,3-strain: the kind of planar N (acyl, sulfonyl, nitroso, aryl) next to
    ring index k whose exocyclic group pushes a substituent at k axial."""
    for d in (-1, 1):
        j = (k + d) % 6
        if ring.planar_kinds.get(j) != "planar_nitrogen":
            continue
        n_atom = mol.GetAtomWithIdx(ring.atoms[j])
        if n_atom.GetAtomicNum() == 7 and planar_nitrogen_kind(mol, n_atom):
            kind = _exo_nitrogen_kind(mol, n_atom, ring_set)
            if kind:
                return kind
    return None


def _pair_row(P: Parameters, kind: str, s: Site, t: Site, ring: Ring, medium: str):
    pos = ",".join(str(x) for x in sorted((s.k + 1, t.k + 1)))
    return P.pair(kind, s.sub.key, t.sub.key, ring.ring_class, pos, medium)


def _scaled_pair_energy(P: Parameters, kind: str, s: Site, t: Site, ring: Ring, medium: str):
    """A tabulated pair energy, else scale x sqrt(A_s x A_t) (both A-values positive)."""
    row = _pair_row(P, kind, s, t, ring, medium)
    if row is not None:
        return row["energy_kjmol"], row["source"]
    if s.a <= 0 or t.a <= 0:
        return 0.0, ""
    name = f"{kind}_scale"
    return P.constants[name] * math.sqrt(s.a * t.a), P.constant_sources[name]


def syn_axial_energy(P: Parameters, s: Site, t: Site, ring: Ring, medium: str) -> tuple[float, str]:
    """Energy of a syn-1,3-diaxial pair beyond the two A-values."""
    return _scaled_pair_energy(P, "syn_axial", s, t, ring, medium)


def gauche_energy(P: Parameters, s: Site, t: Site, ring: Ring, medium: str) -> tuple[float, str]:
    """Vicinal gauche interaction (present in ee and ae, absent in aa)."""
    return _scaled_pair_energy(P, "gauche", s, t, ring, medium)


def geminal_correction(P: Parameters, ax: Site, eq: Site, ring: Ring, medium: str) -> tuple[float, str]:
    """Non-additivity of a geminal pair (1-methyl-1-phenyl prefers the axial phenyl)."""
    row = P.pair("geminal", ax.sub.key, eq.sub.key, ring.ring_class, "", medium)
    if row is None:
        return 0.0, ""
    return row["energy_kjmol"] - (ax.a - eq.a), row["source"]


@dataclass
class PairTerm:
    kind: str
    i: int
    j: int
    energy: float
    source: str


def pair_terms(P: Parameters, sites: list[Site], ring: Ring, medium: str) -> list[PairTerm]:
    """All pairwise corrections that could apply between the ring's substituents."""
    out = []
    for i, j in itertools.combinations(range(len(sites)), 2):
        s, t = sites[i], sites[j]
        if s.constrained or t.constrained:
            continue
        if s.sub.partner_ring and t.sub.partner_ring and s.sub.piece == t.sub.piece:
            continue
        d = ring_distance(s.k, t.k)
        if d == 0:
            for ax, eq, a, b in ((s, t, i, j), (t, s, j, i)):
                e, src = geminal_correction(P, ax, eq, ring, medium)
                if e:
                    out.append(PairTerm("geminal", a, b, e, src))
        elif d == 1:
            e, src = gauche_energy(P, s, t, ring, medium)
            if e:
                out.append(PairTerm("gauche", i, j, e, src))
        elif d == 2:
            e, src = syn_axial_energy(P, s, t, ring, medium)
            if e:
                out.append(PairTerm("syn_axial", i, j, e, src))
    return out


def axial_in_chair(k: int, face: str, chair: int) -> bool:
    """Chair 0 puckers even ring indices up; an axial bond points the way its atom puckers."""
    return ((k % 2 == 0) == (face == "up")) != (chair == 1)


@dataclass
class ChairResult:
    energy: float  # free energy of the chair (Boltzmann sum over N-invertomers)
    axial_prob: list[float]  # per site: probability it is axial in this chair
    best_axial: list  # axial flags of the lowest invertomer (for the breakdown)


_SYN, _GAUCHE, _GEMINAL = 0, 1, 2
_KIND_CODE = {"syn_axial": _SYN, "gauche": _GAUCHE, "geminal": _GEMINAL}


def _state_energy(a_eff: list[float], pair_codes: list[tuple], axial: list) -> float:
    g = 0.0
    for a, ax in zip(a_eff, axial):
        if ax:
            g += a
    for code, i, j, e in pair_codes:
        ai, aj = axial[i], axial[j]
        if ai is not None and aj is not None and _applies(code, ai, aj):
            g += e
    return g


def _applies(code: int, ai: bool, aj: bool) -> bool:
    """Whether a pair term is present: syn-axial when both axial, gauche unless both
    axial (ax/ax is anti), geminal correction when the first group is axial."""
    if code == _GAUCHE:
        return not (ai and aj)
    if code == _SYN:
        return ai and aj
    return ai and not aj


def energy_inputs(sites: list[Site], pairs: list[PairTerm]) -> tuple[list[float], list[tuple]]:
    """Per-site A-values (0 for constrained bonds) and pair terms in the form
    `chair_energy` loops over; computed once per ring."""
    return (
        [0.0 if s.constrained else s.a for s in sites],
        [(_KIND_CODE[p.kind], p.i, p.j, p.energy) for p in pairs],
    )


def chair_energy(
    sites: list[Site],
    faces: list[str | None],
    pairs: list[PairTerm],
    chair: int,
    rt: float,
    inputs: tuple | None = None,
) -> ChairResult:
    """Energy of one chair for given faces; invertible N-substituents take both
    positions (nitrogen inversion is fast) and are Boltzmann-summed."""
    flip = chair == 1
    fixed_axial: list = []
    inv = []
    for n, (s, f) in enumerate(zip(sites, faces)):
        if f == "up":
            fixed_axial.append((s.sub.ring_index % 2 == 0) != flip)
        elif f == "down":
            fixed_axial.append((s.sub.ring_index % 2 == 1) != flip)
        else:
            fixed_axial.append(None)
            if f == "invertible" and not s.constrained:
                inv.append(n)
    a_eff, codes = inputs or energy_inputs(sites, pairs)
    if not inv:
        return ChairResult(
            _state_energy(a_eff, codes, fixed_axial), [1.0 if ax else 0.0 for ax in fixed_axial], fixed_axial
        )
    states = []
    for combo in itertools.product((False, True), repeat=len(inv)):
        axial = list(fixed_axial)
        for n, ax in zip(inv, combo):
            axial[n] = ax
        states.append((_state_energy(a_eff, codes, axial), axial))
    gmin = min(st[0] for st in states)
    weights = [math.exp(-(st[0] - gmin) / rt) for st in states]
    z = sum(weights)
    prob = [0.0] * len(sites)
    for w, (_, axial) in zip(weights, states):
        for n, ax in enumerate(axial):
            if ax:
                prob[n] += w / z
    best = min(states, key=lambda st: st[0])
    return ChairResult(gmin - rt * math.log(z), prob, best[1])


def chair_terms(sites: list[Site], pairs: list[PairTerm], axial: list) -> list[tuple[str, str, float, str]]:
    """The named terms behind one chair's energy (rule, detail, energy, source)."""
    terms = []
    for n, s in enumerate(sites):
        if axial[n] and not s.constrained:
            terms.append(("a_value", f"{s.k + 1}-{s.name} axial", s.a, s.ref))
    for p in pairs:
        ai, aj = axial[p.i], axial[p.j]
        if ai is not None and aj is not None and _applies(_KIND_CODE[p.kind], ai, aj):
            terms.append(
                (
                    p.kind,
                    f"{sites[p.i].k + 1}-{sites[p.i].name} / {sites[p.j].k + 1}-{sites[p.j].name}",
                    p.energy,
                    p.source,
                )
            )
    return terms
