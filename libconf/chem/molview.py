"""A light, read-only view of an RDKit molecule for the hot path.

Calls from Python into RDKit cost about half a microsecond each, so the engine
reads what it needs once per molecule (neighbour lists with bond orders from one
adjacency-matrix call, atom data on demand) and works on plain lists.

`group_smiles` writes the SMILES of a substituent without going through RDKit's
writer (whose fixed cost per call exceeds a SMILES parse): acyclic groups are
written canonically (branches sorted), groups with rings are written by a
deterministic depth-first walk and then canonicalised by RDKit once per distinct
string (memoised). Stereo marks inside groups are not written.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
from rdkit import Chem, rdBase

BOND_SYMBOL = {1.0: "", 1.5: "", 2.0: "=", 3.0: "#"}
# Ring-bearing groups up to this many heavy atoms are canonicalised (they recur across
# a library: phenyl, pyridyl, piperidinyl); larger ones are nearly always unique and
# are written as walked.
MAX_CANONICAL_RING_GROUP = 12


class _AtomicNumbers:
    """Atomic numbers read on demand (most atoms of a molecule are never asked for)."""

    __slots__ = ("mol", "cache")

    def __init__(self, mol: Chem.Mol) -> None:
        self.mol, self.cache = mol, {}

    def __getitem__(self, i: int) -> int:
        z = self.cache.get(i)
        if z is None:
            z = self.cache[i] = self.mol.GetAtomWithIdx(i).GetAtomicNum()
        return z


class MolView:
    __slots__ = ("mol", "n", "nbrs", "z", "_tok", "arom")

    def __init__(self, mol: Chem.Mol) -> None:
        self.mol = mol
        self.n = n = mol.GetNumAtoms()
        nbrs: list[list[tuple[int, float]]] = [[] for _ in range(n)]
        self.arom: list[bool] = []
        if n:
            adj = Chem.GetAdjacencyMatrix(mol, useBO=True)
            # RDKit gives every aromatic atom at least one bond of order 1.5
            self.arom = (adj == 1.5).any(axis=1).tolist()
            ii, jj = np.nonzero(adj)
            orders = adj[ii, jj].tolist()
            for i, j, o in zip(ii.tolist(), jj.tolist(), orders):
                nbrs[i].append((j, o))
        self.nbrs = nbrs
        self.z = _AtomicNumbers(mol)
        self._tok: list[str | None] = [None] * n

    def token(self, i: int) -> str:
        t = self._tok[i]
        if t is None:
            t = self._tok[i] = self.mol.GetAtomWithIdx(i).GetSmarts(isomericSmiles=False)
        return t

    def bond_symbol(self, i: int, j: int, order: float) -> str:
        if order == 1.0 and self.arom[i] and self.arom[j]:
            return "-"
        return BOND_SYMBOL.get(order, "~")

    # -- substituent SMILES ---------------------------------------------------
    def group_atoms(self, stop: set[int], first: int) -> list[int]:
        """Atoms reachable from ``first`` without entering ``stop``."""
        seen = {first}
        stack = [first]
        nbrs = self.nbrs
        while stack:
            a = stack.pop()
            for b, _ in nbrs[a]:
                if b not in seen and b not in stop:
                    seen.add(b)
                    stack.append(b)
        return list(seen)

    def group_smiles(self, stop: set[int], root: int, first: int) -> tuple[str, list[int]]:
        """SMILES of the group entered from ``root`` (a stop atom) via ``first``,
        with ``*`` for every bond back into ``stop``; and the group's atoms."""
        atoms = self.group_atoms(stop, first)
        n_bonds_inside = 0
        aset = set(atoms)
        for a in atoms:
            for b, _ in self.nbrs[a]:
                if b in aset:
                    n_bonds_inside += 1
        acyclic = n_bonds_inside // 2 == len(atoms) - 1
        order = dict(self.nbrs[first])[root]
        head = "*" + ("" if order in (1.0, 1.5) else BOND_SYMBOL.get(order, "~"))
        if acyclic:
            return head + self._tree(first, root, stop), atoms
        walked = head + _Walker(self, stop).walk(first, root)
        if len(atoms) > MAX_CANONICAL_RING_GROUP:
            return walked, atoms
        return canonical_walked(walked), atoms

    def _tree(self, a: int, parent: int, stop: set[int]) -> str:
        parts = []
        for b, o in self.nbrs[a]:
            if b == parent:
                continue
            sym = self.bond_symbol(a, b, o)
            if b in stop:
                parts.append(sym + "*")
            else:
                parts.append(sym + self._tree(b, a, stop))
        parts.sort()
        tok = self.token(a)
        if not parts:
            return tok
        return tok + "".join(f"({p})" for p in parts[:-1]) + parts[-1]


