"""Benchmark f: what a second ring costs — seeds, minima and gradient calls per molecule.

A ring inside a group (morpholino, piperidino, cyclohexyl) is seeded in both of its chairs, which doubles
the ring-level seeds of the analysed ring; this benchmark prints, per molecule of a finished run, the
seeds built and kept, the unique minima, and the engine gradient calls of the minima and thermo stages
(read from the stages' declared outputs: seeds.csv, minima.json, thermo.json), next to a one-ring
reference molecule of similar size when the run has one.

Full run:  python benchmarks/rings.py --config CONFIG --out DIR      (runs the workflow, then summarises)
Summary:   python benchmarks/rings.py --run DIR                      (a finished run folder)
CI subset: python benchmarks/rings.py --quick                        (cyclohexylcyclohexane seeds only, seconds)
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time
from pathlib import Path

import _common as C
import pandas as pd


def summarise(run: Path) -> pd.DataFrame:
    rows = []
    for seeds_csv in sorted(run.glob("*/seeds.csv")):
        folder = seeds_csv.parent
        seeds = pd.read_csv(seeds_csv, keep_default_na=False)
        minima = json.loads((folder / "minima.json").read_text()) if (folder / "minima.json").is_file() else {}
        thermo = json.loads((folder / "thermo.json").read_text()) if (folder / "thermo.json").is_file() else {}
        others = seeds["other_rings"].astype(str).tolist() if "other_rings" in seeds.columns else []
        rows.append({"molecule": folder.name, "rings": 1 + max([len(o.split(";")) for o in others if o] or [0]),
                     "seeds": len(seeds), "seeds_kept": int((seeds["status"] == "ok").sum()),
                     "minima": len(minima.get("conformers", [])),
                     "gradients_minima": minima.get("gradient_calls"), "gradients_thermo": thermo.get("gradient_calls"),
                     "engine_s": round(minima.get("engine_seconds", 0.0) + thermo.get("engine_seconds", 0.0), 1)})
    return pd.DataFrame(rows)


def quick() -> pd.DataFrame:
    from rdkit import Chem

    from chairqm import seeds
    from chairqm.molecule import perceive
    rows = []
    for name, smi in (("cyclohexylcyclohexane", "C1CCC(CC1)C1CCCCC1"), ("methylcyclohexane", "CC1CCCCC1")):
        p = perceive({"name": name, "smiles": smi})[0]
        t0 = time.perf_counter()
        found = seeds.build_seeds(p.mol, p.ring, p.substituents, {"twist_boats": False}, p.other_rings)
        rows.append({"molecule": name, "rings": 1 + len(p.other_rings), "seeds": len(found),
                     "seeds_kept": sum(s.status == "ok" for s in found),
                     "other_ring_forms": ",".join(sorted({s.other_rings for s in found if s.status == "ok"})),
                     "seconds": round(time.perf_counter() - t0, 2), "atoms": Chem.Mol(p.mol).GetNumAtoms()})
    return pd.DataFrame(rows)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--run", type=Path, help="a finished run folder to summarise")
    ap.add_argument("--config", type=Path, help="a configuration to run first")
    ap.add_argument("--out", type=Path, help="output folder for --config")
    ap.add_argument("--quick", action="store_true")
    args = ap.parse_args(argv)
    C.print_machine()
    if args.quick:
        print(C.table(quick().to_dict("records")))
        return 0
    run = args.run
    if args.config is not None:
        run = args.out or Path("results/bench/rings")
        subprocess.run([sys.executable, "-m", "chairqm.cli", "run", str(args.config), "--out", str(run)], check=False)
    if run is None:
        ap.error("give --run DIR, --config CONFIG or --quick")
    print(C.table(summarise(run).to_dict("records")))
    return 0


if __name__ == "__main__":
    sys.exit(main())
