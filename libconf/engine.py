"""`analyze`: one molecule in, every saturated six-membered ring described.

records -> RDKit Mol -> rings found and classified -> faces and groups ->
chair energies, populations, barrier, lock class -> result records.
"""

from __future__ import annotations

import io
import itertools
import math
import re
import sys
import threading
from dataclasses import dataclass

from rdkit import Chem, rdBase

from . import parameters
from .chem.barrier import LockThresholds, barrier_estimate, eyring_rate, lock_class, twist_boat_energy
from .chem.energy import (
    R_KJ,
    Site,
    axial_in_chair,
    chair_energy,
    chair_terms,
    context_a_value,
    energy_inputs,
    pair_terms,
)
from .chem.molview import MolView
from .chem.rings import Ring, describe_ring, has_saturated_six_ring, saturated_six_rings
from .chem.substituents import Substituent, ring_substituents
from .errors import InputError
from .results import Contribution, MoleculeResult, RingResult, SubstituentResult

MEDIA = ("nonpolar", "water")
DEFAULT_MEDIUM = "water"
DEFAULT_TEMPERATURE = 298.15
MAX_HEAVY_ATOMS = 500
MAX_STEREO_ASSIGNMENTS = 64

# --- parsing, with RDKit's own diagnosis turned into one sentence -------------

_log_lock = threading.Lock()


# RDKit's own error and warning log is switched off for the process: a bad record
# comes back as an InputError with a reason, and a library run would otherwise
# print a line per bad record. (Cheaper than blocking the log around every parse.)
rdBase.LogToPythonStderr()
rdBase.DisableLog("rdApp.error")
rdBase.DisableLog("rdApp.warning")


def _rdkit_messages(fn, *args):
    """Run an RDKit call and return (result, what RDKit logged), printing nothing."""
    with _log_lock:
        buf, old = io.StringIO(), sys.stderr
        sys.stderr = buf
        rdBase.EnableLog("rdApp.error")
        try:
            out = fn(*args)
        except Exception as exc:  # RDKit raises several sanitisation exception types
            out = exc
        finally:
            rdBase.DisableLog("rdApp.error")
            sys.stderr = old
    return out, buf.getvalue()


_POS = re.compile(r"position (\d+)")
_VALENCE = re.compile(r"[Ee]xplicit valence for atom # ?(\d+) (\w+),? (\d+)")


def _diagnose(smiles: str) -> InputError:
    raw, msg = _rdkit_messages(lambda s: Chem.MolFromSmiles(s, sanitize=False), smiles)
    if True:
        if raw is None:
            m = _POS.search(msg)
            if "unclosed ring" in msg:
                return InputError("SMILES parse error: a ring-closure digit is never closed")
            if m:
                return InputError(f"SMILES parse error at position {m.group(1)}")
            return InputError("SMILES parse error (RDKit could not read the string)")
        exc, _ = _rdkit_messages(Chem.SanitizeMol, raw)
        if isinstance(exc, Exception):
            text = str(exc)
            m = _VALENCE.search(text)
            if m:
                idx, el, val = int(m.group(1)), m.group(2), m.group(3)
                return InputError(
                    f"valence error on {el}{idx + 1} (atom index {idx}): "
                    f"valence {val} is more than {el} allows"
                )
            if "kekulize" in text.lower():
                return InputError(
                    "aromatic ring cannot be kekulized (check aromatic atoms and their H counts)"
                )
            return InputError(f"molecule rejected by RDKit sanitisation: {text.splitlines()[0][:200]}")
        return InputError("SMILES parse error (RDKit could not read the string)")


def _read_smiles(smiles) -> tuple[Chem.Mol, str]:
    """(unsanitised Mol, stripped text) of a SMILES string, or InputError with a reason."""
    if not isinstance(smiles, str):
        raise InputError(f"expected a SMILES string, got {type(smiles).__name__}")
    text = smiles.strip()
    if not text:
        raise InputError("empty molecule: the SMILES string is blank")
    mol = Chem.MolFromSmiles(text, sanitize=False)
    if mol is None:
        raise _diagnose(text)
    return mol, text


