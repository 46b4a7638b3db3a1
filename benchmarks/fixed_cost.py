"""The fixed cost of a one-molecule run: what a Snakemake workflow of chairqm's shape costs before any
engine work, measured piece by piece on this machine.

    python benchmarks/fixed_cost.py [--repeats 5] [--group "[*]C#N"]

Each item is timed `repeats` times, interleaved, and the median printed (seconds of wall time):

- ``python``: an interpreter that imports nothing (``python -c pass``);
- ``imports``: an interpreter importing what a stage job needs (RDKit, ASE, numpy, pandas, tblite and
  chairqm's stage modules), the cost a warm starter (chairqm.stages.warm) pays once per run;
- ``snakemake --version``: Snakemake's own start;
- ``empty workflow``: a Snakefile of six chained rules that only touch their output (chairqm's six
  per-molecule stages with no work in them), run with ``--cores 2`` as ``chairqm run`` runs Snakemake;
  Snakemake's start, DAG, six job hand-offs and its bookkeeping;
- ``empty workflow, chairqm's launcher``: the same through chairqm.workflow.launch, as ``chairqm run``
  starts Snakemake on the local executor (without the job-rate limiter's exit delay);
- ``chairqm check``: the command-line start and the configuration check of the one-molecule configuration;
- ``chairqm run``: the whole one-molecule run of `group` (fresh folder), with its engine seconds (minima +
  thermo, summed over workers) and wall/engine.

With c cores the engine's work takes at least engine/c seconds of wall time; F = wall − engine/c is the
run's cost outside the engine if that work were split perfectly. A run of fixed cost F meets
wall/engine ≤ 1.25 only when engine ≥ F / (1.25 − 1/c), with c = 2 engine ≥ 1.33 F. The script prints
F of the run, and the empty workflow's time as the F that no run keeping one Snakemake job per stage
can go below.
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import _common as C

SNAKEFILE = """
rule all:
    input: "m/report.done"

rule intake:
    output: "m/intake.done"
    shell: "touch {output}"

""" + "".join(f"""
rule {b}:
    input: "m/{a}.done"
    output: "m/{b}.done"
    shell: "touch {{output}}"
""" for a, b in [("intake", "seeds"), ("seeds", "minima"), ("minima", "thermo"), ("thermo", "ensemble"),
                 ("ensemble", "report")])

STAGE_IMPORTS = ("import numpy, pandas, ase, ase.io, rdkit.Chem.AllChem, tblite.interface, "
                 "chairqm.stages.thermo, chairqm.stages.minima, chairqm.stages.ensemble")


def _time(cmd, cwd=None) -> float:
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, cwd=cwd, capture_output=True, text=True)
    if proc.returncode != 0:
        raise SystemExit(f"{' '.join(map(str, cmd))} failed:\n{proc.stderr[-2000:]}")
    return time.perf_counter() - t0


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--group", default="[*]C#N", help="the group of the one-molecule run (chairqm avalue's config)")
    ap.add_argument("--json", default=None)
    ap.add_argument("--quick", action="store_true", help="one repeat with fluorocyclohexane (CI check)")
    args = ap.parse_args(argv)
    if args.quick:
        args.repeats, args.group = 1, "[*]F"
    import yaml

    from avalue import config_for
    py = sys.executable
    times: dict[str, list] = {}
    runs = []
    with tempfile.TemporaryDirectory(prefix="cq-fixed-") as tmp:
        tmp = Path(tmp)
        (tmp / "Snakefile").write_text(SNAKEFILE)
        cfg = tmp / "config.yaml"
        cfg.write_text(yaml.safe_dump(config_for(args.group, {})))
        items = {
            "python -c pass": lambda k: _time([py, "-c", "pass"]),
            "imports of a stage job": lambda k: _time([py, "-c", STAGE_IMPORTS]),
            "snakemake --version": lambda k: _time([py, "-m", "snakemake", "--version"]),
            "empty six-stage workflow": lambda k: _time([py, "-m", "snakemake", "--snakefile", str(tmp / "Snakefile"),
                                                         "--directory", str(tmp / f"wf{k}"), "--cores", "2",
                                                         "--nolock", "--quiet"]),
            "empty workflow, chairqm's launcher": lambda k: _time([py, "-m", "chairqm.workflow.launch", "--chairqm-local",
                                                                   "--snakefile", str(tmp / "Snakefile"),
                                                                   "--directory", str(tmp / f"wl{k}"), "--cores", "2",
                                                                   "--nolock", "--quiet"]),
            "chairqm check": lambda k: _time([C.CHAIRQM, "check", str(cfg)]),
        }
        for k in range(args.repeats):
            for name, fn in items.items():
                times.setdefault(name, []).append(fn(k))
            out = tmp / f"run{k}"
            wall = _time([C.CHAIRQM, "run", str(cfg), "--out", str(out), "--cores", "2"])
            mol = next(p.parent for p in out.glob("*/minima.json"))
            engine = sum(json.loads((mol / f).read_text())["engine_seconds"] for f in ("minima.json", "thermo.json"))
            runs.append({"wall_s": wall, "engine_s": engine})
    info = C.machine()
    C.print_machine(info)
    print(f"# fixed cost of a one-molecule run; median of {args.repeats} interleaved repeats (seconds)")
    rows = [{"item": k, "median_s": statistics.median(v), "min_s": min(v), "runs": " ".join(f"{x:.2f}" for x in v)}
            for k, v in times.items()]
    w = statistics.median(r["wall_s"] for r in runs)
    e = statistics.median(r["engine_s"] for r in runs)
    rows.append({"item": f"chairqm run {args.group} (wall)", "median_s": w, "min_s": min(r["wall_s"] for r in runs),
                 "runs": " ".join(f"{r['wall_s']:.2f}" for r in runs)})
    rows.append({"item": "  of which engine (minima + thermo)", "median_s": e, "min_s": min(r["engine_s"] for r in runs),
                 "runs": " ".join(f"{r['engine_s']:.2f}" for r in runs)})
    print(C.table(rows, floatfmt=".3g"))
    empty = statistics.median(times["empty workflow, chairqm's launcher"])
    fixed = w - e / 2
    print(f"# wall/engine of the run: {w / e:.2f}; outside the engine (engine split perfectly) F = wall - engine/2 = {fixed:.2f} s, "
          f"so wall/engine <= 1.25 on 2 cores needs engine >= {fixed / 0.75:.1f} s; the empty workflow alone "
          f"(F = {empty:.2f} s) would need {empty / 0.75:.1f} s")
    if args.json:
        C.save_json(Path(args.json), {"machine": info, "times": times, "runs": runs})
    return 0


if __name__ == "__main__":
    sys.exit(main())
