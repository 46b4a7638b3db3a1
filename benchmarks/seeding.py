"""Benchmark b: chairqm's deliberate seeds against a brute-force baseline of random RDKit embeddings.

For each molecule, chairqm's route (chairqm.seeds.build_seeds → GFN2-xTB optimisation of every kept seed →
bond/stereo checks → chairqm.unique.unique_minima → chairqm.ring.measure families) is compared with
`--embeddings` random ETKDG embeddings (RDKit EmbedMultipleConfs, fixed randomSeed) optimised with the
same engine, settings and optimiser, checked and deduplicated the same way.  The question: does chairqm
find every family (ring form + orientation pattern) and every minimum within `--window` kcal/mol of the
lowest that the baseline finds, and how many gradient calls does each route spend?  "The same minimum"
is decided by pooling both sets of optimised structures into one unique_minima call (heavy-atom RMSD ≤
0.125 Å and |ΔE| ≤ 0.1 kcal/mol, mirror images merged for achiral molecules, the workflow's defaults).

Each baseline minimum chairqm missed gets a finite-difference Hessian (chairqm.vibrations): one with an
imaginary mode beyond 15 cm⁻¹ is a saddle point the optimiser stopped at (a flat rotor), not a missed minimum.

Full run (≈ 15–30 min on 2 quiet cores):  nice -n 10 python benchmarks/seeding.py --json results/bench/seeding.json
CI subset (seconds):               python benchmarks/seeding.py --quick
"""

from __future__ import annotations

import argparse
import multiprocessing as mp
import sys
import time
from concurrent.futures import ProcessPoolExecutor

import _common as C

MOLECULES = [  # (name, SMILES, kind)
    ("methylcyclohexane", "CC1CCCCC1", "monosubstituted"),
    ("isopropylcyclohexane", "CC(C)C1CCCCC1", "monosubstituted, rotamers"),
    ("tert-butylcyclohexane", "CC(C)(C)C1CCCCC1", "bulky"),
    ("methoxycyclohexane", "COC1CCCCC1", "monosubstituted, O rotor"),
    ("butylcyclohexane", "CCCCC1CCCCC1", "flexible chain"),
    ("cis-1,3-dimethylcyclohexane", "C[C@H]1CCC[C@@H](C)C1", "disubstituted"),
    ("trans-1,2-dimethylcyclohexane", "C[C@@H]1CCCC[C@H]1C", "disubstituted, chiral"),
    ("2-methoxytetrahydropyran", "CO[C@@H]1CCCCO1", "heterocycle, anomeric"),
]
QUICK = [("fluorocyclohexane", "FC1CCCCC1", "monosubstituted")]
EMBED_SEED = 20240611          # randomSeed of EmbedMultipleConfs (fixed, so the baseline is reproducible)

_cache: dict = {}


def _job(args):
    name, smiles, positions, settings = args
    key = (name, smiles)
    if key not in _cache:
        _cache[key] = C.perceive(name, smiles)
    r = C.optimise_and_check(_cache[key], positions, "auto", settings)
    r["positions"] = r["positions"].tolist()
    return r


def _map(jobs, workers):
    if workers <= 1:
        return [_job(j) for j in jobs]
    with ProcessPoolExecutor(max_workers=workers, mp_context=mp.get_context("spawn")) as ex:
        return list(ex.map(_job, jobs, chunksize=2))


def embeddings(p, n: int, seed: int = EMBED_SEED):
    """`n` random ETKDGv3 embeddings of molecule p (stereo kept), positions in p's atom order."""
    from rdkit import Chem
    from rdkit.Chem import AllChem
    mol = Chem.Mol(p.mol)
    params = AllChem.ETKDGv3()
    params.randomSeed = seed
    params.pruneRmsThresh = -1.0        # keep every embedding: the brute force is the point
    params.numThreads = 1
    ids = list(AllChem.EmbedMultipleConfs(mol, numConfs=n, params=params))
    return [mol.GetConformer(i).GetPositions() for i in ids]


