"""The main job end to end through the workflow, checked against facts of the trade."""

import json
import subprocess
import sys
from html.parser import HTMLParser

import pandas as pd
import pytest
from _runs import config_path, read_summary, run_config

from chairqm.units import KCAL_PER_HARTREE

pytestmark = pytest.mark.slow

MOLECULES = [
    {"name": "mch", "smiles": "CC1CCCCC1"},
    {"name": "cis-tBu-Me", "smiles": "CC(C)(C)[C@H]1CC[C@@H](C)CC1"},
    {"name": "trans-14-dimethyl", "smiles": "C[C@H]1CC[C@H](C)CC1"},
    {"name": "gem-dimethyl", "smiles": "CC1(C)CCCCC1"},
]


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    out = tmp_path_factory.mktemp("e2e") / "out"
    proc = run_config({"project": "end-to-end test", "molecules": MOLECULES,
                       "settings": {"temperatures_k": [298.15, 350.0]}}, out, timeout=None)
    assert proc.returncode == 0, proc.stderr[-3000:]
    return out


def row(out, mol, t=298.15):
    df = read_summary(out)
    r = df[(df.molecule == mol) & (df.temperature_k == t)]
    assert len(r) == 1
    return r.iloc[0]


def test_methylcyclohexane_a_value(run):
    # experimental A-value of methyl 1.74 kcal/mol (Booth and Everett, J. Chem. Soc., Perkin Trans. 2
    # 1980, 255); GFN2-xTB is expected within 0.5 kcal/mol (issue acceptance bound)
    r = row(run, "mch")
    assert r.status == "ok"
    assert abs(float(r.a_value_kcal) - 1.74) <= 0.5
    assert r.preferred_family == "chair s1=equatorial"


def test_cis_tbu_methyl_locks_tbu_equatorial(run):
    # cis-1-tert-butyl-4-methylcyclohexane: ~99.9 % tBu-equatorial at room temperature (common practice;
    # textbook A-values 4.9 and 1.7 kcal/mol give ≈ 99.5 %). Both figures weigh the two chairs against
    # each other, so the check does too: the tBu-equatorial chair against the tBu-axial one. The
    # twist-boats (tBu pseudo-equatorial, about 1 % here, 2.9 kcal/mol up) are not in that estimate; the
    # tBu-equatorial chair must still be the leading family by far (≥ 95 %: a conformationally locked ring,
    # common practice).
    fam = pd.read_csv(run / "cis-tBu-Me" / "families.csv", keep_default_na=False)
    fam = fam[fam.temperature_k == 298.15]
    chairs = fam[fam.ring_form == "chair"]
    tbu_eq = chairs[chairs.orientation.str.contains("s1=equatorial")].population.sum()
    tbu_ax = chairs[chairs.orientation.str.contains("s1=axial")].population.sum()
    assert tbu_eq / (tbu_eq + tbu_ax) >= 0.99
    assert tbu_eq >= 0.95 and tbu_eq == fam.population.max()


def test_trans_14_dimethyl_not_flagged(run):
    r = row(run, "trans-14-dimethyl")
    assert r.status == "ok"
    assert str(r.flag).lower() == "false", r.flag_reason
    assert r.additive_source == "tabulated"
    # additive: 2 × 1.70 kcal/mol between e,e and a,a (the package table's methyl value, from the
    # compilation's general references)
    assert abs(float(r.additive_dg_kcal) - 3.40) < 1e-6


def test_geminal_pair_outside_model(run):
    # the tabulated model has no geminal term; against the run's own A-values the two chairs of
    # 1,1-dimethylcyclohexane are one conformer by symmetry, so the interaction is zero and the flag (about
    # additivity) stays down, while the reason names the geminal pair it checked
    r = row(run, "gem-dimethyl")
    assert r.additive_source == "outside-model"
    assert abs(float(r.interaction_kcal)) < 1e-6
    assert str(r.flag).lower() == "false" and "geminal" in r.flag_reason


def test_populations_sum_to_one(run):
    for m in MOLECULES:
        for path in ("families.csv", "conformers.csv"):
            df = pd.read_csv(run / m["name"] / path, keep_default_na=False)
            for t, g in df.groupby("temperature_k"):
                pops = pd.to_numeric(g.population, errors="coerce").fillna(0.0)
                assert abs(pops.sum() - 1.0) < 1e-9, (m["name"], path, t)


