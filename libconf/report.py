"""`libconf report`: one self-contained HTML page for a finished `annotate` run.

The tables are read column by column in record batches (pyarrow datasets), so a run
of millions of rows is summarised without loading a whole table: counts and
histograms are accumulated batch by batch; the locked-scaffold survey works on a
systematic sample of the locked molecules. Plots (matplotlib) and depictions (RDKit)
are embedded as base64 PNG: the page fetches nothing.
"""

from __future__ import annotations

import base64
import html
import io
import json
import math
import os
import re
from collections import Counter
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pyarrow.compute as pc
import pyarrow.dataset as ds

from . import __version__

BATCH = 131_072
SCAFFOLD_SAMPLE = 20_000
TOP_SCAFFOLDS = 12
DG_BINS = np.arange(0.0, 61.0, 1.0)  # kJ/mol; the last bin also takes everything above
BARRIER_BINS = np.arange(0.0, 122.0, 2.0)
LOCK_ORDER = ("mobile", "biased", "anchored", "fixed", "trapped")
TAB = "\t"


class ReportError(Exception):
    """The directory is not a finished (or resumable) annotate run."""


@dataclass
class RunSummary:
    manifest: dict
    ring_classes: Counter = field(default_factory=Counter)
    lock_classes: Counter = field(default_factory=Counter)
    class_by_lock: Counter = field(default_factory=Counter)
    topologies: Counter = field(default_factory=Counter)
    dg_hist: np.ndarray = field(default_factory=lambda: np.zeros(len(DG_BINS) - 1, dtype=np.int64))
    barrier_hist: np.ndarray = field(default_factory=lambda: np.zeros(len(BARRIER_BINS) - 1, dtype=np.int64))
    n_rings: int = 0
    n_molecules: int = 0
    n_with_rings: int = 0
    n_locked: int = 0
    error_reasons: Counter = field(default_factory=Counter)
    error_examples: dict = field(default_factory=dict)
    error_stages: Counter = field(default_factory=Counter)
    scaffolds: Counter = field(default_factory=Counter)
    scaffold_example: dict = field(default_factory=dict)
    n_scaffold_sample: int = 0


def _dataset(run: Path, table: str):
    folder = run / table
    if not folder.is_dir() or not any(folder.glob("part-*.parquet")):
        return None
    return ds.dataset(sorted(str(p) for p in folder.glob("part-*.parquet")), format="parquet")


def _count(counter: Counter, array) -> None:
    vc = pc.value_counts(array)
    for value, n in zip(vc.field("values").to_pylist(), vc.field("counts").to_pylist()):
        counter[value] += n


def _histogram(hist: np.ndarray, bins: np.ndarray, array) -> None:
    values = array.to_numpy(zero_copy_only=False)
    values = values[np.isfinite(values)] if values.dtype.kind == "f" else values
    if values.size:
        hist += np.histogram(np.clip(values, bins[0], bins[-1] - 1e-9), bins=bins)[0]


_DIGITS = re.compile(r"\d+")


def reason_kind(reason: str) -> str:
    """An error reason with its numbers masked, so that like reasons count together."""
    return _DIGITS.sub("#", reason or "")


