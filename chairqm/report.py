"""The run report: one self-contained HTML page (inline CSS and SVG, no network) a chemist reads after a run.

`write_report(out_dir, run_info)` reads the result files of a run's output folder — `summary.csv` and,
per molecule, `molecule.json`, `families.csv`, `conformers.csv`, `ensemble.json` (and, after a DFT
refinement, `refine.csv` and `refine.json`) — and writes `report.html` next to them. Nothing is
computed here beyond formatting: every number on the page is read from those files (the one exception:
a refined molecule's GFN2-xTB-only chair gap is given the sign of the refined chairs' axis in the
additive table), so the page and the machine-readable results cannot disagree.

Figures are drawn with matplotlib's object API (`matplotlib.figure.Figure`, rendered by the SVG
backend; pyplot and interactive backends are never touched) and the 2-D depictions with RDKit's
`rdMolDraw2D`. Both are inlined as SVG text; SVG ids are derived from a fixed salt per figure so that
the same inputs give the same bytes.

Refined runs (settings.refine): the headline numbers of a refined molecule are composite free energies,
a DFT single point on the GFN2-xTB minimum plus the GFN2-xTB thermal correction, written
`DFT//GFN2-xTB` on the page (REFINED_TAG); wherever such a number appears, the GFN2-xTB-only value the
run also recorded stands beside it, tagged GFN2_TAG. Molecules of a refined run whose single points all
failed carry GFN2-xTB values only and say so. Unrefined runs render without any of these columns.

Sign convention assumed for the additive comparison: `additive.dg_kcal` and `chair_dg_kcal` are the
same difference of the two chair families (whatever its orientation); equal signs mean the additive
estimate favours the chair the calculation favours, opposite signs the ring-flipped chair.
"""

from __future__ import annotations

import html
import io
import json
import math
import re
from pathlib import Path

from . import fileio

REPORT_NAME = "report.html"

# Colours of this report (chosen for it; colour-blind-safe pairs for the ring forms).
RING_FORM_COLOURS = {
    "chair": "#23707a",
    "twist-boat": "#d08a2c",
    "boat": "#9b3f6e",
    "other": "#7c8088",
}
LINE_COLOURS = ["#23707a", "#d08a2c", "#5b57a6", "#9b3f6e", "#6f9a3a", "#b8573a", "#3f8fc4", "#7c8088"]
MAX_CURVES = 7               # families drawn individually in the population plot; the rest are summed

REFINED_TAG = "DFT//GFN2-xTB"          # DFT single point at the GFN2-xTB geometry + GFN2-xTB thermal correction
GFN2_TAG = "GFN2-xTB only"             # the same quantity without the DFT single points
_DISPERSION_SUFFIX = {"d3bj": "-D3(BJ)", "d3zero": "-D3(0)"}

CSS = """
:root { --ink:#24262b; --muted:#62666e; --rule:#d9d6cf; --paper:#f7f5f0; --card:#ffffff;
        --accent:#23707a; --warn-bg:#fdf1dc; --warn:#a4610a; --bad-bg:#f8e4e1; --bad:#a5342a;
        --good-bg:#e3f1ea; --good:#24704c; }
* { box-sizing: border-box; }
body { margin:0; background:var(--paper); color:var(--ink);
       font: 15px/1.45 "Segoe UI", "Helvetica Neue", Arial, sans-serif; }
main { max-width: 1060px; margin: 0 auto; padding: 0 18px 40px; }
header.top { background: var(--accent); color: #fff; padding: 18px 0 14px; margin-bottom: 18px; }
header.top .inner { max-width:1060px; margin:0 auto; padding:0 18px; }
header.top h1 { margin:0 0 4px; font-size: 23px; font-weight: 600; }
header.top p { margin:0; opacity: .9; font-size: 13.5px; }
h2 { font-size: 19px; margin: 26px 0 10px; border-bottom: 2px solid var(--rule); padding-bottom: 3px; }
h3 { font-size: 15.5px; margin: 16px 0 6px; }
.card { background: var(--card); border: 1px solid var(--rule); border-radius: 6px; padding: 12px 16px;
        margin: 14px 0; }
.caution { background: var(--warn-bg); border-left: 6px solid var(--warn); padding: 10px 14px;
           border-radius: 4px; margin: 12px 0; }
.caution strong { color: var(--warn); }
.tiles { display:flex; flex-wrap:wrap; gap:10px; margin: 8px 0; }
.tile { background: var(--card); border:1px solid var(--rule); border-radius:6px; padding:8px 14px;
        min-width: 120px; }
.tile .n { font-size: 22px; font-weight: 600; display:block; }
.tile .l { font-size: 12.5px; color: var(--muted); }
table { border-collapse: collapse; margin: 6px 0 10px; font-size: 13.5px; }
th, td { padding: 3px 9px; border-bottom: 1px solid var(--rule); text-align: left; vertical-align: top; }
th { background: #eeece6; font-weight: 600; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; }
tr.muted td { color: var(--muted); }
table.kv th { background: none; color: var(--muted); font-weight: normal; width: 15em; }
.bar { display:inline-block; height: 9px; background: var(--accent); vertical-align: middle;
       margin-right: 6px; border-radius: 2px; }
.badge { display:inline-block; padding: 1px 8px; border-radius: 10px; font-size: 12.5px; font-weight: 600; }
.badge.flag { background: var(--bad-bg); color: var(--bad); }
.badge.fine { background: var(--good-bg); color: var(--good); }
.badge.failed { background: var(--bad); color: #fff; }
.verdict { padding: 7px 12px; border-radius: 4px; margin: 8px 0; }
.verdict.flag { background: var(--bad-bg); border-left: 5px solid var(--bad); }
.verdict.fine { background: var(--good-bg); border-left: 5px solid var(--good); }
.failure { background: var(--bad-bg); border-left: 6px solid var(--bad); padding: 8px 12px; border-radius: 4px; }
.row { display:flex; flex-wrap: wrap; gap: 18px; align-items: flex-start; }
.row > div { flex: 1 1 300px; min-width: 0; }
figure { margin: 6px 0; }
figure svg { max-width: 100%; height: auto; }
figcaption { font-size: 12.5px; color: var(--muted); }
code, .mono { font-family: "DejaVu Sans Mono", Consolas, monospace; font-size: 12.5px; }
.muted { color: var(--muted); }
details > summary { cursor: pointer; color: var(--accent); margin: 4px 0; }
footer { color: var(--muted); font-size: 12.5px; margin-top: 30px; border-top: 1px solid var(--rule);
         padding-top: 8px; }
"""


# ------------------------------------------------------------------------------------------ helpers

def esc(x) -> str:
    """Escape any value for HTML text or attribute use."""
    return html.escape("" if x is None else str(x), quote=True)


def _missing(x) -> bool:
    if x is None:
        return True
    if isinstance(x, float) and math.isnan(x):
        return True
    return isinstance(x, str) and x.strip().lower() in ("", "nan", "none", "null")


def _num(x):
    """A float, or None for an empty / non-numeric cell."""
    if _missing(x):
        return None
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    return None if math.isnan(v) else v


def _truthy(x) -> bool:
    if isinstance(x, bool):
        return x
    return str(x).strip().lower() in ("true", "1", "yes", "y", "t")


def fmt_kcal(x, digits=2, signed=False) -> str:
    v = _num(x)
    if v is None:
        return "—"
    if abs(v) < 0.5 * 10 ** -digits:
        v = 0.0
    return f"{v:+.{digits}f}" if signed else f"{v:.{digits}f}"