def _sanitize(mol: Chem.Mol, text: str, ops=Chem.SanitizeFlags.SANITIZE_ALL) -> None:
    try:
        Chem.SanitizeMol(mol, ops)
    except Exception:  # RDKit raises several sanitisation exception types
        raise _diagnose(text) from None


def _has_explicit_h(mol: Chem.Mol, text: str) -> bool:
    return "H" in text and any(a.GetAtomicNum() == 1 for a in mol.GetAtoms())


def parse_smiles(smiles: str) -> Chem.Mol:
    """SMILES to a sanitised Mol, or InputError with a reason.

    RDKit's full sanitisation runs (valences, aromaticity, rings), but not its stereo
    perception pass: the engine reads the chiral tags as written (a tag RDKit would
    drop on a centre that is not stereogenic changes no energy), and that pass costs a
    quarter of a parse.
    """
    mol, text = _read_smiles(smiles)
    _sanitize(mol, text)
    return Chem.RemoveHs(mol) if _has_explicit_h(mol, text) else mol


_S = Chem.SanitizeFlags
# RDKit runs its sanitisation steps in a fixed order; these first five are the ones that
# can reject a structure (clean-up, valences, rings, Kekulé form). The rest (radicals, aromaticity,
# conjugation, hybridisation, chirality clean-up, H adjustment) only annotate it; they run
# only for a molecule that may carry a saturated six-membered ring (about 20 % of a
# drug-like library). The two calls together give what one full SanitizeMol gives; the
# second costs more than the same steps inside one call (41 against 14 µs, MOSES), which
# the 80 % that skip it repay.
_VALIDATE = (
    _S.SANITIZE_CLEANUP
    | _S.SANITIZE_CLEANUP_ORGANOMETALLICS
    | _S.SANITIZE_PROPERTIES
    | _S.SANITIZE_SYMMRINGS
    | _S.SANITIZE_KEKULIZE
)
_ANNOTATE = _S.SANITIZE_ALL ^ _VALIDATE


def _parse_for_analysis(smiles: str) -> tuple[Chem.Mol, bool]:
    """(mol, fully sanitised?) for `analyze`: rejected or accepted exactly as
    `parse_smiles` would, but without the annotating sanitisation steps, which the
    caller runs (`_finish`) only if the molecule may carry a saturated six-membered
    ring. A SMILES with explicit H atoms is finished here (removing them needs it)."""
    mol, text = _read_smiles(smiles)
    _sanitize(mol, text, _VALIDATE)
    if _has_explicit_h(mol, text):
        _finish(mol, text)
        return Chem.RemoveHs(mol), True
    return mol, False


def _finish(mol: Chem.Mol, text: str) -> None:
    """The annotating sanitisation steps on a molecule `_parse_for_analysis` validated.

    Of those steps the engine reads only aromaticity and the H counts; hybridisation,
    conjugation and radicals are read from the group SMILES, parsed separately. So a
    SMILES without stereo marks gets RDKit's aromaticity call directly (7 against 34 µs
    for the whole set of steps, MOSES) and RDKit's H adjustment redone for the aromatic
    atoms: an aromatic N that held an implicit H in the Kekulé form (``[nH]``) keeps it
    as an explicit H, as sanitisation leaves it. With stereo marks (``@``) the chirality
    clean-up needs hybridisation, and the full set runs.
    """
    if "@" in text:
        _sanitize(mol, text, _ANNOTATE)
        return
    Chem.SetAromaticity(mol)
    # Only an aromatic heteroatom that carried an H can lose it (none of 65,000 MOSES/NCI
    # molecules, aromatic and Kekulé-written, lost one on carbon); one C++ match finds
    # them where a Python loop over the aromatic atoms cost 18 µs a molecule.
    for (i,) in mol.GetSubstructMatches(_AROMATIC_HETERO_WITH_H):
        atom = mol.GetAtomWithIdx(i)
        before = atom.GetNumImplicitHs()  # cached from the Kekulé form
        if before:
            atom.UpdatePropertyCache(False)
            lost = before - atom.GetNumImplicitHs()
            if lost > 0:
                atom.SetNumExplicitHs(atom.GetNumExplicitHs() + lost)
                atom.UpdatePropertyCache(False)


_AROMATIC_HETERO_WITH_H = Chem.MolFromSmarts("[a;!#6;!H0]")


