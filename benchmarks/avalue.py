"""Benchmark e: the cost of one A-value — wall s, engine s, gradient calls, wall/engine and the A-value of
a fixed list of groups, each run alone as `chairqm avalue GROUP` runs it, before and after the switches,
with the physical floor (the gradients of two chair optimisations and two Hessians).

Each group's monosubstituted cyclohexane (the configuration chairqm.api.avalues writes) runs through
`chairqm run CONFIG --out FRESH --cores N` once per variant, in a fresh folder (nothing cached):

- ``before``: every minimum gets its Hessian (``thermo.frequency_window_kcal: all``) along every Cartesian
  axis (``thermo.hessian_directions: cartesian``, 6N gradients) and the previous default optimiser
  (``optimize.optimizer: precon-lbfgs``): the path before issue 17;
- ``window``: the previous optimiser and Cartesian Hessians, only within the automatic window (and each
  chair family's lowest conformer);
- ``model-hessian``: the window, Cartesian Hessians and the model-Hessian BFGS (``optimize.optimizer:
  bfgs-model``);
- ``cartesian``: the defaults but Cartesian Hessians (the default before the internal directions);
- ``default``: the schema's defaults (the window, bfgs-model, Hessians along the 3N − 6 internal
  directions, 2(3N − 6) gradients).

Columns: wall s (the whole command), engine s (inside GFN2-xTB, minima + thermo stages, summed over
worker processes), gradient calls (minima + thermo), of which Hessian gradients, wall/engine, the A-value
(kcal/mol, 298.15 K) and floor = the optimisation gradients of the two chairs' seeds (minima.csv) + 2 × 6N
(N atoms; two Cartesian Hessians, as issue 17 defines it), with calls/floor; floor_int and
calls/floor_int the same with two Hessians along the internal directions, 2 × 2(3N − 6).

Full run (≈ 10 min on 2 cores):  nice -n 10 python benchmarks/avalue.py --json results/bench/avalue.json
CI subset (one small group, default variant only):  python benchmarks/avalue.py --quick

Reference-set comparison (--reference CONFIG --out DIR): the whole configuration with every Hessian
along Cartesian axes (DIR/all; --all-directions internal for the default directions), then a copy rerun
with the default window and directions (DIR/window: optimisations, and Hessian displacements made along
the same directions, come from the copied caches, so both variants rest on the same minima); per molecule the largest change
of a conformer or family population above 1 %, the change of the A-value (every temperature), the
Hessians computed, and the gradient calls a fresh run of each variant makes (minima + the Hessians and
mode-following re-optimisations of the frequency-checked conformers, read from the per-conformer records),
and b = RT ln(d_i/d_0) − Δ(G − E)_i of every conformer of the full run (chairqm.frequency_window).
  nice -n 10 python benchmarks/avalue.py --reference configs/reference.yaml --out results/bench/window
Hessian split (--hessian-split): one conformer's Hessian serially and over --cores processes.
With --from-run RUN (a finished run of the same configuration) both variants rerun only the thermo and
ensemble stages, through the stage runner, on copies of RUN.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import _common as C

GROUPS = ["[*]C#N", "[*]OC(F)(F)F", "[*]N(C)C", "[*]C1CCC1"]      # the groups of issue 17
QUICK = ["[*]F"]
VARIANTS = {"before": {"thermo": {"frequency_window_kcal": "all", "hessian_directions": "cartesian"},
                       "optimize": {"optimizer": "precon-lbfgs"}},
            "window": {"optimize": {"optimizer": "precon-lbfgs"}, "thermo": {"hessian_directions": "cartesian"}},
            "model-hessian": {"optimize": {"optimizer": "bfgs-model"}, "thermo": {"hessian_directions": "cartesian"}},
            # the defaults but the Hessian along every Cartesian axis (6N gradients, before 2026-12-05)
            "cartesian": {"thermo": {"hessian_directions": "cartesian"}},
            "default": {},
            # every stage job in its own interpreter, as before the warm starter (chairqm.stages.warm)
            "cold": {"_env": {"CHAIRQM_WARM": "0"}}}


def config_for(group: str, variant: dict) -> dict:
    """The configuration chairqm.api.avalues writes for one group, with the variant's settings added."""
    from chairqm import additivity
    from chairqm import avalues as tab
    from chairqm.api import avalue_molecule_name
    frag = tab.canonical_fragment(group)
    settings = {"analysis": {"reference_groups": False}, **{k: v for k, v in variant.items() if k != "_env"}}
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
                              capture_output=True, text=True, env=dict(os.environ, **variant.get("_env", {})))
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
        # floor: the two chairs' own optimisations + two Hessians (6N, and 2(3N - 6) along internal directions)
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
        floor_int = opt_calls + 2 * 2 * (3 * natoms - 6)
        row.update({"engine_s": engine, "gradient_calls": calls,
                    "hessian_gradients": thermo.get("hessian_gradients"),
                    "hessians": f"{thermo.get('hessians', len(thermo['conformers']))}/{len(thermo['conformers'])}",
                    "wall/engine": wall / engine if engine else float("nan"),
                    "a_value_kcal": float(a.iloc[0]) if len(a) and a.iloc[0] != "" else float("nan"),
                    "floor": floor, "calls/floor": calls / floor,
                    "floor_int": floor_int, "calls/floor_int": calls / floor_int})
        return row