def fmt_pct(p) -> str:
    v = _num(p)
    if v is None:
        return "—"
    if v > 0.999 and v < 1.0:
        return "&gt;99.9 %"
    if 0.0 < v < 0.001:
        return "&lt;0.1 %"
    return f"{100.0 * v:.1f} %"


def fmt_t(t) -> str:
    v = _num(t)
    if v is None:
        return esc(t)
    return f"{v:.2f}".rstrip("0").rstrip(".") + " K"


def fmt_seconds(s) -> str:
    v = _num(s)
    if v is None:
        return "—"
    if v < 120:
        return f"{v:.1f} s"
    m, sec = divmod(int(round(v)), 60)
    if m < 120:
        return f"{m} min {sec:02d} s"
    h, m = divmod(m, 60)
    return f"{h} h {m:02d} min"


_ORIENT_SHORT = {"axial": "ax", "equatorial": "eq", "pseudo-axial": "p-ax", "pseudo-equatorial": "p-eq",
                 "pseudoaxial": "p-ax", "pseudoequatorial": "p-eq"}


def _orient_pairs(orientation) -> list[tuple[str, str]]:
    if _missing(orientation):
        return []
    out = []
    for part in str(orientation).split(";"):
        part = part.strip()
        if not part:
            continue
        sid, _, how = part.partition("=")
        out.append((sid.strip(), how.strip()))
    return out


def orientation_short(orientation) -> str:
    """'s1=axial;s2=equatorial' -> 's1 ax, s2 eq' (plain text, not escaped)."""
    pairs = _orient_pairs(orientation)
    if not pairs:
        return "no substituent"
    return ", ".join(f"{s} {_ORIENT_SHORT.get(h, h)}" if h else s for s, h in pairs)


def orientation_words(orientation) -> str:
    """'s1=axial;s2=equatorial' -> 's1 axial and s2 equatorial' (plain text, not escaped)."""
    pairs = _orient_pairs(orientation)
    if not pairs:
        return "no substituent"
    words = [f"{s} {h}" if h else s for s, h in pairs]
    return words[0] if len(words) == 1 else ", ".join(words[:-1]) + " and " + words[-1]


def _same_t(a, b) -> bool:
    a, b = _num(a), _num(b)
    return a is not None and b is not None and abs(a - b) < 1e-6


def _read_csv(path: Path):
    import pandas as pd
    if not path.is_file():
        return None
    try:
        return pd.read_csv(path, dtype=str, keep_default_na=False)
    except Exception:        # an empty or unreadable table is shown as missing, not fatal
        return None


def _read_json(path: Path):
    if not path.is_file():
        return None
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def _rows(frame) -> list[dict]:
    return [] if frame is None else frame.to_dict("records")


def _strip_svg(svg: str) -> str:
    """SVG text ready to inline in HTML: no XML declaration, doctype, comments or metadata block."""
    svg = re.sub(r"<\?xml.*?\?>", "", svg, flags=re.S)
    svg = re.sub(r"<!DOCTYPE.*?>", "", svg, flags=re.S)
    svg = re.sub(r"<!--.*?-->", "", svg, flags=re.S)
    svg = re.sub(r"<metadata>.*?</metadata>", "", svg, flags=re.S)
    return svg.strip()


def _table(headers, rows, num_cols=(), row_classes=None, cls="") -> str:
    """An HTML table; cells are pre-escaped HTML strings."""
    out = [f'<table class="{cls}">' if cls else "<table>", "<thead><tr>"]
    for i, h in enumerate(headers):
        out.append(f'<th class="num">{h}</th>' if i in num_cols else f"<th>{h}</th>")
    out.append("</tr></thead><tbody>")
    for k, r in enumerate(rows):
        rc = row_classes[k] if row_classes else ""
        out.append(f'<tr class="{rc}">' if rc else "<tr>")
        for i, c in enumerate(r):
            out.append(f'<td class="num">{c}</td>' if i in num_cols else f"<td>{c}</td>")
        out.append("</tr>")
    out.append("</tbody></table>")
    return "".join(out)


def _kv_table(pairs) -> str:
    body = "".join(f"<tr><th>{esc(k)}</th><td>{v}</td></tr>" for k, v in pairs)
    return f'<table class="kv"><tbody>{body}</tbody></table>'


def _plain(v) -> str:
    """A setting value in words (escaped)."""
    if v is None:
        return "none"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, dict):
        if not v:
            return "—"
        return esc(", ".join(f"{k}={_plain_raw(x)}" for k, x in sorted(v.items())))
    if isinstance(v, (list, tuple)):
        return esc(", ".join(_plain_raw(x) for x in v))
    return esc(v)


def _plain_raw(v) -> str:
    if isinstance(v, dict):
        return "{" + ", ".join(f"{k}={_plain_raw(x)}" for k, x in sorted(v.items())) + "}"
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_plain_raw(x) for x in v) + "]"
    if v is None:
        return "none"
    return str(v)


def _anchor(name) -> str:
    return "m-" + re.sub(r"[^A-Za-z0-9_.-]", "_", str(name))


# ------------------------------------------------------------------------------------------ depiction

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


def energy_levels_svg(conformers: list[dict], families: list[dict], temperature, salt: str) -> str | None:
    """Energy-level diagram: one column per family (ranked), a short level per counted conformer at its
    relative G (kcal/mol) at `temperature`, the family free energy as a dashed level; coloured by ring form."""
    import matplotlib
    from matplotlib.figure import Figure

    confs = [c for c in conformers if _same_t(c.get("temperature_k"), temperature)
             and str(c.get("status", "")).strip() == "ok" and _num(c.get("g_rel_kcal")) is not None]
    if not confs:
        return None
    fam_rows = [f for f in families if _same_t(f.get("temperature_k"), temperature)]
    fam_g = {(f.get("ring_form", ""), f.get("orientation", "")): _num(f.get("g_rel_kcal")) for f in fam_rows}
    groups: dict[tuple, list[float]] = {}
    for c in confs:
        groups.setdefault((c.get("ring_form", ""), c.get("orientation", "")), []).append(_num(c["g_rel_kcal"]))
    keys = sorted(groups, key=lambda k: (fam_g.get(k) if fam_g.get(k) is not None else min(groups[k]),
                                         min(groups[k]), k))
    width = min(9.0, max(3.6, 0.75 * len(keys) + 1.6))
    with matplotlib.rc_context(_rc()):
        fig = Figure(figsize=(width, 2.9))
        ax = fig.add_subplot(1, 1, 1)
        for x, k in enumerate(keys):
            colour = RING_FORM_COLOURS.get(k[0], RING_FORM_COLOURS["other"])
            levels = sorted(groups[k])
            for g in levels:
                ax.plot([x - 0.28, x + 0.28], [g, g], color=colour, lw=1.8, solid_capstyle="butt")
            fg = fam_g.get(k)
            if fg is not None:
                ax.plot([x - 0.38, x + 0.38], [fg, fg], color=colour, lw=0.9, ls=(0, (2, 1.5)))
            ax.text(x, max(levels), f" {len(levels)}", ha="center", va="bottom", fontsize=6.5, color="#55585f")
        ax.set_xticks(range(len(keys)))
        ax.set_xticklabels([k[0] + "\n" + orientation_short(k[1]).replace(", ", "\n") for k in keys],
                           fontsize=6.5 if len(keys) > 6 else 7.5)
        ax.set_xlim(-0.6, len(keys) - 0.4)
        ax.set_ylabel("relative G / kcal mol$^{-1}$")
        ax.set_title(f"conformers at {fmt_t(temperature)}", loc="left")
        lo, hi = ax.get_ylim()
        ax.set_ylim(min(lo, -0.3), hi + 0.08 * (hi - lo + 1.0))
        ax.grid(axis="y", color="#e3e1dc", lw=0.6)
        ax.set_axisbelow(True)
        fig.tight_layout(pad=0.4)
        return _figure_svg(fig, salt)