# --- one ring -------------------------------------------------------------------


@dataclass
class _Constraint:
    kind: str  # trans_fusion | bridge13 | boat
    sites: tuple[int, int]
    text: str


def _site_index(sites: list[Site], partner_atom: int, k: int) -> int | None:
    for n, s in enumerate(sites):
        if s.sub.first_atom == partner_atom and s.k == k:
            return n
    return None


class _RingModel:
    """Everything about one ring that does not depend on the face assignment."""

    def __init__(self, P, view: MolView, ring: Ring, medium: str, temperature: float, max_assign: int):
        self.P, self.ring, self.medium, self.temperature = P, ring, medium, temperature
        self.rt = R_KJ * temperature
        mol = view.mol
        self.subs: list[Substituent] = ring_substituents(view, ring)
        self.sites: list[Site] = [
            context_a_value(P, mol, ring, s, medium, temperature) for s in self.subs if s.face != "planar"
        ]
        self.fusions: list[tuple[int, int, int]] = []  # (site i, site j, partner size)
        self.bridges: list[_Constraint] = []
        for br in ring.bridges:
            i = _site_index(self.sites, br.partners[0], br.ends[0])
            j = _site_index(self.sites, br.partners[1], br.ends[1])
            if i is None or j is None:
                continue
            loc = (
                f"{br.ends[0] + 1},{br.ends[1] + 1}"
                if br.ends[0] < br.ends[1]
                else f"{br.ends[1] + 1},{br.ends[0] + 1}"
            )
            if br.kind == "fusion" and 4 <= br.partner_size <= 7:
                self.fusions.append((i, j, br.partner_size))
            elif br.kind == "bridge13" and br.bridge_length <= 3:
                self.bridges.append(
                    _Constraint(
                        "bridge13",
                        (i, j),
                        f"bridged polycycle: a {br.bridge_length}-atom bridge across positions {loc} holds one chair",
                    )
                )
            elif br.kind == "bridge14" and br.bridge_length <= 3:
                self.bridges.append(
                    _Constraint(
                        "boat",
                        (i, j),
                        f"bridged polycycle: a {br.bridge_length}-atom bridge across positions {loc} holds a boat",
                    )
                )
        for c in self.bridges:
            for n in c.sites:
                self.sites[n].constrained = True
        self.pairs = pair_terms(P, self.sites, ring, medium)
        self.energy_inputs = energy_inputs(self.sites, self.pairs)
        gauche = sum(p.energy for p in self.pairs if p.kind == "gauche")
        self.twist_boat = twist_boat_energy(P, ring, self.sites, temperature, gauche)
        self._variables(max_assign)

    def _variables(self, max_assign: int) -> None:
        """Ring atoms whose unknown configuration changes the answer."""
        by_atom: dict[int, list[int]] = {}
        for n, s in enumerate(self.sites):
            by_atom.setdefault(s.k, []).append(n)
        self.base_faces = [s.sub.face for s in self.sites]
        # Bonds held by a short bridge sit on one face of the ring by geometry (a cage has
        # no stereo to choose there): put them all on the face a given one has, else up.
        held = [n for n, s in enumerate(self.sites) if s.constrained]
        if held:
            face = next((self.base_faces[n] for n in held if self.base_faces[n] in ("up", "down")), "up")
            for n in held:
                if self.base_faces[n] == "unassigned":
                    self.base_faces[n] = face
        has_fixed = any(f in ("up", "down") for f in self.base_faces)
        variables = []
        for _, ns in sorted(by_atom.items()):
            open_ = [n for n in ns if self.base_faces[n] == "unassigned"]
            if not open_:
                continue
            if len(open_) == 1 and len(ns) == 1:
                variables.append(open_)
            elif len(open_) == 2:
                a, b = open_
                self.base_faces[a], self.base_faces[b] = "up", "down"
                if self.sites[a].sub.key != self.sites[b].sub.key:
                    variables.append(open_)
            else:
                for n in open_:
                    self.base_faces[n] = "up"
        self.n_open = len(variables)
        if variables and not has_fixed:
            # Mirror symmetry: the first open atom may be put on the upper face.
            n0 = variables.pop(0)
            if len(n0) == 1:
                self.base_faces[n0[0]] = "up"
        self.variables = variables
        self.status = "complete" if not variables else ("partial" if has_fixed else "none")
        self.n_assignments = min(2 ** len(variables), max_assign)

    def assignments(self):
        for bits in itertools.islice(
            itertools.product((0, 1), repeat=len(self.variables)), self.n_assignments
        ):
            faces = list(self.base_faces)
            for bit, var in zip(bits, self.variables):
                if len(var) == 1:
                    faces[var[0]] = "down" if bit else "up"
                else:
                    a, b = var
                    faces[a], faces[b] = ("down", "up") if bit else ("up", "down")
            yield faces