def fresh_gradients(mol: Path) -> dict:
    """Gradient calls a fresh run makes for molecule folder `mol`: the minima stage's, and the Hessians
    (every round, computed or read from the cache) and mode-following re-optimisations of the
    frequency-checked conformers, from the per-conformer records."""
    minima = json.loads((mol / "minima.json").read_text())
    thermo = json.loads((mol / "thermo.json").read_text())
    hess = reopt = n = 0
    for c in thermo["conformers"]:
        if not c.get("frequency_checked", True):
            continue
        rec = json.loads((mol / "work" / "thermo" / f"{c['conformer']}.json").read_text())
        hess += sum(h["gradient_calls"] + h["reused"] for h in rec["proof"].get("hessians", []))
        reopt += rec.get("reopt_gradient_calls", 0)
        n += 1
    return {"minima": int(minima["gradient_calls"]), "hessian": int(hess), "reopt": int(reopt), "hessians": n,
            "conformers": len(thermo["conformers"]), "total": int(minima["gradient_calls"] + hess + reopt)}


def brackets(mol: Path) -> list[dict]:
    """b_i = RT ln(d_i/d_0) − [(G_i − E_i) − (G_0 − E_0)] (kcal/mol) of every counted conformer at every
    temperature, 0 = the lowest electronic energy (chairqm.frequency_window's margin must cover it)."""
    import math

    import pandas as pd

    from chairqm.units import KCAL_PER_HARTREE, R_KCAL
    thermo = json.loads((mol / "thermo.json").read_text())
    deg = {c["conformer"]: c["degeneracy"] for c in thermo["conformers"]}
    df = pd.read_csv(mol / "conformers.csv", keep_default_na=False)
    df = df[(df.status == "ok") & (df.population != "")]
    out = []
    for t, g in df.groupby("temperature_k"):
        e, gg = g.energy_hartree.astype(float), g.g_hartree.astype(float)
        i0 = e.idxmin()
        c0 = g.loc[i0, "conformer"]
        for i in g.index:
            cid = g.loc[i, "conformer"]
            corr = ((gg[i] - e[i]) - (gg[i0] - e[i0])) * KCAL_PER_HARTREE
            out.append({"molecule": mol.name, "conformer": cid, "temperature_k": float(t),
                        "ring_form": g.loc[i, "ring_form"], "de_kcal": (e[i] - e[i0]) * KCAL_PER_HARTREE,
                        "population": float(g.loc[i, "population"]),
                        "b_kcal": R_KCAL * float(t) * math.log(deg[cid] / deg[c0]) - corr})
    return out


