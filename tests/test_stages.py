"""The pipeline's house rules: one stage registry read everywhere, one table of result-relevant settings,
failure records that never break a later stage, calibration only at its own temperature, the tested
composite formula in the running code, and Hessians a user can open with ASE."""

from __future__ import annotations

import json
import math
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from chairqm import calibration as cq_cal
from chairqm import cli, config as cq_config, provenance, stages
from chairqm.stages import __main__ as runner
from chairqm.stages import records

ROOT = Path(__file__).resolve().parent.parent


# ------------------------------------------------------------------------------ one stage registry

def test_every_stage_has_a_module_and_a_rule_file():
    for s in stages.STAGES:
        assert callable(s.module.run), s.name
        assert callable(s.module.write_empty), s.name
        rule_file = ROOT / "chairqm" / "workflow" / "rules" / f"{s.name}.smk"
        assert re.search(rf"^rule {s.name}:", rule_file.read_text(), re.M), rule_file


def test_command_line_and_runner_read_the_registry():
    assert cli.available_stages() == stages.until_names()
    assert "refine" in cli.available_stages()
    until = next(a for a in cli.build_parser()._subparsers._group_actions[0].choices["run"]._actions
                 if a.dest == "until")
    for name in stages.until_names():
        assert name in until.help
    with pytest.raises(SystemExit):
        runner.main(["no-such-stage", "--config", "x.yaml"])


