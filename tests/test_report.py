"""Run report: the page builds from a run folder, shows what a chemist needs, loads nothing external, is deterministic.

The fixture folder's numbers are layout data only (made up, roughly realistic); no test checks a value.
"""

import copy
import html
import json
import math
import re
import time
from html.parser import HTMLParser

import pytest

from chairqm import fileio
from chairqm.molecule import perceive
from chairqm.report import depiction_svg, fmt_seconds, orientation_short, write_report

R_KCAL = 0.0019872    # kcal/(mol K), only to make the fixture's made-up populations sum to one
TEMPS = [298.15, 350.0]
CURVE_T = [float(t) for t in range(150, 451, 25)]

# name, SMILES, note, reference, families [(ring_form, {sid: orientation}, G_rel kcal, n_conformers)],
# additive (source, dg, reason, terms), flag reason (None: not flagged), failure reason, calibration
MOLECULES = [
    dict(name="methyl-chx", smiles="CC1CCCCC1", note="simplest test ring",
         families=[("chair", {"s1": "equatorial"}, 0.0, 2), ("chair", {"s1": "axial"}, 1.8, 1),
                   ("twist-boat", {"s1": "pseudo-equatorial"}, 5.6, 2)],
         additive=("tabulated", 1.74, "", [["s1 axial: A([*]C)", 1.74]]), flag=None,
         calibration=(1.70, 1.35, 2.05)),
    dict(name="cis-tBu-Me", smiles="CC(C)(C)[C@H]1CC[C@@H](C)CC1",
         note="<script>alert('x')</script> & co",
         families=[("chair", {"s1": "equatorial", "s2": "axial"}, 0.0, 3),
                   ("chair", {"s1": "axial", "s2": "equatorial"}, 3.3, 2),
                   ("twist-boat", {"s1": "pseudo-equatorial", "s2": "pseudo-axial"}, 4.1, 4)],
         additive=("tabulated", 3.2, "", [["s1 axial: A([*]C(C)(C)C)", 4.9], ["s2 axial: A([*]C)", -1.7]]),
         flag=None),
    dict(name="cpr-Me", smiles="C[C@H]1CC[C@@H](C2CC2)CC1",
         families=[("chair", {"s1": "equatorial", "s2": "axial"}, 0.0, 4),
                   ("chair", {"s1": "axial", "s2": "equatorial"}, 0.4, 3),
                   ("twist-boat", {"s1": "pseudo-equatorial", "s2": "pseudo-equatorial"}, 1.3, 3)],
         additive=("qm-derived", -0.1, "", [["s1 axial: A([*]C)", 1.74], ["s2 axial: A([*]C1CC1) QM-derived", -1.84]]),
         flag="non-chair families hold more than 5 percent of the population",
         tabulated_qm=(None, -0.1)),
    dict(name="thp-2-OMe", smiles="CO[C@@H]1CCCCO1",
         families=[("chair", {"s1": "axial"}, 0.0, 3), ("chair", {"s1": "equatorial"}, 0.9, 3),
                   ("twist-boat", {"s1": "pseudo-axial"}, 4.0, 2), ("boat", {"s1": "axial"}, 6.5, 1)],
         additive=("outside-model", None, "ring heteroatom next to s1", []),
         flag="outside the additive model: ring heteroatom next to s1"),
    dict(name="gem-broken", smiles="CC1(C)CCCCC1", failed="every optimisation of the 12 seeds stopped: SCF did not converge"),
    dict(name="ref-cyclopropyl", smiles="C1CC1C1CCCCC1", reference=True,
         families=[("chair", {"s1": "equatorial"}, 0.0, 3), ("chair", {"s1": "axial"}, 1.9, 3)],
         additive=("qm-derived", 1.9, "", [["s1 axial: A([*]C1CC1) QM-derived", 1.9]]), flag=None),
]


def _boltzmann(gs, t):
    w = [math.exp(-g / (R_KCAL * t)) for g in gs]
    return [x / sum(w) for x in w]


def _orient(d):
    return ";".join(f"{k}={v}" for k, v in d.items())


def _axial(d):
    return ";".join(k for k, v in d.items() if "axial" in v and "equatorial" not in v)


def _family_label(form, d):
    return f"{form} {_orient(d)}"