class _Walker:
    """Depth-first SMILES writer with ring-closure digits (deterministic, not canonical)."""

    def __init__(self, view: MolView, stop: set[int]) -> None:
        self.v, self.stop = view, stop
        # atoms bonded to a stop atom (they may carry a second attachment *)
        self.touching = {b for a in stop for b, _ in view.nbrs[a]}

    def walk(self, first: int, root: int) -> str:
        nbrs, stop = self.v.nbrs, self.stop
        rank = {first: 0}
        parent = {first: root}
        children: dict[int, list[tuple[int, float]]] = {first: []}
        closures: dict[int, list[tuple[int, float]]] = {}
        stack = [(first, iter(nbrs[first]))]
        while stack:
            a, it = stack[-1]
            for b, o in it:
                if b == parent[a] or b in stop:
                    continue
                if b in rank:
                    if rank[b] < rank[a]:  # back edge to an earlier atom: a ring closure
                        closures.setdefault(b, []).append((a, o))
                        closures.setdefault(a, []).append((b, o))
                    continue
                rank[b] = len(rank)
                parent[b] = a
                children[a].append((b, o))
                children[b] = []
                stack.append((b, iter(nbrs[b])))
                break
            else:
                stack.pop()
        self.children, self.closures, self.parent = children, closures, parent
        self.open: dict[tuple[int, int], int] = {}
        self.free: list[int] = []
        self.next_digit = 1
        return self._emit(first)

    def _emit(self, a: int) -> str:
        v = self.v
        arom = v.arom
        out = [v.token(a)]
        closures = self.closures.get(a)
        if closures:
            for b, o in closures:
                key = (a, b) if a < b else (b, a)
                d = self.open.pop(key, None)
                if d is None:
                    if self.free:
                        d = min(self.free)
                        self.free.remove(d)
                    else:
                        d = self.next_digit
                        self.next_digit += 1
                    self.open[key] = d
                    out.append(str(d) if d < 10 else f"%{d}")
                else:
                    out.append(v.bond_symbol(a, b, o) + (str(d) if d < 10 else f"%{d}"))
                    self.free.append(d)
        if a in self.touching:
            parent = self.parent[a]
            branches = [v.bond_symbol(a, b, o) + "*" for b, o in v.nbrs[a] if b in self.stop and b != parent]
        else:
            branches = []
        for b, o in self.children[a]:
            if o == 1.0:
                sym = "-" if arom[a] and arom[b] else ""
            else:
                sym = BOND_SYMBOL.get(o, "~")
            branches.append(sym + self._emit(b))
        if branches:
            last = branches.pop()
            for x in branches:
                out.append("(" + x + ")")
            out.append(last)
        return "".join(out)


@lru_cache(maxsize=16_384)
def canonical_walked(smiles: str) -> str:
    """RDKit's canonical form of a walked group SMILES (once per distinct string)."""
    with rdBase.BlockLogs():
        mol = Chem.MolFromSmiles(smiles)
    if mol is None:
        return smiles
    return Chem.MolToSmiles(mol, isomericSmiles=False)


def group_key_from_smiles(smiles: str) -> str:
    """The form `MolView.group_smiles` gives for a group written as SMILES with ``*``."""
    mol = Chem.MolFromSmiles(smiles)
    if mol is None:
        raise ValueError(f"bad group SMILES: {smiles}")
    dummies = [a.GetIdx() for a in mol.GetAtoms() if a.GetAtomicNum() == 0]
    if not dummies:
        raise ValueError(f"group SMILES needs a * attachment: {smiles}")
    view = MolView(mol)
    root = dummies[0]
    first = view.nbrs[root][0][0]
    text, _ = view.group_smiles(set(dummies), root, first)
    return text
