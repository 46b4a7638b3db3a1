"""The report's 3-D views of the leading conformers (chairqm/report/views3d.py).

The fixture folder holds real geometries — the MMFF-relaxed seeds chairqm builds for methylcyclohexane and
2-methoxytetrahydropyran (both chairs and the twist-boats), written to conformers.sdf by the ensemble
stage's own writer — with made-up free energies (layout data, no value is checked against a reference).
Checked: each molecule shows its preferred chair, the ring-flip partner and the lowest twist-boat; the two
drawn views of a conformer give back its geometry (interatomic distances to within the pixel rounding);
an axial methyl is marked axial and drawn vertical in the edge-on view; the page makes no network request
in a real browser."""

from __future__ import annotations

import itertools
import math
import re
import types

import numpy as np
import pandas as pd
import pytest

from chairqm import fileio
from chairqm.molecule import perceive
from chairqm.report import views3d, write_report
from chairqm.seeds import build_seeds
from chairqm.stages.ensemble import write_sdf

R_KCAL = 0.0019872     # kcal/(mol K), only to turn the made-up free energies into populations
T = 298.15

# name, SMILES, the seeds' (ring form, orientation) -> (conformer id, made-up G_rel kcal/mol); ids are not in
# G order on purpose, so that a pick by id order would fail
SPECS = [
    ("methylcyclohexane", "CC1CCCCC1", {
        ("chair", "s1=axial"): ("c001", 1.8),
        ("chair", "s1=equatorial"): ("c002", 0.0),
        ("twist-boat", "s1=pseudo-axial"): ("c003", 6.3),
        ("twist-boat", "s1=isoclinal"): ("c004", 5.9),
        ("twist-boat", "s1=pseudo-equatorial"): ("c005", 5.5)}),
    ("methoxy-thp", "CO[C@@H]1CCCCO1", {
        ("chair", "s1=axial"): ("c002", 0.0),
        ("chair", "s1=equatorial"): ("c001", 1.2),
        ("twist-boat", "s1=pseudo-axial"): ("c004", 4.4),
        ("twist-boat", "s1=isoclinal"): ("c003", 3.9),
        ("twist-boat", "s1=pseudo-equatorial"): ("c005", 4.8)}),
]
EXPECTED = {"methylcyclohexane": ["c002", "c001", "c005"], "methoxy-thp": ["c002", "c001", "c003"]}
RUN_INFO = {"project": "3-D views fixture", "chairqm_version": "0.1.0", "settings": {"temperatures_k": [T]}}


def _write_molecule(out, name, smiles, table):
    p = perceive({"name": name, "smiles": smiles})[0]
    folder = out / name
    fileio.write_text(folder / "molecule.json", p.to_json() + "\n")
    seeds = {}
    for s in build_seeds(p.mol, p.ring, p.substituents):
        if s.kept and (s.ring_form, s.orientation) in table:
            seeds.setdefault((s.ring_form, s.orientation), s)
    assert set(seeds) == set(table), f"{name}: seeds gave {sorted(seeds)}"
    keys = sorted(table, key=lambda k: table[k][0])
    w = [math.exp(-table[k][1] / (R_KCAL * T)) for k in keys]
    rows, confs = [], []
    for k, wk in zip(keys, w):
        cid, g = table[k]
        s = seeds[k]
        rows.append(dict(conformer=cid, seed=s.name, temperature_k=T, ring_form=k[0], orientation=k[1],
                         q=s.q, theta=s.theta, phi=s.phi, g_hartree=-200.0 + g / 627.5, g_rel_kcal=g,
                         population=wk / sum(w), n_imaginary=0, status="ok"))
        confs.append(dict(conformer=cid, seed=s.name, ring_form=k[0], orientation=k[1], status="ok",
                          degeneracy=1, energy_hartree=-200.0, n_imaginary=0, q=s.q, theta=s.theta, phi=s.phi,
                          atoms=types.SimpleNamespace(positions=np.asarray(s.positions))))
    conf_df = pd.DataFrame(rows)
    fileio.write_csv(folder / "conformers.csv", conf_df)
    fams = [dict(temperature_k=T, ring_form=r["ring_form"], orientation=r["orientation"], g_rel_kcal=r["g_rel_kcal"],
                 population=r["population"], n_conformers=1) for r in rows]
    fileio.write_csv(folder / "families.csv", pd.DataFrame(fams))
    best = min(rows, key=lambda r: r["g_rel_kcal"])
    fileio.write_json(folder / "ensemble.json", {"molecule": name, "status": "ok", "reason": "", "temperatures": [
        {"temperature_k": T, "preferred_family": f"{best['ring_form']} {best['orientation']}"}]})
    write_sdf(folder / "conformers.sdf", p, confs, T, conf_df)
    return {r["conformer"]: seeds[(r["ring_form"], r["orientation"])] for r in rows}


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    out = tmp_path_factory.mktemp("run3d")
    seeds = {name: _write_molecule(out, name, smiles, table) for name, smiles, table in SPECS}
    page = write_report(out, RUN_INFO)
    return out, page, page.read_text(encoding="utf-8"), seeds