def compare(p, ours: list[dict], base: list[dict], window_kcal: float, settings: dict) -> dict:
    """Pool both routes' good minima, deduplicate, and list what the baseline found that chairqm did not."""
    from chairqm import unique as cq_unique
    from chairqm.units import KCAL_PER_HARTREE

    u = settings["unique"]
    recs = []
    fam = {}
    for tag, results in (("q", ours), ("b", base)):
        for i, r in enumerate(results):
            if r["status"] != "ok":
                continue
            nm = f"{tag}{i}"
            recs.append(cq_unique.Record(name=nm, positions=r["positions"], energy_hartree=r["energy_hartree"]))
            fam[nm] = f"{r['ring_form']}:{r['orientation']}"
    groups = cq_unique.unique_minima(p.mol, recs, rmsd_tol=u["rmsd_a"], energy_tol_kcal=u["energy_kcal"])
    e_base = [g.energy_hartree for g in groups if any(m.startswith("b") for m in g.members)]
    e_ours = [g.energy_hartree for g in groups if any(m.startswith("q") for m in g.members)]
    e0 = min(e_base) if e_base else float("nan")
    missed, base_in_window, families_b, families_q, families_bw = [], 0, set(), set(), set()
    missed_groups = []
    for g in groups:
        has_q = any(m.startswith("q") for m in g.members)
        has_b = any(m.startswith("b") for m in g.members)
        f = fam[g.name]
        if has_q:
            families_q.add(f)
        if has_b:
            families_b.add(f)
            rel = (g.energy_hartree - e0) * KCAL_PER_HARTREE
            if rel <= window_kcal + 1e-9:
                base_in_window += 1
                families_bw.add(f)
                if not has_q:
                    missed.append(f"{f} at {rel:.2f}")
                    missed_groups.append((g, rel))
    # the lowest baseline minimum of each family chairqm lacks entirely (also outside the window)
    lacking = families_b - families_q
    for g in groups:
        f = fam[g.name]
        if f in lacking and all(m.startswith("b") for m in g.members):
            lacking.discard(f)
            if not any(h is g for h, _ in missed_groups):
                missed_groups.append((g, (g.energy_hartree - e0) * KCAL_PER_HARTREE))
    only_q_groups = [g for g in groups if all(m.startswith("q") for m in g.members)]
    only_q = len(only_q_groups)
    return {"minima_ours": len(e_ours), "minima_base": len(e_base), "base_in_window": base_in_window,
            "missed_in_window": len(missed), "missed_detail": missed,
            "families_base": len(families_b), "families_ours": len(families_q),
            "families_missed": sorted(families_b - families_q),
            "families_missed_in_window": sorted(families_bw - families_q), "only_ours": only_q,
            "lowest_gap_kcal": ((min(e_ours) - e0) * KCAL_PER_HARTREE) if e_ours and e_base else float("nan"),
            "_missed_groups": missed_groups, "_only_ours": only_q_groups, "_e0": e0, "_records": {r.name: r for r in recs}, "_families": fam}


