"""Benchmark d: wall time against the number of molecules and the number of seeds, and CPU utilisation.

Molecules axis: `chairqm run CONFIG --until minima --cores N` in a fresh folder for configurations of
1, 4 and 16 copies of one cheap molecule (same SMILES, names scale-01 ...), so each unit of work is the same.
Seeds axis: one molecule with many seeds (2-methoxytetrahydropyran, 21 kept seeds) is taken to the seeds
stage once; for 1, 4 and 16 seeds, a copy of that folder whose seeds.csv keeps only the first n kept seeds
is given to the minima stage exactly as the workflow rule starts it (`python -m chairqm.stages minima
--threads N`; it optimises the seeds in N worker processes).
Each point: wall time, CPU time of all child processes (resource.getrusage(RUSAGE_CHILDREN), user + sys)
and CPU utilisation = CPU / wall (2.0 = both cores busy), plus the least-squares line wall = a + b·n and
the ratio of successive increments, which is 1 for linear growth.

Full run (≈ 5–10 min):  nice -n 10 python benchmarks/scaling.py --json results/bench/scaling.json
CI subset (seconds):    python benchmarks/scaling.py --quick
"""

from __future__ import annotations

import argparse
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import _common as C

CHEAP = ("fluorocyclohexane", "FC1CCCCC1")
MANY_SEEDS = ("methoxythp", "CO[C@@H]1CCCCO1")


def _cpu_children() -> float:
    ru = resource.getrusage(resource.RUSAGE_CHILDREN)
    return ru.ru_utime + ru.ru_stime


def _load() -> float:
    import os
    return round(os.getloadavg()[0], 2)


