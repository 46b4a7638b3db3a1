"""Calibration of computed A-values: fit statistics, prediction intervals, the settings key and the shipped file."""

import math

import numpy as np
import pandas as pd
import pytest

from chairqm import calibration as cal
from chairqm import config as cq_config
from chairqm.errors import ChairqmError

# Hand-worked example (worked by hand below): computed x = 1, 2, 3; experimental y = 1, 3, 2.
#   x̄ = 2, ȳ = 2, Sxx = 2, Syy = 2, Sxy = (-1)(-1) + 0·1 + 1·0 = 1
#   experimental = a + b·computed:  b = Sxy/Sxx = 0.5, a = ȳ - b·x̄ = 1
#   fitted 1.5, 2.0, 2.5; residuals -0.5, 1.0, -0.5; SSR = 1.5; s = sqrt(1.5 / (3 - 2)) = 1.224745
#   errors computed - experimental: 0, -1, 1 → MAE = 2/3, MSE = 0, RMSE = sqrt(2/3) = 0.816497
#   R² = Sxy² / (Sxx·Syy) = 0.25
#   reverse fit computed = a' + b'·experimental: b' = Sxy/Syy = 0.5, a' = x̄ - b'·ȳ = 1
X3 = [1.0, 2.0, 3.0]
Y3 = [1.0, 3.0, 2.0]
# Student t quantiles t_{0.975, df} (two-sided 95 %), standard statistical tables (from memory):
T975 = {1: 12.706, 3: 3.182, 10: 2.228, 25: 2.060}


def test_fit_statistics_hand_worked():
    c = cal.fit(X3, Y3)
    assert c.n == 3
    assert c.slope == pytest.approx(0.5, abs=1e-12)
    assert c.intercept == pytest.approx(1.0, abs=1e-12)
    assert c.residual_sd_kcal == pytest.approx(math.sqrt(1.5), abs=1e-12)
    assert c.mae_kcal == pytest.approx(2.0 / 3.0, abs=1e-12)
    assert c.mse_kcal == pytest.approx(0.0, abs=1e-12)
    assert c.rmse_kcal == pytest.approx(math.sqrt(2.0 / 3.0), abs=1e-12)
    assert c.r_squared == pytest.approx(0.25, abs=1e-12)
    assert c.x_mean_kcal == pytest.approx(2.0) and c.sxx_kcal2 == pytest.approx(2.0)
    assert c.reverse_fit["slope"] == pytest.approx(0.5) and c.reverse_fit["intercept"] == pytest.approx(1.0)


def test_mean_signed_error_sign_is_computed_minus_experimental():
    # computed all 0.3 kcal/mol above experiment: MSE = +0.3, MAE = RMSE = 0.3 (definition, common practice)
    exp = [0.5, 1.0, 2.0, 3.0]
    c = cal.fit([e + 0.3 for e in exp], exp)
    assert c.mse_kcal == pytest.approx(0.3) and c.mae_kcal == pytest.approx(0.3) and c.rmse_kcal == pytest.approx(0.3)
    assert c.slope == pytest.approx(1.0) and c.intercept == pytest.approx(-0.3)
    assert c.residual_sd_kcal == pytest.approx(0.0, abs=1e-12)


@pytest.mark.parametrize("df", sorted(T975))
def test_t_quantile_matches_table(df):
    rng = np.random.default_rng(df)
    x = rng.uniform(0, 5, df + 2)
    c = cal.fit(x, x + rng.normal(0, 0.3, x.size))
    assert c.t_quantile == pytest.approx(T975[df], abs=6e-4)