def write_run_folder(out):
    """Write a realistic run output folder (summary.csv, per molecule molecule.json, families.csv,
    conformers.csv, ensemble.json) as the workflow's later stages lay it out."""
    import pandas as pd

    summary = []
    for spec in MOLECULES:
        name = spec["name"]
        folder = out / name
        p = perceive({"name": name, "smiles": spec["smiles"], "note": spec.get("note", ""),
                      "reference": spec.get("reference", False)})[0]
        fileio.write_text(folder / "molecule.json", p.to_json() + "\n")
        if spec.get("failed"):
            fileio.write_json(folder / "ensemble.json", {"molecule": name, "status": "failed",
                                                         "reason": spec["failed"]})
            for t in TEMPS:
                summary.append(dict(molecule=name, temperature_k=t, status="failed", reason=spec["failed"]))
            continue
        fams, confs, temps = [], [], []
        for t in TEMPS:
            gf = [f[2] for f in spec["families"]]
            pops = _boltzmann(gf, t)
            for (form, d, g, n), pop in zip(spec["families"], pops):
                fams.append(dict(temperature_k=t, ring_form=form, orientation=_orient(d), axial=_axial(d),
                                 g_rel_kcal=g, population=pop, n_conformers=n))
            rows, gs = [], []
            k = 0
            for form, d, g, n in spec["families"]:
                for j in range(n):
                    k += 1
                    rows.append(dict(conformer=f"c{k:03d}", seed=f"seed{k:02d}", temperature_k=t, ring_form=form,
                                     q=0.56 if form == "chair" else 0.70, theta=3.0 if form == "chair" else 90.0,
                                     phi=30.0 * j, orientation=_orient(d),
                                     energy_hartree=-20.5 + 0.001 * k, g_hartree=-20.4 + 0.001 * k,
                                     n_imaginary=0, status="ok"))
                    gs.append(g + 0.35 * j)
            pops = _boltzmann(gs, t)
            for r, g, pop in zip(rows, gs, pops):
                r.update(g_rel_kcal=g, population=pop)
            rows.append(dict(conformer=f"c{k + 1:03d}", seed="seed99", temperature_k=t, ring_form="other",
                             q="", theta="", phi="", orientation="", energy_hartree="", g_hartree="",
                             g_rel_kcal="", population="", n_imaginary=1, status="imaginary-mode"))
            confs += rows
            chairs = [f for f in spec["families"] if f[0] == "chair"]
            gap = chairs[1][2] - chairs[0][2]
            non_chair = sum(pp for f, pp in zip(spec["families"], _boltzmann(gf, t)) if f[0] != "chair")
            source, dg, reason, terms = spec["additive"]
            mono = len(chairs[0][1]) == 1
            a_value = (gap if chairs[0][1]["s1"] == "equatorial" else -gap) if mono else None
            tab, qm = spec.get("tabulated_qm", (dg if source == "tabulated" else None,
                                                dg if source == "qm-derived" else None))
            temps.append(dict(temperature_k=t, preferred_family=_family_label(*spec["families"][0][:2]),
                              chair_dg_kcal=gap, a_value_kcal=a_value, twist_boat_population=non_chair,
                              additive=dict(dg_kcal=dg, source=source, reason=reason, terms=terms,
                                            tabulated_dg_kcal=tab, qm_dg_kcal=qm),
                              flag=spec["flag"] is not None, flag_reason=spec["flag"] or ""))
            cal = spec.get("calibration")
            summary.append(dict(molecule=name, temperature_k=t, status="ok", reason="",
                                n_conformers=len(rows) - 1, preferred_family=temps[-1]["preferred_family"],
                                chair_dg_kcal=gap, a_value_kcal=a_value, twist_boat_population=non_chair,
                                additive_dg_kcal=dg, additive_source=source, flag=str(spec["flag"] is not None).lower(),
                                flag_reason=spec["flag"] or "",
                                calibrated_kcal=cal[0] if cal else None, interval_low_kcal=cal[1] if cal else None,
                                interval_high_kcal=cal[2] if cal else None))
        curve = {"temperature_k": CURVE_T, "families": {
            _family_label(f[0], f[1]): [] for f in spec["families"]}}
        for t in CURVE_T:
            for f, pop in zip(spec["families"], _boltzmann([f[2] for f in spec["families"]], t)):
                curve["families"][_family_label(f[0], f[1])].append(pop)
        fileio.write_csv(folder / "families.csv", pd.DataFrame(fams))
        fileio.write_csv(folder / "conformers.csv", pd.DataFrame(confs))
        fileio.write_json(folder / "ensemble.json", {"molecule": name, "status": "ok", "reason": "",
                                                     "temperatures": temps, "curve": curve})
    columns = ["molecule", "temperature_k", "status", "reason", "n_conformers", "preferred_family",
               "chair_dg_kcal", "a_value_kcal", "twist_boat_population", "additive_dg_kcal", "additive_source",
               "flag", "flag_reason", "calibrated_kcal", "interval_low_kcal", "interval_high_kcal"]
    fileio.write_csv(out / "summary.csv", pd.DataFrame(summary, columns=columns))
    return out


