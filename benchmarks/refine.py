"""Benchmark e: cost of the optional DFT refinement — seconds per refined conformer and per molecule.

Two parts, both printed as tables:

1. Levels (``--levels``): one PySCF single point of methylcyclohexane's equatorial chair (a GFN2-xTB
   minimum made on the spot: RDKit embedding + MMFF, then GFN2-xTB with tblite) at each DFT level in
   LEVELS, repeated ``--repeats`` times; the median seconds and their ratio to the first level, all
   measured in the same run, with the thread count the workflow uses per single point (1) or ``--threads``.
2. Runs (``--run DIR`` …): a finished chairqm run with ``settings.refine``; per molecule the number of
   atoms and basis functions, single points made / failed, median seconds per single point, DFT seconds,
   GFN2-xTB engine seconds of the minima and thermo stages, and DFT / GFN2-xTB.  The per-conformer
   records under DIR/<molecule>/work/refine/ hold the times, so a finished run can be summarised again
   without recomputing anything.

Full run:  nice -n 10 python benchmarks/refine.py --levels --run results/reference-refined --json results/bench/refine.json
CI subset: python benchmarks/refine.py --quick   (water at B3LYP-D3(BJ)/def2-SVP, three repeats; seconds)
"""

from __future__ import annotations

import argparse
import json
import statistics
import time
from pathlib import Path

import _common as C

LEVELS = [
    {"functional": "B3LYP", "basis": "def2-SVP"},
    {"functional": "r2SCAN", "basis": "def2-SVP"},
    {"functional": "PBE0", "basis": "def2-SVP"},
    {"functional": "B3LYP", "basis": "def2-TZVP"},
    {"functional": "r2SCAN", "basis": "def2-TZVP"},
]


def _label(level: dict) -> str:
    from chairqm import refine
    s = refine.resolve(level)
    disp = {"d3bj": "-D3(BJ)", "d3zero": "-D3(0)", "none": ""}[s["dispersion"]]
    return f"{s['functional']}{disp}/{s['basis']}" + ("" if s["density_fitting"] else " (no DF)")


def _time_levels(atoms, levels, repeats: int, threads: int) -> list[dict]:
    from chairqm import dft
    rows = []
    for level in levels:
        secs, res = [], None
        for _ in range(repeats):
            t0 = time.perf_counter()
            res = dft.single_point(atoms, 0, 1, level, threads=threads)
            secs.append(time.perf_counter() - t0)
            if not res["converged"]:
                raise SystemExit(f"{_label(level)}: SCF did not converge ({res['message']})")
        rows.append({"level": _label(level), "atoms": len(atoms), "basis functions": res["n_basis"],
                     "SCF cycles": res["cycles"], "threads": threads, "repeats": repeats,
                     "median s": statistics.median(secs), "min s": min(secs)})
    base = rows[0]["median s"]
    for r in rows:
        r["ratio to first"] = r["median s"] / base
    return rows


def _methylcyclohexane_equatorial():
    """Equatorial chair of methylcyclohexane optimised as the minima stage does it (chairqm.optimize with the
    default engine and settings, bonds and stereo checked)."""
    import numpy as np
    from ase import Atoms
    from rdkit import Chem
    from rdkit.Chem import AllChem

    from chairqm import ring as cq_ring

    p = C.perceive("methylcyclohexane", "CC1CCCCC1")
    mol = Chem.Mol(p.mol)
    ids = AllChem.EmbedMultipleConfs(mol, numConfs=20, randomSeed=20240611)
    AllChem.MMFFOptimizeMoleculeConfs(mol, maxIters=2000)
    for cid in ids:
        pos = mol.GetConformer(cid).GetPositions()
        m = cq_ring.measure(pos, p.ring, p.substituents)
        if m["ring_form"] == "chair" and "equatorial" in m["orientation"]:
            r = C.optimise_and_check(p, pos)
            if r["status"] != "ok":
                raise SystemExit(f"GFN2-xTB optimisation of the equatorial chair failed: {r['reason']}")
            return Atoms([x.GetSymbol() for x in mol.GetAtoms()], positions=np.asarray(r["positions"]))
    raise SystemExit("no equatorial chair among the embeddings: change the random seed")