def test_prediction_interval_hand_worked():
    c = cal.fit(X3, Y3)
    t = T975[1]
    s = math.sqrt(1.5)
    # at x0 = x̄ = 2: ŷ = 2, half-width t·s·sqrt(1 + 1/3)
    y, lo, hi = cal.apply(c, 2.0)
    assert y == pytest.approx(2.0)
    assert (hi - lo) / 2 == pytest.approx(t * s * math.sqrt(4.0 / 3.0), rel=1e-4)
    # at x0 = 4: ŷ = 1 + 0.5·4 = 3, (x0 - x̄)²/Sxx = 4/2 = 2 → sqrt(1 + 1/3 + 2) = sqrt(10/3)
    y, lo, hi = cal.apply(c, 4.0)
    assert y == pytest.approx(3.0)
    assert hi - y == pytest.approx(t * s * math.sqrt(10.0 / 3.0), rel=1e-4)
    assert y - lo == pytest.approx(hi - y)


def test_fit_and_interval_against_numpy_polyfit():
    # an independent route: numpy.polyfit for the line, residual SD and the interval formula from its residuals
    rng = np.random.default_rng(7)
    x = rng.uniform(0.0, 5.0, 12)
    y = 0.2 + 0.8 * x + rng.normal(0.0, 0.25, x.size)
    c = cal.fit(x, y)
    b, a = np.polyfit(x, y, 1)
    resid = y - np.polyval([b, a], x)
    s = math.sqrt((resid ** 2).sum() / (x.size - 2))
    assert c.slope == pytest.approx(b, rel=1e-10) and c.intercept == pytest.approx(a, rel=1e-10, abs=1e-12)
    assert c.residual_sd_kcal == pytest.approx(s, rel=1e-10)
    x0 = 4.2
    sxx = ((x - x.mean()) ** 2).sum()
    half = T975[10] * s * math.sqrt(1 + 1 / x.size + (x0 - x.mean()) ** 2 / sxx)
    yhat, lo, hi = cal.apply(c, x0)
    assert yhat == pytest.approx(np.polyval([b, a], x0), rel=1e-10)
    assert hi - yhat == pytest.approx(half, rel=2e-4)     # 2e-4: the table t is given to 4 figures


def test_interval_covers_about_95_percent_of_new_points():
    # frequentist meaning of a 95 % prediction interval (Draper and Smith 1998, §3.1): simulate fits and
    # new points from a known line; the interval must cover close to 95 % of them
    rng = np.random.default_rng(11)
    hits, trials = 0, 2000
    for _ in range(trials):
        x = rng.uniform(0, 4, 8)
        y = 0.5 + 0.9 * x + rng.normal(0, 0.3, 8)
        c = cal.fit(x, y)
        x0 = rng.uniform(0, 4)
        y0 = 0.5 + 0.9 * x0 + rng.normal(0, 0.3)
        _, lo, hi = cal.apply(c, x0)
        hits += lo <= y0 <= hi
    assert 0.93 <= hits / trials <= 0.97


def test_loo_scale_is_the_conformal_quantile_of_refitted_leave_one_out_misses():
    # an independent route to q: refit the line without each point (numpy.polyfit), take its miss at that
    # point, scale by sqrt(1 - h_i) and pick the ceil(0.95 (n + 1))-th smallest (Vovk, Gammerman and Shafer
    # 2005, from memory); checked on the shipped gas-phase calibration's own points
    c = next(c for c in cal.load_all() if not c.settings.get("solvent") and not c.settings.get("refine"))
    pts = [p for p in c.points if p.get("used") == "used"]
    x = np.array([p["computed_kcal"] for p in pts])
    y = np.array([p["experimental_kcal"] for p in pts])
    n = x.size
    h = 1 / n + (x - x.mean()) ** 2 / ((x - x.mean()) ** 2).sum()
    misses = []
    for i in range(n):
        keep = np.arange(n) != i
        misses.append(abs(y[i] - np.polyval(np.polyfit(x[keep], y[keep], 1), x[i])) * math.sqrt(1 - h[i]))
    k = math.ceil(0.95 * (n + 1))
    assert c.loo_scale_kcal == pytest.approx(sorted(misses)[k - 1], rel=1e-9)
    assert cal.loo_scale(x, y) == pytest.approx(c.loo_scale_kcal, rel=1e-12)
    assert c.interval_scale_kcal == pytest.approx(max(c.t_quantile * c.residual_sd_kcal, c.loo_scale_kcal))