@dataclass
class _Outcome:
    faces: list
    allowed: list[int]
    chairs: dict
    fixed_reason: str | None
    boat: bool
    n_cis: int
    fusion: str | None


def _evaluate(model: _RingModel, faces: list[str]) -> _Outcome | None:
    allowed = [0, 1]
    reasons, boat, n_cis, fusion = [], False, 0, None
    for i, j, size in model.fusions:
        fi, fj = faces[i], faces[j]
        if fi in ("up", "down") and fj in ("up", "down"):
            if fi == fj:
                n_cis += 1
                fusion = fusion or "cis"
            else:
                fusion = "trans"
                ok = [c for c in allowed if not axial_in_chair(model.sites[i].k, fi, c)]
                allowed = ok
                reasons.append(f"trans ring fusion with a {size}-membered ring")
        else:
            fusion = fusion or "unassigned"
    for c in model.bridges:
        if c.kind == "boat":
            boat = True
            reasons.append(c.text)
            continue
        i, j = c.sites
        fi, fj = faces[i], faces[j]
        if fi in ("up", "down") and fj in ("up", "down") and fi != fj:
            return None  # a short 1,3-bridge cannot span opposite faces
        if fi in ("up", "down"):
            allowed = [ch for ch in allowed if axial_in_chair(model.sites[i].k, fi, ch)]
        else:
            allowed = allowed[:1]
        reasons.append(c.text)
    if boat:
        allowed = []
    chairs = {
        c: chair_energy(model.sites, faces, model.pairs, c, model.rt, model.energy_inputs) for c in allowed
    }
    return _Outcome(faces, allowed, chairs, "; ".join(dict.fromkeys(reasons)) or None, boat, n_cis, fusion)


def _major_energy(o: _Outcome) -> float:
    return min((r.energy for r in o.chairs.values()), default=math.inf)


def _name(site: Site) -> str:
    if site.source == "table":
        return site.name
    g = site.sub.group
    return g if len(g) <= 40 else g[:37] + "..."


def _driver_text(model: _RingModel, o: _Outcome, major: int) -> str:
    """The group that holds the ring in its major chair, in a chemist's words."""
    minor = 1 - major
    best, text = 0.0, ""
    for n, s in enumerate(model.sites):
        if s.constrained or o.faces[n] not in ("up", "down"):
            continue
        if axial_in_chair(s.k, o.faces[n], minor) and s.a > best:
            best, text = s.a, f"{s.k + 1}-{_name(s)} equatorial"
        elif axial_in_chair(s.k, o.faces[n], major) and -s.a > best:
            why = (
                " (anomeric effect)"
                if any("anomeric" in x for x in s.notes)
                else (" (allylic 1,3-strain)" if any("allylic" in x for x in s.notes) else "")
            )
            best, text = -s.a, f"{s.k + 1}-{_name(s)} axial{why}"
    return text