def summarise(run: Path) -> RunSummary:
    manifest_path = run / "manifest.json"
    if not manifest_path.is_file():
        raise ReportError(f"{run} has no manifest.json: is it the --out directory of `libconf annotate`?")
    try:
        manifest = json.loads(manifest_path.read_text())
    except (OSError, ValueError) as exc:
        raise ReportError(f"cannot read {manifest_path}: {exc}") from None
    s = RunSummary(manifest)

    rings = _dataset(run, "rings")
    if rings is not None:
        cols = ["ring_class", "lock_class", "topology", "dG_flip_kjmol", "barrier_kjmol"]
        for batch in rings.to_batches(columns=cols, batch_size=BATCH):
            s.n_rings += batch.num_rows
            _count(s.ring_classes, batch.column("ring_class"))
            _count(s.lock_classes, batch.column("lock_class"))
            _count(s.topologies, batch.column("topology"))
            pairs = pc.binary_join_element_wise(batch.column("ring_class"), batch.column("lock_class"), TAB)
            _count(s.class_by_lock, pairs)
            _histogram(s.dg_hist, DG_BINS, batch.column("dG_flip_kjmol"))
            _histogram(s.barrier_hist, BARRIER_BINS, batch.column("barrier_kjmol"))

    molecules = _dataset(run, "molecules")
    if molecules is not None:
        locked_total = int(manifest.get("counts", {}).get("locked_scaffolds") or 0)
        step = max(1, math.ceil(locked_total / SCAFFOLD_SAMPLE)) if locked_total else 1
        seen_locked = 0
        cols = ["mol_id", "input_file", "input_row", "smiles", "n_sat6_rings", "locked_scaffold"]
        for batch in molecules.to_batches(columns=cols, batch_size=BATCH):
            s.n_molecules += batch.num_rows
            s.n_with_rings += int(pc.sum(pc.greater(batch.column("n_sat6_rings"), 0)).as_py() or 0)
            locked = batch.filter(batch.column("locked_scaffold"))
            s.n_locked += locked.num_rows
            for i, row in enumerate(locked.to_pylist()):
                if (seen_locked + i) % step == 0:
                    _add_scaffold(s, row)
            seen_locked += locked.num_rows

    errors = _dataset(run, "errors")
    if errors is not None:
        for batch in errors.to_batches(columns=["reason", "raw", "stage"], batch_size=BATCH):
            _count(s.error_stages, batch.column("stage"))
            for reason, raw in zip(batch.column("reason").to_pylist(), batch.column("raw").to_pylist()):
                kind = reason_kind(reason)
                s.error_reasons[kind] += 1
                s.error_examples.setdefault(kind, (reason, (raw or "")[:200]))
    return s


def _add_scaffold(s: RunSummary, row: dict) -> None:
    from rdkit import Chem
    from rdkit.Chem.Scaffolds import MurckoScaffold

    mol = Chem.MolFromSmiles(row["smiles"] or "")
    if mol is None:
        return
    s.n_scaffold_sample += 1
    try:
        core = Chem.MolToSmiles(MurckoScaffold.GetScaffoldForMol(mol))
    except Exception:  # RDKit cannot cut a scaffold: count the molecule as its own
        core = Chem.MolToSmiles(mol)
    s.scaffolds[core] += 1
    s.scaffold_example.setdefault(core, row)


# --- pictures -----------------------------------------------------------------


def _png(fig) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110, bbox_inches="tight")
    import matplotlib.pyplot as plt

    plt.close(fig)
    return base64.b64encode(buf.getvalue()).decode("ascii")


def _bar_chart(counter: Counter, title: str, order=None) -> str:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    keys = [k for k in (order or []) if k in counter] + sorted(
        (k for k in counter if not order or k not in order), key=lambda k: -counter[k]
    )
    fig, ax = plt.subplots(figsize=(6.4, 0.32 * max(len(keys), 3) + 0.8))
    ax.barh([str(k) for k in keys][::-1], [counter[k] for k in keys][::-1], color="#4a7c59")
    ax.set_title(title, fontsize=11)
    ax.set_xlabel("rings")
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    return _png(fig)


def _histogram_chart(hist: np.ndarray, bins: np.ndarray, title: str, xlabel: str) -> str:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(6.4, 3.0))
    ax.bar(
        bins[:-1], hist, width=np.diff(bins), align="edge", color="#8a5a44", edgecolor="white", linewidth=0.3
    )
    ax.set_title(title, fontsize=11)
    ax.set_xlabel(xlabel)
    ax.set_ylabel("rings")
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    return _png(fig)


def _axial_atoms(run: Path, examples: list[dict]) -> dict[tuple, list[int]]:
    """First atoms of groups axial (fraction >= 0.5) in each example molecule."""
    subs = _dataset(run, "substituents")
    if subs is None or not examples:
        return {}
    keys = {(e["input_file"], e["input_row"]) for e in examples}
    rows = sorted({e["input_row"] for e in examples})
    table = subs.to_table(
        columns=["input_file", "input_row", "first_atom", "axial_fraction", "group"],
        filter=ds.field("input_row").isin(rows),
    )
    out: dict[tuple, list[int]] = {}
    for r in table.to_pylist():
        key = (r["input_file"], r["input_row"])
        bridge = (r["group"] or "").count("*") > 1  # a fused or bridging ring bond, not a group
        if key in keys and not bridge and r["axial_fraction"] is not None and r["axial_fraction"] >= 0.5:
            out.setdefault(key, []).append(r["first_atom"])
    return out