def test_loo_scale_needs_enough_points_for_its_quantile():
    # ceil(0.95 (n + 1)) <= n needs n >= 19; with fewer the interval is the normal-theory one
    rng = np.random.default_rng(3)
    for n, has in ((18, False), (19, True)):
        x = rng.uniform(0, 4, n)
        c = cal.fit(x, x + rng.normal(0, 0.3, n))
        assert (c.loo_scale_kcal is not None) is has
    x = rng.uniform(0, 4, 10)
    c = cal.fit(x, x + rng.normal(0, 0.3, 10))
    assert cal.interval_half_width(c, 2.0) == pytest.approx(
        c.t_quantile * c.residual_sd_kcal * math.sqrt(1 + 1 / 10 + (2.0 - c.x_mean_kcal) ** 2 / c.sxx_kcal2))


def test_interval_keeps_95_percent_coverage_when_the_errors_are_heavy_tailed():
    # a conformal interval covers a new exchangeable point with probability >= 95 % whatever the error
    # distribution (Vovk, Gammerman and Shafer 2005; Barber et al., Ann. Statist. 2021, from memory); the
    # interval used is never narrower. Errors here: Student t with 2 degrees of freedom (infinite variance),
    # 26 points per fit as in the shipped calibrations; 2000 trials, Monte Carlo SE of the rate about 0.005
    rng = np.random.default_rng(5)
    hits, trials = 0, 2000
    for _ in range(trials):
        x = rng.uniform(0, 4, 27)
        y = 0.5 + 0.9 * x + 0.2 * rng.standard_t(2, 27)
        c = cal.fit(x[:26], y[:26])
        _, lo, hi = cal.apply(c, x[26])
        hits += lo <= y[26] <= hi
    assert hits / trials >= 0.94


def test_fit_rejects_too_few_or_degenerate_points():
    with pytest.raises(ChairqmError, match="at least 3"):
        cal.fit([1.0, 2.0], [1.0, 2.0])
    with pytest.raises(ChairqmError, match="all computed values are equal"):
        cal.fit([1.0, 1.0, 1.0], [0.5, 1.0, 2.0])
    with pytest.raises(ChairqmError, match="missing"):
        cal.fit([1.0, float("nan"), 2.0, 3.0], [1.0, 2.0, 3.0, 4.0])


def test_apply_missing_value_gives_nan():
    c = cal.fit(X3, Y3)
    assert all(math.isnan(v) for v in cal.apply(c, None))
    assert all(math.isnan(v) for v in cal.apply(c, float("nan")))


def _defaults():
    return cq_config.validate({"molecules": [{"name": "m", "smiles": "CC1CCCCC1"}]})["settings"]


def test_settings_key_defaults_and_normalisation():
    k = cal.settings_key(_defaults())
    assert k == {"engine": "tblite", "method": "GFN2-xTB", "solvent": None, "thermo_model": "qrrho",
                 "frequency_scale": 1.0, "refine": None}
    assert cal.settings_key({}) == k                       # missing settings take the schema defaults
    assert cal.settings_key({"settings": _defaults()}) == k  # a whole configuration works too
    w = cal.settings_key({"solvent": {"model": "ALPB", "name": "Water"}})
    assert w["solvent"] == "alpb:water"
    # settings that do not change free energies are not part of the key
    assert cal.settings_key({**_defaults(), "temperatures_k": [200.0], "seeds": {"twist_boats": False}}) == k


def test_load_matching_none_for_unmatched_settings(tmp_path):
    path = tmp_path / "cal.json"
    c = cal.fit(X3, Y3, settings=cal.settings_key({}))
    cal.save(c, path)
    assert cal.load_matching({}, path=path) is not None
    for other in ({"engine": "xtb-python"}, {"method": "GFN1-xTB"},
                  {"solvent": {"model": "alpb", "name": "water"}}, {"thermo": {"model": "rrho"}},
                  {"thermo": {"frequency_scale": 0.97}}, {"refine": {}}):
        assert cal.load_matching(other, path=path) is None, other
    assert cal.load_matching({}, path=tmp_path / "absent.json") is None