def _timed(cmd, cwd=None, env=None) -> tuple[float, float]:
    cpu0, t0 = _cpu_children(), time.perf_counter()
    proc = subprocess.run(cmd, cwd=cwd, env=env, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    if proc.returncode != 0:
        sys.stderr.write(proc.stdout[-3000:] + proc.stderr[-3000:])
        raise SystemExit(f"{' '.join(map(str, cmd))} failed with exit {proc.returncode}")
    return wall, _cpu_children() - cpu0


def _write_config(path: Path, molecules: list[dict], settings: dict | None = None) -> Path:
    import yaml
    path.write_text(yaml.safe_dump({"project": "scaling benchmark", "molecules": molecules,
                                    "settings": settings or {}}, sort_keys=False))
    return path


def molecules_axis(tmp: Path, counts, cores: int, settings: dict | None) -> list[dict]:
    rows = []
    for n in counts:
        mols = [{"name": f"scale-{i + 1:02d}", "smiles": CHEAP[1]} for i in range(n)]
        cfg = _write_config(tmp / f"mol{n}.yaml", mols, settings)
        out = tmp / f"mol{n}"
        wall, cpu = _timed([C.CHAIRQM, "run", str(cfg), "--out", str(out), "--until", "minima", "--cores", str(cores)])
        seeds = sum(len(_read_csv(out / m["name"] / "minima.csv")) for m in mols)
        rows.append({"axis": "molecules", "n": n, "workers": cores, "seeds_optimised": seeds, "wall_s": wall,
                     "cpu_s": cpu, "cpu_utilisation": cpu / wall, "load_1min_after": _load()})
    return rows


def _read_csv(path):
    import pandas as pd
    return pd.read_csv(path, keep_default_na=False)


def seeds_axis(tmp: Path, counts, cores: int, settings: dict | None, serial_check: bool = True) -> list[dict]:
    import os
    name = MANY_SEEDS[0]
    cfg = _write_config(tmp / "seeds.yaml", [{"name": name, "smiles": MANY_SEEDS[1]}], settings)
    base = tmp / "seeds-base"
    base.mkdir()
    env = dict(os.environ, OMP_NUM_THREADS="1")
    for stage in ("intake", "seeds"):     # the commands the workflow rules run (not timed)
        _timed([sys.executable, "-m", "chairqm.stages", stage, "--config", str(cfg), "--molecule", name],
               cwd=base, env=env)
    table = _read_csv(base / name / "seeds.csv")
    kept = table[table["status"] == "ok"]
    if len(kept) < max(counts):
        raise SystemExit(f"{name} has {len(kept)} kept seeds, fewer than {max(counts)}")
    rows = []
    plan = [(n, cores) for n in counts]
    if serial_check and cores > 1:
        plan.append((max(counts), 1))      # the same work in one process: the parallel speed-up
    for n, workers in plan:
        work = tmp / f"seeds{n}-w{workers}"
        shutil.copytree(base, work)
        keep = set(kept["seed"].iloc[:n])
        sub = table[(table["status"] != "ok") | table["seed"].isin(keep)]
        sub.to_csv(work / name / "seeds.csv", index=False)
        shutil.rmtree(work / name / "work", ignore_errors=True)       # no cached optimisations
        wall, cpu = _timed([sys.executable, "-m", "chairqm.stages", "minima", "--config", str(cfg),
                            "--molecule", name, "--threads", str(workers)], cwd=work, env=env)
        got = len(_read_csv(work / name / "minima.csv"))
        rows.append({"axis": "seeds" if workers == cores else "seeds, 1 worker", "n": n, "workers": workers,
                     "seeds_optimised": got, "wall_s": wall, "cpu_s": cpu, "cpu_utilisation": cpu / wall,
                     "load_1min_after": _load()})
    return rows


def linearity(rows, key: str = "wall_s") -> dict:
    """Least-squares line key = a + b·n over the rows and the ratio of the last to the first increment per unit."""
    import numpy as np
    n = np.array([r["n"] for r in rows], dtype=float)
    w = np.array([r[key] for r in rows], dtype=float)
    if len(n) < 2:
        return {"intercept_s": float("nan"), "per_unit_s": float("nan"), "increment_ratio": float("nan")}
    b, a = np.polyfit(n, w, 1)
    # increments per unit between successive points: equal for linear growth
    inc = [(w[i + 1] - w[i]) / (n[i + 1] - n[i]) for i in range(len(n) - 1)]
    return {"intercept_s": float(a), "per_unit_s": float(b),
            "increment_ratio": float(inc[-1] / inc[0]) if len(inc) > 1 and inc[0] else float("nan")}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="seconds-long CI subset (1 molecule; 1 and 2 seeds)")
    ap.add_argument("--cores", type=int, default=2)
    ap.add_argument("--skip-workflow", action="store_true",
                    help="with --quick: leave out the molecules axis (a whole Snakemake run)")
    ap.add_argument("--json", default=None, help="also write the results to this JSON file")
    args = ap.parse_args(argv)
    info = C.machine()
    tmp = Path(tempfile.mkdtemp(prefix="chairqm-scaling-"))
    try:
        if args.quick:
            rows_m = [] if args.skip_workflow else molecules_axis(tmp, [1], args.cores,
                                                                  {"seeds": {"twist_boats": False}})
            rows_s = seeds_axis(tmp, [1, 2], args.cores, None, serial_check=False)
        else:
            rows_m = molecules_axis(tmp, [1, 4, 16], args.cores, None)
            rows_s = seeds_axis(tmp, [1, 4, 16], args.cores, None)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    C.print_machine(info)
    print(f"# scaling: --cores {args.cores}; load_1min_after = 1-minute load average of the whole machine after the point; molecules axis = copies of {CHEAP[0]} (chairqm run --until minima); "
          f"seeds axis = {MANY_SEEDS[0]} minima stage")
    rows = rows_m + rows_s
    print(C.table(rows, ["axis", "n", "workers", "seeds_optimised", "wall_s", "cpu_s", "cpu_utilisation",
                         "load_1min_after"], floatfmt=".3f"))
    fits = {}
    for axis, rs in (("molecules", rows_m), ("seeds", [r for r in rows_s if r["axis"] == "seeds"])):
        if not rs:
            continue
        for key in ("wall_s", "cpu_s"):
            f = fits.setdefault(axis, {})[key] = linearity(rs, key)
            print(f"{axis}: {key} = {f['intercept_s']:.2f} s + {f['per_unit_s']:.3f} s x n; "
                  f"increment ratio (last / first) {f['increment_ratio']:.2f} (1 = linear)")
    serial = [r for r in rows_s if r["axis"] != "seeds"]
    if serial:
        par = [r for r in rows_s if r["axis"] == "seeds" and r["n"] == serial[0]["n"]][0]
        print(f"seeds, n = {par['n']}: {par['workers']} workers {par['wall_s']:.1f} s, 1 worker "
              f"{serial[0]['wall_s']:.1f} s: speed-up {serial[0]['wall_s'] / par['wall_s']:.2f}")
    C.save_json(args.json, {"machine": info, "cores": args.cores, "rows": rows, "fits": fits})
    return 0


if __name__ == "__main__":
    sys.exit(main())