def _depiction(smiles: str, highlight: list[int]) -> str | None:
    from rdkit import Chem
    from rdkit.Chem.Draw import rdMolDraw2D

    mol = Chem.MolFromSmiles(smiles or "")
    if mol is None:
        return None
    drawer = rdMolDraw2D.MolDraw2DCairo(320, 240)
    colours = {i: (0.85, 0.33, 0.1) for i in highlight if i < mol.GetNumAtoms()}
    rdMolDraw2D.PrepareAndDrawMolecule(drawer, mol, highlightAtoms=list(colours), highlightAtomColors=colours)
    drawer.FinishDrawing()
    return base64.b64encode(drawer.GetDrawingText()).decode("ascii")


# --- the page ---------------------------------------------------------------------

_STYLE = """
body { font-family: system-ui, sans-serif; margin: 2em auto; max-width: 68em; color: #222; }
h1 { font-size: 1.5em; } h2 { font-size: 1.2em; margin-top: 2em; border-bottom: 1px solid #ccc; }
table { border-collapse: collapse; margin: 0.5em 0; } td, th { padding: 0.2em 0.7em; text-align: right; }
th { background: #eee; } td.l, th.l { text-align: left; }
.caution { background: #fff6e0; border-left: 4px solid #d9a400; padding: 0.5em 1em; }
.grid { display: flex; flex-wrap: wrap; gap: 1em; }
.card { border: 1px solid #ddd; padding: 0.5em; width: 330px; font-size: 0.85em; }
code { font-size: 0.9em; word-break: break-all; }
"""


def _table(header: list[str], rows: list[list], left: int = 1) -> str:
    def cell(tag, v, i):
        cls = ' class="l"' if i < left else ""
        return f"<{tag}{cls}>{html.escape(str(v))}</{tag}>"

    head = "".join(cell("th", h, i) for i, h in enumerate(header))
    body = "".join("<tr>" + "".join(cell("td", v, i) for i, v in enumerate(r)) + "</tr>" for r in rows)
    return f"<table><tr>{head}</tr>{body}</table>"


def _img(b64: str, alt: str) -> str:
    return f'<img alt="{html.escape(alt)}" src="data:image/png;base64,{b64}">'