def _ring_form_of(label: str):
    """The ring form a family label starts with ('twist-boat s1=...' -> 'twist-boat'), else None."""
    for form in ("twist-boat", "chair", "boat", "other"):
        if str(label).lower().startswith(form):
            return form
    return None


def _short_label(label: str) -> str:
    """'chair s1=axial;s2=equatorial' -> 'chair s1 ax, s2 eq' for a legend."""
    text = re.sub(r"(s\d+)=([A-Za-z-]+)", lambda mm: f"{mm.group(1)} {_ORIENT_SHORT.get(mm.group(2), mm.group(2))}",
                  str(label))
    return text.replace(";", ", ")


def population_curve_svg(curve: dict, temperatures, salt: str) -> str | None:
    """Family populations against temperature from ensemble.json's `curve`; the run's temperatures are
    marked. The MAX_CURVES most populated families are drawn, the rest summed as 'all others'."""
    import matplotlib
    from matplotlib.figure import Figure

    if not isinstance(curve, dict):
        return None
    ts = [_num(t) for t in curve.get("temperature_k") or []]
    fams = curve.get("families") or {}
    if not ts or any(t is None for t in ts) or not isinstance(fams, dict) or not fams:
        return None
    series = {}
    for label, ys in fams.items():
        ys = [_num(y) for y in (ys or [])]
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
            text = _short_label(label)
            ax.plot(ts, [100 * y for y in series[label]], color=colour, lw=1.5, ls=ls,
                    label=text if len(text) <= 40 else text[:38] + "…")
        if rest:
            total = [100 * sum(series[k][j] for k in rest) for j in range(len(ts))]
            ax.plot(ts, total, color="#9a9da3", lw=1.0, ls="--", label=f"all others ({len(rest)})")
        for t in temperatures or []:
            tv = _num(t)
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


# ------------------------------------------------------------------------------------------ reading

def _molecule_names(out: Path, summary_rows: list[dict]) -> list[str]:
    names = []
    for r in summary_rows:
        n = str(r.get("molecule", ""))
        if n and n not in names:
            names.append(n)
    # then every folder holding a molecule record that the summary does not mention, in name order
    names += sorted(p.parent.name for p in out.glob("*/molecule.json") if p.parent.name not in names)
    return names


def _load_molecule(out: Path, name: str, summary_rows: list[dict]) -> dict:
    folder = out / name
    rows = [r for r in summary_rows if str(r.get("molecule")) == name]
    ens = _read_json(folder / "ensemble.json")
    record = _read_json(folder / "molecule.json")
    status = "ok"
    reason = ""
    if isinstance(ens, dict) and ens.get("status") == "failed":
        status, reason = "failed", str(ens.get("reason", ""))
    failed_rows = [r for r in rows if str(r.get("status", "")).strip() == "failed"]
    if failed_rows:
        status = "failed"
        reason = reason or str(failed_rows[0].get("reason", ""))
    if ens is None and not rows:
        status, reason = "failed", "no results were written for this molecule (ensemble.json and summary rows missing)"
    if status == "failed" and not reason:
        reason = "no reason recorded"
    families = _rows(_read_csv(folder / "families.csv"))
    conformers = _rows(_read_csv(folder / "conformers.csv"))
    refine_info = _read_json(folder / "refine.json")
    return {
        "name": name, "folder": folder, "rows": rows, "ensemble": ens if isinstance(ens, dict) else {},
        "record": record if isinstance(record, dict) else {},
        "families": families,
        "conformers": conformers,
        "minima": _rows(_read_csv(folder / "minima.csv")),
        "refine_rows": _rows(_read_csv(folder / "refine.csv")),
        "refine_info": refine_info if isinstance(refine_info, dict) else {},
        "refined": _is_refined(ens, rows, families, conformers),
        "status": status, "reason": reason,
        "reference": bool((record or {}).get("reference", False)) if isinstance(record, dict) else False,
    }


def _is_refined(ens, rows, families, conformers) -> bool:
    """Whether this molecule's headline free energies are DFT-refined (ensemble.json says so; for older or
    partial folders, the summary's `refined` column or the GFN2-xTB side columns of its tables)."""
    if isinstance(ens, dict) and "refined" in ens:
        return _truthy(ens["refined"])
    if any("refined" in r and not _missing(r["refined"]) for r in rows):
        return any(_truthy(r.get("refined")) for r in rows)
    return (any("g_rel_unrefined_kcal" in f for f in families)
            or any(_truthy(c.get("refined_single_point")) for c in conformers))


def _temperatures(m: dict) -> list:
    ts = []
    for e in m["ensemble"].get("temperatures") or []:
        if isinstance(e, dict) and _num(e.get("temperature_k")) is not None:
            ts.append(_num(e["temperature_k"]))
    for r in m["rows"]:
        t = _num(r.get("temperature_k"))
        if t is not None and not any(_same_t(t, x) for x in ts):
            ts.append(t)
    return ts


def _lead_temperature(ts):
    """The temperature a molecule's headline numbers are quoted at: the one closest to 298.15 K."""
    return min(ts, key=lambda t: (abs(t - 298.15), t)) if ts else None


def _entry(m: dict, t) -> dict:
    """Everything known about molecule m at temperature t: the summary row merged under ensemble.json."""
    row = next((r for r in m["rows"] if _same_t(r.get("temperature_k"), t)), {})
    ens = next((e for e in m["ensemble"].get("temperatures") or []
                if isinstance(e, dict) and _same_t(e.get("temperature_k"), t)), {})
    add = ens.get("additive") if isinstance(ens.get("additive"), dict) else {}
    un = ens.get("unrefined") if isinstance(ens.get("unrefined"), dict) else {}
    def pick(key, *alt):
        for src in (ens, row):
            for k in (key,) + alt:
                if k in src and not _missing(src[k]):
                    return src[k]
        return None
    return {
        "t": t,
        "preferred_family": pick("preferred_family"),
        "chair_dg_kcal": _num(pick("chair_dg_kcal")),
        "a_value_kcal": _num(pick("a_value_kcal")),
        "twist_boat_population": _num(pick("twist_boat_population")),
        "n_conformers": row.get("n_conformers"),
        "flag": _truthy(pick("flag")) if pick("flag") is not None else False,
        "flag_reason": pick("flag_reason") or "",
        "additive_dg": _num(add.get("dg_kcal")) if not _missing(add.get("dg_kcal")) else _num(row.get("additive_dg_kcal")),
        "additive_source": add.get("source") or row.get("additive_source") or "",
        "additive_reason": add.get("reason") or "",
        "terms": add.get("terms") or [],
        "tabulated_dg": _num(add.get("tabulated_dg_kcal")),
        "qm_dg": _num(add.get("qm_dg_kcal")),
        "calibrated": _num(row.get("calibrated_kcal")),
        "low": _num(row.get("interval_low_kcal")),
        "high": _num(row.get("interval_high_kcal")),
        "status": row.get("status", "ok"),
        "unrefined": _unrefined_entry(un, row),
    }


