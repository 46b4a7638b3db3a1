"""Static 3-D views of a molecule's leading conformers: ball-and-stick drawings as inline SVG, no script.

For each molecule the page shows the lowest conformer of the preferred chair family, of its ring-flip
partner and of the lowest non-chair family (a twist-boat when there is one), plus any other family holding
at least POPULATED_SHARE of the population, at most MAX_VIEWS in all. Each conformer is drawn twice from
its final geometry (conformers.sdf, read here by `read_structures`), both orthographic and at one scale
(SCALE px per Å) so that sizes compare across conformers:

* edge-on: looking along the ring's mean plane, raised TILT_DEG above it, with the ring atom carrying the
  first group at the left and the atom across the ring at the right — the textbook view of a chair, in
  which axial bonds run up and down and equatorial bonds lie out to the sides;
* from above: looking along the mean-plane normal, same left-right axis.

The analysed ring's atoms and bonds take the ring form's colour; every group's bond to the ring is marked
by its orientation (axial or pseudo-axial in vermilion, equatorial or pseudo-equatorial in blue, others
grey), measured on the drawn geometry with `chairqm.ring.orientation` — the measurement the conformer
tables use — and labelled in text ('s1 ax'), so nothing depends on colour alone. Hydrogens are drawn where
they tell something: on ring atoms (the axial and equatorial positions) and on heteroatoms; those on
carbons of the groups are left out.

The SVG is written here rather than by matplotlib: an orthographic projection of a few dozen atoms is
three dot products, and the page gets one short <circle>/<path> per atom and bond (element fills come from
the page's style sheet) instead of matplotlib's per-artist groups, which would multiply the page size.
Screen coordinates are whole pixels with the ring centroid at the origin; each atom's circle carries its
atom index (data-a), so the two views of a conformer give back its 3-D coordinates to within a pixel
(see `unproject`).
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass, field

import numpy as np

from .. import ring as cq_ring
from .filters import num

SCALE = 36.0                 # px per Å in every view
TILT_DEG = 20.0              # edge-on views are raised this far above the ring's mean plane
AZIMUTH_DEG = 25.0           # and turned this far about its normal, so that front and back atoms separate
MAX_VIEWS = 4                # conformers drawn per molecule
POPULATED_SHARE = 0.10       # other families drawn when they hold at least this population
MARGIN = 10.0                # px around the drawing and its labels
LABEL_CHAR_PX = 7.0          # width of a label character (12 px bold sans-serif), for the drawing's extent

# ball radii in Å (drawing sizes only, about a third of the van der Waals radius); others: DEFAULT_RADIUS
RADIUS = {"H": 0.17, "C": 0.30, "N": 0.29, "O": 0.28, "F": 0.27, "Si": 0.36, "P": 0.35, "S": 0.36,
          "Cl": 0.35, "Br": 0.38, "I": 0.42, "B": 0.30}
DEFAULT_RADIUS = 0.34
ELEMENT_CLASSES = ("H", "C", "N", "O", "F", "S", "Cl", "Br", "I", "P", "Si", "B")

# how a group's bond to the ring is marked: CSS class and the short text written beside the group
MARKS = {"axial": ("ax", "ax"), "pseudo-axial": ("ax", "p-ax"), "flagpole": ("ax", "flagpole"),
         "equatorial": ("eq", "eq"), "pseudo-equatorial": ("eq", "p-eq"), "bowsprit": ("eq", "bowsprit"),
         "isoclinal": ("iso", "iso"), "planar": ("iso", "planar")}

ROLE_WORDS = {"best": "preferred chair", "partner": "ring-flip partner", "nonchair": "lowest {form}",
              "populated": "also populated", "lowest": "lowest family"}


# ------------------------------------------------------------------------------------------ reading

@dataclass
class Structure:
    """One conformer's final geometry from conformers.sdf: elements, positions (Å, molecule.json atom
    order) and bonds (i, j, order; 1.5 for aromatic)."""
    conformer: str
    symbols: list[str]
    positions: np.ndarray
    bonds: list[tuple[int, int, float]]


def read_structures(path) -> tuple[dict[str, Structure], str]:
    """The records of a conformers.sdf file (the ensemble stage's output, a declared input of the report
    stage) by their `conformer` property, and '' — or {} and why there are none."""
    from pathlib import Path

    from rdkit import Chem
    path = Path(path)
    if not path.is_file() or path.stat().st_size == 0:
        return {}, f"{path.name} is missing or empty"
    out = {}
    try:
        for mol in Chem.SDMolSupplier(str(path), removeHs=False, sanitize=False):
            if mol is None or not mol.HasProp("conformer") or mol.GetNumConformers() == 0:
                continue
            out[mol.GetProp("conformer")] = Structure(
                conformer=mol.GetProp("conformer"),
                symbols=[a.GetSymbol() for a in mol.GetAtoms()],
                positions=np.asarray(mol.GetConformer().GetPositions(), dtype=float),
                bonds=[(b.GetBeginAtomIdx(), b.GetEndAtomIdx(), float(b.GetBondTypeAsDouble()))
                       for b in mol.GetBonds()])
    except OSError as exc:
        return {}, f"{path.name} could not be read: {exc}"
    return out, "" if out else f"{path.name} holds no conformer records"


# ------------------------------------------------------------------------------------------ geometry

@dataclass
class Frame:
    """The viewing frame of one conformer: ring centroid, in-plane left-right axis ex, in-plane ey and
    mean-plane normal n (a right-handed orthonormal set)."""
    centre: np.ndarray
    ex: np.ndarray
    ey: np.ndarray
    n: np.ndarray

    def rotation(self, view: str, tilt_deg: float = TILT_DEG, azimuth_deg: float = AZIMUTH_DEG) -> np.ndarray:
        """Rows: screen right, screen up, towards the viewer. 'top' looks down the normal (ex to the right);
        'side' looks along the mean plane from -ey turned azimuth_deg about the normal, raised tilt_deg
        above the plane."""
        if view == "top":
            return np.array([self.ex, self.ey, self.n])
        if view == "side":
            a, t = math.radians(azimuth_deg), math.radians(tilt_deg)
            right = math.cos(a) * self.ex + math.sin(a) * self.ey
            back = np.cross(self.n, right)                 # in the plane, away from the viewer
            up = math.sin(t) * back + math.cos(t) * self.n
            towards = -math.cos(t) * back + math.sin(t) * self.n
            return np.array([right, up, towards])
        raise ValueError(f"unknown view {view!r}")


def frame(positions, ring, left_atom=None) -> Frame:
    """The frame of a ring: ex from `left_atom` (a ring atom; default the first) towards the atom across
    the ring, projected into the mean plane; n the mean-plane normal, signed so that `left_atom` lies
    below the plane (the left end of a chair points down)."""
    x = np.asarray(positions, dtype=float)
    ring = [int(i) for i in ring]
    k = ring.index(int(left_atom)) if left_atom is not None and int(left_atom) in ring else 0
    centre, n, z = cq_ring.mean_plane(x[ring])
    if z[k] > 0:
        n = -n
    across = x[ring[(k + len(ring) // 2) % len(ring)]] - x[ring[k]]
    ex = across - (across @ n) * n
    ex /= np.linalg.norm(ex)
    ey = np.cross(n, ex)
    return Frame(centre=centre, ex=ex, ey=ey, n=n)


def project(positions, fr: Frame, view: str, scale: float = SCALE) -> np.ndarray:
    """(N, 3): screen x, screen y (SVG: down is positive) in px and depth (towards the viewer, Å)."""
    p = (np.asarray(positions, dtype=float) - fr.centre) @ fr.rotation(view).T
    return np.column_stack([p[:, 0] * scale, -p[:, 1] * scale, p[:, 2]])


def unproject(top_xy, side_xy, scale: float = SCALE, tilt_deg: float = TILT_DEG,
              azimuth_deg: float = AZIMUTH_DEG) -> np.ndarray:
    """The 3-D coordinates (Å, in the conformer's frame: ex, ey, n) of atoms drawn at top_xy in the view
    from above and side_xy in the edge-on view (screen px, as written in the SVG)."""
    top = np.asarray(top_xy, dtype=float) / scale
    side = np.asarray(side_xy, dtype=float) / scale
    a, t = math.radians(azimuth_deg), math.radians(tilt_deg)
    x, y = top[:, 0], -top[:, 1]
    back = -math.sin(a) * x + math.cos(a) * y          # the in-plane coordinate away from the side viewer
    up = -side[:, 1]
    z = (up - math.sin(t) * back) / math.cos(t)
    return np.column_stack([x, y, z])


# ------------------------------------------------------------------------------------------ what to draw

@dataclass
class Pick:
    role: str                   # a ROLE_WORDS key
    conformer: dict             # its conformers.csv row at the temperature
    words: str = ""


def _key(row) -> tuple[str, str]:
    return (str(row.get("ring_form", "")), str(row.get("orientation", "") or ""))


def flipped(orientation: str) -> str:
    """The orientation string of the ring-flip partner: axial and equatorial swapped ('' stays '')."""
    swap = {"axial": "equatorial", "equatorial": "axial"}
    parts = []
    for part in str(orientation or "").split(";"):
        if part.strip():
            sid, _, how = part.partition("=")
            parts.append(f"{sid}={swap.get(how, how)}")
    return ";".join(parts)


def leading_conformers(m, t) -> list[Pick]:
    """The conformers a molecule's 3-D views show at temperature t (see the module text), in page order."""
    fams = [f for f in m.families_ranked(t) if num(f.get("g_rel_kcal")) is not None]
    lowest: dict[tuple, dict] = {}
    for c in m.conformers_ranked(t):
        if str(c.get("status", "")).strip() == "ok" and num(c.get("g_rel_kcal")) is not None:
            lowest.setdefault(_key(c), c)
    picks: list[Pick] = []
    chosen: set = set()

    def take(role, fam_key, words=""):
        if fam_key in lowest and fam_key not in chosen and len(picks) < MAX_VIEWS:
            chosen.add(fam_key)
            picks.append(Pick(role, lowest[fam_key], words or ROLE_WORDS[role]))

    chairs = [f for f in fams if f.get("ring_form") == "chair"]
    if chairs:
        best = _key(chairs[0])
        take("best", best)
        partner = ("chair", flipped(best[1]))
        if partner != best and any(_key(f) == partner for f in chairs):
            take("partner", partner)
        elif len(chairs) > 1:
            take("partner", _key(chairs[1]))
    elif fams:
        take("lowest", _key(fams[0]))
    others = [f for f in fams if f.get("ring_form") != "chair"]
    others.sort(key=lambda f: (f.get("ring_form") != "twist-boat", num(f.get("g_rel_kcal"))))
    if others:
        form = others[0].get("ring_form") or "other"
        take("nonchair", _key(others[0]), ROLE_WORDS["nonchair"].format(
            form=form if form != "other" else "non-chair form"))
    for f in fams:
        if (num(f.get("population")) or 0.0) >= POPULATED_SHARE:
            take("populated", _key(f))
    return picks


# ------------------------------------------------------------------------------------------ drawing

@dataclass
class Drawing:
    """One conformer's two views and their description."""
    conformer: str
    role: str
    ring_form: str
    orientation: str
    population: float | None
    g_rel_kcal: float | None
    marks: dict                          # group id -> orientation measured on the drawn geometry
    views: dict = field(default_factory=dict)    # 'side' / 'top' -> SVG text
    shown_atoms: list[int] = field(default_factory=list)


def measured_marks(positions, ring, substituents, form: str, trigonal=()) -> dict[str, tuple[int, int, str]]:
    """Per group id: (ring atom, first atom, orientation measured on these positions)."""
    x = np.asarray(positions, dtype=float)
    out = {}
    for s in substituents:
        ra, fa = int(s["ring_atom"]), int(s["first_atom"])
        out[str(s["id"])] = (ra, fa, cq_ring.orientation(x, ring, ra, fa, form, ra in trigonal))
    return out


def _shown(symbols, bonds, ring) -> list[int]:
    """Heavy atoms, plus hydrogens on ring atoms and on heteroatoms."""
    nbrs: dict[int, list[int]] = {}
    for i, j, _ in bonds:
        nbrs.setdefault(i, []).append(j)
        nbrs.setdefault(j, []).append(i)
    ring_set = set(ring)
    keep = []
    for i, el in enumerate(symbols):
        if el != "H":
            keep.append(i)
        elif any(j in ring_set or symbols[j] != "C" for j in nbrs.get(i, [])):
            keep.append(i)
    return keep


def _f(v: float) -> str:
    return str(int(round(v))) if abs(v) >= 0.5 else "0"


def _bond_paths(a, b, order: float, gap: float = 3.0) -> str:
    """Path data of a bond from screen point a to b: one stroke, two for a double (or aromatic), three for
    a triple bond, offset across the bond."""
    d = b[:2] - a[:2]
    length = float(np.hypot(*d))
    offsets = [0.0]
    if length > 1e-6 and order >= 1.5:
        offsets = [-gap / 2, gap / 2] if order < 3 else [-gap, 0.0, gap]
    perp = np.array([-d[1], d[0]]) / length if length > 1e-6 else np.zeros(2)
    parts = []
    for o in offsets:
        p, q = a[:2] + o * perp, b[:2] + o * perp
        parts.append(f"M{_f(p[0])} {_f(p[1])}L{_f(q[0])} {_f(q[1])}")
    return "".join(parts)


def view_svg(structure, ring, marks, form_class: str, fr: Frame, view: str, label: str,
             shown=None, box=None, groups=None) -> str:
    """One view as SVG text. `marks`: measured_marks(); `groups`: group id -> its atoms (the label goes
    beyond them); `form_class`: CSS class of the ring form;
    `label`: the accessible name (escaped here); `box`: (xmin, ymin, xmax, ymax) in px to share a
    viewBox between views, else the drawing's own extent."""
    symbols = structure.symbols
    bonds = structure.bonds
    ring_set = {int(i) for i in ring}
    shown = _shown(symbols, bonds, ring) if shown is None else shown
    visible = set(shown)
    p = project(structure.positions, fr, view)
    first_of = {fa: (ra, how) for ra, fa, how in marks.values()}
    ids_of = {fa: sid for sid, (ra, fa, how) in marks.items()}
    items = []                                   # (depth, order, svg text)
    for i, j, order in bonds:
        if i not in visible or j not in visible:
            continue
        cls = "b"
        if i in ring_set and j in ring_set:
            cls = "b rb"
        else:
            for ra, fa in ((i, j), (j, i)):
                if ra in ring_set and fa in first_of and first_of[fa][0] == ra:
                    cls = "b " + MARKS.get(first_of[fa][1], ("iso", ""))[0]
        depth = 0.5 * (p[i, 2] + p[j, 2])
        items.append((depth, 0, f'<path d="{_bond_paths(p[i], p[j], order)}" class="{cls}"/>'))
    for i in shown:
        el = symbols[i]
        r = RADIUS.get(el, DEFAULT_RADIUS) * SCALE
        cls = el if el in ELEMENT_CLASSES else "X"
        if i in ring_set:
            cls += " ra"
        items.append((p[i, 2], 1, f'<circle cx="{_f(p[i, 0])}" cy="{_f(p[i, 1])}" r="{r:.0f}" '
                                   f'class="{cls}" data-a="{i}"/>'))
    items.sort(key=lambda it: (it[0], it[1]))
    texts, boxes = [], []
    pairs = [(i, j) for i, j, _ in bonds] + [(j, i) for i, j, _ in bonds]
    for fa, sid in sorted(ids_of.items(), key=lambda kv: kv[1]):
        ra, how = first_of[fa]
        if fa not in visible:
            continue
        d = p[fa, :2] - p[ra, :2]
        full = float(np.linalg.norm(np.asarray(structure.positions[fa]) - np.asarray(structure.positions[ra]))) * SCALE
        group = [i for i in (groups or {}).get(sid, [fa]) if i in visible and i not in ring_set] or [fa]
        if float(np.hypot(*d)) < 0.5 * full:           # a bond seen nearly end-on: write outwards from the ring,
            d = p[ra, :2] - p[sorted(ring_set), :2].mean(axis=0)     # past the ring atom's other exocyclic atom
            group += [j for i, j in pairs if i == ra and j in visible and j not in ring_set]
        d = d / max(float(np.hypot(*d)), 1e-6)
        # beyond the group's farthest drawn atom along that direction, so the text never lies on the group
        reach = max(float((p[i, :2] - p[ra, :2]) @ d) + RADIUS.get(symbols[i], DEFAULT_RADIUS) * SCALE for i in group)
        at = p[ra, :2] + d * (max(reach, RADIUS.get(symbols[ra], DEFAULT_RADIUS) * SCALE) + 7)
        anchor = "start" if d[0] > 0.3 else "end" if d[0] < -0.3 else "middle"
        cls, short = MARKS.get(how, ("iso", how))
        text = f"{sid} {short}"
        width = LABEL_CHAR_PX * len(text)
        left = at[0] if anchor == "start" else at[0] - width if anchor == "end" else at[0] - width / 2
        y = at[1] + 4 + (6 if d[1] > 0.7 else -4 if d[1] < -0.7 else 0)      # above or below a vertical bond
        boxes.append((left, y - 11, left + width, y + 3))
        texts.append(f'<text x="{_f(at[0])}" y="{_f(y)}" text-anchor="{anchor}" class="t {cls}">'
                     f'{html.escape(text)}</text>')
    if box is None:
        box = extent(p[shown], [symbols[i] for i in shown], boxes)
    x0, y0, x1, y1 = box
    body = "".join(t for _, _, t in items) + "".join(texts)
    name = html.escape(label, quote=True)
    return (f'<svg xmlns="http://www.w3.org/2000/svg" class="m3 {form_class}" role="img" aria-label="{name}" '
            f'viewBox="{_f(x0)} {_f(y0)} {_f(x1 - x0)} {_f(y1 - y0)}" width="{_f(x1 - x0)}" '
            f'height="{_f(y1 - y0)}">{body}</svg>')


def extent(p, symbols, boxes=()) -> tuple[float, float, float, float]:
    """(xmin, ymin, xmax, ymax) in px of projected atoms with their balls and of the label boxes
    (xmin, ymin, xmax, ymax), plus MARGIN."""
    r = np.array([RADIUS.get(el, DEFAULT_RADIUS) * SCALE for el in symbols])
    xs = [float((p[:, 0] - r).min()), float((p[:, 0] + r).max())] + [v for b in boxes for v in (b[0], b[2])]
    ys = [float((p[:, 1] - r).min()), float((p[:, 1] + r).max())] + [v for b in boxes for v in (b[1], b[3])]
    return (min(xs) - MARGIN, min(ys) - MARGIN, max(xs) + MARGIN, max(ys) + MARGIN)


def form_class(form: str) -> str:
    return {"chair": "f-chair", "twist-boat": "f-tb", "boat": "f-boat"}.get(str(form), "f-other")


def draw(m, st: Structure, pick: Pick, trigonal=()) -> Drawing:
    """Both views of a picked conformer (geometry `st`) of molecule m (model.Molecule). Raises ValueError on
    a geometry that cannot be framed."""
    c = pick.conformer
    cid = str(c.get("conformer", ""))
    ring = [int(i) for i in m.record.get("ring") or []]
    if len(ring) < 4:
        raise ValueError("molecule.json gives no analysed ring")
    subs = m.record.get("substituents") or []
    x = np.asarray(st.positions, dtype=float)
    form = cq_ring.classify(cq_ring.cremer_pople(x[ring])) if len(ring) == 6 else str(c.get("ring_form", ""))
    marks = measured_marks(x, ring, subs, form, trigonal)
    left = int(subs[0]["ring_atom"]) if subs else ring[0]
    fr = frame(x, ring, left)
    shown = _shown(st.symbols, st.bonds, ring)
    pop = num(c.get("population"))
    text_orient = "; ".join(f"{sid} {how}" for sid, (_, _, how) in marks.items()) or "no groups"
    d = Drawing(conformer=cid, role=pick.words, ring_form=str(c.get("ring_form", "")),
                orientation=str(c.get("orientation", "") or ""), population=pop,
                g_rel_kcal=num(c.get("g_rel_kcal")), marks={k: v[2] for k, v in marks.items()},
                shown_atoms=shown)
    for view, how in (("side", f"seen edge-on, {TILT_DEG:.0f}° above the ring's mean plane"),
                      ("top", "seen from above the ring's mean plane")):
        label = f"Conformer {cid} ({pick.words}: {d.ring_form}, {text_orient}), {how}"
        d.views[view] = view_svg(st, ring, marks, form_class(d.ring_form), fr, view, label, shown,
                                 groups={str(g["id"]): [int(i) for i in g.get("atoms") or []] for g in subs})
    return d


def _trigonal(ring, st: Structure) -> set[int]:
    """Ring atoms with three neighbours (whose one exocyclic bond may be 'planar')."""
    deg = {}
    for i, j, _ in st.bonds:
        deg[i] = deg.get(i, 0) + 1
        deg[j] = deg.get(j, 0) + 1
    return {a for a in ring if deg.get(a, 0) == 3}


def drawings(m) -> dict:
    """{'drawings': [Drawing, ...], 't': temperature} for the page, or {'error': why} / {} (nothing to show)."""
    if m.status != "ok" or m.lead is None:
        return {}
    picks = leading_conformers(m, m.lead)
    if not picks:
        return {}
    structures, problem = read_structures(m.folder / "conformers.sdf")
    if not structures:
        return {"error": problem}
    ring = [int(i) for i in m.record.get("ring") or []]
    tri = _trigonal(ring, next(iter(structures.values())))
    out, missing_ids = [], []
    for pk in picks:
        cid = str(pk.conformer.get("conformer", ""))
        if cid not in structures:
            missing_ids.append(cid)
            continue
        out.append(draw(m, structures[cid], pk, tri))
    res = {"drawings": out, "t": m.lead}
    if any(pk.role == "best" for pk in picks) and not any(pk.role == "partner" for pk in picks):
        res["no_partner"] = True      # said on the page: the other chair is not among the counted conformers
    if missing_ids:
        res["missing"] = ", ".join(missing_ids)
    return res


__all__ = ["Drawing", "Frame", "Pick", "Structure", "draw", "drawings", "flipped", "frame", "leading_conformers",
           "measured_marks", "project", "read_structures", "unproject", "view_svg"]
