"""The figures of the report page as inline SVG text: RDKit 2-D depictions and matplotlib plots.

Plots use matplotlib's object API (`matplotlib.figure.Figure`, rendered by the SVG backend; pyplot and
interactive backends are never touched); SVG ids come from a fixed salt per figure, so the same inputs
give the same bytes.
"""

from __future__ import annotations

import io
import re

from .filters import fmt_t, num, orientation_short, same_t, short_label

# Colours of this report (chosen for it; colour-blind-safe pairs for the ring forms).
RING_FORM_COLOURS = {
    "chair": "#23707a",
    "twist-boat": "#d08a2c",
    "boat": "#9b3f6e",
    "other": "#7c8088",
}
LINE_COLOURS = ["#23707a", "#d08a2c", "#5b57a6", "#9b3f6e", "#6f9a3a", "#b8573a", "#3f8fc4", "#7c8088"]
MAX_CURVES = 7               # families drawn individually in the population plot; the rest are summed


def _strip_svg(svg: str) -> str:
    """SVG text ready to inline in HTML: no XML declaration, doctype, comments or metadata block."""
    svg = re.sub(r"<\?xml.*?\?>", "", svg, flags=re.S)
    svg = re.sub(r"<!DOCTYPE.*?>", "", svg, flags=re.S)
    svg = re.sub(r"<!--.*?-->", "", svg, flags=re.S)
    svg = re.sub(r"<metadata>.*?</metadata>", "", svg, flags=re.S)
    return svg.strip()


def _sub_get(s, key):
    return s.get(key) if isinstance(s, dict) else getattr(s, key)


def depiction_svg(smiles: str, substituents, ring, width: int = 320, height: int = 240) -> str:
    """A 2-D depiction (RDKit rdMolDraw2D, inline SVG text) with ring atoms and substituents labelled.

    `smiles` is either the atom-mapped explicit-H SMILES of molecule.json (atom order = map numbers)
    or a plain SMILES, whose atom order is RDKit's parse order followed by the added hydrogens (the
    intake convention). `ring` lists ring atom indices and `substituents` the groups (dicts or
    objects with id, ring_atom, first_atom, atoms) in that order. Ring atoms are annotated with
    their index ('#4'), each group's first atom with its id ('s1'); ring and groups are shaded.
    Raises ValueError when the SMILES does not parse or an index does not exist.
    """
    from rdkit import Chem
    from rdkit.Chem import rdDepictor
    from rdkit.Chem.Draw import rdMolDraw2D

    params = Chem.SmilesParserParams()
    params.removeHs = False
    mol = Chem.MolFromSmiles(str(smiles), params)
    if mol is None:
        raise ValueError(f"SMILES does not parse: {smiles!r}")
    if any(a.GetAtomMapNum() for a in mol.GetAtoms()):
        order = sorted(range(mol.GetNumAtoms()), key=lambda i: mol.GetAtomWithIdx(i).GetAtomMapNum())
        mol = Chem.RenumberAtoms(mol, order)
        for a in mol.GetAtoms():
            a.SetAtomMapNum(0)
    mol = Chem.AddHs(mol)
    n = mol.GetNumAtoms()
    ring = [int(i) for i in (ring or [])]
    subs = list(substituents or [])
    wanted = set(ring) | {int(_sub_get(s, "first_atom")) for s in subs} | {int(_sub_get(s, "ring_atom")) for s in subs}
    bad = sorted(i for i in wanted if not 0 <= i < n)
    if bad:
        raise ValueError(f"atom indices {bad} do not exist in a molecule of {n} atoms")

    for a in mol.GetAtoms():
        a.SetIntProp("cq_index", a.GetIdx())
    notes = {i: f"#{i}" for i in ring}
    for s in subs:
        notes[int(_sub_get(s, "first_atom"))] = str(_sub_get(s, "id"))
    # keep exactly the hydrogens that carry a label (e.g. the H of a ring N-H); mapped atoms survive RemoveHs
    for i in notes:
        if mol.GetAtomWithIdx(i).GetAtomicNum() == 1:
            mol.GetAtomWithIdx(i).SetAtomMapNum(900 + i)
    rp = Chem.RemoveHsParameters()
    rp.removeMapped = False
    mol = Chem.RemoveHs(mol, rp)
    for a in mol.GetAtoms():
        a.SetAtomMapNum(0)
    where = {a.GetIntProp("cq_index"): a.GetIdx() for a in mol.GetAtoms()}

    rdDepictor.SetPreferCoordGen(False)
    rdDepictor.Compute2DCoords(mol)
    ring_new = [where[i] for i in ring if i in where]
    group_new = []
    for s in subs:
        for i in (_sub_get(s, "atoms") or [_sub_get(s, "first_atom")]):
            if int(i) in where and where[int(i)] not in ring_new:
                group_new.append(where[int(i)])
    for i, text in notes.items():
        if i in where:
            mol.GetAtomWithIdx(where[i]).SetProp("atomNote", text)
    atom_colours = {i: (0.80, 0.91, 0.92) for i in ring_new}
    atom_colours.update({i: (0.98, 0.89, 0.74) for i in group_new})
    bond_colours = {}
    for b in mol.GetBonds():
        i, j = b.GetBeginAtomIdx(), b.GetEndAtomIdx()
        if i in atom_colours and j in atom_colours and atom_colours[i] == atom_colours[j]:
            bond_colours[b.GetIdx()] = atom_colours[i]

    drawer = rdMolDraw2D.MolDraw2DSVG(int(width), int(height))
    opts = drawer.drawOptions()
    opts.annotationFontScale = 0.62
    opts.setAtomNoteColour((0.08, 0.33, 0.38))
    opts.padding = 0.08
    opts.includeMetadata = False
    rdMolDraw2D.PrepareAndDrawMolecule(drawer, mol, highlightAtoms=list(atom_colours),
                                       highlightAtomColors=atom_colours,
                                       highlightBonds=list(bond_colours),
                                       highlightBondColors=bond_colours)
    drawer.FinishDrawing()
    return _strip_svg(drawer.GetDrawingText())