def _unrefined_entry(un: dict, row: dict):
    """The GFN2-xTB-only values a refined run recorded beside the refined ones (ensemble.json's `unrefined`
    entry, else the summary's *_unrefined_kcal columns); None when there are none."""
    keys = ("chair_dg_unrefined_kcal", "a_value_unrefined_kcal")
    if not un and not any(not _missing(row.get(k)) for k in keys):
        return None
    def pick(key, col):
        v = un.get(key)
        return _num(v) if not _missing(v) else _num(row.get(col))
    return {
        "preferred_family": un.get("preferred_family") if not _missing(un.get("preferred_family")) else None,
        "chair_dg_kcal": pick("chair_dg_kcal", "chair_dg_unrefined_kcal"),
        "a_value_kcal": pick("a_value_kcal", "a_value_unrefined_kcal"),
        "twist_boat_population": _num(un.get("twist_boat_population")),
        "flag": _truthy(un["flag"]) if not _missing(un.get("flag")) else None,
        "flag_reason": un.get("flag_reason") or "",
    }


# ------------------------------------------------------------------------------------------ refinement

def _refine_settings(run_info: dict, mols: list[dict]):
    """The DFT refinement settings of the run, or None when the run neither asked for nor recorded one.

    The resolved settings a molecule's refine.json records win over the configuration's `settings.refine`
    (which may be partial, e.g. {}); a key found in neither takes the package default, as the run did."""
    block = (run_info.get("settings") or {}).get("refine")
    recorded = next((m["refine_info"]["settings"] for m in mols
                     if isinstance(m["refine_info"].get("settings"), dict)), None)
    if block is None and recorded is None and not any(m["refined"] or m["refine_rows"] for m in mols):
        return None
    rs = {}
    try:
        from .refine import DEFAULTS
        rs.update(DEFAULTS)
    except Exception:           # the page must not depend on the refinement module importing
        pass
    if isinstance(block, dict):
        rs.update(block)
    if recorded:
        rs.update(recorded)
    return rs


def dft_level(rs: dict) -> str:
    """'PBE0-D3(BJ)/def2-TZVP' — functional, dispersion correction and basis of the single points (plain text)."""
    functional = str(rs.get("functional") or "DFT (functional not recorded)")
    disp = _DISPERSION_SUFFIX.get(str(rs.get("dispersion", "")).strip().lower(), "")
    basis = rs.get("basis")
    return f"{functional}{disp}/{basis}" if basis else f"{functional}{disp}"


def _dft_words(rs: dict, solvent) -> str:
    """The single-point level in a sentence (plain text, not escaped)."""
    disp = str(rs.get("dispersion", "")).strip().lower()
    parts = [{"d3bj": "D3 dispersion with Becke–Johnson damping", "d3zero": "D3 dispersion with zero damping",
              "none": "no dispersion correction"}.get(disp, f"dispersion {disp}" if disp else "dispersion not recorded")]
    if "density_fitting" in rs:
        parts.append("density fitting" if _truthy(rs["density_fitting"]) else "no density fitting")
    if solvent:
        model = str(rs.get("solvent_model", "")).strip().lower()
        parts.append({"gfn2-delta": "gas-phase single points plus the GFN2-xTB solvation free energy",
                      "pcm": "C-PCM continuum solvent inside the SCF"}.get(model, f"solvent model {model or 'not recorded'}"))
    return f"{dft_level(rs)} ({', '.join(parts)})"


def _refine_status(row: dict | None, conf: dict, refined: bool) -> str:
    """The conformer table's 'DFT single point' cell (HTML)."""
    shifted = " — mean DFT − GFN2-xTB shift used" if refined else ""
    if row is None:
        if _truthy(conf.get("refined_single_point")):
            return "yes"
        if not _missing(conf.get("refined_single_point")):
            return esc("no" + shifted)
        return "—"
    status = str(row.get("status", "")).strip()
    if status == "ok":
        return "yes (ok)"
    if status == "not-selected":
        return esc("not selected" + shifted)
    reason = row.get("reason") or "no reason recorded"
    return f'<span class="badge flag">{esc(status or "unknown")}</span> {esc(reason)}{esc(shifted)}'


def _refine_block(m: dict, rs: dict, solvent) -> str:
    """Per molecule: what the DFT refinement did — single points, failures with their reasons, DFT time."""
    rows = m["refine_rows"]
    info = m["refine_info"]
    own = dict(rs)
    if isinstance(info.get("settings"), dict):
        own.update(info["settings"])
    out = ["<h3>DFT refinement</h3>"]
    n_ok = sum(1 for r in rows if str(r.get("status", "")).strip() == "ok")
    n_skip = sum(1 for r in rows if str(r.get("status", "")).strip() == "not-selected")
    failed = [r for r in rows if str(r.get("status", "")).strip() not in ("ok", "not-selected")]
    if m["refined"]:
        out.append(f"<p>Free energies of this molecule are {esc(REFINED_TAG)}: {esc(_dft_words(own, solvent))} "
                   "single points on the GFN2-xTB minima plus the GFN2-xTB thermal corrections. Conformers "
                   "without their own single point carry the mean DFT − GFN2-xTB energy shift of those that "
                   f"have one. Columns marked “{esc(GFN2_TAG)}” hold the values without the single points.</p>")
    elif rows:
        out.append('<div class="failure"><strong>No DFT single point succeeded for this molecule:</strong> every '
                   "value shown for it is GFN2-xTB only.</div>")
    else:
        out.append('<div class="failure"><strong>No refinement record (refine.csv) for this molecule:</strong> '
                   "every value shown for it is GFN2-xTB only.</div>")
    if rows or info:
        seconds = _num(info.get("dft_seconds"))
        if seconds is None and rows:
            seconds = sum(_num(r.get("seconds")) or 0.0 for r in rows)
        pairs = [("level", esc(dft_level(own))),
                 ("single points", esc(f"{n_ok} succeeded, {len(failed)} failed, {n_skip} conformer(s) not "
                                       f"selected (of {len(rows)})")),
                 ("DFT time", fmt_seconds(seconds)),
                 ("settings", _plain({k: v for k, v in own.items() if k not in ("functional", "basis")}))]
        if isinstance(info.get("versions"), dict) and info["versions"]:
            pairs.append(("versions", _plain(info["versions"])))
        out.append(_kv_table(pairs))
    if failed:
        out.append(_table(["conformer", "status", "reason"],
                          [[esc(r.get("conformer", "")), esc(r.get("status", "")),
                            esc(r.get("reason") or "no reason recorded")] for r in failed]))
        out.append(f'<p class="muted">{len(failed)} single point(s) failed; '
                   + ("those conformers carry the mean shift of the successful ones." if m["refined"]
                      else "no refined value exists for this molecule.") + "</p>")
    return "".join(out)


# ------------------------------------------------------------------------------------------ sections

def _caution(method: str, rs=None, solvent=None, unrefined=()) -> str:
    if rs is None:
        source = (f"Every number on this page comes from {esc(method)} energies with a harmonic/quasi-RRHO "
                  "free-energy treatment.")
    else:
        source = (f"The free energies on this page are DFT single points ({esc(_dft_words(rs, solvent))}) on "
                  f"{esc(method)} geometries, with {esc(method)} harmonic/quasi-RRHO thermal corrections — "
                  f"written {esc(REFINED_TAG)}. Conformers without their own single point carry the mean "
                  f"DFT − {esc(method)} energy shift of those that have one. Wherever a refined value is shown, "
                  f"the {esc(method)}-only value stands beside it, marked “{esc(GFN2_TAG)}”.")
        if unrefined:
            source += (" No DFT single point succeeded (or none was recorded) for " + esc(", ".join(unrefined))
                       + f": the values of those molecules are {esc(method)} only.")
    return (
        '<section class="caution" id="caution"><strong>Model predictions, not measurements.</strong> '
        f"{source} Expect errors of a few tenths of a kcal/mol on the A-values of simple groups, and larger "
        "ones for polar substituents, anomeric rings and groups held by dispersion (bulky or aromatic groups). "
        "Confirm a result experimentally (for example by low-temperature NMR) or at a higher level of theory "
        "before relying on it.</section>"
    )