def check_missed(p, cmp: dict, settings: dict, threshold_cm1: float = 15.0) -> list[dict]:
    """For each baseline minimum chairqm missed within the window, the lowest baseline minimum of each
    family chairqm lacks, and each chairqm minimum the baseline did not find: its Hessian (chairqm.vibrations), lowest frequency and
    number of imaginary modes beyond `threshold_cm1` (the thermo stage's default), and its nearest chairqm
    minimum (heavy-atom RMSD, energy difference).  A structure with an imaginary mode is a saddle point
    the optimiser stopped at, not a minimum chairqm failed to find."""
    import tempfile

    import numpy as np
    from ase import Atoms

    from chairqm import unique as cq_unique
    from chairqm import vibrations as cq_vib
    from chairqm.units import KCAL_PER_HARTREE

    recs = cmp["_records"]
    ours = [r for n, r in recs.items() if n.startswith("q")]
    syms = [a.GetSymbol() for a in p.mol.GetAtoms()]

    def lowest(r):
        atoms = Atoms(syms, positions=np.asarray(r.positions))
        with tempfile.TemporaryDirectory() as tmp:
            h = cq_vib.hessian(atoms, C.calc_factory(p, settings)(), tmp)
        freqs = np.sort(np.asarray(cq_vib.frequencies(h, atoms)[0]))
        return float(freqs[0]), int((freqs < -threshold_cm1).sum())

    out = []
    for g, rel in cmp["_missed_groups"]:
        r = recs[g.name]
        low, nimag = lowest(r)
        nearest = min(ours, key=lambda q: cq_unique.best_rmsd(p.mol, r.positions, q.positions)) if ours else None
        out.append({"side": "baseline only", "family": cmp["_families"][g.name], "rel_kcal": rel,
                    "lowest_cm1": low, "n_imaginary": nimag,
                    "nearest_ours_rmsd_a": cq_unique.best_rmsd(p.mol, r.positions, nearest.positions) if nearest else None,
                    "nearest_ours_de_kcal": (r.energy_hartree - nearest.energy_hartree) * KCAL_PER_HARTREE if nearest else None,
                    "xyz": "\n".join([str(len(syms)), f"{g.name} rel {rel:.3f} kcal/mol"] +
                                     [f"{s} {x:.6f} {y:.6f} {z:.6f}" for s, (x, y, z) in zip(syms, r.positions)])})
    for g in cmp["_only_ours"]:
        r = recs[g.name]
        low, nimag = lowest(r)
        out.append({"side": "chairqm only", "family": cmp["_families"][g.name],
                    "rel_kcal": (g.energy_hartree - cmp["_e0"]) * KCAL_PER_HARTREE,
                    "lowest_cm1": low, "n_imaginary": nimag, "nearest_ours_rmsd_a": None,
                    "nearest_ours_de_kcal": None, "xyz": ""})
    return out