def test_contract_columns(run):
    want = {"summary.csv": ["molecule", "temperature_k", "status", "reason", "n_conformers", "preferred_family",
                            "chair_dg_kcal", "a_value_kcal", "twist_boat_population", "additive_dg_kcal",
                            "additive_source", "flag", "flag_reason"]}
    per_mol = {
        "substituents.csv": ["substituent", "ring_atom", "fragment"],
        "seeds.csv": ["seed", "ring_form", "q", "theta", "phi", "orientation", "ff_energy_kcal", "status"],
        "minima.csv": ["conformer", "seed", "ring_form", "q", "theta", "phi", "orientation", "energy_hartree",
                       "gradient_calls", "status", "reason"],
        "thermo.csv": ["conformer", "temperature_k", "zpe_hartree", "h_hartree", "s_hartree_per_k", "g_hartree",
                       "symmetry_number", "degeneracy", "lowest_frequency_cm1", "n_imaginary", "status"],
        "families.csv": ["temperature_k", "ring_form", "orientation", "axial", "g_rel_kcal", "population"],
        "conformers.csv": ["conformer", "seed", "temperature_k", "ring_form", "q", "theta", "phi", "orientation",
                           "energy_hartree", "g_hartree", "g_rel_kcal", "population", "n_imaginary", "status"],
    }
    for f, cols in want.items():
        assert list(pd.read_csv(run / f).columns[:len(cols)]) == cols
    for m in MOLECULES:
        for f, cols in per_mol.items():
            assert list(pd.read_csv(run / m["name"] / f).columns[:len(cols)]) == cols, (m["name"], f)
        assert (run / m["name"] / "conformers.sdf").stat().st_size > 0
    prov = json.loads((run / "provenance.json").read_text())
    for k in ("chairqm_version", "engines", "settings", "input_hashes", "started", "finished", "n_cpus",
              "engine_seconds", "wall_seconds"):
        assert k in prov
    # engine seconds are summed over the worker processes of every job (two cores here: run_config's
    # default), so they may exceed the wall time, but not the wall time of both cores together
    assert 0 < prov["engine_seconds"] < 2 * prov["wall_seconds"]


def test_every_conformer_is_proven_minimum_or_excluded(run):
    """A counted conformer is a proven minimum, or (outside the frequency window) says it was not
    frequency-checked and carries less than the window's 0.1 % population (issue 17's floor)."""
    for m in MOLECULES:
        c = pd.read_csv(run / m["name"] / "conformers.csv", keep_default_na=False)
        counted = c[pd.to_numeric(c.population, errors="coerce").fillna(0) > 0]
        assert (counted.status == "ok").all()
        checked = counted[counted.frequency_checked.astype(str) == "True"]
        unchecked = counted[counted.frequency_checked.astype(str) == "False"]
        assert len(checked) + len(unchecked) == len(counted)
        assert (checked.n_imaginary.astype(int) == 0).all()
        assert (unchecked.population.astype(float) < 1e-3).all()
        assert (unchecked.thermal_correction_from != "").all()


def _every_hessian_and(tmp_path, name, smiles, label, window):
    """One molecule run with a Hessian for every minimum ('all'), then a copy rerun with `window` (the same
    minima; its Hessians come from the copied cache): ({'all': folder, label: folder}, and both
    conformers.csv tables indexed by conformer, in the same order)."""
    import shutil
    outs = {}
    for lab, win in (("all", "all"), (label, window)):
        out = tmp_path / lab
        if outs:
            shutil.copytree(outs["all"], out)
        proc = run_config({"molecules": [{"name": name, "smiles": smiles}],
                           "settings": {"thermo": {"frequency_window_kcal": win}}}, out, timeout=None)
        assert proc.returncode == 0, proc.stderr[-3000:]
        outs[lab] = out
    full, other = (pd.read_csv(outs[lab] / name / "conformers.csv", keep_default_na=False).set_index("conformer")
                   for lab in ("all", label))
    assert list(full.index) == list(other.index)
    return outs, full, other