def _header(run_info: dict, mols: list[dict], rs=None) -> str:
    settings = run_info.get("settings") or {}
    project = run_info.get("project") or "chairqm run"
    main = [m for m in mols if not m["reference"]]
    refs = [m for m in mols if m["reference"]]
    n_failed = sum(m["status"] == "failed" for m in main)
    n_flagged = sum(1 for m in main if m["status"] != "failed"
                    and any(_entry(m, t)["flag"] for t in _temperatures(m)))
    n_ok = len(main) - n_failed
    n_ref_failed = sum(m["status"] == "failed" for m in refs)
    wall, eng = _num(run_info.get("wall_seconds")), _num(run_info.get("engine_seconds"))
    share = f" ({100 * eng / wall:.0f} % of the wall time)" if wall and eng is not None and wall > 0 else ""
    out = ['<header class="top"><div class="inner">',
           f"<h1>Which ring conformer dominates? — {esc(project)}</h1>",
           f"<p>chairqm {esc(run_info.get('chairqm_version', '?'))} · started {esc(run_info.get('started', '?'))}"
           f" · finished {esc(run_info.get('finished', '?'))}</p>",
           "</div></header><main>"]
    solvent = settings.get("solvent")
    not_refined = [m["name"] for m in mols if rs is not None and not m["refined"] and m["status"] != "failed"]
    out.append(_caution(settings.get("method") or "GFN2-xTB", rs, solvent, not_refined))
    out.append('<section id="run"><h2>This run</h2><div class="tiles">')
    tiles = [(len(main), "molecules"), (n_ok, "finished"), (n_failed, "failed"), (n_flagged, "flagged"),
             (len(refs), "reference rings" + (f" ({n_ref_failed} failed)" if n_ref_failed else "")),
             (fmt_seconds(wall), "wall time"), (fmt_seconds(eng), "inside the engine")]
    dft_s = None
    if rs is not None:
        dft_s = sum(_num(m["refine_info"].get("dft_seconds")) or 0.0 for m in mols)
        tiles.append((fmt_seconds(dft_s), "in DFT single points"))
    for n, label in tiles:
        out.append(f'<div class="tile"><span class="n">{n if isinstance(n, str) else esc(n)}</span>'
                   f'<span class="l">{esc(label)}</span></div>')
    out.append("</div>")
    out.append(f"<p>Wall time {fmt_seconds(wall)}, of which {fmt_seconds(eng)} inside energy and gradient "
               f"calls{share}, on {esc(run_info.get('n_cpus', '?'))} CPU core(s)."
               + (f" The DFT single points took {fmt_seconds(dft_s)} (summed over the single points)."
                  if dft_s is not None else "") + "</p>")

    out.append('<div class="row"><div><h3>Settings</h3>')
    order = ["temperatures_k", "solvent", "engine", "method", "thermo"]
    keys = [k for k in order if k in settings] + sorted(k for k in settings if k not in order)
    shown = dict(settings)
    if rs is not None:
        shown["refine"] = rs              # the settings the single points used, defaults filled in
    out.append(_kv_table([(k, _plain(shown[k])) for k in keys]) if keys else '<p class="muted">none recorded</p>')
    out.append("</div><div><h3>Versions and provenance</h3>")
    pairs = [("chairqm", esc(run_info.get("chairqm_version", "?")))]
    skip = {"project", "chairqm_version", "settings", "started", "finished", "wall_seconds",
            "engine_seconds", "n_cpus"}
    for k in sorted(run_info):
        if k in skip:
            continue
        v = run_info[k]
        if isinstance(v, dict) and len(v) > 12:      # e.g. one input hash per molecule: keep the page short
            pairs.append((k, f"{len(v)} entries (see provenance.json)"))
        else:
            pairs.append((k, _plain(v)))
    pairs.append(("CPU cores", esc(run_info.get("n_cpus", "?"))))
    out.append(_kv_table(pairs))
    out.append("</div></div></section>")
    return "".join(out)


def _side_by_side(m: dict, e: dict, key: str) -> list[str]:
    """[refined, GFN2-xTB only] cells of a refined run's quantity `key` for molecule m."""
    if not m["refined"]:
        return ['<span class="muted">not refined</span>', fmt_kcal(e.get(key))]
    return [fmt_kcal(e.get(key)), fmt_kcal((e.get("unrefined") or {}).get(key))]


def _level_head(text: str, tag: str) -> str:
    """A column heading with the level of theory on its own line (tag is escaped)."""
    return f"{text}<br><small>{esc(tag)}</small>"


def _overview(mols: list[dict], refine_on: bool = False) -> str:
    main = [m for m in mols if not m["reference"]]
    if not main:
        return ""
    rows, classes = [], []
    for m in main:
        link = f'<a href="#{esc(_anchor(m["name"]))}">{esc(m["name"])}</a>'
        if m["status"] == "failed":
            rows.append([link, '<span class="badge failed">failed</span>', esc(m["reason"]), "", "", "", ""]
                        + (["", ""] if refine_on else []))
            classes.append("muted")
            continue
        ts = _temperatures(m)
        t = _lead_temperature(ts)
        e = _entry(m, t) if t is not None else {}
        flagged = any(_entry(m, x)["flag"] for x in ts)
        badge = ('<span class="badge flag">flagged</span>' if flagged else '<span class="badge fine">no flag</span>')
        fam = e.get("preferred_family")
        fam_cell = f'<span class="mono">{esc(fam)}</span>' if fam else "—"
        if refine_on:
            rows.append([link, badge, fam_cell, fmt_t(t)] + _side_by_side(m, e, "chair_dg_kcal")
                        + _side_by_side(m, e, "a_value_kcal") + [fmt_pct(e.get("twist_boat_population"))])
        else:
            rows.append([link, badge, fam_cell, fmt_t(t),
                         fmt_kcal(e.get("chair_dg_kcal")), fmt_kcal(e.get("a_value_kcal")),
                         fmt_pct(e.get("twist_boat_population"))])
        classes.append("")
    if refine_on:
        table = _table(["molecule", "verdict", "dominant family", "at",
                        _level_head("chair gap / kcal mol⁻¹", REFINED_TAG),
                        _level_head("chair gap / kcal mol⁻¹", GFN2_TAG),
                        _level_head("A-value / kcal mol⁻¹", REFINED_TAG),
                        _level_head("A-value / kcal mol⁻¹", GFN2_TAG), "non-chair population"],
                       rows, num_cols=(4, 5, 6, 7, 8), row_classes=classes)
        note = (f" Verdict, dominant family and non-chair population are {esc(REFINED_TAG)} for the refined "
                f"molecules; “{esc(GFN2_TAG)}”: the same run without the DFT single points.")
    else:
        table = _table(["molecule", "verdict", "dominant family", "at", "chair gap / kcal mol⁻¹",
                        "A-value / kcal mol⁻¹", "non-chair population"], rows, num_cols=(4, 5, 6),
                       row_classes=classes)
        note = ""
    return ('<section id="overview"><h2>Molecules at a glance</h2>' + table
            + '<p class="muted">Values at the temperature closest to 298.15 K; every temperature is listed '
              f"with its molecule below.{note}</p></section>")