def run(molecules, n_embed: int, window: float, workers: int, settings: dict, check: bool = False,
        partial=None) -> list[dict]:
    from chairqm.seeds import build_seeds
    rows = []
    for name, smiles, kind in molecules:
        p = C.perceive(name, smiles)
        t0 = time.perf_counter()
        seeds = [s for s in build_seeds(p.mol, p.ring, p.substituents, settings["seeds"]) if s.kept]
        t_seed = time.perf_counter() - t0
        t1 = time.perf_counter()
        ours = _map([(name, smiles, s.positions, settings) for s in seeds], workers)
        t_ours = time.perf_counter() - t1
        t2 = time.perf_counter()
        base = _map([(name, smiles, x, settings) for x in embeddings(p, n_embed)], workers)
        t_base = time.perf_counter() - t2
        cmp = compare(p, ours, base, window, settings)
        checked = check_missed(p, cmp, settings) if check else []
        for k in [k for k in cmp if k.startswith("_")]:
            cmp.pop(k)
        g_ours = sum(r["gradient_calls"] for r in ours)
        g_base = sum(r["gradient_calls"] for r in base)
        rows.append({"molecule": name, "kind": kind, "seeds": len(seeds), "embeddings": len(base),
                     "failed_ours": sum(r["status"] != "ok" for r in ours),
                     "failed_base": sum(r["status"] != "ok" for r in base),
                     **cmp, "grad_ours": g_ours, "grad_base": g_base,
                     "grad_ratio": g_ours / g_base if g_base else float("nan"),
                     "engine_ours_s": sum(r["engine_seconds"] for r in ours),
                     "engine_base_s": sum(r["engine_seconds"] for r in base),
                     "seed_build_s": t_seed, "wall_ours_s": t_ours, "wall_base_s": t_base,
                     "missed_checked": checked})
        if partial:
            C.save_json(partial, {"rows": rows})
        print(f"# {name}: {len(seeds)} seeds, {len(base)} embeddings, missed {cmp['missed_in_window']}, "
              f"gradients {g_ours} vs {g_base}", file=sys.stderr, flush=True)
    return rows


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="seconds-long CI subset (one molecule, 12 embeddings, one process)")
    ap.add_argument("--embeddings", type=int, default=None, help="random embeddings per molecule (default 200)")
    ap.add_argument("--window", type=float, default=None,
                    help="kcal/mol above the baseline's lowest minimum (default 3; 10 with --quick, so that the "
                         "twist-boat it leaves out is reported missed and the Hessian check runs)")
    ap.add_argument("--workers", type=int, default=2, help="worker processes (default 2)")
    ap.add_argument("--only", default=None, help="comma-separated molecule names of the full set to run")
    ap.add_argument("--no-check", action="store_true",
                    help="do not compute Hessians of the baseline minima chairqm missed")
    ap.add_argument("--json", default=None, help="also write the results to this JSON file")
    args = ap.parse_args(argv)
    settings = C.default_settings()
    if args.quick:
        mols, n = QUICK, args.embeddings or 12
        settings["seeds"]["twist_boats"] = False
        args.workers = 1                  # no worker start-up for a few optimisations
        args.window = 10.0 if args.window is None else args.window
    else:
        mols, n = MOLECULES, args.embeddings or 200
        if args.only:
            want = args.only.split(",")
            unknown = sorted(set(want) - {m[0] for m in MOLECULES})
            if unknown:
                raise SystemExit(f"--only: unknown molecule(s) {unknown}; known: {[m[0] for m in MOLECULES]}")
            mols = [m for m in MOLECULES if m[0] in want]
    args.window = 3.0 if args.window is None else args.window
    info = C.machine()
    rows = run(mols, n, args.window, args.workers, settings, check=not args.no_check,
               partial=(args.json + ".partial") if args.json else None)
    C.print_machine(info)
    print(f"# seeding efficiency: chairqm seeds vs {n} random ETKDG embeddings (randomSeed {EMBED_SEED}); "
          f"{settings['method']} / {settings['engine']}, default optimiser, window {args.window:g} kcal/mol")
    cols = ["molecule", "seeds", "embeddings", "minima_ours", "minima_base", "base_in_window",
            "missed_in_window", "families_ours", "families_base", "grad_ours", "grad_base", "grad_ratio",
            "lowest_gap_kcal", "only_ours", "failed_ours", "failed_base"]
    print(C.table(rows, cols))
    tot_o = sum(r["grad_ours"] for r in rows)
    tot_b = sum(r["grad_base"] for r in rows)
    missed = sum(r["missed_in_window"] for r in rows)
    fmissed = sum(len(r["families_missed"]) for r in rows)
    print(f"\ntotal gradient calls: chairqm {tot_o}, baseline {tot_b}, ratio {tot_o / max(tot_b, 1):.3f} "
          f"(target <= 0.2); baseline minima within window missed by chairqm: {missed}; "
          f"baseline families missed: {fmissed}")
    for r in rows:
        if r["missed_detail"] or r["families_missed"]:
            print(f"  {r['molecule']}: missed minima {r['missed_detail']}; missed families {r['families_missed']}")
        for m in r.get("missed_checked", []):
            if m["side"] != "baseline only":
                continue
            kind = "saddle point" if m["n_imaginary"] else "minimum"
            print(f"    {m['family']} at {m['rel_kcal']:.2f} kcal/mol: lowest frequency {m['lowest_cm1']:.1f} cm-1, "
                  f"{m['n_imaginary']} imaginary -> {kind}; nearest chairqm minimum RMSD "
                  f"{m['nearest_ours_rmsd_a']:.3f} A, dE {m['nearest_ours_de_kcal']:+.3f} kcal/mol")
    print("\nHessian check (imaginary = below -15 cm-1):")
    chk = []
    for r in rows:
        mc = r.get("missed_checked", [])
        b = [m for m in mc if m["side"] == "baseline only"]
        q = [m for m in mc if m["side"] == "chairqm only"]
        bw = [m for m in b if m["rel_kcal"] <= args.window + 1e-9]
        chk.append({"molecule": r["molecule"],
                    "missed_in_window": len(bw), "of_which_saddles": sum(m["n_imaginary"] > 0 for m in bw),
                    "missed_true_minima": sum(m["n_imaginary"] == 0 for m in bw),
                    "family_reps_checked": len(b) - len(bw),
                    "family_reps_saddles": sum(m["n_imaginary"] > 0 for m in b if m not in bw),
                    "chairqm_only": len(q), "chairqm_only_saddles": sum(m["n_imaginary"] > 0 for m in q)})
    print(C.table(chk))
    C.save_json(args.json, {"machine": info, "embeddings": n, "window_kcal": args.window,
                            "embed_seed": EMBED_SEED, "rows": rows})
    return 0


if __name__ == "__main__":
    sys.exit(main())