def test_refined_runs_have_their_own_calibration_key(tmp_path):
    pytest.importorskip("pyscf")
    default = cal.settings_key({"refine": {}})["refine"]
    assert default is not None and "b3lyp" in default and "def2-tzvp" in default
    # the DFT level is in the key; the selection window is not (it does not change a refined energy)
    assert cal.settings_key({"refine": {"window_kcal": 1.0}})["refine"] == default
    assert cal.settings_key({"refine": {"basis": "def2-SVP"}})["refine"] != default
    # with a solvent the solvent model is part of it
    assert cal.settings_key({"refine": {}, "solvent": {"model": "alpb", "name": "water"}})["refine"] != default
    path = tmp_path / "cal.json"
    cal.save(cal.fit(X3, Y3, settings=cal.settings_key({})), path)
    cal.save(cal.fit(X3, [2.0, 4.0, 3.0], settings=cal.settings_key({"refine": {}})), path)
    assert len(cal.load_all(path)) == 2
    assert cal.load_matching({"refine": {}}, path=path).intercept == pytest.approx(2.0)
    assert cal.load_matching({"refine": {"basis": "def2-SVP"}}, path=path) is None
    assert cal.load_matching({}, path=path).intercept != pytest.approx(2.0)


def test_save_replaces_same_key_and_keeps_others(tmp_path):
    path = tmp_path / "cal.json"
    gas = cal.settings_key({})
    water = cal.settings_key({"solvent": {"model": "alpb", "name": "water"}})
    cal.save(cal.fit(X3, Y3, settings=gas), path)
    cal.save(cal.fit(X3, [2.0, 4.0, 3.0], settings=water), path)
    cal.save(cal.fit([1.0, 2.0, 3.0], [1.0, 2.0, 3.0], settings=gas), path)
    items = cal.load_all(path)
    assert len(items) == 2
    assert cal.load_matching({}, path=path).slope == pytest.approx(1.0)
    assert cal.load_matching({"solvent": {"model": "alpb", "name": "water"}}, path=path).intercept == pytest.approx(2.0)
    with pytest.raises(ChairqmError):
        cal.save(cal.fit(X3, Y3), path)          # no settings key: would match nothing


def test_shipped_calibration_matches_default_settings():
    c = cal.load_matching(_defaults())
    assert c is not None, "chairqm/data/calibration.json has no calibration for tblite / GFN2-xTB / gas / qrrho / 1.0"
    # a fit made by today's settings_key carries refine: None (unrefined); older entries lack the key;
    # the optimiser its minima came from is stored beside the key, and is today's default
    from chairqm.optimize import DEFAULT_OPTIMIZER
    assert {k: v for k, v in c.settings.items() if k != "refine"} == {
        "engine": "tblite", "method": "GFN2-xTB", "solvent": None, "thermo_model": "qrrho", "frequency_scale": 1.0,
        "optimizer": DEFAULT_OPTIMIZER}
    assert c.settings.get("refine") is None
    assert c.n >= 20 and c.temperature_k == pytest.approx(298.15)
    # the stored statistics are those of the stored points (recomputed here from the table)
    pts = pd.DataFrame(c.points)
    used = pts[pts["used"] == "used"]
    assert len(used) == c.n
    again = cal.fit(used["computed_kcal"], used["experimental_kcal"])
    for f in ("slope", "intercept", "residual_sd_kcal", "mae_kcal", "mse_kcal", "rmse_kcal"):
        assert getattr(again, f) == pytest.approx(getattr(c, f), rel=1e-9, abs=1e-12), f
    y, lo, hi = cal.apply(c, 1.5)
    assert lo < y < hi
    # the default calibration rests on the package table as it is now (rebuilt from the published
    # compilation, issue 16 item 3): every used point's experimental value and source are the table's
    from chairqm import avalues
    for p in c.points:
        if p["used"] == "used":
            row = avalues.lookup(p["fragment"])
            assert row is not None, p["molecule"]
            assert p["experimental_kcal"] == pytest.approx(float(row["a_value_kcal"]), abs=1e-12), p["molecule"]
            assert p["source"] == row["source"] and bool(p["from_memory"]) == bool(row["from_memory"])


