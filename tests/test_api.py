"""The Python API (chairqm.api) and the command line over it: the same errors with the same messages,
the progress lines and the answers printed at the end, several groups in one `chairqm avalue` table, and
the README's notebook example run as it is written."""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest

from chairqm import api, cli
from chairqm.errors import ChairqmError

ROOT = Path(__file__).resolve().parent.parent
PY = sys.executable


def _cli_errors(argv, capsys) -> list[str]:
    assert cli.main(argv) == cli.EXIT_INPUT
    err = capsys.readouterr().err.splitlines()
    assert err and all(line.startswith("chairqm: error: ") for line in err), err
    return [line[len("chairqm: error: "):] for line in err]


def _write(path: Path, text: str) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text)
    return path


@pytest.mark.parametrize("text", [
    "molecules:\n  - {name: bad, smiles: C1CC(}\n",                       # not a SMILES
    "molecules:\n  - {name: mch, smiles: CC1CCCCC1}\nsettings: {temprature_k: [298.15]}\n",   # misspelt key
    "molecules:\n  - {name: benzene, smiles: c1ccccc1}\n",                # no saturated six-membered ring
])
def test_api_raises_the_messages_the_command_line_prints(text, tmp_path, capsys):
    cfg = _write(tmp_path / "c.yaml", text)
    with pytest.raises(ChairqmError) as exc:
        api.check(cfg)
    assert _cli_errors(["check", str(cfg)], capsys) == str(exc.value).splitlines()
    with pytest.raises(ChairqmError) as exc_run:
        api.run(cfg, tmp_path / "out")
    assert str(exc_run.value) == str(exc.value)
    assert _cli_errors(["run", str(cfg), "--out", str(tmp_path / "out2")], capsys) == str(exc.value).splitlines()


def test_avalue_errors_are_the_command_lines(tmp_path, capsys):
    for bad in ("CC", "[*]C[*]"):                          # no attachment point; two of them
        with pytest.raises(ChairqmError) as exc:
            api.avalue(bad, out=tmp_path / "av")
        assert _cli_errors(["avalue", bad, "--out", str(tmp_path / "av")], capsys) == str(exc.value).splitlines()
    with pytest.raises(ChairqmError, match="MODEL:NAME"):
        api.avalue("[*]C", solvent="water", out=tmp_path / "av")
    assert any("MODEL:NAME" in line for line in _cli_errors(["avalue", "[*]C", "--solvent", "water"], capsys))


def test_run_rejects_an_unknown_stage_and_a_mapping_without_out(tmp_path):
    cfg = _write(tmp_path / "c.yaml", "molecules:\n  - {name: mch, smiles: CC1CCCCC1}\n")
    with pytest.raises(ChairqmError, match="the stages are intake, seeds"):
        api.run(cfg, tmp_path / "out", until="nonsense")
    with pytest.raises(ChairqmError, match="needs an output folder"):
        api.run({"molecules": [{"name": "mch", "smiles": "CC1CCCCC1"}]})