RUN_INFO = {
    "project": "ring study <fixture>",
    "chairqm_version": "0.1.0",
    "engine_versions": {"tblite": "0.4.0", "xtb-python": "22.1"},
    "settings": {"temperatures_k": TEMPS, "solvent": {"model": "alpb", "name": "chloroform"},
                 "engine": "tblite", "method": "GFN2-xTB", "thermo": {"model": "qrrho", "frequency_scale": 1.0}},
    "started": "2025-03-01T10:00:00+00:00",
    "finished": "2025-03-01T10:07:31+00:00",
    "wall_seconds": 451.2,
    "engine_seconds": 322.7,
    "n_cpus": 2,
}


@pytest.fixture(scope="module")
def run_folder(tmp_path_factory):
    return write_run_folder(tmp_path_factory.mktemp("run"))


@pytest.fixture(scope="module")
def page(run_folder):
    t0 = time.perf_counter()
    path = write_report(run_folder, RUN_INFO)
    seconds = time.perf_counter() - t0
    return path, path.read_text(encoding="utf-8"), seconds


class _Collect(HTMLParser):
    """Every tag with its attributes, the text inside <style> and a check that tags nest properly."""

    VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source", "track", "wbr"}

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags, self.styles, self.stack, self.problems, self.text = [], [], [], [], []
        self._in_style = False

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if tag == "style":
            self._in_style = True
        if tag not in self.VOID:
            self.stack.append((tag, self.getpos()))

    def handle_startendtag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_endtag(self, tag):
        if tag == "style":
            self._in_style = False
        if tag in self.VOID:
            return
        if not self.stack or self.stack[-1][0] != tag:
            self.problems.append(f"</{tag}> at {self.getpos()} closes {self.stack[-1] if self.stack else 'nothing'}")
            return
        self.stack.pop()

    def handle_data(self, data):
        (self.styles if self._in_style else self.text).append(data)


def _parse(text):
    p = _Collect()
    p.feed(text)
    p.close()
    return p


def test_page_is_written_atomically_to_the_run_folder(page, run_folder):
    path, text, _ = page
    assert path == run_folder / "report.html"
    assert text.startswith("<!DOCTYPE html>")
    assert not list(run_folder.glob(".report.html.*"))        # no temporary file left behind
    other = write_report(run_folder, RUN_INFO, path=run_folder / "elsewhere" / "r.html")
    assert other.read_text(encoding="utf-8") == text


def test_page_shows_molecules_families_flags_and_caution(page):
    _, text, _ = page
    for spec in MOLECULES:
        assert html.escape(spec["name"]) in text
        if spec.get("families"):
            form, d = spec["families"][0][:2]
            assert html.escape(_family_label(form, d)) in text            # the preferred family
        if spec.get("flag"):
            assert html.escape(spec["flag"]) in text
    assert "Model predictions, not measurements" in text
    assert "higher level of theory" in text and "GFN2-xTB" in text
    assert "Flagged:" in text and "No flag:" in text
    assert "no calibration matches these settings" in text
    assert "95 % interval" in text                                   # methyl-chx carries a calibration
    assert "does not cover this molecule" in text                    # the outside-model case in words
    assert "Reference rings" in text
    # the reference ring sits in its own section, not among the molecules
    ref_at = text.index('id="reference"')
    assert text.index("ref-cyclopropyl", text.index("</header>")) > ref_at
    # one figure per plot: 4 ok non-reference molecules x (levels + curve), depictions for all 5 non-reference
    parsed = _parse(text)
    assert sum(1 for tag, _ in parsed.tags if tag == "svg") == 4 * 2 + 5
    # conformers that are not counted are still listed
    assert "imaginary-mode" in text


def test_failed_molecule_renders_with_its_reason(page):
    _, text, _ = page
    reason = MOLECULES[4]["failed"]
    block = text[text.index('id="m-gem-broken"'):]
    block = block[:block.index("</article>")]
    assert "This molecule failed" in block and html.escape(reason) in block


def test_failed_molecule_with_nothing_but_a_reason(tmp_path):
    fileio.write_json(tmp_path / "lonely" / "ensemble.json", {"status": "failed", "reason": "intake: bad valence"})
    fileio.write_text(tmp_path / "summary.csv", "molecule,temperature_k,status,reason\nlonely,298.15,failed,"
                      "intake: bad valence\n")
    text = write_report(tmp_path, {"project": "p"}).read_text(encoding="utf-8")
    assert "intake: bad valence" in text and "lonely" in text
    assert not _parse(text).problems