def test_hessians_only_where_they_decide_the_answer(tmp_path):
    """Cyanocyclohexane with Hessians for the two chairs only (window 0) against every minimum ('all'):
    the twist-boats stay listed, marked and with a borrowed thermal correction; no population above 1 %
    moves by more than 0.5 percentage points and the A-value by no more than 0.05 kcal/mol (issue 17's
    acceptance bounds)."""
    outs, full, part = _every_hessian_and(tmp_path, "cyano", "N#CC1CCCCC1", "chairs", 0)
    assert (full.frequency_checked.astype(str) == "True").all()
    chairs = part.ring_form == "chair"
    assert (part[chairs].frequency_checked.astype(str) == "True").all()
    others = part[~chairs]
    assert len(others) and (others.frequency_checked.astype(str) == "False").all()
    assert set(others.thermal_correction_from) <= set(part[chairs].index)
    assert (others.status == "ok").all() and others.g_hartree.astype(float).notna().all()
    big = full.population.astype(float) > 0.01
    assert (abs(full.population.astype(float) - part.population.astype(float))[big] <= 0.005).all()
    assert abs(float(row(outs["all"], "cyano").a_value_kcal) - float(row(outs["chairs"], "cyano").a_value_kcal)) <= 0.05
    thermo = json.loads((outs["chairs"] / "cyano" / "thermo.json").read_text())
    assert thermo["hessians"] == 2 < thermo["minima"]


def test_the_growing_window_skips_only_what_a_full_frequency_run_puts_below_the_floor(tmp_path):
    """Ethylcyclohexane (12 minima: three ethyl rotamers per chair, twist-boats 5-6 kcal/mol up) with the
    automatic window, which narrows as each Hessian adds a known free energy, against Hessians for every
    minimum: fewer Hessians, every skipped conformer below the 0.1 % floor in the full run, no population
    above 1 % moved by more than 0.5 percentage points, the A-value by no more than 0.05 kcal/mol (issue
    17's acceptance bounds)."""
    outs, full, auto = _every_hessian_and(tmp_path, "ethyl", "CCC1CCCCC1", "auto", "auto")
    skipped = auto.frequency_checked.astype(str) == "False"
    thermo = json.loads((outs["auto"] / "ethyl" / "thermo.json").read_text())
    assert skipped.any() and thermo["hessians"] == int((~skipped).sum()) < thermo["minima"]
    assert (full.population.astype(float)[skipped] < 1e-3).all()
    big = full.population.astype(float) > 0.01
    assert (abs(full.population.astype(float) - auto.population.astype(float))[big] <= 0.005).all()
    assert abs(float(row(outs["all"], "ethyl").a_value_kcal) - float(row(outs["auto"], "ethyl").a_value_kcal)) <= 0.05


def test_ase_database_is_queryable(run):
    from ase.db import connect
    db = connect(str(run / "conformers.db"))
    rows = list(db.select(molecule="mch"))
    assert rows and all(r.ring_form in ("chair", "twist-boat", "boat", "half-chair", "envelope", "other") for r in rows)
    n = sum(1 for _ in db.select())
    names = pd.read_csv(run / "summary.csv")["molecule"].unique()      # reference rings included
    per_t = sum(len(pd.read_csv(run / n / "conformers.csv").query("temperature_k == 298.15")) for n in names)
    assert n == per_t          # every conformer once, failed ones included


class _Refs(HTMLParser):
    def __init__(self):
        super().__init__()
        self.refs = []

    def handle_starttag(self, tag, attrs):
        for k, v in attrs:
            if k in ("src", "href") and v:
                self.refs.append(v)
        if tag in ("script", "link", "iframe", "img") and any(k in ("src", "href") for k, _ in attrs):
            self.refs.append(f"<{tag}>")


def test_report_is_self_contained(run):
    html = (run / "report.html").read_text()
    p = _Refs()
    p.feed(html)
    assert all(r.startswith("#") for r in p.refs), p.refs
    for m in MOLECULES:
        assert m["name"] in html