def _depiction_block(m: dict) -> str:
    rec = m["record"]
    smiles = rec.get("mapped_smiles") or rec.get("smiles")
    if not smiles:
        return '<p class="muted">No structure record (molecule.json) to draw.</p>'
    try:
        svg = depiction_svg(smiles, rec.get("substituents") or [], rec.get("ring") or [])
    except Exception as exc:      # a broken record must not stop the page
        return f'<p class="muted">No depiction: {esc(exc)}</p>'
    return (f"<figure>{svg}<figcaption>Ring atoms carry their atom index (#n, 0-based, as in the result "
            "tables); each group carries its id at the atom bonded to the ring.</figcaption></figure>")


def _identity(m: dict) -> str:
    rec = m["record"]
    pairs = []
    if rec.get("smiles"):
        pairs.append(("SMILES", f'<span class="mono">{esc(rec["smiles"])}</span>'))
    ring, elements = rec.get("ring") or [], rec.get("ring_elements") or []
    if ring and len(ring) == len(elements):
        pairs.append(("ring, in order", esc(", ".join(f"#{i} {el}" for i, el in zip(ring, elements)))))
    subs = rec.get("substituents") or []
    if subs:
        parts = []
        for s in subs:
            text = f'{esc(s.get("id"))}: <span class="mono">{esc(s.get("fragment"))}</span> on atom #{esc(s.get("ring_atom"))}'
            if s.get("charge"):
                text += f" (charge {esc(s.get('charge'))})"
            parts.append(text)
        pairs.append(("groups", "<br>".join(parts)))
    if rec.get("stereo"):
        pairs.append(("stereo", esc(rec["stereo"])))
    if rec.get("note"):
        pairs.append(("note", esc(rec["note"])))
    return _kv_table(pairs) if pairs else ""


def _family_table(m: dict, t) -> str:
    fams = [f for f in m["families"] if _same_t(f.get("temperature_k"), t)]
    if not fams:
        return '<p class="muted">No family table for this temperature.</p>'
    fams.sort(key=lambda f: (_num(f.get("g_rel_kcal")) if _num(f.get("g_rel_kcal")) is not None else 1e9,
                             f.get("ring_form", ""), f.get("orientation", "")))
    side = any("g_rel_unrefined_kcal" in f for f in fams)        # a refined run's GFN2-xTB columns
    rows = []
    for k, f in enumerate(fams, 1):
        p = _num(f.get("population"))
        bar = f'<span class="bar" style="width:{max(1, round(60 * p)) if p else 0}px"></span>' if p else ""
        row = [str(k), esc(f.get("ring_form", "")), esc(orientation_short(f.get("orientation"))),
               esc(f.get("axial") or "none"), fmt_kcal(f.get("g_rel_kcal")), bar + fmt_pct(p)]
        if side:
            row += [fmt_kcal(f.get("g_rel_unrefined_kcal")), fmt_pct(f.get("population_unrefined"))]
        rows.append(row + [esc(f.get("n_conformers", ""))])
    if side:
        return _table(["#", "ring form", "orientation", "axial groups",
                       _level_head("G<sub>rel</sub> / kcal mol⁻¹", REFINED_TAG),
                       _level_head("population", REFINED_TAG),
                       _level_head("G<sub>rel</sub> / kcal mol⁻¹", GFN2_TAG),
                       _level_head("population", GFN2_TAG), "conformers"], rows, num_cols=(0, 4, 5, 6, 7, 8))
    return _table(["#", "ring form", "orientation", "axial groups", "G<sub>rel</sub> / kcal mol⁻¹",
                   "population", "conformers"], rows, num_cols=(0, 4, 5, 6))


def _chair_of(m: dict, t, which: str, column: str = "g_rel_kcal"):
    """The preferred (lowest G, read from `column`) chair family at t, or the other chair; None if absent."""
    chairs = [f for f in m["families"] if _same_t(f.get("temperature_k"), t)
              and f.get("ring_form") == "chair" and _num(f.get(column)) is not None]
    chairs.sort(key=lambda f: (_num(f[column]), f.get("orientation", "")))
    if which == "best":
        return chairs[0] if chairs else None
    return chairs[1] if len(chairs) > 1 else None


def _chair_words(fam) -> str:
    if fam is None:
        return "the ring-flipped chair"
    o = orientation_words(fam.get("orientation"))
    return "the chair" if o == "no substituent" else f"the chair with {o}"


def _gfn2_chair_gap(m: dict, e: dict):
    """A refined molecule's GFN2-xTB-only chair gap on the axis of the refined chairs (positive: the same
    chair is preferred without the single points), with that chair family; (None, family) if unknown."""
    u = e.get("unrefined") or {}
    best_u = _chair_of(m, e["t"], "best", "g_rel_unrefined_kcal")
    best = _chair_of(m, e["t"], "best")
    gap_u = u.get("chair_dg_kcal")
    if gap_u is None or best_u is None or best is None:
        return None, best_u
    same = best_u.get("orientation", "") == best.get("orientation", "")
    return (abs(gap_u) if same else -abs(gap_u)), best_u


def _gfn2_paragraph(m: dict, e: dict) -> str:
    """What the same molecule gave without the DFT single points (refined molecules only; HTML)."""
    u = e.get("unrefined")
    if not m["refined"] or u is None:
        return ""
    signed, best_u = _gfn2_chair_gap(m, e)
    if u["chair_dg_kcal"] is not None:
        words = _chair_words(best_u) if best_u is not None else "the preferred chair"
        text = f"{words} is lower in free energy by {fmt_kcal(abs(u['chair_dg_kcal']))} kcal/mol than the ring-flipped chair"
        if signed is not None and signed < 0:
            text += f" — the opposite chair to the {REFINED_TAG} result"
        text += "."
    else:
        text = "no free-energy gap between the two chairs is available."
    if u["a_value_kcal"] is not None:
        text += f" A-value: {fmt_kcal(u['a_value_kcal'])} kcal/mol."
    if u["flag"] is not None and u["flag"] != e["flag"]:
        text += (f" At that level this molecule would be flagged: {u['flag_reason'] or 'no reason recorded'}."
                 if u["flag"] else " At that level this molecule would not be flagged.")
    return f"<p>{esc(GFN2_TAG)} (the same run without the DFT single points): {esc(text)}</p>"