def test_text_from_files_is_escaped(page):
    _, text, _ = page
    assert "<script" not in text.lower()
    assert html.escape("<script>alert('x')</script> & co") in text
    assert "ring study &lt;fixture&gt;" in text


def test_page_loads_nothing_external(page):
    _, text, _ = page
    parsed = _parse(text)
    for tag, attrs in parsed.tags:
        assert tag not in {"script", "link", "iframe", "object", "embed", "img", "base", "frame", "audio", "video"}, tag
        for key in ("src", "href", "xlink:href", "data", "action", "poster", "srcset", "background", "formaction"):
            if key in attrs:
                assert (attrs[key] or "").startswith("#"), (tag, key, attrs[key])
        for key, value in attrs.items():
            if key == "xmlns" or key.startswith("xmlns:"):
                continue                      # SVG namespace names are identifiers, nothing is fetched
            assert not re.search(r"(?i)https?:|ftp:|file:", value or ""), (tag, key, value)
            if key == "style":
                assert not re.search(r"url\(\s*['\"]?(?!#)", value or ""), value
    css = "".join(parsed.styles)
    assert "@import" not in css and "@font-face" not in css
    assert not re.search(r"url\(\s*['\"]?(?!#)", css)
    # and nowhere in the page, outside the namespace declarations, is there a web address at all
    stripped = re.sub(r"""\sxmlns(:\w+)?=(['"])[^'"]*\2""", "", text)
    assert "http://" not in stripped and "https://" not in stripped


def test_page_is_well_formed(page):
    _, text, _ = page
    parsed = _parse(text)
    assert parsed.problems == []
    assert parsed.stack == []
    ids = [a["id"] for t, a in parsed.tags if "id" in a and t in {"article", "section"}]
    assert len(ids) == len(set(ids))


def test_page_is_deterministic_apart_from_timestamps(run_folder, page, tmp_path):
    _, text, _ = page
    again = write_report(run_folder, copy.deepcopy(RUN_INFO), path=tmp_path / "again.html").read_text(encoding="utf-8")
    assert again == text
    later = dict(copy.deepcopy(RUN_INFO), started="2031-12-24T23:00:00+00:00", finished="2031-12-24T23:59:59+00:00")
    other = write_report(run_folder, later, path=tmp_path / "later.html").read_text(encoding="utf-8")
    assert other != text
    normalised = other.replace(later["started"], RUN_INFO["started"]).replace(later["finished"], RUN_INFO["finished"])
    assert normalised == text


def test_page_is_small_and_quick(page):
    path, _, seconds = page
    size = path.stat().st_size
    assert size < 2_000_000, size           # the brief's limit for about five molecules
    assert seconds < 20, seconds            # "a few seconds"; generous for a shared 2-core machine


def test_depiction_labels_ring_and_groups():
    # 2-methylpiperidine: the N-H hydrogen is a substituent and must be drawn (7 heavy atoms + that H)
    p = perceive({"name": "m", "smiles": "C[C@@H]1CCCCN1"})[0]
    subs = [vars(s) for s in p.substituents]
    assert [s["fragment"] for s in subs] == ["[*]C", "[*][H]"]
    svg = depiction_svg(p.mapped_smiles, subs, p.ring)
    assert svg.startswith("<svg") and svg.rstrip().endswith("</svg>")
    drawn = {int(i) for i in re.findall(r"atom-(\d+)", svg)}
    assert drawn == set(range(8))
    assert "class='note'" in svg
    plain = depiction_svg("C[C@@H]1CCCCN1", [], [])           # no labels asked for: none drawn
    assert "class='note'" not in plain
    assert {int(i) for i in re.findall(r"atom-(\d+)", plain)} == set(range(7))
    with pytest.raises(ValueError):
        depiction_svg("C1CC", [], [])
    with pytest.raises(ValueError):
        depiction_svg("CC1CCCCC1", [], [0, 1, 2, 3, 4, 99])


def test_missing_tables_and_curve_are_said_not_fatal(run_folder, tmp_path):
    import shutil
    out = tmp_path / "partial"
    shutil.copytree(run_folder, out)
    (out / "methyl-chx" / "families.csv").unlink()
    (out / "methyl-chx" / "conformers.csv").unlink()
    ens = json.loads((out / "methyl-chx" / "ensemble.json").read_text())
    del ens["curve"]
    fileio.write_json(out / "methyl-chx" / "ensemble.json", ens)
    text = write_report(out, RUN_INFO).read_text(encoding="utf-8")
    block = text[text.index('id="m-methyl-chx"'):]
    block = block[:block.index("</article>")]
    assert "No family table for this temperature" in block
    assert block.count("<svg") == 1                                   # the depiction only
    assert not _parse(text).problems