def test_rerun_with_nothing_changed_computes_nothing(run):
    proc = subprocess.run([sys.executable, "-m", "chairqm.cli", "run", str(config_path(run)), "--out", str(run),
                           "--", "--dry-run"], capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert "Nothing to be done" in proc.stdout + proc.stderr


def test_avalue_command_answers_for_an_untabulated_group(tmp_path):
    from chairqm import avalues
    frag = "[*]C1CC1"                      # cyclopropyl: not in the package table
    assert avalues.lookup(frag) is None
    out = tmp_path / "av"
    proc = subprocess.run([sys.executable, "-m", "chairqm.cli", "avalue", frag, "--out", str(out), "--cores", "2"],
                          capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr[-2000:]
    line = [l for l in proc.stdout.splitlines() if l.startswith(f"A({frag}) =")]
    assert line, proc.stdout
    value = float(line[0].split("=")[1].split()[0])
    # a small hydrocarbon group bonded through a CH: its A-value must be positive and of the size of the
    # small alkyl groups' (methyl 1.70 to isopropyl 2.15 kcal/mol in the package table) — a loose sanity
    # window of 0.5–3 kcal/mol (common practice), not a precise check value
    assert 0.5 < value < 3.0
    assert (out / "report.html").is_file()


# CCSD(T)/CBS electronic energy differences between the lowest chairs with the group equatorial and axial
# (Weldon, Vickrey, Tschumper, J. Phys. Chem. A 2005, 109, 11073), kcal/mol, positive = equatorial lower:
# methylcyclohexane +1.75; 2-fluoro- and 2-methoxytetrahydropyran prefer the axial group (anomeric
# effect) by 2.45 and 1.27.  Tolerances as the refinement's specification asks: 0.3 for the hydrocarbon,
# 0.6 for the anomeric rings.
CCSDT_CBS = {"mch": (1.75, 0.3), "fluoro-thp": (-2.45, 0.6), "methoxy-thp": (-1.27, 0.6)}


@pytest.fixture(scope="module")
def refined_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("refine") / "out"
    proc = run_config({
        "project": "refinement against CCSD(T)/CBS",
        "molecules": [{"name": "mch", "smiles": "CC1CCCCC1"},
                      {"name": "fluoro-thp", "smiles": "F[C@@H]1CCCCO1"},
                      {"name": "methoxy-thp", "smiles": "CO[C@@H]1CCCCO1"}],
        # window 0: the lowest conformer of each chair family only, which is what the comparison needs
        "settings": {"seeds": {"twist_boats": False}, "refine": {"window_kcal": 0.0}}}, out, timeout=None)
    assert proc.returncode == 0, proc.stderr[-3000:]
    return out


def _refined_chair_gap(out, mol):
    """E(DFT) of the lowest refined axial chair minus that of the lowest refined equatorial chair, kcal/mol."""
    c = pd.read_csv(out / mol / "conformers.csv", keep_default_na=False)
    c = c[(c["refined_single_point"].astype(str) == "True") & (c["ring_form"] == "chair")]
    c = c.drop_duplicates("conformer")
    ax = c[c["orientation"].str.contains("=axial")]
    eq = c[c["orientation"].str.contains("=equatorial")]
    assert len(ax) >= 1 and len(eq) >= 1, c
    e_ax = ax["energy_refined_hartree"].astype(float).min()
    e_eq = eq["energy_refined_hartree"].astype(float).min()
    return (e_ax - e_eq) * KCAL_PER_HARTREE


@pytest.mark.parametrize("mol", list(CCSDT_CBS))
def test_refined_chair_energy_gap_matches_ccsdt_cbs(refined_run, mol):
    ref, tol = CCSDT_CBS[mol]
    assert _refined_chair_gap(refined_run, mol) == pytest.approx(ref, abs=tol)


def test_refined_run_writes_both_levels_side_by_side(refined_run):
    s = read_summary(refined_run)
    assert set(s["refined"].astype(str)) == {"True"}
    assert {"chair_dg_unrefined_kcal", "a_value_unrefined_kcal"} <= set(s.columns)
    r = s[s["molecule"] == "mch"].iloc[0]
    # refined A-value of methyl against experiment: 1.74 kcal/mol (Booth and Everett 1980), within 0.5
    assert abs(float(r.a_value_kcal) - 1.74) <= 0.5
    assert float(r.a_value_unrefined_kcal) != float(r.a_value_kcal)
    c = pd.read_csv(refined_run / "mch" / "conformers.csv")
    assert {"energy_refined_hartree", "g_refined_hartree"} <= set(c.columns)
    fam = pd.read_csv(refined_run / "mch" / "families.csv")
    assert {"g_rel_unrefined_kcal", "population_unrefined"} <= set(fam.columns)
    rc = pd.read_csv(refined_run / "methoxy-thp" / "refine.csv", keep_default_na=False)
    assert (rc["status"] == "ok").sum() == 2          # window 0: one conformer per chair family
    assert set(rc["status"]) <= {"ok", "not-selected"}
    page = (refined_run / "report.html").read_text()
    assert "GFN2-xTB only" in page and "def2-TZVP" in page
