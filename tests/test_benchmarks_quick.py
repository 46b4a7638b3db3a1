"""The benchmark scripts keep working: each runs its --quick subset, exits 0 and prints a table."""

import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

BENCH = Path(__file__).resolve().parent.parent / "benchmarks"
# script -> marks; measured on 2 cores: optimizers 2 s, seeding 6 s, overhead 9 s (28 s under load),
# scaling 18 s (65 s under load), so scaling is marked slow
SCRIPTS = {
    "optimizers.py": [],
    "seeding.py": [],
    "overhead.py": [],
    "scaling.py": [pytest.mark.slow],
    "refine.py": [],
    "rings.py": [],
    "avalue.py": [pytest.mark.slow],
    "fixed_cost.py": [pytest.mark.slow],
}
# scripts that rebuild or report data rather than measure (no --quick): tested below and in test_avalues.py
DATA_SCRIPTS = {"build_avalue_table.py", "avalue_table_diff.py", "calibration_report.py", "refine_auto.py",
                "one_sided_hessian.py"}
# a table as benchmarks/_common.table prints it: a header line, then a rule of dash runs separated by two spaces
RULE = re.compile(r"^-+(  -+)+$", re.M)


def test_every_benchmark_script_is_covered():
    found = {p.name for p in BENCH.glob("*.py") if not p.name.startswith("_")}
    assert found == set(SCRIPTS) | DATA_SCRIPTS, "add new benchmark scripts to SCRIPTS in this test"


@pytest.mark.parametrize("script", [pytest.param(s, marks=m) for s, m in SCRIPTS.items()])
def test_quick_subset_runs_and_prints_a_table(script):
    env = dict(os.environ, OMP_NUM_THREADS="1")
    proc = subprocess.run([sys.executable, str(BENCH / script), "--quick"], capture_output=True, text=True,
                          env=env, timeout=600)
    assert proc.returncode == 0, proc.stderr[-2000:]
    out = proc.stdout
    assert RULE.search(out), out
    header = out[:RULE.search(out).start()].splitlines()[-1]
    assert len(header.split()) >= 4                 # a header with several columns
    body = out[RULE.search(out).end():].strip().splitlines()
    assert body and len(body[0].split()) >= 4       # at least one data row
    assert re.search(r"\d+ cores", out)             # the machine line is printed


def test_avalue_table_diff_reports_changed_added_and_dropped_groups(tmp_path):
    head = ("group,fragment,a_value_kcal,range_low_kcal,range_high_kcal,source,from_memory\n")
    (tmp_path / "old.csv").write_text(head + "methyl,[*]C,1.74,1.70,1.80,Booth 1980,true\n"
                                      "ethynyl,[*]C#C,0.41,0.41,0.52,Eliel 1994,true\n"
                                      "ethoxycarbonyl,[*]C(=O)OCC,1.2,1.1,1.2,Hirsch 1967,true\n", encoding="utf-8")
    (tmp_path / "new.csv").write_text(head + "methyl,[*]C,1.70,1.70,1.70,general refs: Hirsch,false\n"
                                      "ethynyl,[*]C#C,0.41,0.41,0.52,ref 2a: Jensen 1969,false\n"
                                      "fluoro,[*]F,0.28,0.15,0.36,ref 2a: Jensen 1969,false\n", encoding="utf-8")
    proc = subprocess.run([sys.executable, str(BENCH / "avalue_table_diff.py"), "--old-file", str(tmp_path / "old.csv"),
                           "--new-file", str(tmp_path / "new.csv")], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    out = proc.stdout
    # '#' inside a SMILES is data: the ethynyl row must survive the reading
    assert "| methyl | `[*]C` | 1.74 (1.70–1.80) | 1.70 (1.70–1.70) | -0.04 |" in out
    assert "| ethynyl | `[*]C#C` | 0.41" in out and "+0.00" in out
    assert "2 groups in both tables, 1 with a changed value" in out
    assert "Only in the old table: ethoxycarbonyl" in out and "Only in the new table (1): fluoro." in out


def test_calibration_report_reproduces_the_stored_statistics():
    from chairqm import calibration as cal
    # the report's default: the gas-phase calibration without refinement (whatever its place in the file)
    c = next(c for c in cal.load_all(cal.packaged_path())
             if not (c.settings or {}).get("refine") and not (c.settings or {}).get("solvent"))
    proc = subprocess.run([sys.executable, str(BENCH / "calibration_report.py")], capture_output=True, text=True,
                          timeout=300, env=dict(os.environ, OMP_NUM_THREADS="1"))
    assert proc.returncode == 0, proc.stderr[-2000:]
    out = proc.stdout
    assert f"| mean absolute error, MAE | {c.mae_kcal:.3f} kcal/mol |" in out
    assert f"experimental = {c.intercept:.3f} + {c.slope:.3f} · computed" in out
    assert f"## Statistics (n = {c.n})" in out
    assert out.count("(outside)") == int(re.search(r"coverage of the 95 % intervals \| (\d+) of (\d+)", out)
                                          .group(2)) - int(re.search(r"coverage of the 95 % intervals \| (\d+) of", out).group(1))


@pytest.mark.slow
def test_one_sided_hessian_rebuilds_the_runs_own_free_energies(tmp_path):
    """benchmarks/one_sided_hessian.py rebuilds each central Hessian from the run's cached displacements:
    its central G − E must be the run's published one (thermo.csv) for every frequency-checked conformer,
    and the forward one must differ from it (a different finite difference) but stay close for a rigid
    group's chairs (within 0.5 kcal/mol: common practice for forward differences at a 0.005 Å step)."""
    import pandas as pd

    from _runs import run_summary
    from chairqm.units import KCAL_PER_HARTREE
    out = tmp_path / "run"
    run_summary({"project": "one-sided", "molecules": [{"name": "mch", "smiles": "CC1CCCCC1"}],
                 "settings": {"temperatures_k": [298.15]}}, out)
    proc = subprocess.run([sys.executable, str(BENCH / "one_sided_hessian.py"), str(out)], capture_output=True,
                          text=True, timeout=600, env=dict(os.environ, OMP_NUM_THREADS="1"))
    assert proc.returncode == 0, proc.stderr[-2000:]
    rows = [line.split("|")[1:-1] for line in proc.stdout.splitlines() if line.startswith("| mch |")]
    thermo = pd.read_csv(out / "mch" / "thermo.csv")
    checked = thermo[(thermo["frequency_checked"].astype(str).str.lower() == "true") & thermo["g_corr_hartree"].notna()]
    assert 2 <= len(rows) <= len(checked)          # a conformer that needed mode following is left out
    published = {r.conformer: r.g_corr_hartree * KCAL_PER_HARTREE for r in checked.itertuples()}
    for cells in rows:
        cid, form, central, delta = cells[1].strip(), cells[2], float(cells[4]), float(cells[6])
        assert central == pytest.approx(published[cid], abs=1e-3), cid
        assert delta != 0.0
        if "chair" in form:
            assert abs(delta) < 0.5, (cid, delta)