# ------------------------------------------------------------------------------------------ refined runs
#
# The same fixture folder turned into a run with `settings.refine`: the refined molecules get the extra
# columns and files the ensemble and refine stages write (GFN2-xTB-only values beside the refined ones,
# refine.csv, refine.json). The GFN2-xTB-only free energies below are made up, chosen only to differ from
# the refined ones (and, for cis-tBu-Me, to prefer the other chair), so that the page must show both.

REFINE_JSON_SETTINGS = {"functional": "PBE0", "basis": "def2-TZVP", "dispersion": "d3bj",
                        "density_fitting": True, "window_kcal": 2.5, "max_memory_mb": 4000,
                        "solvent_model": "gfn2-delta", "conv_tol": 1e-9, "max_cycle": 100, "grid_level": 3}
REFINE_SECONDS = 4321.0
FAILED_SP_REASON = "SCF did not converge in 100 cycles <level shift 0.2>"
UNREFINED_G = {"methyl-chx": [0.0, 1.37, 4.9], "cis-tBu-Me": [0.5, 0.0, 3.6], "ref-cyclopropyl": [0.0, 1.55]}
ALL_SP_FAILED = "thp-2-OMe"


def _spec(name):
    return next(s for s in MOLECULES if s["name"] == name)


def _unrefined_summary(spec, t):
    """chair gap, A-value, preferred family, non-chair population of the made-up GFN2-xTB-only values."""
    gs = UNREFINED_G[spec["name"]]
    fams = spec["families"]
    chairs = sorted(((g, f) for g, f in zip(gs, fams) if f[0] == "chair"), key=lambda x: x[0])
    gap = chairs[1][0] - chairs[0][0]
    # one chair-gap axis: the refined chairs' (negative when GFN2-xTB alone prefers the other chair)
    refined_best = min((f for f in fams if f[0] == "chair"), key=lambda f: f[2])
    if chairs[0][1] is not refined_best:
        gap = -gap
    mono = len(fams[0][1]) == 1
    a_value = (gap if chairs[0][1][1]["s1"] == "equatorial" else -gap) if mono else None
    best = min(zip(gs, fams), key=lambda x: x[0])[1]
    non_chair = sum(p for f, p in zip(fams, _boltzmann(gs, t)) if f[0] != "chair")
    return dict(preferred_family=_family_label(*best[:2]), chair_dg_kcal=gap, a_value_kcal=a_value,
                twist_boat_population=non_chair, flag=False, flag_reason="")


def write_refined_run_folder(out):
    import pandas as pd

    write_run_folder(out)
    summary = pd.read_csv(out / "summary.csv", dtype=str, keep_default_na=False)
    summary["refined"] = ""
    summary["chair_dg_unrefined_kcal"] = ""
    summary["a_value_unrefined_kcal"] = ""
    for spec in MOLECULES:
        name = spec["name"]
        if spec.get("failed"):
            continue
        folder = out / name
        summary.loc[summary["molecule"] == name, "refined"] = str(name in UNREFINED_G)
        confs = pd.read_csv(folder / "conformers.csv", dtype=str, keep_default_na=False)
        usable = [c for c in dict.fromkeys(confs.loc[confs["status"] == "ok", "conformer"])]
        if name == ALL_SP_FAILED:      # every single point failed: the molecule keeps its GFN2-xTB values
            rows = [dict(conformer=c, selected=True, energy_hartree=-20.5, energy_refined_hartree="",
                         solvation_hartree="", converged=False, seconds=12.0, status="failed",
                         reason="out of memory") for c in usable]
            fileio.write_csv(folder / "refine.csv", pd.DataFrame(rows))
            fileio.write_json(folder / "refine.json", {"molecule": name, "settings": REFINE_JSON_SETTINGS,
                                                       "dft_seconds": 0.0})
            ens = json.loads((folder / "ensemble.json").read_text())
            ens["refined"] = False
            fileio.write_json(folder / "ensemble.json", ens)
            continue
        if name not in UNREFINED_G:
            continue
        # refine.csv: the first two conformers refined, the third failed, the rest not selected
        status = {c: ("ok" if k < 2 else "failed" if k == 2 else "not-selected") for k, c in enumerate(usable)}
        rows = [dict(conformer=c, selected=s != "not-selected", energy_hartree=-20.5,
                     energy_refined_hartree=-233.1 if s == "ok" else "", solvation_hartree=0.0 if s == "ok" else "",
                     converged=s == "ok" if s != "not-selected" else "", seconds=300.0 if s != "not-selected" else "",
                     status=s, reason={"ok": "", "failed": FAILED_SP_REASON}.get(s, "more than 2.5 kcal/mol above "
                                                                             "the lowest"))
                for c, s in status.items()]
        fileio.write_csv(folder / "refine.csv", pd.DataFrame(rows))
        fileio.write_json(folder / "refine.json", {"molecule": name, "settings": REFINE_JSON_SETTINGS,
                                                   "versions": {"pyscf": "2.8.0"}, "dft_seconds": REFINE_SECONDS})
        confs["energy_refined_hartree"] = [-233.1 if status.get(c) == "ok" else "" for c in confs["conformer"]]
        confs["g_refined_hartree"] = [-233.0 if c in status else "" for c in confs["conformer"]]
        confs["refined_single_point"] = [status.get(c) == "ok" for c in confs["conformer"]]
        fileio.write_csv(folder / "conformers.csv", confs)
        fams = pd.read_csv(folder / "families.csv", dtype=str, keep_default_na=False)
        g_u, p_u = [], []
        for t in TEMPS:
            g_u += UNREFINED_G[name]
            p_u += _boltzmann(UNREFINED_G[name], t)
        fams["g_rel_unrefined_kcal"] = g_u
        fams["population_unrefined"] = p_u
        fileio.write_csv(folder / "families.csv", fams)
        ens = json.loads((folder / "ensemble.json").read_text())
        ens["refined"] = True
        for entry in ens["temperatures"]:
            entry["unrefined"] = _unrefined_summary(spec, entry["temperature_k"])
        fileio.write_json(folder / "ensemble.json", ens)
        for t in TEMPS:
            u = _unrefined_summary(spec, t)
            sel = (summary["molecule"] == name) & (summary["temperature_k"].astype(float) == t)
            summary.loc[sel, "chair_dg_unrefined_kcal"] = str(u["chair_dg_kcal"])
            summary.loc[sel, "a_value_unrefined_kcal"] = "" if u["a_value_kcal"] is None else str(u["a_value_kcal"])
    fileio.write_csv(out / "summary.csv", summary)
    return out