def test_every_shipped_calibration_point_names_its_source():
    for c in cal.load_all(cal.packaged_path()):
        for p in c.points:
            if p["used"] == "used":
                assert str(p["source"]).strip(), (c.settings, p["molecule"])
                assert p["experimental_kcal"] is not None and p["computed_kcal"] is not None


def test_shipped_calibration_has_the_default_refinement_level():
    pytest.importorskip("pyscf")
    c = cal.load_matching({**_defaults(), "refine": {}})
    assert c is not None, "no calibration for refined runs at the default DFT level"
    assert c.settings["refine"] == cal.settings_key({"refine": {}})["refine"]
    assert c.n >= 20
    pts = pd.DataFrame(c.points)
    used = pts[pts["used"] == "used"]
    again = cal.fit(used["computed_kcal"], used["experimental_kcal"])
    assert again.slope == pytest.approx(c.slope, rel=1e-9) and again.rmse_kcal == pytest.approx(c.rmse_kcal, rel=1e-9)
    # the refined and unrefined computed values differ: the two calibrations are fits to different numbers
    assert c.slope != pytest.approx(cal.load_matching(_defaults()).slope, rel=1e-6)
    assert cal.load_matching({**_defaults(), "refine": {"basis": "def2-SVP"}}) is None


def test_shipped_calibration_does_not_match_other_settings():
    # ALPB water, chloroform and DMSO ship (tests/test_calibration_media.py); toluene and GBSA do not
    assert cal.load_matching({**_defaults(), "solvent": {"model": "alpb", "name": "toluene"}}) is None
    assert cal.load_matching({**_defaults(), "solvent": {"model": "gbsa", "name": "water"}}) is None
    assert cal.load_matching({**_defaults(), "thermo": {"model": "rrho"}}) is None


def test_calibrate_run_on_a_small_finished_run(tmp_path):
    # a finished run folder made by hand: molecule.json from the intake stage's own perception, a summary.csv
    from chairqm.avalues import a_value
    from chairqm.molecule import perceive
    mols = {"ref-exp-methyl": ("CC1CCCCC1", 1.9), "ref-exp-chloro": ("ClC1CCCCC1", 0.2),
            "ref-exp-phenyl": ("c1ccc(cc1)C1CCCCC1", 2.5), "ref-exp-methoxy": ("COC1CCCCC1", 0.3),
            "ref-exp-broken": ("BrC1CCCCC1", None), "ring-thp": ("CC1CCCCO1", 1.0)}
    rows = []
    for name, (smi, computed) in mols.items():
        p = perceive({"name": name, "smiles": smi})[0]
        (tmp_path / name).mkdir()
        (tmp_path / name / "molecule.json").write_text(p.to_json())
        rows.append({"molecule": name, "temperature_k": 298.15, "status": "ok" if computed is not None else "failed",
                     "reason": "" if computed is not None else "minima stage failed", "a_value_kcal": computed})
    pd.DataFrame(rows).to_csv(tmp_path / "summary.csv", index=False)
    cfg = cq_config.validate({"molecules": [{"name": n, "smiles": s} for n, (s, _) in mols.items()]})
    c = cal.calibrate_run(tmp_path, cfg)
    t = c.table().set_index("molecule")
    assert c.n == 4
    assert t.loc["ref-exp-broken", "used"].startswith("run status failed")
    assert t.loc["ring-thp", "used"] == "not a monosubstituted cyclohexane"
    assert t.loc["ref-exp-methyl", "experimental_kcal"] == pytest.approx(a_value("[*]C"))
    assert t.loc["ref-exp-chloro", "error_kcal"] == pytest.approx(0.2 - a_value("[*]Cl"))
    used = ["ref-exp-methyl", "ref-exp-chloro", "ref-exp-phenyl", "ref-exp-methoxy"]
    ref = cal.fit([mols[m][1] for m in used], [a_value(t.loc[m, "fragment"]) for m in used])
    assert c.slope == pytest.approx(ref.slope) and c.residual_sd_kcal == pytest.approx(ref.residual_sd_kcal)
    from chairqm.optimize import DEFAULT_OPTIMIZER
    assert c.settings == {**cal.settings_key({}), "optimizer": DEFAULT_OPTIMIZER}   # the optimiser beside the key