def render(run: Path, s: RunSummary) -> str:
    m = s.manifest
    params = m.get("parameters", {})
    counts = m.get("counts", {})
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>libconf run report: {html.escape(run.name)}</title>",
        f"<style>{_STYLE}</style></head><body>",
        f"<h1>Ring conformations of {html.escape(run.name)}</h1>",
        '<p class="caution">These numbers are estimates from published additive increments '
        "(A-values and interaction terms), not measurements. They are weakest for groups no "
        "table lists (taken by analogy), crowded or trigonal-atom rings, and for every "
        "inversion barrier other than cyclohexane's.</p>",
        "<h2>Run</h2>",
        _table(
            ["run", ""],
            [
                ["status", m.get("status", "?")],
                ["temperature (K)", params.get("temperature")],
                ["medium", params.get("medium")],
                ["records", f"{counts.get('records', 0):,}"],
                ["molecules", f"{s.n_molecules:,}"],
                ["molecules with a saturated six-membered ring", f"{s.n_with_rings:,}"],
                ["locked scaffolds", f"{s.n_locked:,}"],
                ["rings", f"{s.n_rings:,}"],
                ["error rows", f"{counts.get('errors', 0):,}"],
                ["libconf (run / report)", f"{m.get('versions', {}).get('libconf', '?')} / {__version__}"],
                ["RDKit", m.get("versions", {}).get("rdkit", "?")],
            ],
            left=2,
        ),
        _table(
            ["input", "size (bytes)", "sha256"],
            [
                [i.get("name"), f"{i.get('size', 0):,}", (i.get("sha256") or "")[:16] + "…"]
                for i in m.get("inputs", [])
            ],
        ),
        _table(["parameter", "value"], [[k, v] for k, v in sorted(params.items())], left=2),
    ]
    if s.n_rings:
        classes = sorted(s.ring_classes, key=lambda k: -s.ring_classes[k])
        locks = [k for k in LOCK_ORDER if k in s.lock_classes]
        cross = [
            [c, *[f"{s.class_by_lock.get(c + TAB + lk, 0):,}" for lk in locks], f"{s.ring_classes[c]:,}"]
            for c in classes
        ]
        parts += [
            "<h2>Rings by class and lock class</h2>",
            '<div class="grid">',
            _img(_bar_chart(s.ring_classes, "ring classes"), "ring classes"),
            _img(_bar_chart(s.lock_classes, "lock classes", LOCK_ORDER), "lock classes"),
            "</div>",
            _table(["ring class", *locks, "all"], cross),
            _table(["topology", "rings"], [[k, f"{v:,}"] for k, v in s.topologies.most_common()]),
            "<h2>Distributions</h2>",
            "<p>Rings held fixed by their topology have no flip energy or barrier and are not counted here; "
            f"the last bar of each plot also holds everything above {DG_BINS[-1]:g} and "
            f"{BARRIER_BINS[-1]:g} kJ/mol.</p>",
            '<div class="grid">',
            _img(_histogram_chart(s.dg_hist, DG_BINS, "dG_flip (minor - major chair)", "kJ/mol"), "dG_flip"),
            _img(
                _histogram_chart(s.barrier_hist, BARRIER_BINS, "ring-inversion barrier", "kJ/mol"), "barrier"
            ),
            "</div>",
        ]
    if s.scaffolds:
        top = s.scaffolds.most_common(TOP_SCAFFOLDS)
        examples = [s.scaffold_example[core] for core, _ in top]
        axial = _axial_atoms(run, examples)
        cards = []
        for (core, n), ex in zip(top, examples):
            pic = _depiction(ex["smiles"], axial.get((ex["input_file"], ex["input_row"]), []))
            share = 100.0 * n / max(s.n_scaffold_sample, 1)
            cards.append(
                '<div class="card">'
                + (_img(pic, core) if pic else "")
                + f"<div><b>{n:,}</b> of the sample ({share:.1f} %)</div>"
                + f"<div>scaffold <code>{html.escape(core)}</code></div>"
                + f"<div>example {html.escape(str(ex['mol_id']))}</div></div>"
            )
        parts += [
            "<h2>Most common locked scaffolds</h2>",
            f"<p>Murcko scaffolds of a systematic sample of {s.n_scaffold_sample:,} of the "
            f"{s.n_locked:,} locked molecules. Each picture shows one example molecule; groups axial "
            "in its major chair are marked in orange (bonds of fused or bridging rings are not marked).</p>",
            '<div class="grid">' + "".join(cards) + "</div>",
        ]
    parts.append("<h2>Errors</h2>")
    if s.error_reasons:
        parts.append(_table(["stage", "rows"], [[k, f"{v:,}"] for k, v in s.error_stages.most_common()]))
        parts.append(
            _table(
                ["reason (numbers masked)", "rows", "example record"],
                [[k, f"{v:,}", s.error_examples[k][1]] for k, v in s.error_reasons.most_common(25)],
            )
        )
    else:
        parts.append("<p>No error rows.</p>")
    stamp = datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")
    parts.append(f"<p><small>libconf {__version__}, report written {stamp}.</small></p></body></html>")
    return "\n".join(parts)


def write_report(run_dir: str | os.PathLike, out: str | os.PathLike | None = None) -> Path:
    """Summarise a run directory into one self-contained HTML file; returns its path."""
    run = Path(run_dir)
    target = Path(out) if out else run / "report.html"
    page = render(run, summarise(run))
    tmp = target.with_name("." + target.name + ".tmp")
    tmp.write_text(page, encoding="utf-8")
    os.replace(tmp, target)
    return target