def _additive_block(m: dict, e: dict) -> str:
    t = e["t"]
    out = []
    best, other = _chair_of(m, t, "best"), _chair_of(m, t, "other")
    gap = e["chair_dg_kcal"]
    source = str(e["additive_source"] or "")
    level = f" ({esc(REFINED_TAG)})" if m.get("refined") else ""
    if gap is not None:
        computed = (f"Computed{level}: {esc(_chair_words(best))} is lower in free energy by "
                    f"{fmt_kcal(abs(gap))} kcal/mol than the ring-flipped chair.")
    else:
        computed = f"Computed{level}: no free-energy gap between the two chairs is available."
    if e["a_value_kcal"] is not None:
        computed += f" Computed A-value{level}: {fmt_kcal(e['a_value_kcal'])} kcal/mol."
    if source == "outside-model":
        why = e["additive_reason"] or "the substitution pattern is not covered by group additivity"
        out.append(f"<p>The additive A-value model does not cover this molecule ({esc(why)}), "
                   f"so no additive estimate is given. {computed}</p>")
    elif e["additive_dg"] is not None:
        add = e["additive_dg"]
        kind = {"tabulated": "tabulated A-values",
                "qm-derived": "QM-derived A-values from this run's reference rings"}.get(source, source or "A-values")
        if add == 0:
            said = "puts the two chairs level"
        elif not gap:
            said = f"gives a chair difference of {fmt_kcal(add, signed=True)} kcal/mol"
        else:
            same = (add > 0) == (gap > 0)
            said = f"favours {_chair_words(best if same else other)} by {fmt_kcal(abs(add))} kcal/mol"
            if not same:
                said += " — the opposite chair to the computed one"
        diff = f" The two differ by {fmt_kcal(abs(gap - add))} kcal/mol." if gap is not None else ""
        why = f"; {e['additive_reason']}" if e["additive_reason"] else ""
        out.append(f"<p>Additive estimate ({esc(kind + why)}): {esc(said)}. {computed}{diff}</p>")
    else:
        out.append(f"<p>No additive estimate was recorded. {computed}</p>")
    out.append(_gfn2_paragraph(m, e))

    if e["flag"]:
        out.append(f'<div class="verdict flag"><strong>Flagged:</strong> {esc(e["flag_reason"] or "no reason recorded")}</div>')
    else:
        text = "computed and additive results agree within the flag criteria"
        if source == "outside-model" or e["additive_dg"] is None:
            text = "none of the flag criteria applies"
        extra = f" ({esc(e['flag_reason'])})" if e["flag_reason"] else ""
        out.append(f'<div class="verdict fine"><strong>No flag:</strong> {esc(text)}{extra}.</div>')

    if e["tabulated_dg"] is not None or e["qm_dg"] is not None:
        rows = [["tabulated A-values", fmt_kcal(e["tabulated_dg"], signed=True)],
                ["QM-derived A-values (reference rings)", fmt_kcal(e["qm_dg"], signed=True)]]
        if m.get("refined") and e.get("unrefined") is not None:
            rows += [[f"this calculation, {esc(REFINED_TAG)} (chair gap)", fmt_kcal(gap, signed=True)],
                     [f"this calculation, {esc(GFN2_TAG)} (chair gap)",
                      fmt_kcal(_gfn2_chair_gap(m, e)[0], signed=True)]]
        else:
            rows.append(["this calculation (chair gap)", fmt_kcal(gap, signed=True)])
        out.append(_table(["additive estimate from", "ΔG / kcal mol⁻¹"], rows, num_cols=(1,)))
    terms = [tm for tm in e["terms"] if isinstance(tm, (list, tuple)) and len(tm) >= 2]
    if terms:
        rows = [[esc(tm[0]), fmt_kcal(tm[1], signed=True)] for tm in terms]
        if e["additive_dg"] is not None:
            rows.append(["<strong>additive estimate</strong>", f"<strong>{fmt_kcal(e['additive_dg'], signed=True)}</strong>"])
        out.append(_table(["additive term", "kcal mol⁻¹"], rows, num_cols=(1,)))

    if e["calibrated"] is not None:
        ci = ""
        if e["low"] is not None and e["high"] is not None:
            ci = f", 95 % interval {fmt_kcal(e['low'])} to {fmt_kcal(e['high'])} kcal/mol"
        out.append(f"<p>Calibrated value: {fmt_kcal(e['calibrated'])} kcal/mol{ci}.</p>")
    else:
        out.append('<p class="muted">Calibrated value: no calibration matches these settings.</p>')
    return "".join(out)


def _conformer_table(m: dict, t) -> str:
    confs = [c for c in m["conformers"] if _same_t(c.get("temperature_k"), t)]
    if not confs:
        return ""
    def key(c):
        ok = str(c.get("status", "")).strip() == "ok"
        g = _num(c.get("g_rel_kcal"))
        return (0 if ok else 1, g if g is not None else 1e9, str(c.get("conformer", "")))
    confs.sort(key=key)
    dft = bool(m.get("refined") or m.get("refine_rows")
               or any(not _missing(c.get("refined_single_point")) for c in confs))
    by_id = {str(r.get("conformer", "")): r for r in m.get("refine_rows") or []}
    rows, classes = [], []
    for c in confs:
        ok = str(c.get("status", "")).strip() == "ok"
        q, th, ph = _num(c.get("q")), _num(c.get("theta")), _num(c.get("phi"))
        row = [esc(c.get("conformer", "")), esc(c.get("seed", "")), esc(c.get("ring_form", "")),
               esc(orientation_short(c.get("orientation"))),
               "—" if q is None else f"{q:.3f}", "—" if th is None else f"{th:.1f}",
               "—" if ph is None else f"{ph:.1f}",
               fmt_kcal(c.get("g_rel_kcal")) if ok else "—", fmt_pct(c.get("population")) if ok else "—"]
        if dft:
            row.append(_refine_status(by_id.get(str(c.get("conformer", ""))), c, bool(m.get("refined")))
                       if ok else "—")
        rows.append(row + [esc(c.get("n_imaginary", "")),
                           esc(c.get("status", "")) if ok else f"<em>{esc(c.get('status', ''))}</em>"])
        classes.append("" if ok else "muted")
    n_bad = sum(1 for c in confs if str(c.get("status", "")).strip() != "ok")
    note = (f" {n_bad} listed conformer(s) are not counted in the populations (status other than ok)."
            if n_bad else "")
    if dft:
        tag = REFINED_TAG if m.get("refined") else GFN2_TAG
        headers = ["conformer", "seed", "ring form", "orientation", "Q / Å", "θ / °", "φ / °",
                   _level_head("G<sub>rel</sub> / kcal mol⁻¹", tag), _level_head("population", tag),
                   "own DFT single point", "imag.", "status"]
        note += (" Own DFT single point: whether the conformer got its own single point (and its outcome); "
                 + ("the others carry the mean DFT − GFN2-xTB shift." if m.get("refined")
                    else "none succeeded, so the free energies are GFN2-xTB only."))
        what = "puckering, free energy, DFT single point, status"
    else:
        headers = ["conformer", "seed", "ring form", "orientation", "Q / Å", "θ / °", "φ / °",
                   "G<sub>rel</sub> / kcal mol⁻¹", "population", "imag.", "status"]
        what = "puckering, free energy, status"
    return (f"<details><summary>Every conformer at {fmt_t(t)} ({len(confs)}): {what}</summary>"
            + _table(headers, rows, num_cols=(4, 5, 6, 7, 8, len(headers) - 2), row_classes=classes)
            + f'<p class="muted">Q, θ, φ: Cremer–Pople puckering coordinates.{esc(note)}</p></details>')


def _seed_failures(m: dict) -> str:
    """Seeds whose optimisation or verification failed (from minima.csv): never counted, always shown."""
    bad = [r for r in m.get("minima", []) if str(r.get("status", "")).strip() not in ("ok", "duplicate")]
    if not bad:
        return ""
    rows = [[esc(r.get("seed", "")), esc(r.get("status", "")), esc(r.get("reason", ""))] for r in bad]
    return ('<h3>Seeds that gave no usable minimum</h3>'
            + _table(["seed", "status", "reason"], rows)
            + f'<p class="muted">{len(bad)} seed(s) of this molecule are listed here and in minima.csv; '
              'they are not counted in any population.</p>')