def test_check_takes_a_mapping_and_resolves_structure_files_against_the_current_folder(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    res = api.check({"molecules": [{"name": "mch", "smiles": "CC1CCCCC1"}]})
    assert "mch" in res.table and "1 molecule(s)" in res.settings_line
    # a mapping handed to run is written as OUT/run-config.yaml with the file path made absolute
    xyz = _write(tmp_path / "in" / "w.xyz", "3\n\nO 0 0 0\nH 0 0 0.96\nH 0.93 0 -0.24\n")
    path = api._as_config_path({"molecules": [{"name": "w", "file": "in/w.xyz", "charge": 0}]}, tmp_path / "o")
    import yaml
    assert yaml.safe_load(path.read_text())["molecules"][0]["file"] == str(xyz)


def test_progress_lines_come_from_the_output_folder(tmp_path):
    """One line per molecule and stage when the stage's first output appears after the start, FAILED with
    the reason when a failure record appears, nothing for files older than the run."""
    from chairqm import config as cq_config
    from chairqm.plan import make_plan
    plan = make_plan(cq_config.validate({"molecules": [{"name": "a", "smiles": "CC1CCCCC1"},
                                                       {"name": "b", "smiles": "C1CCCCC1"}]}))
    settings = cq_config.validate({"molecules": [{"name": "a", "smiles": "CC1CCCCC1"}]})["settings"]
    old = _write(tmp_path / "b" / "molecule.json", "{}")
    os.utime(old, (time.time() - 3600, time.time() - 3600))        # from an earlier run
    lines = []
    watcher = api.Progress(tmp_path, plan, settings, None, time.time(), lines.append)
    watcher.poll()
    assert lines == []
    from chairqm import stages
    _write(tmp_path / "a" / "molecule.json", "{}")
    watcher.poll()
    assert lines == []                                             # substituents.csv not there yet
    for stage in ("intake", "seeds"):
        for path, is_folder in stages.get(stage).paths():
            if not is_folder:
                _write(tmp_path / "a" / path, "")
    _write(tmp_path / "b" / "failed.json", json.dumps({"stage": "seeds", "reason": "RuntimeError: injected"}))
    _write(tmp_path / "b" / "seeds.csv", "")
    watcher.poll()
    watcher.poll()                                                 # nothing printed twice
    text = "\n".join(lines)
    assert len(lines) == 3, text
    assert any("intake" in l and " a " in l and l.endswith("done") for l in lines)
    assert any("seeds" in l and " a " in l and l.endswith("done") for l in lines)
    assert any("seeds" in l and " b " in l and "FAILED: RuntimeError: injected" in l for l in lines)
    # with --until seeds, later stages are not watched
    assert {s for s, _, _ in api.Progress(tmp_path, plan, settings, "seeds", 0, print).watch} == {"intake", "seeds"}


def test_answers_table_shows_verdicts_and_flag_reasons():
    summary = pd.DataFrame([
        {"molecule": "m1", "temperature_k": 298.15, "status": "ok", "reason": "", "preferred_family": "chair s1=equatorial",
         "chair_dg_kcal": 1.7354, "a_value_kcal": 1.7354, "twist_boat_population": 0.0012, "flag": False,
         "flag_reason": "", "calibrated_kcal": 1.6049, "interval_low_kcal": 1.05, "interval_high_kcal": 2.16,
         "calibrated_quantity": "a_value_kcal"},
        {"molecule": "m2", "temperature_k": 298.15, "status": "ok", "reason": "", "preferred_family": "chair s1=axial",
         "chair_dg_kcal": 0.4, "a_value_kcal": math.nan, "twist_boat_population": 0.2, "flag": True,
         "flag_reason": "outside the additive model", "calibrated_kcal": math.nan, "interval_low_kcal": math.nan,
         "interval_high_kcal": math.nan, "calibrated_quantity": ""},
        {"molecule": "m3", "temperature_k": 298.15, "status": "failed", "reason": "no conformer survived",
         "flag": True, "flag_reason": "no result"},
    ])
    text = cli.answers_table(summary)
    lines = text.splitlines()
    m1 = next(l for l in lines if l.startswith("m1"))
    assert "chair s1=equatorial" in m1 and "1.74" in m1 and "1.60 (1.05 to 2.16)" in m1 and "0.1 %" in m1
    m2 = next(l for l in lines if l.startswith("m2"))
    assert "FLAG" in m2 and "20.0 %" in m2
    assert "m2 (298.15 K): outside the additive model" in text
    assert "FAILED: no conformer survived" in next(l for l in lines if l.startswith("m3"))


def test_molecule_of_a_result_names_the_molecules(tmp_path):
    (tmp_path / "a").mkdir()
    r = api.RunResult(tmp_path, molecules=["a"])
    with pytest.raises(ChairqmError, match="the molecules are a"):
        r.molecule("b")
    with pytest.raises(ChairqmError, match="no summary.csv"):
        r.summary


# ------------------------------------------------------------------------------ end to end (slow)

@pytest.mark.slow
def test_readme_python_example_runs_as_written(tmp_path):
    """The README's "From Python" block, run unchanged in an empty folder."""
    text = (ROOT / "README.md").read_text()
    block = text.split("### From Python", 1)[1].split("```python\n", 1)[1].split("```", 1)[0]
    script = _write(tmp_path / "example.py", block)
    env = {k: v for k, v in os.environ.items() if k not in ("CHAIRQM_FAULTS", "CHAIRQM_VERBOSE")}
    env["OMP_NUM_THREADS"] = "1"
    proc = subprocess.run([PY, str(script)], cwd=tmp_path, capture_output=True, text=True, env=env, timeout=1800)
    assert proc.returncode == 0, proc.stdout[-2000:] + proc.stderr[-3000:]
    line = next(l for l in proc.stdout.splitlines() if l.startswith("A(CN) ="))
    a_cn = float(line.split("=")[1].split()[0])
    # A(CN) = 0.2 kcal/mol (Eliel, Wilen and Mander, Stereochemistry of Organic Compounds, 1994, from
    # memory); GFN2-xTB's error on small polar groups is a few tenths (README caution): a 0.6 window
    assert -0.4 < a_cn < 0.8
    summary = pd.read_csv(tmp_path / "results" / "api-run" / "summary.csv")
    # cis-1-tert-butyl-4-methylcyclohexane: the tert-butyl group (A ~ 4.9, package table) locks the
    # ring with itself equatorial, so the methyl is axial in the preferred chair
    assert summary.loc[0, "preferred_family"] == "chair s1=equatorial;s2=axial"
    # progress lines, one per stage of the molecule
    for stage in ("intake", "seeds", "minima", "thermo", "ensemble"):
        assert any(stage in l and "cis-4-tBu-Me" in l and l.rstrip().endswith("done")
                   for l in proc.stdout.splitlines()), stage


@pytest.mark.slow
def test_avalue_several_groups_one_table_and_csv(tmp_path):
    out = tmp_path / "av"
    env = {k: v for k, v in os.environ.items() if k not in ("CHAIRQM_FAULTS", "CHAIRQM_VERBOSE")}
    env["OMP_NUM_THREADS"] = "1"
    groups = ["[*]C", "[*]C1CC1", "C([*])"]                # methyl twice (written differently): one row
    proc = subprocess.run([PY, "-m", "chairqm.cli", "avalue", *groups, "--out", str(out)], capture_output=True,
                          text=True, env=env, timeout=1800)
    assert proc.returncode == 0, proc.stdout[-2000:] + proc.stderr[-3000:]
    table = pd.read_csv(out / "avalues.csv")
    assert list(table["group"]) == ["[*]C", "[*]C1CC1"]
    me = table.set_index("group").loc["[*]C"]
    cpr = table.set_index("group").loc["[*]C1CC1"]
    # A(Me) = 1.70 kcal/mol (package table: the compilation's general references); GFN2-xTB within 0.5 of it
    assert me["tabulated_kcal"] == pytest.approx(1.70, abs=0.005)
    assert abs(me["a_value_kcal"] - 1.70) < 0.5
    assert pd.isna(cpr["tabulated_kcal"])
    # cyclopropyl: a small hydrocarbon group bonded through a CH, the size of the small alkyl groups'
    # (methyl 1.70 to isopropyl 2.15 in the package table): a loose 0.5-3 window (common practice)
    assert 0.5 < cpr["a_value_kcal"] < 3.0
    for r in table.itertuples():
        total = r.equatorial_chair_population + r.axial_chair_population + r.other_ring_forms_population
        assert total == pytest.approx(1.0, abs=1e-3)
        assert r.equatorial_chair_population > r.axial_chair_population
    # the printed table has one row per group with the same A-values (two decimals)
    rows = [l for l in proc.stdout.splitlines() if l.startswith("[*]")]
    assert len(rows) == 2
    for row, value in zip(rows, table["a_value_kcal"]):
        assert f"{value:.2f}" in row.split()[2]
    # and the API reads the same run back
    res = api.avalues(groups, out=out, progress=False)
    assert res.result("[*]C").a_value_kcal == pytest.approx(me["a_value_kcal"], abs=1e-5)
    assert not res.result("[*]C").families.empty


def test_csv_numbers_carry_the_documented_significant_digits(tmp_path):
    """fileio.write_csv: 12 significant digits by default (8 for summary tables), floats inside
    mixed columns too; integers, text and empty cells as they were; values read back within rounding."""
    from chairqm import fileio
    assert fileio.CSV_SIGNIFICANT_DIGITS == 12 and fileio.SUMMARY_SIGNIFICANT_DIGITS == 8   # README says so
    df = pd.DataFrame({"g_hartree": [-21.98820864879390, -300.123456789012345],
                       "mixed": [1.728021915821402, None], "n": [3, 4], "text": ["s1=axial", ""]})
    fileio.write_csv(tmp_path / "a.csv", df)
    lines = (tmp_path / "a.csv").read_text().splitlines()
    assert lines[1] == "-21.9882086488,1.72802191582,3,s1=axial"
    assert lines[2] == "-300.123456789,,4,"
    back = pd.read_csv(tmp_path / "a.csv")
    assert back["g_hartree"].tolist() == pytest.approx(df["g_hartree"].tolist(), abs=1e-9)
    fileio.write_csv(tmp_path / "s.csv", df, significant_digits=fileio.SUMMARY_SIGNIFICANT_DIGITS)
    assert (tmp_path / "s.csv").read_text().splitlines()[1] == "-21.988209,1.7280219,3,s1=axial"