def analyze_ring(
    P,
    view: MolView,
    ring: Ring,
    ring_id: int,
    medium: str,
    temperature: float,
    max_assign: int,
    thresholds: LockThresholds,
) -> RingResult:
    model = _RingModel(P, view, ring, medium, temperature, max_assign)
    outcomes = [o for o in map(lambda f: _evaluate(model, f), model.assignments()) if o is not None]
    if not outcomes:  # every assignment impossible: report the ring as held, no chair analysis
        outcomes = [_Outcome(list(model.base_faces), [], {}, "held by the ring system", False, 0, None)]
    best = min(outcomes, key=_major_energy)
    rt = model.rt
    flippable = [o for o in outcomes if len(o.allowed) == 2]

    def dg(o):
        return abs(o.chairs[1].energy - o.chairs[0].energy)

    res = RingResult(
        ring_id=ring_id,
        ring_atoms=list(ring.atoms),
        ring_class=ring.ring_class,
        topology=ring.topology,
        n_planar_ring_atoms=len(ring.planar),
        stereo_status=model.status,
        dG_flip_kjmol=None,
        dG_flip_min_kjmol=None,
        dG_flip_max_kjmol=None,
        major_chair_fraction=None,
        twist_boat_fraction=None,
        barrier_kjmol=None,
        flip_rate_per_s=None,
        flip_half_life_s=None,
        lock_class="mobile",
        lock_reason="",
        value_source="none",
        uncertainty_kjmol=None,
        fusion=best.fusion,
        n_stereo_assignments=len(outcomes),
    )
    if flippable:
        res.dG_flip_min_kjmol = min(dg(o) for o in flippable)
        res.dG_flip_max_kjmol = max(dg(o) for o in flippable)

    active = [s for s in model.sites if not s.constrained]
    srcs = {s.source for s in active}
    res.value_source = "none" if not srcs else (srcs.pop() if len(srcs) == 1 else "mixed")

    chair_prob = {0: 0.0, 1: 0.0}
    if len(best.allowed) == 2:
        g0, g1 = best.chairs[0].energy, best.chairs[1].energy
        major = 0 if g0 <= g1 else 1
        gmaj = min(g0, g1)
        w = {0: math.exp(-(g0 - gmaj) / rt), 1: math.exp(-(g1 - gmaj) / rt)}
        w_tb = math.exp(-(model.twist_boat - gmaj) / rt)
        z = w[0] + w[1] + w_tb
        res.dG_flip_kjmol = abs(g1 - g0)
        res.major_chair_fraction = w[major] / z
        res.twist_boat_fraction = w_tb / z
        res.twist_boat_energy_kjmol = model.twist_boat
        res.chair_energies_kjmol = (g0, g1)
        res.major_chair = major
        chair_prob = {0: w[0] / (w[0] + w[1]), 1: w[1] / (w[0] + w[1])}
        # The flip runs from the major chair to the first twist-boat: when the minor chair
        # lies above the twist-boat, only the climb to the twist-boat raises the barrier.
        dg_path = min(res.dG_flip_kjmol, max(0.0, model.twist_boat - gmaj))
        barrier, ub, terms = barrier_estimate(P, ring, model.sites, dg_path, best.n_cis)
        res.barrier_kjmol = barrier
        res.barrier_terms = terms
        res.flip_rate_per_s = eyring_rate(barrier, temperature)
        res.flip_half_life_s = math.log(2) / res.flip_rate_per_s
        differs = [
            s
            for n, s in enumerate(model.sites)
            if not s.constrained and abs(best.chairs[0].axial_prob[n] - best.chairs[1].axial_prob[n]) > 0.5
        ]
        res.uncertainty_kjmol = math.sqrt(sum(s.u**2 for s in differs)) if differs else 0.0
        res.lock_class = lock_class(res.major_chair_fraction, res.flip_half_life_s, thresholds)
        if res.lock_class == "trapped":
            res.lock_reason = (
                f"inversion barrier {barrier:.0f} kJ/mol: half-life "
                f"{res.flip_half_life_s:.3g} s at {temperature:g} K"
            )
        elif res.lock_class in ("anchored", "biased"):
            res.lock_reason = (
                _driver_text(model, best, major) or f"chairs {res.dG_flip_kjmol:.1f} kJ/mol apart"
            )
        else:
            res.lock_reason = f"chairs {res.dG_flip_kjmol:.1f} kJ/mol apart"
    else:
        res.lock_class = "fixed"
        res.lock_reason = best.fixed_reason or "held by the ring system"
        if best.allowed:
            c = best.allowed[0]
            res.major_chair = c
            energies = [None, None]
            energies[c] = best.chairs[c].energy
            res.chair_energies_kjmol = tuple(energies)
            res.major_chair_fraction = 1.0
            chair_prob = {c: 1.0, 1 - c: 0.0}
    for c, cr in best.chairs.items():
        for rule, detail, e, src in chair_terms(model.sites, model.pairs, cr.best_axial):
            res.contributions.append(Contribution(c, rule, detail, e, src))

    site_of = {id(s.sub): n for n, s in enumerate(model.sites)}
    for sub in model.subs:
        n = site_of.get(id(sub))
        site = model.sites[n] if n is not None else None
        axial_fraction, in_chair = None, (None, None)
        if site is not None and best.chairs:
            probs = {c: best.chairs[c].axial_prob[n] for c in best.chairs}
            axial_fraction = sum(chair_prob[c] * probs[c] for c in probs)
            in_chair = tuple((probs[c] > 0.5) if c in probs else None for c in (0, 1))
        res.substituents.append(
            SubstituentResult(
                ring_id=ring_id,
                ring_atom=sub.ring_atom,
                position=sub.ring_index + 1,
                first_atom=sub.first_atom,
                group=sub.group,
                face=sub.face,
                axial_fraction=axial_fraction,
                a_value_kjmol=None if site is None or site.constrained else site.a,
                a_value_source=None if site is None or site.constrained else site.source,
                name=_name(site) if site else "",
                source_ref=site.ref if site else "",
                axial_in_chair=in_chair,
            )
        )
    return res