def test_workflow_rules_are_the_registry(tmp_path):
    """The rules Snakemake sees (parsed from the real workflow) are the registry's stages and one
    until_STAGE end point per stage the registry offers — nothing listed by hand elsewhere."""
    cfg = tmp_path / "c.yaml"
    cfg.write_text("molecules:\n  - {name: mch, smiles: CC1CCCCC1}\nsettings: {refine: {}}\n")
    proc = subprocess.run([sys.executable, "-m", "snakemake", "--list-rules", "--snakefile", str(ROOT / "Snakefile"),
                           "--directory", str(tmp_path), "--config", f"chairqm_config={cfg}"],
                          capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr[-2000:]
    rules = set(proc.stdout.split())
    expected = set(stages.names()) | {f"until_{n}" for n in stages.until_names()} | {"all"}
    assert rules == expected


def test_a_failure_record_of_any_stage_never_breaks_a_later_one(tmp_path, monkeypatch):
    """A refine failure used to make every later stage die with "'refine' is not in list"."""
    monkeypatch.chdir(tmp_path)
    (tmp_path / "m").mkdir()
    for failed in stages.names():
        if not stages.get(failed).per_molecule or failed == "intake":
            continue
        for stage in stages.names()[1:]:
            if not stages.get(stage).per_molecule:
                continue
            (tmp_path / "m" / "failed.json").write_text(json.dumps({"stage": failed, "reason": "x"}))
            runner.clear_stale_failure(stage, "m")
            cleared = not (tmp_path / "m" / "failed.json").exists()
            assert cleared == (stages.index(stage) <= stages.index(failed)), (failed, stage)


def test_failed_stage_is_retried_by_the_next_run(tmp_path):
    from chairqm.plan import make_plan
    cfg = cq_config.validate({"molecules": [{"name": "a", "smiles": "CC1CCCCC1"},
                                            {"name": "b", "smiles": "C1CCCCC1"}]})
    plan = make_plan(cfg)
    (tmp_path / "a").mkdir()
    (tmp_path / "a" / "failed.json").write_text(json.dumps({"stage": "ensemble", "reason": "x"}))
    assert cli.failed_stage_targets(tmp_path, plan, cfg["settings"]) == ["a/ensemble.json"]
    # a failed optional stage that this run does not ask for is not forced
    (tmp_path / "a" / "failed.json").write_text(json.dumps({"stage": "refine", "reason": "x"}))
    assert cli.failed_stage_targets(tmp_path, plan, cfg["settings"]) == []


def test_failure_outputs_have_the_success_headers(tmp_path, monkeypatch):
    """Every isolated stage's failure path writes its declared outputs, with the columns the success path
    writes (tables.py is the one home of both)."""
    from chairqm.stages import tables
    monkeypatch.chdir(tmp_path)
    settings = cq_config.validate({"molecules": [{"name": "m", "smiles": "C1CCCCC1"}],
                                   "settings": {"refine": {}}})["settings"]
    for s in stages.STAGES:
        if not (s.per_molecule and s.isolated):
            continue
        s.write_empty("m", settings, "boom")
        for path, is_folder in s.paths():
            target = tmp_path / "m" / path
            assert target.is_dir() if is_folder else target.is_file(), (s.name, path)
            if path.endswith(".csv"):
                cols = list(pd.read_csv(target).columns)
                assert cols == getattr(tables, path[:-4])(settings), (s.name, path)


# ------------------------------------------------------------------- result-relevant settings

def test_every_result_setting_is_a_schema_setting():
    schema_keys = set(cq_config.load_schema()["properties"]["settings"]["properties"])
    for stage, rs in provenance.RESULT_SETTINGS.items():
        assert stage in stages.names()
        assert set(rs.job) <= schema_keys, stage
        assert set(rs.record) <= set(rs.job), stage
    assert set(provenance.CALIBRATION_SETTINGS) <= schema_keys


def test_record_keys_ignore_settings_that_do_not_change_a_record():
    from chairqm.plan import make_plan
    base = {"molecules": [{"name": "m", "smiles": "CC1CCCCC1"}], "settings": {"refine": {}}}
    cfg = cq_config.validate(base)
    p = make_plan(cfg).get("m")
    key = records.record_key("refine", cfg["settings"], p, "xyz")
    wider = cq_config.validate({**base, "settings": {"refine": {"window_kcal": 9.0, "max_memory_mb": 4000}}})
    assert records.record_key("refine", wider["settings"], p, "xyz") == key
    other = cq_config.validate({**base, "settings": {"refine": {"basis": "def2-SVP"}}})
    assert records.record_key("refine", other["settings"], p, "xyz") != key
    new_tol = cq_config.validate({**base, "settings": {"unique": {"rmsd_a": 0.3}}})
    assert records.record_key("minima", new_tol["settings"], p, "xyz") == records.record_key("minima", cfg["settings"], p, "xyz")
    assert provenance.fingerprint("minima", new_tol["settings"], "1") != provenance.fingerprint("minima", cfg["settings"], "1")


def test_calibration_key_takes_the_schema_defaults():
    explicit = cq_config.validate({"molecules": [{"name": "m", "smiles": "C1CCCCC1"}]})["settings"]
    assert cq_cal.settings_key({}) == cq_cal.settings_key(explicit)


# ------------------------------------------------------------------- calibration temperature

def test_calibration_is_applied_only_at_its_own_temperature():
    from chairqm.stages.report import calibrate_rows
    settings = cq_config.validate({"molecules": [{"name": "m", "smiles": "C1CCCCC1"}]})["settings"]
    cal = cq_cal.load_matching(settings)
    if cal is None:
        pytest.skip("no packaged calibration for the default settings")
    rows = [{"status": "ok", "temperature_k": float(cal.temperature_k), "a_value_kcal": 1.7},
            {"status": "ok", "temperature_k": 350.0, "a_value_kcal": 1.7}]
    note = calibrate_rows(rows, settings)
    assert rows[0]["calibrated_kcal"] == pytest.approx(cq_cal.apply(cal, 1.7)[0])
    assert "calibrated_kcal" not in rows[1]
    assert "350 K are uncalibrated" in note


def test_calibration_file_can_be_chosen_and_its_fingerprint_follows_it(tmp_path, monkeypatch):
    target = tmp_path / "cal.json"
    target.write_text(cq_cal.packaged_path().read_text())
    monkeypatch.setenv("CHAIRQM_CALIBRATION", str(target))
    same = cq_cal.file_fingerprint()
    assert same == cq_cal.file_fingerprint(cq_cal.packaged_path())
    target.write_text("[]")
    assert cq_cal.file_fingerprint() != same
    assert cq_cal.load_all() == []


# ------------------------------------------------------------------- composite free energy

def _water():
    from ase.build import molecule
    return molecule("H2O")


def _conformer(folder: Path, cid: str, energy: float):
    """A conformer of the thermo stage's final list with a real (GFN2-xTB) Hessian of water."""
    pytest.importorskip("tblite")
    from chairqm import engine, vibrations
    from chairqm.stages.ensemble import Conformer
    atoms = _water()
    calc = engine.make_calculator("tblite", "GFN2-xTB", 0, 1, None, 1.0, 300.0)
    hess = vibrations.hessian(atoms, calc, folder / "work" / cid)
    records.write_vibrations(folder / "thermo" / f"{cid}.vib.json", atoms, hess)
    records.write_xyz(folder / "thermo" / f"{cid}.xyz", atoms)
    entry = {"conformer": cid, "energy_hartree": energy, "symmetry_number": 2, "geometry": f"thermo/{cid}.xyz",
             "vibrations": f"thermo/{cid}.vib.json"}
    th = {"model": "qrrho", "frequency_scale": 1.0, "imaginary_threshold_cm1": 15.0, "standard_state": "gas"}
    return Conformer(entry).attach(folder, th, 1)


def test_refined_free_energies_come_from_the_tested_composite_formula(tmp_path):
    from chairqm import refine as cq_refine
    from chairqm.stages.ensemble import apply_refinement
    a, b = _conformer(tmp_path, "c001", -5.07), _conformer(tmp_path, "c002", -5.06)
    pd.DataFrame([{"conformer": "c001", "status": "ok", "energy_hartree": -5.07, "energy_refined_hartree": -76.4,
                   "solvation_hartree": 0.002},
                  {"conformer": "c002", "status": "failed", "energy_hartree": -5.06, "energy_refined_hartree": "",
                   "solvation_hartree": ""}]).to_csv(tmp_path / "refine.csv", index=False)
    assert apply_refinement(tmp_path, [a, b])
    t = 298.15
    assert a.g(t) == cq_refine.composite(-76.4, -5.07, a.g(t, refined=False), 0.002)
    # not refined: its GFN2-xTB G moved by the mean DFT − GFN2-xTB offset of the refined ones
    assert b.g(t) == pytest.approx(b.g(t, refined=False) + (-76.4 + 0.002 + 5.07), abs=1e-12)


# ------------------------------------------------------------------- Hessians for ASE users

def test_published_hessian_opens_with_ase_and_gives_our_frequencies(tmp_path):
    """ASE's own VibrationsData reads the file; its frequencies (no projection of translations and
    rotations) agree with chairqm's projected ones for the three real vibrations of water."""
    from ase.vibrations import VibrationsData

    from chairqm import vibrations
    c = _conformer(tmp_path, "c001", -5.07)
    data = VibrationsData.read(str(tmp_path / "thermo" / "c001.vib.json"))
    ase_freqs = np.sort(np.real(data.get_frequencies()))[-3:]
    ours, _ = vibrations.frequencies(data.get_hessian_2d(), data.get_atoms())
    assert len(ours) == 3
    assert np.allclose(ase_freqs, ours, atol=2.0)
    # GFN2-xTB water bends near 1500-1600 cm-1 and stretches above 3400 cm-1 (from memory; experiment
    # 1595, 3657, 3756 cm-1, NIST CCCBDB) — a sanity check that the stored Hessian is in eV/Å²
    assert 1400 < ours[0] < 1700 and ours[1] > 3300
    assert math.isfinite(c.g(298.15))


def test_light_hessian_reader_gives_what_ase_reads(tmp_path):
    """records.read_vibrations (no ase.vibrations import) returns exactly ASE's VibrationsData contents."""
    from ase.vibrations import VibrationsData
    _conformer(tmp_path, "c001", -5.07)
    path = tmp_path / "thermo" / "c001.vib.json"
    atoms, hess = records.read_vibrations(path)
    data = VibrationsData.read(str(path))
    assert np.array_equal(hess, data.get_hessian_2d())
    assert np.array_equal(atoms.positions, data.get_atoms().positions)
    assert list(atoms.numbers) == list(data.get_atoms().numbers)


def test_every_chair_gap_is_given_on_one_axis():
    """G(second) − G(preferred) of the computed chairs: an estimate that prefers the other chair is
    negative on it (common practice for a signed difference), whatever its own sign convention."""
    from chairqm.ensemble import on_axis
    assert on_axis(1.2, "s1=equatorial", "s1=equatorial") == 1.2
    assert on_axis(1.2, "s1=axial", "s1=equatorial") == -1.2
    assert on_axis(0.0, "s1=axial", "s1=equatorial") == 0.0 and str(on_axis(0.0, "a", "b")) == "0.0"
    assert on_axis(None, "s1=axial", "s1=equatorial") is None


def test_no_stage_opens_another_stages_work_folder():
    """work/ holds a stage's private per-conformer records; the stages after it read declared outputs."""
    own = {"minima": {"opt"}, "thermo": {"thermo", "freq"}, "refine": {"refine"}}
    for s in stages.STAGES:
        src = Path(s.module.__file__).read_text()
        used = set(re.findall(r'"work"\s*/\s*"(\w+)"', src)) | set(re.findall(r"work/(\w+)", src))
        assert used <= own.get(s.name, set()), (s.name, used)


def test_the_first_failure_stays_the_recorded_cause(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    settings = cq_config.validate({"molecules": [{"name": "m", "smiles": "C1CCCCC1"}]})["settings"]
    runner.record_failure("seeds", "m", settings, "embedding broke")
    runner.record_failure("thermo", "m", settings, "empty input")
    assert runner.failure("m") == {"stage": "seeds", "reason": "embedding broke"}
    assert (tmp_path / "m" / "thermo.csv").is_file()            # the later stage's outputs are still written


def _square(x):
    return x * x


@pytest.mark.parametrize("threads", [1, 2])
def test_budgeted_map_starts_nothing_once_the_budget_is_spent(threads):
    out = records.budgeted_map(_square, [3, 3, 3, 3, 3, 3], threads, budget=10, cost=lambda r: r)
    done = [r for r in out if r is not None]
    assert done and all(r == 9 for r in done)
    assert sum(done) >= 10 and len(done) <= 2 + threads     # stopped soon after the total passed 10
    assert out[-1] is None                                  # 6 × 9 = 54 > 10: the last one never ran
    assert records.budgeted_map(_square, [1, 2], threads, budget=0, cost=lambda r: r) == [1, 4]


def test_jobs_rerun_when_the_package_code_changes_under_the_same_version(monkeypatch):
    """The rule fingerprints carry the version and a digest of the package's sources: an edited package
    with an unchanged version number reruns the jobs (which reuse every record whose inputs did not change)."""
    from chairqm import __version__
    v = provenance.code_version()
    assert v == f"{__version__}+{provenance.code_digest()}"
    settings = cq_config.settings_defaults()
    before = provenance.fingerprint("minima", settings, v)
    monkeypatch.setattr(provenance, "code_digest", lambda: "f" * 16)
    assert provenance.code_version() != v
    assert provenance.fingerprint("minima", settings, provenance.code_version()) != before