def test_calibrate_run_needs_a_finished_run(tmp_path):
    cfg = cq_config.validate({"molecules": [{"name": "m", "smiles": "CC1CCCCC1"}]})
    with pytest.raises(ChairqmError, match="summary.csv"):
        cal.calibrate_run(tmp_path, cfg)


def test_applies_only_at_the_calibration_temperature():
    c = cal.fit(X3, Y3, settings=cal.settings_key({}))
    assert cal.applies_at(c, 298.15) and cal.applies_at(c, 298.0)
    assert not cal.applies_at(c, 250.0) and not cal.applies_at(c, 310.0)


def test_file_fingerprint_changes_with_the_file(tmp_path):
    path = tmp_path / "cal.json"
    assert cal.file_fingerprint(path) == ""
    cal.save(cal.fit(X3, Y3, settings=cal.settings_key({})), path)
    first = cal.file_fingerprint(path)
    cal.save(cal.fit(X3, [2.0, 4.0, 3.0], settings=cal.settings_key({})), path)
    assert first and cal.file_fingerprint(path) != first


def test_calibrate_refine_writes_the_reference_configuration_with_refinement(tmp_path):
    from pathlib import Path

    import yaml

    from chairqm import cli

    ref = Path(cli.project_root()) / "configs" / "reference.yaml"
    derived = cli._with_refinement(ref, "{basis: def2-TZVP}", tmp_path / "out")
    cfg = cq_config.load(derived)
    assert cfg["settings"]["refine"] == {"basis": "def2-TZVP"}
    assert [m["name"] for m in cfg["molecules"]] == [m["name"] for m in yaml.safe_load(ref.read_text())["molecules"]]
    assert cq_config.load(cli._with_refinement(ref, "{}", tmp_path / "o2"))["settings"]["refine"] == {}
    for bad in ("[1, 2]", "{basis: [", "just text"):
        with pytest.raises(ChairqmError, match="--refine"):
            cli._with_refinement(ref, bad, tmp_path / "o3")
    # a user's mistake is an input error (exit 2), before anything runs
    assert cli.main(["calibrate", str(ref), "--out", str(tmp_path / "o4"), "--refine", "[1]"]) == 2


def test_the_calibration_applies_only_inside_its_domain():
    # fitted on monosubstituted cyclohexanes: heterocycles, several groups, fused rings and group types
    # absent from the fit are left uncalibrated, each with its reason
    from types import SimpleNamespace as NS

    from chairqm import calibration as cq_cal
    cal = cq_cal.load_all(cq_cal.packaged_path())[0]
    me = [NS(id="s1", fragment="[*]C", ring_atom=0)]
    assert cq_cal.domain(cal, ["C"] * 6, me) == ""
    assert "ring O atom" in cq_cal.domain(cal, ["C", "C", "C", "C", "C", "O"], me)
    assert "2 groups" in cq_cal.domain(cal, ["C"] * 6, me + [NS(id="s2", fragment="[*]C", ring_atom=3)])
    assert "fused" in cq_cal.domain(cal, ["C"] * 6, [NS(id="s1", fragment="[*]CCCC[*]", ring_atom=0)] * 2)
    fitted = {cq_cal._first_element(p["fragment"]) for p in cal.points}
    assert "Ge" not in fitted
    assert "attached through Ge" in cq_cal.domain(cal, ["C"] * 6, [NS(id="s1", fragment="[*][GeH3]", ring_atom=0)])