RUN_INFO_REFINED = dict(copy.deepcopy(RUN_INFO))
RUN_INFO_REFINED["settings"]["refine"] = {}          # as configured: every default; refine.json has the values


@pytest.fixture(scope="module")
def refined_page(tmp_path_factory):
    out = write_refined_run_folder(tmp_path_factory.mktemp("refined"))
    return write_report(out, RUN_INFO_REFINED).read_text(encoding="utf-8")


def _article(text, name):
    block = text[text.index(f'id="m-{name}"'):]
    return block[:block.index("</article>")]


def _table_rows(fragment):
    """Every table row of an HTML fragment as a list of its cells' plain text."""
    rows = []
    for tr in re.findall(r"<tr[^>]*>(.*?)</tr>", fragment, flags=re.S):
        cells = re.findall(r"<t[hd][^>]*>(.*?)</t[hd]>", tr, flags=re.S)
        rows.append([html.unescape(re.sub(r"<[^>]+>", " ", c)).strip() for c in cells])
    return rows


def _f2(x):
    return f"{x:.2f}"


def test_refined_family_table_shows_both_levels(refined_page):
    block = _article(refined_page, "methyl-chx")
    lead = block[:block.index("Additive A-value comparison")]          # the 298.15 K family table
    head = next(r for r in _table_rows(lead) if r and r[0] == "#")
    assert any("GFN2-xTB only" in h for h in head) and any("DFT//GFN2-xTB" in h for h in head)
    spec = _spec("methyl-chx")
    for (form, d, g, _), g_u in zip(spec["families"], UNREFINED_G["methyl-chx"]):
        row = next(r for r in _table_rows(lead) if r and r[1] == form and r[2] == orientation_short(_orient(d)))
        assert row[head.index(next(h for h in head if "G rel" in h and "DFT" in h))] == _f2(g)
        assert row[head.index(next(h for h in head if "G rel" in h and "GFN2-xTB only" in h))] == _f2(g_u)
    # the unrefined population column is there too (two population columns)
    assert sum("population" in h for h in head) == 2


def test_refined_page_names_the_dft_level(refined_page):
    caution = refined_page[refined_page.index('id="caution"'):]
    caution = caution[:caution.index("</section>")]
    # settings.refine was {}: the functional and basis can only come from refine.json
    assert "PBE0" in caution and "def2-TZVP" in caution and "Becke–Johnson" in caution
    assert "B3LYP" not in caution
    assert "GFN2-xTB geometries" in caution and "thermal corrections" in caution
    assert ALL_SP_FAILED in caution                         # the molecule whose single points all failed
    assert "Model predictions, not measurements" in caution