def summarise_run(run: Path) -> list[dict]:
    """Per-molecule refinement cost of a finished refined run (see the module docstring)."""
    rows = []
    for rj in sorted(run.glob("*/refine.json")):
        folder = rj.parent
        recs = [json.loads(f.read_text()) for f in sorted((folder / "work" / "refine").glob("*.json"))]
        if not recs:
            continue
        ok = [r for r in recs if r.get("status") == "ok"]
        secs = [float(r["seconds"]) for r in recs if r.get("seconds")]
        gfn2 = 0.0
        for stage in ("minima", "thermo"):
            f = folder / f"{stage}.json"
            if f.is_file():
                gfn2 += float(json.loads(f.read_text()).get("engine_seconds") or 0.0)
        xyz = folder / "work" / "thermo" / f"{recs[0].get('conformer')}.xyz"
        n_atoms = int(xyz.read_text().split()[0]) if xyz.is_file() else None
        dft = sum(secs)
        rows.append({"molecule": folder.name, "atoms": n_atoms, "basis functions": max((r.get("n_basis") or 0)
                     for r in recs) or None, "single points": len(recs), "failed": len(recs) - len(ok),
                     "median s per point": statistics.median(secs) if secs else None, "DFT s": dft,
                     "GFN2-xTB s": gfn2, "DFT / GFN2-xTB": dft / gfn2 if gfn2 else None})
    return rows


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="seconds-long CI subset")
    ap.add_argument("--levels", action="store_true", help="time one single point at each level in LEVELS")
    ap.add_argument("--run", action="append", default=[], help="summarise a finished refined run folder (repeatable)")
    ap.add_argument("--level", action="append", default=[], metavar="FUNCTIONAL/BASIS",
                    help="with --levels: time only these levels (repeatable), e.g. B3LYP/def2-SVP")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--threads", type=int, default=1, help="PySCF threads per single point (the workflow uses 1)")
    ap.add_argument("--json", default=None, help="also write the results to this JSON file")
    args = ap.parse_args(argv)
    info = C.machine()
    C.print_machine(info)
    result = {"machine": info}
    if args.quick:
        from ase.build import molecule
        rows = _time_levels(molecule("H2O"), [LEVELS[0]], repeats=3, threads=args.threads)
        print("\nwater, one single point (median of 3)\n" + C.table(rows))
        result["quick"] = rows
    if args.levels:
        levels = [dict(zip(("functional", "basis"), x.split("/", 1))) for x in args.level] or LEVELS
        rows = _time_levels(_methylcyclohexane_equatorial(), levels, args.repeats, args.threads)
        print(f"\nmethylcyclohexane equatorial chair, one single point per level (median of {args.repeats})\n"
              + C.table(rows))
        result["levels"] = rows
    for run in args.run:
        rows = summarise_run(Path(run))
        if rows:
            tot = {"molecule": "total", "single points": sum(r["single points"] for r in rows),
                   "failed": sum(r["failed"] for r in rows),
                   "median s per point": statistics.median(r["median s per point"] for r in rows
                                                           if r["median s per point"] is not None),
                   "DFT s": sum(r["DFT s"] for r in rows), "GFN2-xTB s": sum(r["GFN2-xTB s"] for r in rows)}
            tot["DFT / GFN2-xTB"] = tot["DFT s"] / tot["GFN2-xTB s"] if tot["GFN2-xTB s"] else None
            rows.append(tot)
        print(f"\nrefined run {run}\n" + C.table(rows, floatfmt=".1f"))
        result.setdefault("runs", {})[run] = rows
    if not (args.quick or args.levels or args.run):
        ap.error("give --quick, --levels and/or --run DIR")
    C.save_json(args.json, result)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
