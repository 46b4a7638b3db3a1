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
}
# a table as benchmarks/_common.table prints it: a header line, then a rule of dash runs separated by two spaces
RULE = re.compile(r"^-+(  -+)+$", re.M)


def test_every_benchmark_script_is_covered():
    found = {p.name for p in BENCH.glob("*.py") if not p.name.startswith("_")}
    assert found == set(SCRIPTS), "add new benchmark scripts to SCRIPTS in this test"


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
