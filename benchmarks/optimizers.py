"""Benchmark c: gradient calls per conformer of the default optimiser and the alternatives.

Every kept chairqm seed of a few molecules (chairqm.seeds.build_seeds, default settings) is optimised with
each optimiser named in --optimizers through chairqm.optimize.optimize (GFN2-xTB / tblite, fmax and
max_steps from the configuration defaults); the table gives gradient calls per conformer (median, 90th
percentile, max), engine and wall seconds, convergence, and whether the optimisers reached the same
minimum (largest |ΔE| to the default's energy for the same seed).

Full run (≈ 3–6 min):  nice -n 10 python benchmarks/optimizers.py --json results/bench/optimizers.json
CI subset (seconds):   python benchmarks/optimizers.py --quick
"""

from __future__ import annotations

import argparse
import sys
import time

import _common as C

MOLECULES = [
    ("methylcyclohexane", "CC1CCCCC1"),
    ("isopropylcyclohexane", "CC(C)C1CCCCC1"),
    ("methoxycyclohexane", "COC1CCCCC1"),
    ("cis-1,3-dimethylcyclohexane", "C[C@H]1CCC[C@@H](C)C1"),
    ("2-methoxytetrahydropyran", "CO[C@@H]1CCCCO1"),
    ("tert-butylcyclohexane", "CC(C)(C)C1CCCCC1"),
]
QUICK = [("fluorocyclohexane", "FC1CCCCC1")]


def main(argv=None) -> int:
    from chairqm.optimize import DEFAULT_OPTIMIZER, OPTIMIZERS
    from chairqm.seeds import build_seeds
    from chairqm.units import KCAL_PER_HARTREE

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="seconds-long CI subset (two seeds of one molecule)")
    ap.add_argument("--optimizers", default=None,
                    help=f"comma-separated, from {', '.join(OPTIMIZERS)} (default: {DEFAULT_OPTIMIZER},lbfgs,geometric)")
    ap.add_argument("--json", default=None, help="also write the results to this JSON file")
    args = ap.parse_args(argv)
    names = (args.optimizers.split(",") if args.optimizers else
             ([DEFAULT_OPTIMIZER, "lbfgs"] if args.quick else [DEFAULT_OPTIMIZER, "lbfgs", "geometric"]))
    settings = C.default_settings()
    mols = QUICK if args.quick else MOLECULES
    if args.quick:
        settings["seeds"]["twist_boats"] = False
    info = C.machine()
    per = {o: [] for o in names}           # one dict per conformer
    for name, smiles in mols:
        p = C.perceive(name, smiles)
        seeds = [s for s in build_seeds(p.mol, p.ring, p.substituents, settings["seeds"]) if s.kept]
        for s in seeds:
            for o in names:
                t0 = time.perf_counter()
                r = C.optimise_and_check(p, s.positions, o, settings)
                r["wall_s"] = time.perf_counter() - t0
                r["molecule"], r["seed"] = name, s.name
                r.pop("positions")
                per[o].append(r)
        print(f"# {name}: {len(seeds)} seeds done", file=sys.stderr, flush=True)
    ref = {(r["molecule"], r["seed"]): r["energy_hartree"] for r in per[names[0]]}
    rows = []
    for o in names:
        rs = per[o]
        calls = [r["gradient_calls"] for r in rs]
        de = [abs(r["energy_hartree"] - ref[(r["molecule"], r["seed"])]) * KCAL_PER_HARTREE
              for r in rs if r["status"] == "ok" and ref.get((r["molecule"], r["seed"])) is not None]
        rows.append({"optimizer": o + (" (default)" if o == DEFAULT_OPTIMIZER else ""), "conformers": len(rs),
                     "converged": sum(r["status"] == "ok" for r in rs),
                     "median_calls": C.quantile(calls, 0.5), "p90_calls": C.quantile(calls, 0.9),
                     "max_calls": max(calls) if calls else 0, "total_calls": sum(calls),
                     "engine_s": sum(r["engine_seconds"] for r in rs), "wall_s": sum(r["wall_s"] for r in rs),
                     "max_dE_vs_first_kcal": max(de) if de else float("nan")})
    C.print_machine(info)
    print(f"# optimiser cost: {len(per[names[0]])} conformers (kept seeds of "
          f"{', '.join(m[0] for m in mols)}); {settings['method']} / {settings['engine']}, "
          f"fmax {settings['optimize']['fmax_ev_per_a']} eV/Å")
    print(C.table(rows, floatfmt=".4g"))
    C.save_json(args.json, {"machine": info, "rows": rows, "per_conformer": per})
    return 0


if __name__ == "__main__":
    sys.exit(main())