def _stages_again(cfg_path: Path, folder: Path, molecules, cores: int) -> int:
    """Rerun only the thermo and ensemble stages of every molecule in `folder` with this chairqm (the
    stage runner, no Snakemake): the optimisations stay as they are, Hessian displacements come from the
    cache. Returns the number of molecules whose stages failed."""
    import os
    env = dict(os.environ, CHAIRQM_CONFIG=str(cfg_path.resolve()), OMP_NUM_THREADS="1")
    bad = 0
    for m in molecules:
        for stage in ("thermo", "ensemble"):
            proc = subprocess.run([sys.executable, "-m", "chairqm.stages", stage, "--molecule", m, "--threads",
                                   str(cores)], cwd=folder, env=env, capture_output=True, text=True)
            if proc.returncode or (folder / m / "failed.json").is_file():
                print(f"# {m} {stage}: failed {proc.stderr[-500:]}", file=sys.stderr)
                bad += 1
                break
    return bad


def compare_reference(config: Path, out: Path, cores: int, stages_only: Path | None = None,
                      rerun: bool = True, all_directions: str = "cartesian") -> int:
    import shutil

    import pandas as pd
    import yaml
    out.mkdir(parents=True, exist_ok=True)
    base = yaml.safe_load(Path(config).read_text())
    runs = {}
    for label, window in (("all", "all"), ("window", None)):
        cfg = json.loads(json.dumps(base))
        th = cfg.setdefault("settings", {}).setdefault("thermo", {})
        if window is None:
            th.pop("frequency_window_kcal", None)
        else:
            th["frequency_window_kcal"] = window
            th["hessian_directions"] = all_directions      # the full-frequency reference: 6N by default
        path = out / f"{label}.yaml"
        path.write_text(yaml.safe_dump(cfg, sort_keys=False))
        dest = out / label
        t0 = time.perf_counter()
        if not rerun and dest.exists():
            rc = 0
        elif stages_only is not None:
            # an earlier finished run: both variants rerun thermo and ensemble on copies of it
            if not dest.exists():
                shutil.copytree(stages_only, dest, symlinks=True)
            names = [m["name"] for m in cfg["molecules"] if (dest / m["name"] / "minima.json").is_file()]
            rc = _stages_again(path, dest, names, cores)
        else:
            if label == "window" and not dest.exists():
                shutil.copytree(runs["all"], dest)
            rc = subprocess.run([C.CHAIRQM, "run", str(path), "--out", str(dest), "--cores", str(cores)],
                                capture_output=True, text=True).returncode
        print(f"# {label}: exit {rc}, {time.perf_counter() - t0:.0f} s", file=sys.stderr, flush=True)
        runs[label] = dest
    rows, bs = [], []
    def a_values(folder, m):
        e = json.loads((folder / m / "ensemble.json").read_text())
        return {r["temperature_k"]: (r.get("a_value_kcal"), r.get("chair_dg_kcal")) for r in e.get("temperatures", [])}

    for m in sorted(x["name"] for x in base["molecules"]):
        ma, mw = runs["all"] / m, runs["window"] / m
        if not (ma / "thermo.json").is_file() or not (mw / "conformers.csv").is_file():
            rows.append({"molecule": m, "status": "missing"})
            continue
        ca = pd.read_csv(ma / "conformers.csv", keep_default_na=False)
        cw = pd.read_csv(mw / "conformers.csv", keep_default_na=False)
        pops = ca.merge(cw, on=["conformer", "temperature_k"], suffixes=("_a", "_w"))
        pa = pd.to_numeric(pops.population_a, errors="coerce").fillna(0.0)
        pw = pd.to_numeric(pops.population_w, errors="coerce").fillna(0.0)
        big = (pa > 0.01) | (pw > 0.01)
        fa = pd.read_csv(ma / "families.csv", keep_default_na=False)
        fw_ = pd.read_csv(mw / "families.csv", keep_default_na=False)
        fam = fa.merge(fw_, on=["temperature_k", "ring_form", "orientation"], suffixes=("_a", "_w"), how="outer")
        fpa, fpw = fam.population_a.astype(float).fillna(0.0), fam.population_w.astype(float).fillna(0.0)
        fbig = (fpa > 0.01) | (fpw > 0.01)
        ra, rw = a_values(runs["all"], m), a_values(runs["window"], m)
        da = [abs(ra[t][0] - rw[t][0]) for t in ra if t in rw and ra[t][0] is not None and rw[t][0] is not None]
        dg = [abs(ra[t][1] - rw[t][1]) for t in ra if t in rw and ra[t][1] is not None and rw[t][1] is not None]
        ga, gw = fresh_gradients(ma), fresh_gradients(mw)
        unchecked = cw[cw.frequency_checked.astype(str) == "False"]
        rows.append({"molecule": m, "status": "ok", "hessians": f"{gw['hessians']}/{ga['hessians']}",
                     "max_dpop_conformer_pp": 100 * float((pa - pw)[big].abs().max() if big.any() else 0.0),
                     "max_dpop_family_pp": 100 * float((fpa - fpw)[fbig].abs().max() if fbig.any() else 0.0),
                     "max_unchecked_pop_pct": 100 * float(pd.to_numeric(unchecked.population, errors="coerce").max()
                                                          if len(unchecked) else 0.0),
                     "dA_kcal": max(da) if da else float("nan"), "dgap_kcal": max(dg) if dg else float("nan"),
                     "grad_all": ga["total"], "grad_window": gw["total"],
                     "hessian_grad_all": ga["hessian"], "hessian_grad_window": gw["hessian"]})
        bs.extend(brackets(ma))
    info = C.machine()
    C.print_machine(info)
    print(f"# {config}: every Hessian (all, {all_directions} directions) against the default window (window), same minima; "
          "populations above 1 % in either run; pp = percentage points")
    print(C.table(rows, floatfmt=".3g"))
    ok = [r for r in rows if r.get("status") == "ok"]
    tot_a, tot_w = sum(r["grad_all"] for r in ok), sum(r["grad_window"] for r in ok)
    print(f"\n# totals over {len(ok)} molecules: gradient calls {tot_a} (all) -> {tot_w} (window), "
          f"ratio {tot_w / tot_a:.3f}; Hessian gradients {sum(r['hessian_grad_all'] for r in ok)} -> "
          f"{sum(r['hessian_grad_window'] for r in ok)}")
    print(f"# largest population change above 1 %: conformer {max(r['max_dpop_conformer_pp'] for r in ok):.3f} pp, "
          f"family {max(r['max_dpop_family_pp'] for r in ok):.3f} pp; largest A-value change "
          f"{max((r['dA_kcal'] for r in ok if r['dA_kcal'] == r['dA_kcal']), default=float('nan')):.4f} kcal/mol; "
          f"largest chair-gap change {max((r['dgap_kcal'] for r in ok if r['dgap_kcal'] == r['dgap_kcal']), default=float('nan')):.4f} kcal/mol; "
          f"largest population of a conformer without its own Hessian "
          f"{max(r['max_unchecked_pop_pct'] for r in ok):.4f} %")
    top = sorted(bs, key=lambda r: -r["b_kcal"])[:5]
    print(f"# b = RT ln(d_i/d_0) - delta(G - E)_i over {len(bs)} conformer-temperatures of the full run: largest "
          + "; ".join(f"{r['b_kcal']:.2f} ({r['molecule']} {r['conformer']} {r['ring_form']}, dE {r['de_kcal']:.2f})"
                      for r in top))
    C.save_json(out / "comparison.json", {"machine": info, "rows": rows, "brackets": bs})
    return 0