def _articles(text):
    return dict(re.findall(r'<article class="card" id="[^"]*"><h2>([^<]+?) <(.*?)</article>', text, re.S))


def _figures(article):
    """conformer id -> (caption text, edge-on SVG, top SVG), in page order."""
    out = {}
    for cid, body in re.findall(r'<figure class="m3fig" data-conformer="([^"]+)">(.*?)</figure>', article, re.S):
        svgs = re.findall(r"<svg .*?</svg>", body, re.S)
        assert len(svgs) == 2
        out[cid] = (re.sub(r"<[^>]+>", " ", body.split("</figcaption>")[0]), svgs[0], svgs[1])
    return out


def _atoms(svg):
    """atom index -> (cx, cy, classes) of every ball in a view."""
    return {int(a): (float(x), float(y), cls) for x, y, cls, a in
            re.findall(r'<circle cx="(-?\d+)" cy="(-?\d+)" r="\d+" class="([^"]+)" data-a="(\d+)"/>', svg)}


def test_each_molecule_shows_both_chairs_and_the_lowest_twist_boat(run):
    _, _, text, _ = run
    arts = _articles(text)
    assert set(arts) == set(EXPECTED)
    for name, ids in EXPECTED.items():
        figs = _figures(arts[name])
        assert list(figs) == ids, name                       # preferred chair, its flip partner, lowest twist-boat
        roles = [figs[c][0] for c in ids]
        assert "preferred chair" in roles[0] and "ring-flip partner" in roles[1] and "lowest twist-boat" in roles[2]
        assert " chair, " in roles[0] and " twist-boat, " in roles[2]
        for cid in ids:
            _, side, top = figs[cid]
            for svg in (side, top):
                assert 'role="img"' in svg and f'aria-label="Conformer {cid} (' in svg
                assert len(re.findall(r'class="[A-Za-z]+ ra"', svg)) == 6          # the analysed ring's six atoms
                assert "<script" not in svg


def test_two_views_give_back_the_geometry(run):
    """The edge-on and the top view of a conformer together fix every drawn atom in 3-D: the coordinates
    recovered from the SVG keep the conformer's interatomic distances to within the pixel rounding
    (1/SCALE Å per coordinate), and the ring's mean plane is the drawing plane of the top view."""
    _, _, text, seeds = run
    arts = _articles(text)
    for name, ids in EXPECTED.items():
        figs = _figures(arts[name])
        ring = perceive({"name": name, "smiles": dict((n, s) for n, s, _ in SPECS)[name]})[0].ring
        for cid in ids:
            _, side, top = figs[cid]
            a_side, a_top = _atoms(side), _atoms(top)
            assert set(a_side) == set(a_top) and len(a_top) >= 12
            idx = sorted(a_top)
            xyz = views3d.unproject([a_top[i][:2] for i in idx], [a_side[i][:2] for i in idx])
            ref = np.asarray(seeds[name][cid].positions)[idx]
            d_svg = np.linalg.norm(xyz[:, None] - xyz[None], axis=-1)
            d_ref = np.linalg.norm(ref[:, None] - ref[None], axis=-1)
            assert np.abs(d_svg - d_ref).max() < 0.08, f"{name} {cid}: distances moved by {np.abs(d_svg - d_ref).max():.3f} Å"
            # screen x is shared by the two views only through the frame: the same atom, the same ex coordinate
            # in the top view; ring atoms lie about the top view's plane (mean z ~ 0)
            ring_z = xyz[[idx.index(i) for i in ring]][:, 2]
            assert abs(ring_z.mean()) < 0.03
            # every ring bond is drawn with its true length in 3-D
            for k in range(6):
                i, j = idx.index(ring[k]), idx.index(ring[(k + 1) % 6])
                assert d_svg[i, j] == pytest.approx(d_ref[i, j], abs=0.06)


def _s1_bond(svg, ring_atom, first_atom):
    atoms = _atoms(svg)
    (x0, y0, _), (x1, y1, _) = atoms[ring_atom], atoms[first_atom]
    return x1 - x0, y1 - y0


def test_axial_methyl_is_marked_axial_and_stands_vertical_edge_on(run):
    _, _, text, _ = run
    figs = _figures(_articles(text)["methylcyclohexane"])
    p = perceive({"name": "m", "smiles": "CC1CCCCC1"})[0]
    s1 = p.substituents[0]
    _, ax_side, ax_top = figs["c001"]              # the axial chair
    _, eq_side, _ = figs["c002"]                   # the equatorial chair
    assert 'class="b ax"' in ax_side and 'class="b ax"' in ax_top and 'class="b eq"' not in ax_side
    assert re.search(r'class="t ax">s1 ax</text>', ax_side)
    assert 'class="b eq"' in eq_side and 'class="b ax"' not in eq_side
    assert re.search(r'class="t eq">s1 eq</text>', eq_side)
    dx, dy = _s1_bond(ax_side, s1.ring_atom, s1.first_atom)
    assert abs(dy) > 2 * abs(dx), (dx, dy)          # axial: up or down the page
    dx, dy = _s1_bond(eq_side, s1.ring_atom, s1.first_atom)
    assert abs(dx) > 1.5 * abs(dy), (dx, dy)        # equatorial: out to the side (about 20° off the plane)
    # the marks are measured on the drawn geometry, not copied from the table
    _, tb_side, _ = figs["c005"]
    assert 'class="t eq">s1 p-eq</text>' in tb_side


