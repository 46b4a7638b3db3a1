"""Benchmark a: orchestration overhead — whole-workflow wall time divided by the engine time inside it.

Runs `chairqm run CONFIG --out DIR --cores N` in a fresh folder (default configs/demo.yaml) and reads
DIR/provenance.json: wall_seconds (run start to report) / engine_seconds (wall time inside GFN2-xTB
calls, summed over the minima and thermo stages of every molecule).  Target ≤ 1.5.  Because
engine_seconds is summed over parallel worker processes, the ratio also credits parallelism; the table
therefore adds the CPU time of all child processes (resource.getrusage(RUSAGE_CHILDREN)), the CPU
utilisation (CPU / wall, at most N), and CPU / engine — the share of all computing that is not the engine
(imports, Snakemake, force-field seeding, Python around the engine), independent of the number of cores.

Full run (the demo, ≈ 5–15 min on 2 cores):  nice -n 10 python benchmarks/overhead.py --json results/bench/overhead.json
CI subset (seconds):                          python benchmarks/overhead.py --quick
  (--quick runs one small molecule up to the minima stage in a temporary folder and takes the engine time
   from its minima.json, because provenance.json is written by the final report stage only.)
"""

from __future__ import annotations

import argparse
import json
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import _common as C

QUICK_CONFIG = {"project": "overhead benchmark, CI subset",
                "molecules": [{"name": "fluorocyclohexane", "smiles": "FC1CCCCC1"}],
                "settings": {"seeds": {"twist_boats": False}}}


def _cpu_children() -> float:
    ru = resource.getrusage(resource.RUSAGE_CHILDREN)
    return ru.ru_utime + ru.ru_stime


def run_once(config: Path, out: Path, cores: int, until: str | None = None) -> dict:
    """One `chairqm run` in `out`; returns the measured figures."""
    cmd = [C.CHAIRQM, "run", str(config), "--out", str(out), "--cores", str(cores)]
    if until:
        cmd += ["--until", until]
    cpu0, t0 = _cpu_children(), time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True)
    wall_outer = time.perf_counter() - t0
    cpu = _cpu_children() - cpu0
    if proc.returncode != 0:
        sys.stderr.write(proc.stdout[-3000:] + proc.stderr[-3000:])
        raise SystemExit(f"chairqm run failed with exit {proc.returncode} (see {out})")
    prov_file = out / "provenance.json"
    if prov_file.is_file():
        prov = json.loads(prov_file.read_text())
        wall, engine, calls, source = prov["wall_seconds"], prov["engine_seconds"], prov["gradient_calls"], "provenance.json"
    else:
        engine, calls = 0.0, 0
        for f in list(out.glob("*/minima.json")) + list(out.glob("*/thermo.json")):
            d = json.loads(f.read_text())
            engine += d.get("engine_seconds", 0.0)
            calls += d.get("gradient_calls", 0)
        wall, source = wall_outer, "minima.json/thermo.json + outer timer"
    return {"config": config.name, "target": until or "full run", "cores": cores,
            "wall_s": wall, "wall_outer_s": wall_outer, "engine_s": engine, "gradient_calls": calls,
            "ratio_wall_engine": wall / engine if engine else float("nan"),
            "cpu_children_s": cpu, "cpu_utilisation": cpu / wall_outer if wall_outer else float("nan"),
            "ratio_cpu_engine": cpu / engine if engine else float("nan"), "source": source}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="seconds-long CI subset")
    ap.add_argument("--config", default=str(C.ROOT / "configs" / "demo.yaml"))
    ap.add_argument("--out", default=None, help="fresh output folder (default: a new temporary folder, removed afterwards)")
    ap.add_argument("--cores", type=int, default=2)
    ap.add_argument("--json", default=None, help="also write the results to this JSON file")
    args = ap.parse_args(argv)
    info = C.machine()
    tmp = Path(tempfile.mkdtemp(prefix="chairqm-overhead-"))
    try:
        if args.quick:
            import yaml
            cfg = tmp / "quick.yaml"
            cfg.write_text(yaml.safe_dump(QUICK_CONFIG, sort_keys=False))
            row = run_once(cfg, tmp / "out", args.cores, until="minima")
        else:
            out = Path(args.out) if args.out else tmp / "out"
            if out.exists() and any(out.iterdir()):
                raise SystemExit(f"{out} is not empty: give a fresh --out folder (a reused one skips finished work)")
            row = run_once(Path(args.config), out, args.cores)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    C.print_machine(info)
    print("# orchestration overhead: wall / engine seconds (target <= 1.5)")
    cols = ["config", "target", "cores", "wall_s", "engine_s", "ratio_wall_engine", "cpu_children_s",
            "cpu_utilisation", "ratio_cpu_engine", "gradient_calls", "wall_outer_s"]
    print(C.table([row], cols, floatfmt=".3f"))
    print(f"(wall and engine seconds from {row['source']})")
    C.save_json(args.json, {"machine": info, "rows": [row]})
    return 0


if __name__ == "__main__":
    sys.exit(main())
