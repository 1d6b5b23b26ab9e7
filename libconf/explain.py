"""Plain-text breakdown of one molecule for `libconf explain`."""

from __future__ import annotations

import math

from .results import MoleculeResult, RingResult

CHAIR_NAMES = ("chair A", "chair B")


def _num(x, fmt="{:.1f}", none="-"):
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return none
    return fmt.format(x)


def _ring_text(r: RingResult, temperature: float) -> list[str]:
    head = (
        f"Ring {r.ring_id}: {r.ring_class}, {r.topology}"
        + (f" ({r.fusion} fusion)" if r.fusion else "")
        + f", atoms {'-'.join(map(str, r.ring_atoms))} (locants 1-6 in this order)"
    )
    lines = [head]
    if r.n_planar_ring_atoms:
        lines.append(f"  trigonal (flattened) ring atoms: {r.n_planar_ring_atoms}")
    lines.append(
        f"  stereo: {r.stereo_status}"
        + (
            f" ({r.n_stereo_assignments} assignments tried; most stable shown)"
            if r.stereo_status != "complete"
            else ""
        )
    )
    if r.substituents:
        lines.append("  substituents (chair A puckers locants 1, 3, 5 up):")
        lines.append(
            f"    {'pos':>3}  {'group':<22} {'face':<11} {'A':>6} {'B':>6} "
            f"{'A-value':>8}  {'source':<6} {'axial %':>7}"
        )
        for s in r.substituents:
            ax = ["ax" if v else "eq" if v is not None else "-" for v in s.axial_in_chair]
            group = s.group if len(s.group) <= 22 else s.group[:19] + "..."
            lines.append(
                f"    {s.position:>3}  {group:<22} {s.face:<11} {ax[0]:>6} {ax[1]:>6} "
                f"{_num(s.a_value_kjmol):>8}  {s.a_value_source or '-':<6} "
                f"{_num(None if s.axial_fraction is None else 100 * s.axial_fraction):>7}"
            )
        refs = {}
        for s in r.substituents:
            if s.source_ref and s.a_value_kjmol is not None:
                refs.setdefault(f"{s.position}-{s.name}", s.source_ref)
        if refs:
            lines.append("  A-value sources:")
            for k, v in refs.items():
                lines.append(f"    {k}: {v}")
    for c in (0, 1):
        e = r.chair_energies_kjmol[c] if r.chair_energies_kjmol else None
        terms = [t for t in r.contributions if t.chair == c]
        if e is None and not terms:
            continue
        lines.append(
            f"  {CHAIR_NAMES[c]}: {_num(e)} kJ/mol above a strain-free chair"
            + ("  <- major" if r.major_chair == c else "")
        )
        for t in terms:
            lines.append(f"      {t.energy_kjmol:+7.1f}  {t.rule:<10} {t.detail}")
    lines.append(
        f"  dG_flip {_num(r.dG_flip_kjmol)} kJ/mol"
        + (
            f" (spread {_num(r.dG_flip_min_kjmol)}..{_num(r.dG_flip_max_kjmol)})"
            if r.stereo_status != "complete"
            else ""
        )
        + f", uncertainty {_num(r.uncertainty_kjmol)} kJ/mol, values from {r.value_source}"
    )
    lines.append(
        f"  populations at {temperature:g} K: major chair {_num(r.major_chair_fraction, '{:.3f}')}, "
        f"twist-boat {_num(r.twist_boat_fraction, '{:.3g}')}"
        + (f" (twist-boat {_num(r.twist_boat_energy_kjmol)} kJ/mol)" if r.twist_boat_energy_kjmol else "")
    )
    if r.barrier_kjmol is not None:
        lines.append(
            f"  inversion barrier {r.barrier_kjmol:.1f} kJ/mol from the major chair; "
            f"rate {r.flip_rate_per_s:.3g} /s, half-life {r.flip_half_life_s:.3g} s"
        )
        for t in r.barrier_terms:
            lines.append(f"      {t.energy_kjmol:+7.1f}  {t.detail}")
    lines.append(f"  lock class: {r.lock_class} - {r.lock_reason}")
    return lines


def explain_text(res: MoleculeResult) -> str:
    out = [
        f"{res.smiles}",
        f"medium {res.medium}, {res.temperature:g} K, {res.n_sat6_rings} saturated six-membered ring(s)",
    ]
    if not res.rings:
        out.append("No saturated six-membered ring: nothing to analyse.")
    for r in res.rings:
        out.append("")
        out.extend(_ring_text(r, res.temperature))
    if res.rings:
        out.append("")
        out.append(
            f"locked scaffold: {'yes' if res.locked_scaffold else 'no'}; "
            f"axial strain {res.axial_strain_kjmol:.1f} kJ/mol; "
            f"axial groups in major chairs {res.n_axial_major:.2f}"
        )
        out.append("Estimates from additive increments; they do not replace experiment.")
    return "\n".join(out)


def plot_chairs(res: MoleculeResult, path: str, max_rings: int = 6) -> None:
    """One panel per ring: both chairs' energies, stacked by the terms that make them."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    rings = res.rings[:max_rings] or []
    n = max(len(rings), 1)
    fig, axes = plt.subplots(n, 1, figsize=(7.5, 1.9 * n + 0.6), squeeze=False)
    if not rings:
        axes[0][0].text(0.5, 0.5, "no saturated six-membered ring", ha="center", va="center")
        axes[0][0].set_axis_off()
    palette = plt.get_cmap("tab20").colors
    for ax, r in zip((a[0] for a in axes), rings):
        colours: dict[str, tuple] = {}
        widest = 1.0
        for c in (0, 1):
            left = 0.0
            for t in (t for t in r.contributions if t.chair == c):
                name = t.detail if t.rule == "a_value" else f"{t.rule.replace('_', '-')}: {t.detail}"
                new = name not in colours
                colour = colours.setdefault(name, palette[len(colours) % len(palette)])
                ax.barh(
                    CHAIR_NAMES[c],
                    t.energy_kjmol,
                    left=left,
                    color=colour,
                    edgecolor="white",
                    label=name if new else None,
                )
                left += t.energy_kjmol
            widest = max(widest, left)
            total = r.chair_energies_kjmol[c] if r.chair_energies_kjmol else None
            label = "not a chair here" if total is None else f"{total:.1f} kJ/mol"
            if r.major_chair == c:
                label += "  (major)"
            ax.text(max(left, 0) + 0.3, c, label, va="center", fontsize=8)
        ax.axvline(0, color="black", linewidth=0.6)
        ax.set_xlim(right=widest * 1.3)
        ax.set_title(
            f"ring {r.ring_id}: {r.ring_class}, {r.lock_class}"
            + (f" - {r.lock_reason}" if r.lock_reason else ""),
            fontsize=9,
        )
        ax.set_xlabel("kJ/mol above a strain-free chair", fontsize=8)
        ax.invert_yaxis()
        handles, labels = ax.get_legend_handles_labels()
        if handles:
            ax.legend(
                handles, labels, fontsize=7, loc="center left", bbox_to_anchor=(1.01, 0.5), frameon=False
            )
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)
    fig.suptitle(f"{res.smiles}  ({res.medium}, {res.temperature:g} K)", fontsize=9)
    fig.tight_layout()
    fig.savefig(path, dpi=120, bbox_inches="tight")
    plt.close(fig)
