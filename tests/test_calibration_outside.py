"""The second, out-of-domain reference set and the widened intervals outside the calibration's domain."""

import importlib.util
import math
from pathlib import Path
from types import SimpleNamespace as NS

import numpy as np
import pandas as pd
import pytest

from chairqm import calibration as cq_cal
from chairqm import config as cq_config
from chairqm import molecule as cq_mol
from chairqm.errors import ChairqmError

ROOT = Path(__file__).resolve().parents[1]
CONFIG = ROOT / "configs" / "reference-outside.yaml"
CASES = ROOT / "configs" / "reference-outside.csv"


def _report_module():
    spec = importlib.util.spec_from_file_location("calibration_report", ROOT / "benchmarks" / "calibration_report.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def _gas_calibration():
    settings = cq_config.validate({"molecules": [{"name": "m", "smiles": "C1CCCCC1"}]})["settings"]
    cal = cq_cal.load_matching(settings)
    assert cal is not None, "the packaged gas-phase GFN2-xTB calibration is missing"
    return cal


# ------------------------------------------------------------------- the second set

def test_second_set_parses_and_every_case_names_its_source():
    cfg = cq_config.load(CONFIG)
    names = [m["name"] for m in cfg["molecules"]]
    assert len(names) >= 15
    cases = _report_module().read_outside_cases(CASES)
    assert sorted(cases["molecule"]) == sorted(names)           # one experimental row per molecule
    assert cases["experimental_kcal"].notna().all()
    for r in cases.itertuples():
        assert len(str(r.source)) > 20 and any(ch.isdigit() for ch in str(r.source)), r.molecule   # authors, year
        assert str(r.compared).strip() and str(r.conditions).strip()
        assert "axial" in r.axial_chair and "equatorial" in r.equatorial_chair
    # the settings are the ones the shipped gas-phase calibration is keyed by
    assert cq_cal.settings_key(cfg["settings"]) == cq_cal.settings_key(_gas_calibration().settings)


def test_every_case_of_the_second_set_lies_outside_the_domain_and_names_its_groups():
    cfg = cq_config.load(CONFIG)
    cal = _gas_calibration()
    cases = _report_module().read_outside_cases(CASES).set_index("molecule")
    for m in cfg["molecules"]:
        (p,) = cq_mol.perceive(m, ROOT / "configs", cfg["settings"])
        assert cq_cal.domain(cal, p.ring_elements, p.substituents).startswith("outside"), m["name"]
        ids = {s.id for s in p.substituents}
        spec = cases.loc[m["name"]]
        for orient in (spec.axial_chair, spec.equatorial_chair):
            assert {x.split("=")[0] for x in orient.split(";")} <= ids, m["name"]


# ------------------------------------------------------------------- the spread and the widened interval

def test_outside_spread_hand_worked():
    # residuals ±1, ±2: RMS = sqrt(10/4) = 1.5811; with s = 0.5, tau = sqrt(2.5 - 0.25) = 1.5;
    # t(0.975, 3) = 3.182 (Student t table, common practice)
    o = cq_cal.outside_spread([1.0, -1.0, 2.0, -2.0], 0.5)
    assert o["n"] == 4
    assert o["rms_kcal"] == pytest.approx(math.sqrt(2.5))
    assert o["excess_sd_kcal"] == pytest.approx(1.5)
    assert o["t_quantile"] == pytest.approx(3.182, abs=1e-3)
    # a second set no worse than the in-domain spread adds nothing
    assert cq_cal.outside_spread([0.1, -0.1, 0.2], 0.5)["excess_sd_kcal"] == 0.0
    with pytest.raises(ChairqmError):
        cq_cal.outside_spread([1.0, 2.0], 0.5)


def test_widened_interval_formula_and_it_is_wider_than_inside():
    c = cq_cal.fit([0.0, 1.0, 2.0, 3.0], [0.1, 0.9, 2.2, 2.9])
    x0 = 1.7
    c.outside_domain = cq_cal.outside_spread([1.0, -1.0, 2.0, -2.0], c.residual_sd_kcal)
    tau = c.outside_domain["excess_sd_kcal"]
    # four points: too few for the distribution-free scale, so the in-domain part is t*s (Draper and Smith)
    assert c.loo_scale_kcal is None
    h_in = c.t_quantile * c.residual_sd_kcal * math.sqrt(1 + 1 / c.n + (x0 - c.x_mean_kcal) ** 2 / c.sxx_kcal2)
    by_hand = math.sqrt(h_in ** 2 + (c.outside_domain["t_quantile"] * tau) ** 2)
    assert cq_cal.interval_half_width_outside(c, x0) == pytest.approx(by_hand)
    v_in, lo_in, hi_in = cq_cal.apply(c, x0)
    v_out, lo_out, hi_out = cq_cal.apply(c, x0, outside=True)
    assert v_out == pytest.approx(v_in)                        # the same line, a wider interval
    assert lo_out < lo_in and hi_out > hi_in


def test_packaged_calibration_widens_outside_and_inside_is_unchanged():
    cal = _gas_calibration()
    assert cq_cal.has_outside_spread(cal)
    o = cal.outside_domain
    assert o["n"] >= 15 and o["source_set"] == "configs/reference-outside.yaml" and o["created"]
    for x0 in (-1.0, 0.5, 1.5, 3.0):
        _, lo, hi = cq_cal.apply(cal, x0)
        _, wlo, whi = cq_cal.apply(cal, x0, outside=True)
        assert whi - wlo > hi - lo
        assert (hi - lo) / 2 == pytest.approx(cq_cal.interval_half_width(cal, x0))


def test_stored_spread_is_recomputed_from_its_stored_points():
    # the stored figure is what outside_spread gives on the stored residuals (computed, not typed)
    cal = _gas_calibration()
    o = cal.outside_domain
    used = [p for p in o["points"] if p["used"] == "used"]
    assert len(used) == o["n"]
    for p in used:
        assert p["calibrated_kcal"] == pytest.approx(cal.intercept + cal.slope * p["computed_kcal"])
        assert p["residual_kcal"] == pytest.approx(p["experimental_kcal"] - p["calibrated_kcal"])
    again = cq_cal.outside_spread([p["residual_kcal"] for p in used], cal.residual_sd_kcal)
    assert again["excess_sd_kcal"] == pytest.approx(o["excess_sd_kcal"])
    assert again["t_quantile"] == pytest.approx(o["t_quantile"])


def test_without_a_spread_outside_stays_uncalibrated():
    c = cq_cal.fit([0.0, 1.0, 2.0, 3.0], [0.1, 0.9, 2.2, 2.9])
    assert not cq_cal.has_outside_spread(c)
    assert all(math.isnan(v) for v in cq_cal.apply(c, 1.0, outside=True))
    with pytest.raises(ChairqmError):
        cq_cal.interval_half_width_outside(c, 1.0)


def test_which_cases_outside_are_widened():
    cal = _gas_calibration()
    me = [NS(id="s1", fragment="[*]C", ring_atom=0)]
    assert cq_cal.widened_outside(cal, ["C", "C", "C", "C", "C", "O"], me)                  # heterocycle
    assert cq_cal.widened_outside(cal, ["C"] * 6, me + [NS(id="s2", fragment="[*]Cl", ring_atom=1)])
    assert not cq_cal.widened_outside(cal, ["C"] * 6, [NS(id="s1", fragment="[*]CCCC[*]", ring_atom=0)] * 2)
    assert not cq_cal.widened_outside(cal, ["C"] * 6, [NS(id="s1", fragment="[*][GeH3]", ring_atom=0)])


def test_report_stage_widens_outside_and_keeps_the_domain_reason():
    from chairqm.stages.report import calibrate_rows
    settings = cq_config.validate({"molecules": [{"name": "m", "smiles": "C1CCCCC1"}]})["settings"]
    cal = _gas_calibration()
    mols = {"chx": NS(ring_elements=["C"] * 6, substituents=[NS(id="s1", fragment="[*]C", ring_atom=0)]),
            "thp": NS(ring_elements=["C"] * 5 + ["O"], substituents=[NS(id="s1", fragment="[*]C", ring_atom=0)]),
            "fused": NS(ring_elements=["C"] * 6, substituents=[NS(id="s1", fragment="[*]CCCC[*]", ring_atom=0)] * 2)}
    plan = NS(get=lambda name: mols[name])
    rows = [{"molecule": k, "status": "ok", "temperature_k": 298.15, "a_value_kcal": 1.5, "chair_dg_kcal": 1.5}
            for k in mols]
    note = calibrate_rows(rows, settings, cal, plan)
    chx, thp, fused = rows
    assert chx["calibration_domain"] == "inside"
    assert thp["calibration_domain"] == cq_cal.domain(cal, mols["thp"].ring_elements, mols["thp"].substituents)
    assert thp["calibrated_kcal"] == pytest.approx(chx["calibrated_kcal"])
    assert thp["interval_high_kcal"] - thp["interval_low_kcal"] > chx["interval_high_kcal"] - chx["interval_low_kcal"]
    assert fused["calibration_domain"].startswith("outside") and "calibrated_kcal" not in fused
    assert "widened" in note


# ------------------------------------------------------------------- the comparison and the coverage

def test_chair_difference_boltzmann_sums_matching_chairs():
    mod = _report_module()
    from chairqm.units import R_KCAL
    fam = pd.DataFrame({"temperature_k": [298.15] * 4,
                        "ring_form": ["chair", "chair", "chair", "twist-boat"],
                        "orientation": ["s1=axial;s2=axial", "s1=axial;s2=equatorial", "s1=equatorial;s2=axial",
                                        "s1=pseudo-axial;s2=axial"],
                        "g_rel_kcal": [0.0, 1.0, 1.2, 0.1]})
    rt = R_KCAL * 298.15
    # s1 axial: two chair families (s2 either way) summed; s1 equatorial: one; the twist-boat never counts
    g_ax = -rt * math.log(1.0 + math.exp(-1.0 / rt))
    assert mod.chair_difference(fam, "s1=axial", "s1=equatorial") == pytest.approx(g_ax - 1.2)
    assert mod.chair_difference(fam, "s1=axial;s2=axial", "s1=equatorial;s2=axial") == pytest.approx(-1.2)
    assert math.isnan(mod.chair_difference(fam, "s1=equatorial;s2=equatorial", "s1=axial;s2=axial"))


def test_leave_one_out_coverage_is_computed():
    mod = _report_module()
    c = cq_cal.fit([0.0, 1.0, 2.0, 3.0, 4.0], [0.0, 1.1, 1.9, 3.0, 4.1])
    comp = [0.5, 1.0, 1.5, 2.0, 2.5, 1.0]
    exp = [0.6, 1.3, 1.2, 2.4, 2.1, 9.0]                     # the last one far off
    pts = [{"computed_kcal": x, "experimental_kcal": y, "calibrated_kcal": c.intercept + c.slope * x,
            "residual_kcal": y - (c.intercept + c.slope * x), "used": "used"} for x, y in zip(comp, exp)]
    covered, n, per = mod.outside_coverage(c, pts)
    assert n == 6
    assert per[-1][2] is False                               # the outlier is not covered by the others' spread
    # each interval is the one a spread from the other five cases gives
    res = np.array([p["residual_kcal"] for p in pts])
    for i, (lo, hi, inside) in enumerate(per):
        ci = mod.copy_with(c, cq_cal.outside_spread(np.delete(res, i), c.residual_sd_kcal))
        h = cq_cal.interval_half_width_outside(ci, comp[i])
        assert (lo, hi) == pytest.approx((pts[i]["calibrated_kcal"] - h, pts[i]["calibrated_kcal"] + h))
        assert inside == (lo <= exp[i] <= hi)
    assert covered == sum(x[2] for x in per) < 6


def test_inside_coverage_of_the_packaged_calibration_is_computed():
    mod = _report_module()
    cal = _gas_calibration()
    covered, n = mod.inside_coverage(cal)
    assert n == cal.n
    assert 0 < covered <= n


def test_outside_points_read_a_small_finished_folder(tmp_path):
    # one case with a families.csv (copied shape of a run's table), one whose molecule did not run,
    # one whose compared chair is missing
    mod = _report_module()
    c = cq_cal.fit([0.0, 1.0, 2.0, 3.0], [0.1, 0.9, 2.2, 2.9])
    cases = pd.DataFrame({"molecule": ["a", "b", "d"], "compared": ["x", "y", "z"],
                          "axial_chair": ["s1=axial;s2=axial", "s1=axial", "s1=axial"],
                          "equatorial_chair": ["s1=equatorial;s2=equatorial", "s1=equatorial", "s1=equatorial"],
                          "experimental_kcal": [-0.5, 1.0, 1.0], "conditions": ["vapour"] * 3,
                          "source": ["Author A, J. Chem. 1999, 1"] * 3, "from_memory": [True] * 3})
    (tmp_path / "a").mkdir()
    pd.DataFrame({"temperature_k": [298.15, 298.15, 298.15], "ring_form": ["chair", "chair", "twist-boat"],
                  "orientation": ["s1=axial;s2=axial", "s1=equatorial;s2=equatorial", "s1=pseudo-axial;s2=isoclinal"],
                  "g_rel_kcal": [0.0, 0.8, 4.0]}).to_csv(tmp_path / "a" / "families.csv", index=False)
    (tmp_path / "d").mkdir()
    pd.DataFrame({"temperature_k": [298.15], "ring_form": ["chair"], "orientation": ["s1=axial"],
                  "g_rel_kcal": [0.0]}).to_csv(tmp_path / "d" / "families.csv", index=False)
    a, b, d = mod.outside_points(c, tmp_path, cases)
    assert a["used"] == "used" and a["computed_kcal"] == pytest.approx(-0.8)
    assert a["calibrated_kcal"] == pytest.approx(c.intercept - 0.8 * c.slope)
    assert a["residual_kcal"] == pytest.approx(-0.5 - a["calibrated_kcal"])
    assert a["error_kcal"] == pytest.approx(-0.8 + 0.5)
    assert b["used"].startswith("no families.csv") and b["computed_kcal"] is None
    assert d["used"].startswith("a compared chair is missing")


def test_a_ring_with_an_exocyclic_double_bond_is_outside_the_domain_and_not_widened():
    # the line was fitted on cyclohexanes; a cyclohexanone or methylenecyclohexane ring is flattened at its
    # sp2 atom and the second set holds no such case, so its value stays uncalibrated
    from chairqm.molecule import perceive
    c = next(c for c in cq_cal.load_all() if not c.settings.get("solvent") and not c.settings.get("refine"))
    for smiles in ("CC1CCC(=C)CC1", "CC1CCC(=O)CC1"):
        p = perceive({"name": "m", "smiles": smiles})[0]
        exo = cq_cal.exocyclic_double_bonds(p.mol, p.ring)
        assert exo == 1
        why = cq_cal.domain(c, p.ring_elements, p.substituents, exo)
        assert "exocyclic double bond" in why
        assert not cq_cal.widened_outside(c, p.ring_elements, p.substituents, exo)
    p = perceive({"name": "m", "smiles": "CC1CCCCC1"})[0]
    assert cq_cal.exocyclic_double_bonds(p.mol, p.ring) == 0
    assert cq_cal.domain(c, p.ring_elements, p.substituents, 0) == ""
