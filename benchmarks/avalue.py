"""Benchmark e: the cost of one A-value — wall s, engine s, gradient calls, wall/engine and the A-value of
a fixed list of groups, each run alone as `chairqm avalue GROUP` runs it, before and after the switches,
with the physical floor (the gradients of two chair optimisations and two Hessians).

Each group's monosubstituted cyclohexane (the configuration chairqm.api.avalues writes) runs through
`chairqm run CONFIG --out FRESH --cores N` once per variant, in a fresh folder (nothing cached):

- ``all-hessians``: ``thermo.frequency_window_kcal: all`` (every minimum gets its Hessian: the old path);
- ``default``: the schema's defaults (Hessians only within the automatic window and for each chair
  family's lowest conformer).

Columns: wall s (the whole command), engine s (inside GFN2-xTB, minima + thermo stages, summed over
worker processes), gradient calls (minima + thermo), of which Hessian gradients, wall/engine, the A-value
(kcal/mol, 298.15 K) and floor = the optimisation gradients of the two chairs' seeds (minima.csv) + 2 × 6N
(N atoms), with calls/floor.

Full run (≈ 10 min on 2 cores):  nice -n 10 python benchmarks/avalue.py --json results/bench/avalue.json
CI subset (one small group, default variant only):  python benchmarks/avalue.py --quick
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import _common as C

GROUPS = ["[*]C#N", "[*]OC(F)(F)F", "[*]N(C)C", "[*]C1CCC1"]      # the groups of issue 17
QUICK = ["[*]F"]
VARIANTS = {"all-hessians": {"thermo": {"frequency_window_kcal": "all"}}, "default": {}}


def config_for(group: str, variant: dict) -> dict:
    """The configuration chairqm.api.avalues writes for one group, with the variant's settings added."""
    from chairqm import additivity
    from chairqm import avalues as tab
    from chairqm.api import avalue_molecule_name
    frag = tab.canonical_fragment(group)
    settings = {"analysis": {"reference_groups": False}, **variant}
    return {"project": f"A-value benchmark of {frag}",
            "molecules": [{"name": avalue_molecule_name(frag), "smiles": additivity.reference_smiles(frag)}],
            "settings": settings}


def measure(group: str, variant: dict, cores: int, keep: Path | None = None) -> dict:
    import pandas as pd
    import yaml
    with tempfile.TemporaryDirectory(prefix="cq-avalue-") as tmp:
        root = Path(keep) if keep else Path(tmp)
        root.mkdir(parents=True, exist_ok=True)
        cfg = config_for(group, variant)
        path = root / "config.yaml"
        path.write_text(yaml.safe_dump(cfg))
        out = root / "out"
        t0 = time.perf_counter()
        proc = subprocess.run([C.CHAIRQM, "run", str(path), "--out", str(out), "--cores", str(cores)],
                              capture_output=True, text=True)
        wall = time.perf_counter() - t0
        name = cfg["molecules"][0]["name"]
        row = {"group": group, "wall_s": wall, "status": "failed" if proc.returncode else "ok"}
        if proc.returncode:
            print(proc.stderr[-2000:], file=sys.stderr)
            return row
        mol = out / name
        minima = json.loads((mol / "minima.json").read_text())
        thermo = json.loads((mol / "thermo.json").read_text())
        engine = minima["engine_seconds"] + thermo["engine_seconds"]
        calls = minima["gradient_calls"] + thermo["gradient_calls"]
        summ = pd.read_csv(out / "summary.csv", keep_default_na=False)
        a = summ.loc[summ.temperature_k == 298.15, "a_value_kcal"]
        # floor: the two chairs' own optimisations + two Hessians of 6N gradients
        mcsv = pd.read_csv(mol / "minima.csv", keep_default_na=False)
        confs = sorted(minima["conformers"], key=lambda c: c["energy_hartree"])
        chairs = {}
        for c in confs:
            if c["ring_form"] == "chair":
                chairs.setdefault(c["orientation"], c)
        seeds = [c["seed"] for c in chairs.values()][:2]
        natoms = int((mol / "minima" / f"{confs[0]['conformer']}.xyz").read_text().split()[0])
        opt_calls = int(mcsv[mcsv.seed.isin(seeds)].gradient_calls.astype(int).sum())
        floor = opt_calls + 2 * 6 * natoms
        row.update({"engine_s": engine, "gradient_calls": calls,
                    "hessian_gradients": thermo.get("hessian_gradients"),
                    "hessians": f"{thermo.get('hessians', len(thermo['conformers']))}/{len(thermo['conformers'])}",
                    "wall/engine": wall / engine if engine else float("nan"),
                    "a_value_kcal": float(a.iloc[0]) if len(a) and a.iloc[0] != "" else float("nan"),
                    "floor": floor, "calls/floor": calls / floor})
        return row


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="one small group, default settings only")
    ap.add_argument("--cores", type=int, default=2)
    ap.add_argument("--groups", default=None, help="comma-separated groups (default: the issue's four)")
    ap.add_argument("--variants", default=None, help=f"comma-separated, from {', '.join(VARIANTS)}")
    ap.add_argument("--json", default=None, help="also write the results to this JSON file")
    args = ap.parse_args(argv)
    groups = args.groups.split(",") if args.groups else (QUICK if args.quick else GROUPS)
    variants = args.variants.split(",") if args.variants else (["default"] if args.quick else list(VARIANTS))
    info = C.machine()
    rows = []
    for g in groups:
        for v in variants:                  # interleaved, so load drifts hit both variants alike
            r = measure(g, VARIANTS[v], args.cores)
            r["variant"] = v
            rows.append(r)
            print(f"# {g} {v}: {r['wall_s']:.1f} s", file=sys.stderr, flush=True)
    C.print_machine(info)
    print(f"# one group per run, {args.cores} cores, fresh folders; engine s and gradient calls from "
          "minima.json + thermo.json; floor = two chair optimisations + two 6N Hessians")
    cols = ["group", "variant", "status", "wall_s", "engine_s", "wall/engine", "gradient_calls",
            "hessian_gradients", "hessians", "floor", "calls/floor", "a_value_kcal"]
    print(C.table(rows, cols, floatfmt=".4g"))
    C.save_json(args.json, {"machine": info, "rows": rows})
    return 0


if __name__ == "__main__":
    sys.exit(main())