def test_marks_come_from_the_geometry():
    p = perceive({"name": "m", "smiles": "CC1CCCCC1"})[0]
    seeds = {s.orientation: s for s in build_seeds(p.mol, p.ring, p.substituents) if s.kept and s.ring_form == "chair"}
    subs = [{"id": s.id, "ring_atom": s.ring_atom, "first_atom": s.first_atom} for s in p.substituents]
    for how in ("axial", "equatorial"):
        marks = views3d.measured_marks(seeds[f"s1={how}"].positions, p.ring, subs, "chair")
        assert marks["s1"][2] == how


def test_rotation_is_a_rotation_and_frame_is_right_handed(run):
    _, _, _, seeds = run
    p = perceive({"name": "m", "smiles": "CC1CCCCC1"})[0]
    x = np.asarray(seeds["methylcyclohexane"]["c002"].positions)
    fr = views3d.frame(x, p.ring, p.substituents[0].ring_atom)
    for view in ("top", "side"):
        r = fr.rotation(view)
        assert np.allclose(r @ r.T, np.eye(3), atol=1e-12) and np.linalg.det(r) == pytest.approx(1.0)
        proj = views3d.project(x, fr, view, scale=1.0)
        # the first group's ring atom at the left of the atom across the ring, in both views
        k = p.ring.index(p.substituents[0].ring_atom)
        assert proj[p.ring[k], 0] < proj[p.ring[(k + 3) % 6], 0]
    with pytest.raises(ValueError):
        fr.rotation("sideways")


def test_flipped_swaps_axial_and_equatorial_only():
    assert views3d.flipped("s1=axial;s2=equatorial") == "s1=equatorial;s2=axial"
    assert views3d.flipped("s1=planar;s2=axial") == "s1=planar;s2=equatorial"
    assert views3d.flipped("") == ""


def test_labels_are_escaped_and_views_are_reproducible(run):
    out, _, text, _ = run
    from chairqm.report.model import read_run
    m = next(mm for mm in read_run(out, RUN_INFO).molecules if mm.name == "methylcyclohexane")
    st, _ = views3d.read_structures(m.folder / "conformers.sdf")
    pick = views3d.leading_conformers(m, T)[0]
    pick.words = 'chair <"&>'
    d = views3d.draw(m, st[pick.conformer["conformer"]], pick)
    assert 'aria-label="Conformer c002 (chair &lt;&quot;&amp;&gt;' in d.views["side"]
    assert "<\"&>" not in d.views["side"]
    assert write_report(out, RUN_INFO, path=out / "again.html").read_text(encoding="utf-8") == text


def test_missing_structures_are_said_not_fatal(tmp_path):
    out = tmp_path / "run"
    _write_molecule(out, "methylcyclohexane", "CC1CCCCC1", SPECS[0][2])
    (out / "methylcyclohexane" / "conformers.sdf").write_text("", encoding="utf-8")
    text = write_report(out, RUN_INFO).read_text(encoding="utf-8")
    assert "No 3-D views: conformers.sdf is missing or empty" in text and "<figure class=\"m3fig\"" not in text


def test_at_most_max_views_and_no_family_twice(run):
    out, _, _, _ = run
    from chairqm.report.model import read_run
    for m in read_run(out, RUN_INFO).molecules:
        picks = views3d.leading_conformers(m, T)
        keys = [(pk.conformer["ring_form"], pk.conformer["orientation"]) for pk in picks]
        assert len(keys) == len(set(keys)) <= views3d.MAX_VIEWS
        assert all(a != b for a, b in itertools.combinations([pk.conformer["conformer"] for pk in picks], 2))


def test_the_page_with_3d_views_requests_nothing_in_a_browser(run, tmp_path):
    from test_report_browser import CHROMIUM, render
    if CHROMIUM is None:
        pytest.skip("needs a headless chromium (Debian: apt install chromium)")
    _, page, _, _ = run
    dom, requests = render(page, tmp_path)
    assert requests == [], f"the report made network requests: {requests}"
    # the parsed DOM holds both views of three conformers per molecule, with their balls
    assert len(re.findall(r'<svg[^>]*class="m3 ', dom)) == 2 * sum(len(v) for v in EXPECTED.values())
    assert len(re.findall(r"<circle ", dom)) > 12 * 2 * 6


def test_without_a_second_chair_no_partner_is_drawn_and_the_page_says_so(tmp_path):
    out = tmp_path / "run"
    table = {k: v for k, v in SPECS[0][2].items() if k != ("chair", "s1=axial")}
    _write_molecule(out, "methylcyclohexane", "CC1CCCCC1", table)
    text = write_report(out, RUN_INFO).read_text(encoding="utf-8")
    assert list(_figures(_articles(text)["methylcyclohexane"])) == ["c002", "c005"]
    assert "so no ring-flip partner is drawn" in text