def _molecule_section(m: dict, rs=None, solvent=None) -> str:
    name = m["name"]
    head = f'<article class="card" id="{esc(_anchor(name))}"><h2>{esc(name)}'
    if m["status"] == "failed":
        out = [head, ' <span class="badge failed">failed</span></h2>',
               f'<div class="failure"><strong>This molecule failed:</strong> {esc(m["reason"])}</div>']
        if m["record"]:
            out.append('<div class="row"><div>' + _depiction_block(m) + "</div><div>" + _identity(m) + "</div></div>")
        out.append("</article>")
        return "".join(out)

    ts = _temperatures(m)
    flagged = any(_entry(m, t)["flag"] for t in ts)
    out = [head, ' <span class="badge flag">flagged</span>' if flagged else ' <span class="badge fine">no flag</span>',
           "</h2>"]
    out.append('<div class="row"><div>' + _depiction_block(m) + "</div><div>" + _identity(m))
    lead = _lead_temperature(ts)
    if lead is not None:
        e = _entry(m, lead)
        u = e.get("unrefined") if m["refined"] else None
        if u is not None:
            u_fam = _short_label(u["preferred_family"]) if u["preferred_family"] else "—"
            out.append(f"<p>At {fmt_t(lead)} the dominant family ({esc(REFINED_TAG)}) is "
                       f"<strong>{esc(_short_label(e['preferred_family']) if e['preferred_family'] else '—')}</strong>"
                       f"; non-chair forms hold {fmt_pct(e['twist_boat_population'])} of the population. "
                       f"{esc(GFN2_TAG)}: <strong>{esc(u_fam)}</strong>, non-chair forms "
                       f"{fmt_pct(u['twist_boat_population'])}.</p>")
        else:
            out.append(f"<p>At {fmt_t(lead)} the dominant family is "
                       f"<strong>{esc(_short_label(e['preferred_family']) if e['preferred_family'] else '—')}</strong>"
                       f"; non-chair forms hold {fmt_pct(e['twist_boat_population'])} of the population.</p>")
    out.append("</div></div>")
    if rs is not None:
        out.append(_refine_block(m, rs, solvent))
    level = f"Free energies {esc(REFINED_TAG)}. " if m["refined"] else ""

    figs = []
    if lead is not None:
        try:
            svg = energy_levels_svg(m["conformers"], m["families"], lead, salt=f"levels-{name}")
        except Exception as exc:      # a figure problem is reported on the page, never fatal
            svg, figs = None, figs + [f'<p class="muted">Energy-level diagram not drawn: {esc(exc)}</p>']
        if svg:
            figs.append(f"<div><figure>{svg}<figcaption>{level}Solid levels: the counted conformers, at their relative free "
                        "energy; dashed level: the family's free energy (its conformers together); the number above "
                        "a column counts its conformers. Columns are ranked by family free energy.</figcaption>"
                        "</figure></div>")
    try:
        svg = population_curve_svg(m["ensemble"].get("curve"), ts, salt=f"curve-{name}")
    except Exception as exc:
        svg, figs = None, figs + [f'<p class="muted">Population curve not drawn: {esc(exc)}</p>']
    if svg:
        figs.append(f"<div><figure>{svg}<figcaption>{level}Family populations against temperature (same free "
                    "energies, re-weighted); dotted lines mark the temperatures of this run.</figcaption></figure></div>")
    if figs:
        out.append('<div class="row">' + "".join(figs) + "</div>")

    for t in ts:
        e = _entry(m, t)
        out.append(f"<details{' open' if _same_t(t, lead) else ''}><summary>{fmt_t(t)}"
                   f"{' — flagged' if e['flag'] else ''}</summary>")
        out.append("<h3>Families, ranked by free energy"
                   + (f" ({esc(REFINED_TAG)})" if m["refined"] else "") + "</h3>" + _family_table(m, t))
        out.append("<h3>Additive A-value comparison</h3>" + _additive_block(m, e))
        out.append("</details>")
    if not ts:
        out.append('<p class="muted">No per-temperature results were recorded.</p>')
    elif lead is not None:
        out.append(_conformer_table(m, lead))
    out.append(_seed_failures(m))
    out.append("</article>")
    return "".join(out)


def _reference_section(refs: list[dict], refine_on: bool = False) -> str:
    if not refs:
        return ""
    rows, classes = [], []
    for m in refs:
        rec = m["record"]
        frag = ", ".join(str(s.get("fragment", "")) for s in rec.get("substituents") or [])
        if m["status"] == "failed":
            rows.append([esc(m["name"]), f'<span class="mono">{esc(frag)}</span>', "—", "—"]
                        + (["—"] if refine_on else [])
                        + ["—", f'<span class="badge failed">failed</span> {esc(m["reason"])}'])
            classes.append("muted")
            continue
        for t in _temperatures(m):
            e = _entry(m, t)
            values = _side_by_side(m, e, "a_value_kcal") if refine_on else [fmt_kcal(e["a_value_kcal"])]
            rows.append([esc(m["name"]), f'<span class="mono">{esc(frag)}</span>', fmt_t(t)] + values
                        + [esc(_short_label(e["preferred_family"] or "—")),
                           esc(e["flag_reason"]) if e["flag"] else "ok"])
            classes.append("")
    if refine_on:
        headers = ["reference", "group", "at", _level_head("A-value / kcal mol⁻¹", REFINED_TAG),
                   _level_head("A-value / kcal mol⁻¹", GFN2_TAG), "dominant family", "remark"]
        num_cols = (3, 4)
        extra = (f" The QM-derived estimates use the {esc(REFINED_TAG)} A-values of the refined reference "
                 "rings.")
    else:
        headers = ["reference", "group", "at", "A-value / kcal mol⁻¹", "dominant family", "remark"]
        num_cols = (3,)
        extra = ""
    return ('<section id="reference"><h2>Reference rings</h2><p>Monosubstituted cyclohexanes the run added '
            "for groups without a tabulated A-value, computed with the same settings; their A-values feed "
            f"the QM-derived additive estimates above.{extra}</p>"
            + _table(headers, rows, num_cols=num_cols, row_classes=classes)
            + "</section>")


# ------------------------------------------------------------------------------------------ page

def build_report(out_dir, run_info: dict) -> str:
    """The report page as a string (see write_report)."""
    out = Path(out_dir)
    summary_rows = _rows(_read_csv(out / "summary.csv"))
    mols = [_load_molecule(out, n, summary_rows) for n in _molecule_names(out, summary_rows)]
    main = [m for m in mols if not m["reference"]]
    refs = [m for m in mols if m["reference"]]
    project = run_info.get("project") or "chairqm run"
    parts = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
             '<meta name="viewport" content="width=device-width, initial-scale=1">',
             f"<title>{esc(project)} — chairqm report</title>", f"<style>{CSS}</style></head><body>"]
    rs = _refine_settings(run_info, mols)
    solvent = (run_info.get("settings") or {}).get("solvent")
    parts.append(_header(run_info, mols, rs))
    parts.append(_overview(mols, rs is not None))
    for m in main:
        parts.append(_molecule_section(m, rs, solvent))
    if not mols:
        parts.append('<p class="muted">This output folder holds no molecule results yet.</p>')
    parts.append(_reference_section(refs, rs is not None))
    parts.append("<footer>Energies in kcal/mol, temperatures in kelvin, populations as Boltzmann fractions "
                 "of the counted conformers. Written by chairqm "
                 f"{esc(run_info.get('chairqm_version', '?'))} from the files of this folder; "
                 "summary.csv and the per-molecule tables hold the same numbers.</footer>")
    parts.append("</main></body></html>\n")
    return "\n".join(parts)


def write_report(out_dir, run_info: dict, path=None) -> Path:
    """Write the run's self-contained HTML report (default OUT/report.html) atomically; return its path.

    `run_info` is the provenance record (project, chairqm_version, engine versions, settings, started,
    finished, wall_seconds, engine_seconds, n_cpus); unknown keys are listed under provenance.
    """
    target = Path(path) if path is not None else Path(out_dir) / REPORT_NAME
    fileio.write_text(target, build_report(out_dir, run_info or {}))
    return target