def hessian_split(cores: int, repeats: int = 3) -> int:
    """One conformer's Hessian (methylcyclohexane, equatorial chair, GFN2-xTB) computed serially and split
    over `cores` processes (chairqm.vibrations.hessian_run with an executor of cores − 1 spawned workers,
    warmed up first); median wall seconds of `repeats` runs each, interleaved, fresh cache folders."""
    import multiprocessing as mp
    from concurrent.futures import ProcessPoolExecutor

    import numpy as np
    from ase import Atoms

    from chairqm import vibrations as V
    from chairqm.seeds import build_seeds
    settings = C.default_settings()
    p = C.perceive("methylcyclohexane", "CC1CCCCC1")
    seed = [s for s in build_seeds(p.mol, p.ring, p.substituents, settings["seeds"]) if s.kept][0]
    r = C.optimise_and_check(p, seed.positions, "auto", settings)
    atoms = Atoms([a.GetSymbol() for a in p.mol.GetAtoms()], positions=r["positions"])
    factory = C.calc_factory(p, settings)
    times = {"serial": [], "split": []}
    same = True
    with tempfile.TemporaryDirectory() as tmp, \
            ProcessPoolExecutor(max_workers=cores - 1, mp_context=mp.get_context("spawn")) as ex:
        V.hessian_run(atoms, factory, Path(tmp) / "warm", executor=ex)          # workers import once
        for k in range(repeats):
            t0 = time.perf_counter()
            a = V.hessian_run(atoms, factory, Path(tmp) / f"s{k}")
            times["serial"].append(time.perf_counter() - t0)
            t0 = time.perf_counter()
            b = V.hessian_run(atoms, factory, Path(tmp) / f"p{k}", executor=ex)
            times["split"].append(time.perf_counter() - t0)
            same = same and np.array_equal(a.hessian, b.hessian)
    C.print_machine()
    print(f"# one Hessian of methylcyclohexane ({a.gradient_calls} gradients), serial against split over {cores} "
          f"processes; median of {repeats}, interleaved; bitwise identical: {same}")
    med = {k: float(np.median(v)) for k, v in times.items()}
    print(C.table([{"mode": k, "median_wall_s": med[k], "runs": " ".join(f"{x:.2f}" for x in v),
                    "ratio_to_serial": med[k] / med["serial"]} for k, v in times.items()], floatfmt=".3g"))
    return 0


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="one small group, default settings only")
    ap.add_argument("--cores", type=int, default=2)
    ap.add_argument("--groups", default=None, help="comma-separated groups (default: the issue's four)")
    ap.add_argument("--variants", default=None, help=f"comma-separated, from {', '.join(VARIANTS)}")
    ap.add_argument("--json", default=None, help="also write the results to this JSON file")
    ap.add_argument("--reference", default=None, help="a configuration: compare every Hessian against the window")
    ap.add_argument("--out", default="results/bench/window", help="output folder of --reference")
    ap.add_argument("--hessian-split", action="store_true", help="time one Hessian serially and split over --cores")
    ap.add_argument("--compare-only", action="store_true", help="with --reference: compare the folders already in --out")
    ap.add_argument("--all-directions", default="cartesian", choices=["cartesian", "internal"],
                    help="with --reference: Hessian directions of the every-Hessian run (default cartesian, 6N)")
    ap.add_argument("--from-run", default=None,
                    help="with --reference: a finished run folder of that configuration; both variants rerun only "
                         "the thermo and ensemble stages on copies of it (no new optimisations)")
    args = ap.parse_args(argv)
    if args.hessian_split:
        return hessian_split(args.cores)
    if args.reference:
        return compare_reference(Path(args.reference), Path(args.out), args.cores,
                                 Path(args.from_run) if args.from_run else None, rerun=not args.compare_only,
                                 all_directions=args.all_directions)
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
          "minima.json + thermo.json; floor = two chair optimisations + two 6N Hessians; floor_int with two 2(3N-6) Hessians")
    cols = ["group", "variant", "status", "wall_s", "engine_s", "wall/engine", "gradient_calls",
            "hessian_gradients", "hessians", "floor", "calls/floor", "floor_int", "calls/floor_int", "a_value_kcal"]
    print(C.table(rows, cols, floatfmt=".4g"))
    C.save_json(args.json, {"machine": info, "rows": rows})
    return 0


if __name__ == "__main__":
    sys.exit(main())