# ------------------------------------------------------------------------------------------ figures

def _figure_svg(fig, salt: str) -> str:
    import matplotlib
    buf = io.StringIO()
    with matplotlib.rc_context({"svg.hashsalt": salt, "svg.fonttype": "none"}):
        fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None})
    return _strip_svg(buf.getvalue())


def _rc():
    return {"font.size": 8.5, "axes.titlesize": 9, "axes.labelsize": 8.5, "xtick.labelsize": 7.5,
            "ytick.labelsize": 7.5, "legend.fontsize": 7.5, "font.family": "sans-serif",
            "axes.spines.top": False, "axes.spines.right": False, "axes.edgecolor": "#55585f"}


#: Families up to which the energy-level diagram stands in columns; with more it lies on its side, one
#: row per family with its label written horizontally, and grows in height with the family count.
LEVEL_COLUMNS_MAX = 6


def energy_levels_figure(conformers: list[dict], families: list[dict], temperature):
    """The energy-level diagram as a matplotlib Figure (None without counted conformers): one column per
    family (ranked), a short level per counted conformer at its relative G (kcal/mol) at `temperature`,
    the family free energy as a dashed level; coloured by ring form. With more than LEVEL_COLUMNS_MAX
    families the diagram is drawn on its side (one labelled row per family, G along x), so that no label
    overlaps another however many families a molecule has."""
    import matplotlib
    from matplotlib.figure import Figure

    confs = [c for c in conformers if same_t(c.get("temperature_k"), temperature)
             and str(c.get("status", "")).strip() == "ok" and num(c.get("g_rel_kcal")) is not None]
    if not confs:
        return None
    fam_rows = [f for f in families if same_t(f.get("temperature_k"), temperature)]
    fam_g = {(f.get("ring_form", ""), f.get("orientation", "")): num(f.get("g_rel_kcal")) for f in fam_rows}
    groups: dict[tuple, list[float]] = {}
    for c in confs:
        groups.setdefault((c.get("ring_form", ""), c.get("orientation", "")), []).append(num(c["g_rel_kcal"]))
    keys = sorted(groups, key=lambda k: (fam_g.get(k) if fam_g.get(k) is not None else min(groups[k]),
                                         min(groups[k]), k))
    sideways = len(keys) > LEVEL_COLUMNS_MAX
    with matplotlib.rc_context(_rc()):
        if sideways:
            fig = Figure(figsize=(6.8, 0.9 + 0.27 * len(keys)))
        else:
            fig = Figure(figsize=(min(9.0, max(3.6, 0.95 * len(keys) + 1.6)), 2.9))
        ax = fig.add_subplot(1, 1, 1)
        for x, k in enumerate(keys):
            colour = RING_FORM_COLOURS.get(k[0], RING_FORM_COLOURS["other"])
            levels = sorted(groups[k])
            fg = fam_g.get(k)
            if sideways:
                for g in levels:
                    ax.plot([g, g], [x - 0.32, x + 0.32], color=colour, lw=1.6, solid_capstyle="butt")
                if fg is not None:
                    ax.plot([fg, fg], [x - 0.42, x + 0.42], color=colour, lw=0.9, ls=(0, (2, 1.5)))
                ax.text(max(levels), x, f"  {len(levels)}", ha="left", va="center", fontsize=6.5, color="#55585f")
            else:
                for g in levels:
                    ax.plot([x - 0.28, x + 0.28], [g, g], color=colour, lw=1.8, solid_capstyle="butt")
                if fg is not None:
                    ax.plot([x - 0.38, x + 0.38], [fg, fg], color=colour, lw=0.9, ls=(0, (2, 1.5)))
                ax.text(x, max(levels), f" {len(levels)}", ha="center", va="bottom", fontsize=6.5, color="#55585f")
        if sideways:
            ax.set_yticks(range(len(keys)))
            ax.set_yticklabels([f"{k[0]}  {orientation_short(k[1])}" for k in keys], fontsize=7)
            ax.set_ylim(len(keys) - 0.4, -0.6)            # the lowest family on top
            ax.set_xlabel("relative G / kcal mol$^{-1}$ (number of conformers at the right of each row)")
            lo, hi = ax.get_xlim()
            ax.set_xlim(min(lo, -0.3), hi + 0.08 * (hi - lo + 1.0))
            ax.grid(axis="x", color="#e3e1dc", lw=0.6)
        else:
            ax.set_xticks(range(len(keys)))
            ax.set_xticklabels([k[0] + "\n" + orientation_short(k[1]).replace(", ", "\n") for k in keys],
                               fontsize=6.5 if len(keys) > 4 else 7.5)
            ax.set_xlim(-0.6, len(keys) - 0.4)
            ax.set_ylabel("relative G / kcal mol$^{-1}$")
            lo, hi = ax.get_ylim()
            ax.set_ylim(min(lo, -0.3), hi + 0.08 * (hi - lo + 1.0))
            ax.grid(axis="y", color="#e3e1dc", lw=0.6)
        ax.set_title(f"conformers at {fmt_t(temperature)}", loc="left")
        ax.set_axisbelow(True)
        fig.tight_layout(pad=0.4)
        return fig