def test_refined_page_shows_failed_single_point_and_dft_time(refined_page):
    block = _article(refined_page, "methyl-chx")
    assert html.escape(FAILED_SP_REASON) in block
    assert "<level shift" not in block                      # escaped
    dft = block[block.index("<h3>DFT refinement</h3>"):]
    assert fmt_seconds(REFINE_SECONDS) in dft
    assert "2 succeeded, 1 failed, 2 conformer(s) not selected (of 5)" in dft
    conf = _table_rows(block[block.index("Every conformer at"):])
    head = conf[0]
    col = head.index("own DFT single point")
    by_id = {r[0]: r for r in conf[1:]}
    assert by_id["c001"][col].startswith("yes") and by_id["c002"][col].startswith("yes")
    assert "failed" in by_id["c003"][col] and FAILED_SP_REASON in by_id["c003"][col]
    assert by_id["c004"][col].startswith("not selected")
    assert by_id["c006"][col] == "—"                       # not a usable minimum


def test_refined_overview_and_additive_block_give_the_gfn2_values(refined_page):
    ov = refined_page[refined_page.index('id="overview"'):]
    ov = ov[:ov.index("</section>")]
    rows = _table_rows(ov)
    head = rows[0]
    gap_dft = next(i for i, h in enumerate(head) if h.startswith("chair gap") and "DFT" in h)
    gap_gfn = next(i for i, h in enumerate(head) if h.startswith("chair gap") and "GFN2-xTB only" in h)
    a_dft = next(i for i, h in enumerate(head) if h.startswith("A-value") and "DFT" in h)
    a_gfn = next(i for i, h in enumerate(head) if h.startswith("A-value") and "GFN2-xTB only" in h)
    by_name = {r[0]: r for r in rows[1:]}
    spec = _spec("methyl-chx")
    u = _unrefined_summary(spec, 298.15)
    r = by_name["methyl-chx"]
    assert r[gap_dft] == _f2(spec["families"][1][2]) and r[gap_gfn] == _f2(u["chair_dg_kcal"])
    assert r[a_gfn] == _f2(u["a_value_kcal"]) and r[a_dft] != r[a_gfn]
    assert by_name[ALL_SP_FAILED][gap_dft] == "not refined"
    assert all(len(row) == len(head) for row in rows)       # the failed molecule's row is padded too

    block = _article(refined_page, "methyl-chx")
    add = block[block.index("Additive A-value comparison"):]
    assert f"by {_f2(u['chair_dg_kcal'])} kcal/mol" in add.split("GFN2-xTB only (the same run")[1]
    assert "opposite chair to the DFT//GFN2-xTB result" not in add
    # cis-tBu-Me prefers the other chair without the single points: said so
    add = _article(refined_page, "cis-tBu-Me")
    assert "opposite chair to the DFT//GFN2-xTB result" in add
    # the reference ring's A-value at both levels
    ref = refined_page[refined_page.index('id="reference"'):]
    assert _f2(UNREFINED_G["ref-cyclopropyl"][1]) in ref and "GFN2-xTB only" in ref


def test_molecule_whose_single_points_all_failed_says_it_is_gfn2_only(refined_page):
    block = _article(refined_page, ALL_SP_FAILED)
    assert "No DFT single point succeeded for this molecule" in block
    assert "out of memory" in block
    assert "Families, ranked by free energy</h3>" in block     # not labelled as refined


def test_refined_page_is_well_formed_and_self_contained(refined_page):
    parsed = _parse(refined_page)
    assert parsed.problems == [] and parsed.stack == []
    assert "<script" not in refined_page.lower()
    stripped = re.sub(r"""\sxmlns(:\w+)?=(['"])[^'"]*\2""", "", refined_page)
    assert "http://" not in stripped and "https://" not in stripped


def test_unrefined_page_has_no_refinement_columns(page):
    _, text, _ = page
    for words in ("GFN2-xTB only", "DFT//GFN2-xTB", "own DFT single point", "DFT refinement", "not refined",
                  "DFT single point"):
        assert words not in text, words
    block = _article(text, "methyl-chx")
    head = next(r for r in _table_rows(block) if r and r[0] == "#")
    assert sum("population" in h for h in head) == 1


def test_refined_settings_table_lists_the_settings_the_single_points_used(refined_page):
    run = refined_page[refined_page.index('id="settings"'):]
    run = run[:run.index("</section>")]
    row = next(r for r in _table_rows(run) if r and r[0] == "refine")
    assert "functional=PBE0" in row[1] and "basis=def2-TZVP" in row[1] and "window_kcal=2.5" in row[1]


# ------------------------------------------------------------------------------------------ escaping, in-memory rows