# --- public entry -----------------------------------------------------------------


def analyze(
    smiles_or_mol: str | Chem.Mol,
    *,
    temperature: float = DEFAULT_TEMPERATURE,
    medium: str = DEFAULT_MEDIUM,
    max_heavy_atoms: int = MAX_HEAVY_ATOMS,
    max_stereo_assignments: int = MAX_STEREO_ASSIGNMENTS,
    thresholds: LockThresholds | None = None,
) -> MoleculeResult:
    """Describe every saturated six-membered ring of one molecule.

    >>> r = analyze("C[C@H]1CC[C@@H](C(C)(C)C)CC1")   # cis-4-tert-butyl-1-methyl
    >>> r.rings[0].lock_class
    'anchored'

    Raises `InputError` for input libconf cannot analyse.
    """
    if medium not in MEDIA:
        raise ValueError(f"medium must be one of {', '.join(MEDIA)}, not {medium!r}")
    if not (0 < temperature < 2000):
        raise ValueError(f"temperature must be in kelvin (0-2000), not {temperature!r}")
    if isinstance(smiles_or_mol, Chem.Mol):
        mol = smiles_or_mol
        if any(a.GetAtomicNum() == 1 for a in mol.GetAtoms()):
            try:
                mol = Chem.RemoveHs(mol)
            except Exception as exc:  # RDKit sanitisation errors
                raise InputError(f"molecule rejected by RDKit: {str(exc).splitlines()[0][:200]}") from None
        Chem.GetSymmSSSR(mol)  # (re)perceive rings the same way as for SMILES input
        smiles = None
        complete = True
    else:
        mol, complete = _parse_for_analysis(smiles_or_mol)
        smiles = smiles_or_mol.strip()
    n_heavy = mol.GetNumAtoms()
    if n_heavy == 0:
        raise InputError("empty molecule: no atoms", stage="parse")
    if n_heavy > max_heavy_atoms:
        raise InputError(f"record exceeds {max_heavy_atoms} heavy atoms ({n_heavy})", stage="analyse")
    if smiles is None:
        smiles = Chem.MolToSmiles(mol)
    result = MoleculeResult(smiles=smiles, n_heavy_atoms=n_heavy, temperature=temperature, medium=medium)
    # On the validated, not yet aromatised molecule the test can only say yes more often
    # (a ring bond that aromaticity would claim still reads as single), never less.
    if not has_saturated_six_ring(mol):
        return result
    if not complete:
        _finish(mol, smiles)
        if not has_saturated_six_ring(mol):
            return result
    view = MolView(mol)
    rings = saturated_six_rings(mol, view, pretested=True)
    if not rings:
        return result
    P = parameters.load()
    th = thresholds or LockThresholds()
    all_rings = mol.GetRingInfo().AtomRings()
    for ring_id, atoms in enumerate(rings):
        ring = describe_ring(view, atoms, all_rings)
        result.rings.append(
            analyze_ring(P, view, ring, ring_id, medium, temperature, max_stereo_assignments, th)
        )
    return result