def energy_levels_svg(conformers: list[dict], families: list[dict], temperature, salt: str) -> str | None:
    """The energy-level diagram (energy_levels_figure) as inline SVG text, or None."""
    import matplotlib
    fig = energy_levels_figure(conformers, families, temperature)
    if fig is None:
        return None
    with matplotlib.rc_context(_rc()):
        return _figure_svg(fig, salt)


def _ring_form_of(label: str):
    """The ring form a family label starts with ('twist-boat s1=...' -> 'twist-boat'), else None."""
    for form in ("twist-boat", "chair", "boat", "other"):
        if str(label).lower().startswith(form):
            return form
    return None


def population_curve_svg(curve: dict, temperatures, salt: str) -> str | None:
    """Family populations against temperature from ensemble.json's `curve`; the run's temperatures are
    marked. The MAX_CURVES most populated families are drawn, the rest summed as 'all others'."""
    import matplotlib
    from matplotlib.figure import Figure

    if not isinstance(curve, dict):
        return None
    ts = [num(t) for t in curve.get("temperature_k") or []]
    fams = curve.get("families") or {}
    if not ts or any(t is None for t in ts) or not isinstance(fams, dict) or not fams:
        return None
    series = {}
    for label, ys in fams.items():
        ys = [num(y) for y in (ys or [])]
        if len(ys) == len(ts) and all(y is not None for y in ys):
            series[str(label)] = ys
    if not series:
        return None
    ranked = sorted(series, key=lambda k: (-max(series[k]), k))
    shown, rest = ranked[:MAX_CURVES], ranked[MAX_CURVES:]
    styles = ["-", "--", "-.", ":"]
    seen: dict[str, int] = {}
    with matplotlib.rc_context(_rc()):
        fig = Figure(figsize=(4.6, 2.9))
        ax = fig.add_subplot(1, 1, 1)
        for i, label in enumerate(shown):
            form = _ring_form_of(label)
            if form:
                k = seen[form] = seen.get(form, -1) + 1
                colour, ls = RING_FORM_COLOURS[form], styles[k % len(styles)]
            else:
                colour, ls = LINE_COLOURS[i % len(LINE_COLOURS)], "-"
            text = short_label(label)
            ax.plot(ts, [100 * y for y in series[label]], color=colour, lw=1.5, ls=ls,
                    label=text if len(text) <= 40 else text[:38] + "…")
        if rest:
            total = [100 * sum(series[k][j] for k in rest) for j in range(len(ts))]
            ax.plot(ts, total, color="#9a9da3", lw=1.0, ls="--", label=f"all others ({len(rest)})")
        for t in temperatures or []:
            tv = num(t)
            if tv is not None and min(ts) <= tv <= max(ts):
                ax.axvline(tv, color="#b9b6ae", lw=0.8, ls=":")
        ax.set_xlabel("T / K")
        ax.set_ylabel("population / %")
        ax.set_ylim(-2, 102)
        ax.set_xlim(min(ts), max(ts))
        ax.grid(color="#e3e1dc", lw=0.6)
        ax.set_axisbelow(True)
        ax.legend(loc="best", frameon=False, handlelength=1.6)
        fig.tight_layout(pad=0.4)
        return _figure_svg(fig, salt)