def _summary_as_python(folder):
    """summary.csv as the report stage holds it before writing: Python numbers, NaN for empty cells,
    flags as bools (pandas' own parsing of the file)."""
    import pandas as pd
    rows = pd.read_csv(folder / "summary.csv").to_dict("records")
    assert {type(r["flag"]) for r in rows} == {bool, float}       # bools, and NaN on the failed molecule's rows
    return rows


def test_html_special_characters_in_names_are_escaped(run_folder, tmp_path):
    project = "<b>&\"x'</b>"
    molecule = "<i>&\"y'"                      # a summary row whose molecule has no folder (no "/" in it)
    info = dict(copy.deepcopy(RUN_INFO), project=project)
    rows = _summary_as_python(run_folder)
    rows.append(dict(rows[0], molecule=molecule))
    text = write_report(run_folder, info, path=tmp_path / "r.html", summary_rows=rows).read_text(encoding="utf-8")
    for raw in ("<b>", "</b>", "<i>"):
        assert raw not in text, raw
    escaped = html.escape(project, quote=True)                   # &lt;b&gt;&amp;&quot;x&#x27;&lt;/b&gt;
    assert f"<title>{escaped} — chairqm report</title>" in text
    assert f"Which ring conformer dominates? — {escaped}</h1>" in text
    assert f'<h2>{html.escape(molecule, quote=True)} <span class="badge' in text
    assert 'id="m-_i___y_"' in text and 'href="#m-_i___y_"' in text   # < > & " ' each become _
    parsed = _parse(text)
    assert parsed.problems == [] and parsed.stack == []
    words = "".join(parsed.text)
    assert project in words and molecule in words               # and both read as written


def test_summary_rows_in_memory_are_used_and_summary_csv_is_not_read(run_folder, page, tmp_path):
    import shutil
    from chairqm.report import build_report

    _, from_file, _ = page
    rows = _summary_as_python(run_folder)
    out = tmp_path / "no-summary"
    shutil.copytree(run_folder, out)
    (out / "summary.csv").unlink()
    # no summary.csv at all: the in-memory rows (bools, NaN, floats) give the page the file gives
    assert build_report(out, RUN_INFO, summary_rows=rows) == from_file
    # flags as the strings summary.csv holds: the same page
    as_strings = [dict(r, flag=str(r["flag"]).lower()) if isinstance(r["flag"], bool) else r for r in rows]
    assert build_report(out, RUN_INFO, summary_rows=as_strings) == from_file

    # a stale summary.csv that disagrees with the rows handed over: the rows win
    stale = "molecule,temperature_k,status,reason\nmethyl-chx,298.15,failed,stale file from an earlier run\n"
    fileio.write_text(out / "summary.csv", stale)
    text = build_report(out, RUN_INFO, summary_rows=rows)
    assert "stale file from an earlier run" not in text
    assert "This molecule failed" not in _article(text, "methyl-chx")
    # the in-memory calibration of methyl-chx (1.70, 1.35 to 2.05) is on the page
    assert "Calibrated value: 1.70 kcal/mol, 95 % interval 1.35 to 2.05 kcal/mol." in _article(text, "methyl-chx")
    # without rows the file is read, as before
    assert "stale file from an earlier run" in build_report(out, RUN_INFO)


def test_a_temperature_without_calibration_says_why(run_folder):
    """The calibration is fitted at one temperature and applied only there: a value at another temperature
    is shown uncalibrated with that reason, not as if no calibration existed."""
    from chairqm.report import build_report
    assert any(abs(t - 298.15) > 0.5 for t in TEMPS)
    text = build_report(run_folder, dict(copy.deepcopy(RUN_INFO), calibration_temperature_k=298.15))
    assert "none at 350 K; the calibration was fitted at 298.15 K and is applied only there" in text
    assert "none at 298.15 K" not in text


def test_page_answers_first_and_keeps_settings_for_the_end(page):
    """Issue 18: the verdicts (overview table) come first, settings/versions/provenance last."""
    _, text, _ = page
    body = text[text.index("<body"):]
    overview, run, settings = (body.index(f'id="{s}"') for s in ("overview", "run", "settings"))
    assert overview < run < settings
    articles = [m.start() for m in re.finditer(r"<article", body)]
    assert articles and max(articles) < settings                   # every molecule before the settings
    for heading in ("<h3>Settings</h3>", "<h3>Versions and provenance</h3>"):
        assert body.index(heading) > settings
    # the overview row of the calibrated molecule shows its calibrated value with the interval
    ov = body[overview:body.index("</section>", overview)]
    assert "calibrated / kcal mol⁻¹ (95 % interval)" in ov
    assert "1.70 (1.35 to 2.05)" in ov
