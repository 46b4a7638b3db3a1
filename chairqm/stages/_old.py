"""Stage entry points the Snakemake rules call: `python -m chairqm.stages STAGE --config C --molecule M`.

Each stage reads the files of the stage before it from the current folder (the run's output
folder) and writes its own, atomically. The science lives in the other modules.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import sys
from pathlib import Path

from . import config as cq_config
from . import fileio
from .errors import ChairqmError
from .molecule import Perceived, substituents_table
from .plan import make_plan


def _context(args):
    cfg = cq_config.load(args.config)
    plan = make_plan(cfg)
    if plan.problems:
        raise ChairqmError("\n".join(plan.problems))
    return cfg, plan


def load_molecule(name: str) -> Perceived:
    return Perceived.from_json(Path(name, "molecule.json").read_text())


def stage_intake(cfg, plan, name, threads=1):
    p = plan.get(name)
    folder = Path(name)
    fileio.write_text(folder / "molecule.json", p.to_json() + "\n")
    fileio.write_csv(folder / "substituents.csv", substituents_table(p))


# ------------------------------------------------------------------------------------------ helpers

def key_of(*parts) -> str:
    """A short, stable hash of JSON-able parts: the cache key of a per-conformer record."""
    text = json.dumps(parts, sort_keys=True, default=str)
    return hashlib.sha256(text.encode()).hexdigest()[:20]


def engine_settings(cfg, p: Perceived) -> dict:
    s = cfg["settings"]
    return {"engine": s["engine"], "method": s["method"], "solvent": s.get("solvent"),
            "accuracy": s["accuracy"], "electronic_temperature": s["electronic_temperature_k"],
            "charge": p.charge, "multiplicity": p.multiplicity}


class CalcFactory:
    """Picklable calculator factory: factory(T_el=None) -> a fresh engine calculator."""

    def __init__(self, es: dict):
        self.es = dict(es)

    def __call__(self, electronic_temperature=None):
        from . import engine
        es = self.es
        t = es["electronic_temperature"] if electronic_temperature is None else electronic_temperature
        return engine.make_calculator(es["engine"], es["method"], es["charge"], es["multiplicity"],
                                      es["solvent"], es["accuracy"], t)


def _pool_map(fn, items, threads):
    """Run fn over items, in `threads` worker processes when more than one (spawned, so no engine state
    is inherited); results in input order."""
    items = list(items)
    if threads <= 1 or len(items) <= 1:
        return [fn(x) for x in items]
    import multiprocessing as mp
    from concurrent.futures import ProcessPoolExecutor
    with ProcessPoolExecutor(max_workers=min(threads, len(items)), mp_context=mp.get_context("spawn")) as ex:
        return list(ex.map(fn, items))


def atoms_from_xyz(path):
    from ase.io import read
    return read(str(path), format="extxyz")


def write_xyz(path, atoms, comment_info=None):
    import io
    from ase.io import write
    a = atoms.copy()
    a.calc = None
    a.info = dict(comment_info or {})
    buf = io.StringIO()
    write(buf, a, format="extxyz")
    fileio.write_text(path, buf.getvalue())


# Fault injection for the reliability tests: CHAIRQM_FAULTS='{"scf": ["mol/seed"], "bond": ["mol/seed"],
# "imaginary": ["mol/c001"], "crash": ["mol/minima"], "dft_scf": ["mol/c001"]}'. Each fault makes a real failure happen in the named
# place (an engine that raises, a stretched bond, a genuine saddle point, an unexpected error in a stage)
# so the tests see the isolation machinery work. Unset in normal use.
def fault(kind: str, where: str) -> bool:
    import os
    text = os.environ.get("CHAIRQM_FAULTS")
    if not text:
        return False
    return where in json.loads(text).get(kind, [])


def _failing_calculator():
    """Stands in for an engine whose SCF never converges (fault injection)."""
    from ase.calculators.calculator import Calculator

    class FailingSCF(Calculator):
        implemented_properties = ["energy", "forces"]

        def calculate(self, *args, **kwargs):
            raise RuntimeError("SCF did not converge (injected fault)")

    return FailingSCF()


def _stretch_a_bond(atoms):
    """Pull the first hydrogen 1.5 Å away from its neighbour (fault injection: a broken bond)."""
    import numpy as np
    a = atoms.copy()
    h = int(np.where(a.numbers == 1)[0][0])
    d = a.positions - a.positions[h]
    dist = np.linalg.norm(d, axis=1)
    dist[h] = np.inf
    j = int(np.argmin(dist))
    v = a.positions[h] - a.positions[j]
    a.positions[h] += 1.5 * v / np.linalg.norm(v)
    return a


def _eclipse_a_methyl(atoms, mol):
    """Rotate the hydrogens of a methyl group by 60° about its bond (fault injection: a genuine saddle
    point of the methyl rotation)."""
    import numpy as np
    a = atoms.copy()
    for atom in mol.GetAtoms():
        hs = [n.GetIdx() for n in atom.GetNeighbors() if n.GetAtomicNum() == 1]
        heavy = [n.GetIdx() for n in atom.GetNeighbors() if n.GetAtomicNum() > 1]
        if atom.GetSymbol() == "C" and len(hs) == 3 and len(heavy) == 1:
            c, x = atom.GetIdx(), heavy[0]
            axis = a.positions[c] - a.positions[x]
            axis /= np.linalg.norm(axis)
            th = np.pi / 3
            K = np.array([[0, -axis[2], axis[1]], [axis[2], 0, -axis[0]], [-axis[1], axis[0], 0]])
            R = np.eye(3) + np.sin(th) * K + (1 - np.cos(th)) * K @ K
            for h in hs:
                a.positions[h] = a.positions[c] + R @ (a.positions[h] - a.positions[c])
            return a
    return a


# ------------------------------------------------------------------------------------------ seeds

def stage_seeds(cfg, plan, name, threads=1):
    from . import seeds as cq_seeds
    p = load_molecule(name)
    folder = Path(name)
    found = cq_seeds.build_seeds(p.mol, p.ring, p.substituents, cfg["settings"]["seeds"])
    table = cq_seeds.write_seeds(found, folder / "seeds", p.mol)
    fileio.write_csv(folder / "seeds.csv", table)


# ------------------------------------------------------------------------------------------ minima

OPT_COLUMNS = ["conformer", "seed", "ring_form", "q", "theta", "phi", "orientation", "energy_hartree",
               "gradient_calls", "status", "reason"]


def _optimise_one(job):
    """Optimise one seed and verify it; write its record (XYZ, then JSON as the completion mark)."""
    from . import optimize as cq_opt
    from . import ring as cq_ring
    name, seed, key, es, opt, xyz_in, out_xyz, out_json = job
    p = load_molecule(name)
    mol = p.mol
    atoms = atoms_from_xyz(xyz_in)
    factory = (lambda t=None: _failing_calculator()) if fault("scf", f"{name}/{seed}") else CalcFactory(es)
    res = cq_opt.optimize(atoms, factory, fmax=opt["fmax_ev_per_a"], max_steps=opt["max_steps"],
                          optimizer=opt["optimizer"], electronic_temperature=es["electronic_temperature"])
    rec = {"key": key, "seed": seed, "engine": es, "optimize": opt, **res.record()}
    status, reasons = res.status, [res.reason] if res.reason else []
    geom = res.atoms
    if fault("bond", f"{name}/{seed}"):
        geom = _stretch_a_bond(geom)
    ref_pairs = {tuple(sorted((b.GetBeginAtomIdx(), b.GetEndAtomIdx()))) for b in mol.GetBonds()}
    if status != "failed":
        ok_b, why_b = cq_opt.check_bonds(ref_pairs, geom)
        ok_s, why_s = cq_opt.check_stereo(mol, geom.positions)
        rec["checks"] = {"bonds": ok_b, "bonds_reason": why_b, "stereo": ok_s, "stereo_reason": why_s}
        if not ok_b:
            status, reasons = "failed", reasons + [f"bonds changed: {why_b}"]
        if not ok_s:
            status, reasons = "failed", reasons + [f"stereo changed: {why_s}"]
        m = cq_ring.measure(geom.positions, p.ring, p.substituents)
        rec["measured"] = m
    else:
        rec["checks"] = {}
        rec["measured"] = None
    rec["status"] = status
    rec["reason"] = "; ".join(r for r in reasons if r)
    write_xyz(out_xyz, geom, {"seed": seed, "energy_hartree": rec["energy_hartree"]})
    fileio.write_json(out_json, rec)
    return rec


def _opt_settings(cfg):
    return dict(cfg["settings"]["optimize"])


def stage_minima(cfg, plan, name, threads=1):
    import pandas as pd
    from . import __version__
    from . import unique as cq_unique
    p = load_molecule(name)
    folder = Path(name)
    work = folder / "work" / "opt"
    es = engine_settings(cfg, p)
    opt = _opt_settings(cfg)
    seeds_df = pd.read_csv(folder / "seeds.csv", keep_default_na=False)
    kept = seeds_df[seeds_df["status"] == "ok"]
    jobs, recs = [], {}
    for seed in kept["seed"]:
        xyz_in = folder / "seeds" / f"{seed}.xyz"
        key = key_of(xyz_in.read_text(), es, opt, __version__)
        out_json = work / f"{seed}.json"
        if out_json.is_file():
            old = fileio.read_json(out_json)
            if old.get("key") == key and old.get("status") != "failed" and (work / f"{seed}.xyz").is_file():
                recs[seed] = old          # finished earlier with the same input and settings: reuse
                continue                  # (a failed record is retried)
        jobs.append((name, seed, key, es, opt, str(xyz_in), str(work / f"{seed}.xyz"), str(out_json)))
    for rec in _pool_map(_optimise_one, jobs, threads):
        recs[rec["seed"]] = rec
    good = [s for s in kept["seed"] if recs[s]["status"] == "ok"]
    geoms = {s: atoms_from_xyz(work / f"{s}.xyz") for s in good}
    groups = cq_unique.unique_minima(
        p.mol, [cq_unique.Record(name=s, positions=geoms[s].positions, energy_hartree=recs[s]["energy_hartree"])
                for s in good],
        rmsd_tol=cfg["settings"]["unique"]["rmsd_a"], energy_tol_kcal=cfg["settings"]["unique"]["energy_kcal"])
    groups = sorted(groups, key=lambda g: (recs[g.name]["energy_hartree"], g.name))
    conf_of, dup_of, conformers = {}, {}, []
    for k, g in enumerate(groups, 1):
        cid = f"c{k:03d}"
        conf_of[g.name] = cid
        for m in list(g.members) + list(g.mirror_members):
            if m != g.name:
                dup_of[m] = cid
    for k, g in enumerate(groups, 1):
        cid = conf_of[g.name]
        meas = recs[g.name]["measured"]
        write_xyz(folder / "minima" / f"{cid}.xyz", geoms[g.name], {"conformer": cid, "seed": g.name})
        conformers.append({"conformer": cid, "seed": g.name, "members": list(g.members),
                           "degeneracy": int(g.degeneracy), "chiral_conformer": bool(g.chiral_conformer),
                           "mirror_of": g.mirror_of, "mirror_members": list(g.mirror_members),
                           "energy_hartree": recs[g.name]["energy_hartree"], **meas})
    rows = []
    for _, srow in kept.iterrows():
        s = srow["seed"]
        r = recs[s]
        meas = r.get("measured") or {}
        status, reason = r["status"], r.get("reason", "")
        if s in dup_of:
            mirror = any(s in g.mirror_members for g in groups)
            status, reason = "duplicate", (f"mirror image of {dup_of[s]} (counted in its degeneracy)" if mirror
                                           else f"same minimum as {dup_of[s]}")
        seed_label = f"{srow['ring_form']}:{srow['orientation']}"
        if meas and (meas["ring_form"], meas["orientation"]) != (srow["ring_form"], srow["orientation"]):
            reason = "; ".join(x for x in (reason, f"relaxed from seed form {seed_label}") if x)
        rows.append({"conformer": conf_of.get(s, ""), "seed": s,
                     "ring_form": meas.get("ring_form", ""), "q": meas.get("q"), "theta": meas.get("theta"),
                     "phi": meas.get("phi"), "orientation": meas.get("orientation", ""),
                     "energy_hartree": r["energy_hartree"], "gradient_calls": r["gradient_calls"],
                     "status": status, "reason": reason, "seed_ring_form": srow["ring_form"],
                     "seed_orientation": srow["orientation"], "steps": r["steps"],
                     "fmax_ev_per_a": r["fmax_final"], "engine_seconds": r["engine_seconds"]})
    table = pd.DataFrame(rows, columns=OPT_COLUMNS + ["seed_ring_form", "seed_orientation", "steps",
                                                      "fmax_ev_per_a", "engine_seconds"])
    fileio.write_json(folder / "minima.json", {
        "molecule": name, "engine": es, "optimize": opt, "conformers": conformers,
        "engine_seconds": float(sum(recs[s]["engine_seconds"] for s in kept["seed"])),
        "gradient_calls": int(sum(recs[s]["gradient_calls"] for s in kept["seed"])),
        "chairqm_version": __version__})
    fileio.write_csv(folder / "minima.csv", table)



# ------------------------------------------------------------------------------------------ thermo

THERMO_COLUMNS = ["conformer", "temperature_k", "zpe_hartree", "h_hartree", "s_hartree_per_k", "g_hartree",
                  "symmetry_number", "degeneracy", "lowest_frequency_cm1", "n_imaginary", "status"]
CURVE_T = [float(t) for t in range(150, 451, 10)]      # K: populations-against-temperature curve


def _thermo_settings(cfg):
    t = dict(cfg["settings"]["thermo"])
    t["standard_state"] = "solution" if cfg["settings"].get("solvent") else "gas"
    return t


def _freq_one(job):
    """Hessian, proof of minimum and thermal terms of one conformer; record written atomically."""
    import numpy as np
    from . import optimize as cq_opt
    from . import ring as cq_ring
    from . import thermo as cq_thermo
    from . import vibrations as cq_vib
    name, cid, key, es, opt, th, temps, xyz_in, energy, cache_dir, out_json, out_xyz = job
    p = load_molecule(name)
    atoms = atoms_from_xyz(xyz_in)
    factory = CalcFactory(es)
    opt_calls = {"n": 0, "seconds": 0.0}

    def reoptimize(a):
        r = cq_opt.optimize(a, factory, fmax=opt["fmax_ev_per_a"], max_steps=opt["max_steps"],
                            optimizer=opt["optimizer"], electronic_temperature=es["electronic_temperature"])
        opt_calls["n"] += r.gradient_calls
        opt_calls["seconds"] += r.engine_seconds
        if r.status == "failed":
            raise RuntimeError(r.reason)
        return r.atoms, r.energy_hartree

    max_rounds = th["max_rounds"]
    if fault("imaginary", f"{name}/{cid}"):
        atoms, energy, max_rounds = _eclipse_a_methyl(atoms, p.mol), None, 0
    proof = cq_vib.prove_minimum(atoms, lambda: factory(), reoptimize, cache_dir,
                                 threshold_cm1=th["imaginary_threshold_cm1"], max_rounds=max_rounds,
                                 step=th["step_a"], energy_hartree=energy)
    rec = {"key": key, "conformer": cid, "proof": proof.to_record(), "thermo_settings": th,
           "reopt_gradient_calls": opt_calls["n"],
           "engine_seconds": proof.engine_seconds + opt_calls["seconds"],
           "gradient_calls": proof.gradient_calls + opt_calls["n"]}
    status = {"minimum": "ok", "saddle-remains": "saddle", "failed": "failed"}[proof.status]
    reason = "" if status == "ok" else proof.history[-1] if proof.history else proof.status
    final = proof.atoms
    if status != "failed":
        mol = p.mol
        ref_pairs = {tuple(sorted((b.GetBeginAtomIdx(), b.GetEndAtomIdx()))) for b in mol.GetBonds()}
        ok_b, why_b = cq_opt.check_bonds(ref_pairs, final)
        ok_s, why_s = cq_opt.check_stereo(mol, final.positions)
        if not (ok_b and ok_s):
            status, reason = "failed", "; ".join(x for x in (why_b if not ok_b else "", why_s if not ok_s else "") if x)
        sigma, pg = cq_thermo.symmetry_number(final)
        rec["symmetry_number"], rec["point_group"] = int(sigma), pg
        rec["measured"] = cq_ring.measure(final.positions, p.ring, p.substituents)
        terms = {}
        for t in sorted(set(map(float, temps)) | set(CURVE_T)):
            tt = cq_thermo.thermochemistry(proof.freqs, final, t, sigma, multiplicity=es["multiplicity"],
                                           model=th["model"], scale=th["frequency_scale"],
                                           standard_state=th["standard_state"],
                                           imaginary_threshold_cm1=th["imaginary_threshold_cm1"])
            terms[f"{t:.2f}"] = tt.to_record()
        rec["terms"] = terms
    rec["energy_hartree"] = proof.energy_hartree
    rec["status"], rec["reason"] = status, reason
    write_xyz(out_xyz, final, {"conformer": cid, "energy_hartree": proof.energy_hartree})
    fileio.write_json(out_json, rec)
    return rec


def stage_thermo(cfg, plan, name, threads=1):
    import pandas as pd
    from . import __version__
    p = load_molecule(name)
    folder = Path(name)
    work = folder / "work"
    es = engine_settings(cfg, p)
    opt = _opt_settings(cfg)
    th = _thermo_settings(cfg)
    temps = cfg["settings"]["temperatures_k"]
    minima = fileio.read_json(folder / "minima.json")
    jobs, recs = [], {}
    for c in minima["conformers"]:
        cid = c["conformer"]
        xyz_in = folder / "minima" / f"{cid}.xyz"
        key = key_of(xyz_in.read_text(), es, opt, th, sorted(map(float, temps)), __version__)
        out_json = work / "thermo" / f"{cid}.json"
        if out_json.is_file():
            old = fileio.read_json(out_json)
            if old.get("key") == key and old.get("status") != "failed":
                recs[cid] = old           # reuse; a failed record is retried
                continue
        cache = work / "freq" / f"{cid}-{key_of(xyz_in.read_text(), es, th['step_a'])[:10]}"
        jobs.append((name, cid, key, es, opt, th, temps, str(xyz_in), c["energy_hartree"], str(cache),
                     str(out_json), str(work / "thermo" / f"{cid}.xyz")))
    for rec in _pool_map(_freq_one, jobs, threads):
        recs[rec["conformer"]] = rec
    rows = []
    for c in minima["conformers"]:
        r = recs[c["conformer"]]
        for t in temps:
            term = (r.get("terms") or {}).get(f"{float(t):.2f}")
            e = r["energy_hartree"]
            rows.append({"conformer": c["conformer"], "temperature_k": float(t),
                         "zpe_hartree": term["zpe"] if term else None,
                         "h_hartree": e + term["h_corr"] if term else None,
                         "s_hartree_per_k": term["s_total"] if term else None,
                         "g_hartree": e + term["g_corr"] if term else None,
                         "symmetry_number": r.get("symmetry_number"), "degeneracy": c["degeneracy"],
                         "lowest_frequency_cm1": r["proof"]["lowest_frequency_cm1"],
                         "n_imaginary": r["proof"]["n_imaginary"], "status": r["status"],
                         "energy_hartree": e, "g_corr_hartree": term["g_corr"] if term else None,
                         "point_group": r.get("point_group"), "model": th["model"],
                         "rounds": r["proof"]["rounds"], "reason": r["reason"]})
    fileio.write_json(folder / "thermo.json", {
        "molecule": name, "thermo": th, "chairqm_version": __version__,
        "engine_seconds": float(sum(r["engine_seconds"] for r in recs.values())),
        "gradient_calls": int(sum(r["gradient_calls"] for r in recs.values()))})
    fileio.write_csv(folder / "thermo.csv", pd.DataFrame(rows, columns=THERMO_COLUMNS + [
        "energy_hartree", "g_corr_hartree", "point_group", "model", "rounds", "reason"]))


# ------------------------------------------------------------------------------------------ refine

REFINE_COLUMNS = ["conformer", "selected", "energy_hartree", "energy_refined_hartree", "solvation_hartree",
                  "converged", "seconds", "status", "reason"]


def _refine_one(job):
    """One DFT single point on a GFN2-xTB minimum; record written atomically."""
    from . import refine as cq_refine
    name, cid, key, rs, es, solvent, xyz, out_json, scratch = job
    p = load_molecule(name)
    atoms = atoms_from_xyz(xyz)
    if fault("dft_scf", f"{name}/{cid}"):
        rs = dict(rs, max_cycle=1)     # a real SCF that cannot converge in one iteration, fallback included
    res = cq_refine.single_point(atoms, p.charge, p.multiplicity, rs, threads=1, scratch_dir=scratch,
                                 solvent=solvent)
    solv = 0.0
    if res.get("converged") and solvent and rs["solvent_model"] == "gfn2-delta":
        solv = cq_refine.xtb_solvation_hartree(atoms, es)
    rec = {"key": key, "conformer": cid, **res, "solvation_hartree": solv,
           "status": "ok" if res.get("converged") else "failed", "reason": res.get("message", "")}
    fileio.write_json(out_json, rec)
    return rec


def refine_settings(cfg):
    from . import refine as cq_refine
    block = cfg["settings"].get("refine")
    return None if block is None else cq_refine.resolve(block)


def stage_refine(cfg, plan, name, threads=1):
    """DFT single points (PySCF) on the conformers within the window of the lowest plus the lowest of each
    chair family; every other conformer keeps its GFN2-xTB value shifted by the mean DFT − GFN2 offset."""
    import pandas as pd
    from . import __version__
    from . import refine as cq_refine
    rs = refine_settings(cfg)
    p = load_molecule(name)
    folder = Path(name)
    es = engine_settings(cfg, p)
    t0 = float(cfg["settings"]["temperatures_k"][0])
    confs = [c for c in _final_conformers(name, p, cfg) if c["usable"]]
    rows, jobs, recs = [], [], {}
    if confs:
        from . import ensemble as cq_ens
        df = pd.DataFrame([{"conformer": c["conformer"], "ring_form": c["ring_form"],
                            "orientation": c["orientation"], "g_hartree": _g_at(c, t0),
                            "degeneracy": c["degeneracy"]} for c in confs])
        cp = cq_ens.conformer_populations(df, t0)
        sel_df = df.merge(cp[["conformer", "g_rel_kcal"]], on="conformer")
        selected = set(cq_refine.select(sel_df, rs["window_kcal"]))
        for c in confs:
            if c["conformer"] not in selected:
                continue
            xyz = folder / "work" / "thermo" / f"{c['conformer']}.xyz"
            key = key_of(xyz.read_text(), cq_refine.energy_settings(rs), es, __version__)
            out_json = folder / "work" / "refine" / f"{c['conformer']}.json"
            if out_json.is_file():
                old = fileio.read_json(out_json)
                if old.get("key") == key and old.get("status") == "ok":
                    recs[c["conformer"]] = old
                    continue
            jobs.append((name, c["conformer"], key, rs, es, cfg["settings"].get("solvent"), str(xyz),
                         str(out_json), str(folder / "work" / "refine" / "scratch")))
        for rec in _pool_map(_refine_one, jobs, threads):
            recs[rec["conformer"]] = rec
        for c in confs:
            r = recs.get(c["conformer"])
            rows.append({"conformer": c["conformer"], "selected": r is not None,
                         "energy_hartree": c["rec"]["energy_hartree"],
                         "energy_refined_hartree": r.get("energy_hartree") if r else None,
                         "solvation_hartree": r.get("solvation_hartree") if r else None,
                         "converged": r.get("converged") if r else None,
                         "seconds": r.get("seconds") if r else None,
                         "status": r["status"] if r else "not-selected", "reason": r.get("reason", "") if r else
                         f"more than {rs['window_kcal']:g} kcal/mol above the lowest and not the lowest of a chair family"})
    fileio.write_csv(folder / "refine.csv", pd.DataFrame(rows, columns=REFINE_COLUMNS))
    fileio.write_json(folder / "refine.json", {"molecule": name, "settings": rs, "versions": cq_refine.versions(),
                                               "dft_seconds": float(sum(r.get("seconds") or 0 for r in recs.values()))})


def _apply_refinement(name, confs):
    """Put refined free energies on the conformers: G = E(DFT) + [G − E](GFN2-xTB) (+ GFN2 solvation with
    'gfn2-delta'). A conformer that was not refined (or whose SCF failed) gets its GFN2-xTB G shifted by the
    mean E(DFT) − E(GFN2) of the refined ones. Returns False when there is nothing to apply."""
    import numpy as np
    import pandas as pd
    path = Path(name) / "refine.csv"
    if not path.is_file():
        return False
    df = pd.read_csv(path, keep_default_na=False)
    ok = df[df["status"] == "ok"]
    if ok.empty:
        return False
    shift = {r.conformer: float(r.energy_refined_hartree) + float(r.solvation_hartree or 0.0) - float(r.energy_hartree)
             for r in ok.itertuples()}
    mean = float(np.mean(list(shift.values())))
    for c in confs:
        c["refined"] = c["conformer"] in shift
        c["dft_shift"] = shift.get(c["conformer"], mean)
        row = df[df["conformer"] == c["conformer"]]
        c["energy_refined_hartree"] = (float(row["energy_refined_hartree"].iloc[0])
                                       if c["refined"] else None)
    return True


# ------------------------------------------------------------------------------------------ ensemble

CONFORMER_COLUMNS = ["conformer", "seed", "temperature_k", "ring_form", "q", "theta", "phi", "orientation",
                     "energy_hartree", "g_hartree", "g_rel_kcal", "population", "n_imaginary", "status"]
FAMILY_COLUMNS = ["temperature_k", "ring_form", "orientation", "axial", "g_rel_kcal", "population"]


def _clean(x):
    """JSON-friendly scalar: NaN -> None, numpy -> Python."""
    import math
    if x is None:
        return None
    try:
        if isinstance(x, str):
            return x
        f = float(x)
        return None if math.isnan(f) else f
    except (TypeError, ValueError):
        return x


def _final_conformers(name, p, cfg):
    """Conformers after the thermo stage, re-measured on their final geometry and merged again: a mode
    followed downhill can land on a minimum that another seed reached too."""
    from . import unique as cq_unique
    folder = Path(name)
    minima = fileio.read_json(folder / "minima.json")
    confs = []
    for c in minima["conformers"]:
        cid = c["conformer"]
        rec = fileio.read_json(folder / "work" / "thermo" / f"{cid}.json")
        xyz = folder / "work" / "thermo" / f"{cid}.xyz"
        atoms = atoms_from_xyz(xyz)
        usable = rec["status"] == "ok" and rec["proof"]["n_imaginary"] == 0
        meas = rec.get("measured") or {k: c.get(k) for k in ("ring_form", "q", "theta", "phi", "orientation")}
        confs.append({"conformer": cid, "seed": c["seed"], "rec": rec, "atoms": atoms, "usable": usable,
                      "status": rec["status"] if rec["status"] != "ok" or usable else "saddle",
                      "reason": rec.get("reason", ""), "degeneracy": c["degeneracy"], **meas})
    good = [c for c in confs if c["usable"]]
    groups = cq_unique.unique_minima(
        p.mol, [cq_unique.Record(c["conformer"], c["atoms"].positions, c["rec"]["energy_hartree"]) for c in good],
        rmsd_tol=cfg["settings"]["unique"]["rmsd_a"], energy_tol_kcal=cfg["settings"]["unique"]["energy_kcal"])
    by_id = {c["conformer"]: c for c in confs}
    for g in groups:
        by_id[g.name]["degeneracy"] = int(g.degeneracy)
        for m in list(g.duplicates) + list(g.mirror_members):
            c = by_id[m]
            c["usable"] = False
            c["status"] = "duplicate"
            c["reason"] = (f"after the frequency check this is the {'mirror image' if m in g.mirror_members else 'same minimum'}"
                           f" of {g.name}")
    return confs


def _g_at(c, t, refined=True):
    """G(T) of a conformer in hartree: GFN2-xTB, or the refined composite value when refinement ran."""
    term = (c["rec"].get("terms") or {}).get(f"{float(t):.2f}")
    if term is None:
        return None
    g = c["rec"]["energy_hartree"] + term["g_corr"]
    return g + c["dft_shift"] if (refined and "dft_shift" in c) else g


def _qm_a_values(plan, name, temperature):
    out = {}
    for frag, ref in plan.references_for(name).items():
        path = Path(ref) / "ensemble.json"
        if not path.is_file():
            continue
        for row in fileio.read_json(path).get("temperatures", []):
            if abs(row["temperature_k"] - float(temperature)) < 1e-6 and row.get("a_value_kcal") is not None:
                out[frag] = row["a_value_kcal"]
    return out


def _analyse_temperature(p, plan, name, cfg, usable_df, t):
    from . import additivity as cq_add
    from . import ensemble as cq_ens
    an = cfg["settings"]["analysis"]
    fam = cq_ens.families(usable_df, t)
    ids = cq_ens.chair_ids(p.ring, p.ring_elements, p.substituents)
    summ = cq_ens.chair_summary(fam, ids)
    qm = _qm_a_values(plan, name, t)
    own = (len(p.substituents) == 1 and p.ring_elements == ["C"] * 6 and summ.get("a_value_kcal") is not None
           and cq_add.needs_reference(p.substituents))
    if own:
        # this ring defines its group's QM-derived A-value: the additive estimate is that value itself
        qm = {**qm, p.substituents[0].fragment: summ["a_value_kcal"]}
    reasons = cq_add.outside_reasons(p.ring, p.ring_elements, p.substituents, qm)
    if reasons:
        est = cq_add.AdditiveEstimate(None, None, None, None, "outside-model", "; ".join(reasons))
    elif summ.get("chair_dg_kcal") is None:
        est = None
    else:
        est = cq_add.estimate_for(p, summ["preferred_chair_orientation"], summ["second_chair_orientation"], qm)
    if est is None:
        flag, why = True, "the ring-flip partner chair was not found among the minima, so no chair gap can be compared"
    else:
        flag, why = cq_add.disagreement(summ.get("preferred_chair_axial"), summ.get("chair_dg_kcal"), est,
                                        summ.get("twist_boat_population", 0.0), an["flag_threshold_kcal"],
                                        an["non_chair_threshold"])
    if own and not reasons:
        flag, why = False, (f"defines the QM-derived A-value of {p.substituents[0].fragment} "
                            "(used for the additive estimate of the other molecules)")
    add_dg = None
    if est is not None and est.dg_kcal is not None:
        # on the computed chairs' axis: positive when the additive estimate prefers the computed preferred chair
        same = (est.preferred_orientation == summ.get("preferred_chair_orientation"))
        add_dg = est.dg_kcal if same else -est.dg_kcal
    row = {"temperature_k": float(t), "preferred_family": summ.get("preferred_family"),
           "chair_dg_kcal": _clean(summ.get("chair_dg_kcal")),
           "a_value_kcal": _clean(summ.get("a_value_kcal")) if len(p.substituents) == 1 else None,
           "twist_boat_population": _clean(summ.get("twist_boat_population")),
           "preferred_chair": summ.get("preferred_chair"), "second_chair": summ.get("second_chair"),
           "additive": None if est is None else {
               "dg_kcal": _clean(add_dg), "source": est.source, "reason": est.reason,
               "terms": [[str(a), _clean(b)] for a, b in est.terms],
               "tabulated_dg_kcal": _clean(est.tabulated_dg_kcal if (est.tabulated_dg_kcal is None or add_dg is None or add_dg == est.dg_kcal) else -est.tabulated_dg_kcal),
               "qm_dg_kcal": _clean(est.qm_dg_kcal if (est.qm_dg_kcal is None or add_dg is None or add_dg == est.dg_kcal) else -est.qm_dg_kcal),
               "preferred_orientation": est.preferred_orientation},
           "flag": bool(flag), "flag_reason": why, "note": summ.get("note", "")}
    return fam, row


def _frame(confs, t, refined=True):
    import pandas as pd
    return pd.DataFrame([{"conformer": c["conformer"], "ring_form": c["ring_form"], "orientation": c["orientation"],
                          "g_hartree": _g_at(c, t, refined), "degeneracy": c["degeneracy"]} for c in confs])


def stage_ensemble(cfg, plan, name, threads=1):
    import pandas as pd
    from . import ensemble as cq_ens
    p = load_molecule(name)
    folder = Path(name)
    temps = [float(t) for t in cfg["settings"]["temperatures_k"]]
    confs = _final_conformers(name, p, cfg)
    refined = cfg["settings"].get("refine") is not None and _apply_refinement(name, confs)
    usable = [c for c in confs if c["usable"]]
    out = {"molecule": name, "smiles": p.smiles, "reference": p.reference, "status": "ok", "reason": "",
           "refined": bool(refined), "temperatures": [], "curve": {"temperature_k": CURVE_T, "families": {}}}
    conf_rows, fam_frames = [], []
    if not usable:
        out["status"] = "failed"
        out["reason"] = upstream_failure(name) or ("no conformer survived optimisation, verification and the frequency check"
                         if confs else "no conformer could be built or optimised (see seeds.csv and minima.csv)")
    for t in temps:
        pops = {}
        if usable:
            df = _frame(usable, t)
            cp = cq_ens.conformer_populations(df, t)
            pops = {r.conformer: (r.g_rel_kcal, r.population) for r in cp.itertuples()}
            fam, row = _analyse_temperature(p, plan, name, cfg, df, t)
            if refined:
                # the GFN2-xTB values beside the refined ones
                fam_u, row_u = _analyse_temperature(p, plan, name, cfg, _frame(usable, t, refined=False), t)
                fam = fam.merge(fam_u[["ring_form", "orientation", "g_rel_kcal", "population"]].rename(
                    columns={"g_rel_kcal": "g_rel_unrefined_kcal", "population": "population_unrefined"}),
                    on=["ring_form", "orientation"], how="left")
                row["unrefined"] = {k: row_u[k] for k in ("preferred_family", "chair_dg_kcal", "a_value_kcal",
                                                          "twist_boat_population", "flag", "flag_reason")}
            fam_frames.append(fam)
            out["temperatures"].append(row)
        for c in confs:
            g_rel, pop = pops.get(c["conformer"], (None, 0.0 if c["usable"] is False else None))
            r = {"conformer": c["conformer"], "seed": c["seed"], "temperature_k": t,
                 "ring_form": c["ring_form"], "q": c["q"], "theta": c["theta"], "phi": c["phi"],
                 "orientation": c["orientation"], "energy_hartree": c["rec"]["energy_hartree"],
                 "g_hartree": _g_at(c, t, refined=False), "g_rel_kcal": g_rel, "population": pop,
                 "n_imaginary": c["rec"]["proof"]["n_imaginary"], "status": c["status"],
                 "degeneracy": c["degeneracy"], "symmetry_number": c["rec"].get("symmetry_number"),
                 "reason": c["reason"]}
            if refined:
                r["energy_refined_hartree"] = c.get("energy_refined_hartree")
                r["g_refined_hartree"] = _g_at(c, t) if "dft_shift" in c else None
                r["refined_single_point"] = bool(c.get("refined"))
            conf_rows.append(r)
    if usable:
        for t in CURVE_T:
            fam = cq_ens.families(_frame(usable, t), t)
            for r in fam.itertuples():
                key = cq_ens.family_key(r.ring_form, r.orientation)
                out["curve"]["families"].setdefault(key, [0.0] * len(CURVE_T))
                out["curve"]["families"][key][CURVE_T.index(t)] = float(r.population)
    fams = pd.concat(fam_frames, ignore_index=True) if fam_frames else pd.DataFrame(columns=FAMILY_COLUMNS)
    extra = [c for c in fams.columns if c not in FAMILY_COLUMNS]
    fileio.write_csv(folder / "families.csv", fams[FAMILY_COLUMNS + extra])
    more = ["degeneracy", "symmetry_number", "reason"] + (
        ["energy_refined_hartree", "g_refined_hartree", "refined_single_point"] if refined else [])
    conf_df = pd.DataFrame(conf_rows, columns=CONFORMER_COLUMNS + more)
    fileio.write_csv(folder / "conformers.csv", conf_df)
    _write_sdf(folder / "conformers.sdf", p, confs, temps[0], conf_df)
    fileio.write_json(folder / "ensemble.json", out)


def _write_sdf(path, p, confs, t0, conf_df):
    """Every minimum (final geometry) with its properties, lowest free energy first."""
    import io
    from rdkit import Chem
    from rdkit.Geometry import Point3D
    mol = p.mol
    buf = io.StringIO()
    w = Chem.SDWriter(buf)
    w.SetKekulize(False)
    at_t0 = conf_df[conf_df["temperature_k"] == t0].set_index("conformer")
    for c in confs:
        m = Chem.Mol(mol)
        conf = Chem.Conformer(m.GetNumAtoms())
        for i, (x, y, z) in enumerate(c["atoms"].positions):
            conf.SetAtomPosition(i, Point3D(float(x), float(y), float(z)))
        conf.Set3D(True)
        m.RemoveAllConformers()
        m.AddConformer(conf, assignId=True)
        m.SetProp("_Name", f"{p.name} {c['conformer']}")
        row = at_t0.loc[c["conformer"]]
        props = {"conformer": c["conformer"], "seed": c["seed"], "ring_form": c["ring_form"],
                 "orientation": c["orientation"], "status": c["status"], "degeneracy": c["degeneracy"],
                 "energy_hartree": c["rec"]["energy_hartree"], "temperature_k": t0,
                 "g_hartree": row["g_hartree"], "g_rel_kcal": row["g_rel_kcal"], "population": row["population"],
                 "n_imaginary": c["rec"]["proof"]["n_imaginary"], "q": c["q"], "theta": c["theta"], "phi": c["phi"]}
        for k, v in props.items():
            m.SetProp(k, "" if v is None or (isinstance(v, float) and v != v) else str(v))
        w.write(m)
    w.close()
    fileio.write_text(path, buf.getvalue())


# ------------------------------------------------------------------------------------------ report

SUMMARY_COLUMNS = ["molecule", "temperature_k", "status", "reason", "n_conformers", "preferred_family",
                   "chair_dg_kcal", "a_value_kcal", "twist_boat_population", "additive_dg_kcal",
                   "additive_source", "flag", "flag_reason"]


CALIBRATION_COLUMNS = ["calibrated_kcal", "interval_low_kcal", "interval_high_kcal", "calibrated_quantity"]


def _calibrate_rows(rows, settings) -> str:
    """Calibrated value and 95 % prediction interval for each row's A-value (or, for rings with several
    groups, its chair gap), from the packaged calibration whose settings match this run; none otherwise."""
    from . import calibration as cq_cal
    cal = cq_cal.load_matching(settings)
    if cal is None:
        return ("no calibration matches these settings (method, engine, solvent, thermochemistry"
                + (", DFT refinement level" if settings.get("refine") is not None else "")
                + "): values are uncalibrated")
    for r in rows:
        if r.get("status") != "ok":
            continue
        for quantity in ("a_value_kcal", "chair_dg_kcal"):
            v = r.get(quantity)
            if v is not None and v == v:
                c, lo, hi = cq_cal.apply(cal, float(v))
                r.update({"calibrated_kcal": c, "interval_low_kcal": lo, "interval_high_kcal": hi,
                          "calibrated_quantity": quantity})
                break
    return (f"calibrated against {cal.n} experimental A-values (residual SD {cal.residual_sd_kcal:.2f} kcal/mol); "
            "chair gaps of rings with several groups use the same line, an extrapolation")


def summary_rows(cfg, plan):
    rows = []
    for m in plan.molecules:
        ens = fileio.read_json(Path(m.name) / "ensemble.json")
        conf = Path(m.name) / "conformers.csv"
        import pandas as pd
        n = 0
        if conf.is_file():
            cdf = pd.read_csv(conf)
            n = int(cdf.loc[cdf["status"] == "ok", "conformer"].nunique())
        if ens["status"] != "ok":
            for t in cfg["settings"]["temperatures_k"]:
                rows.append({"molecule": m.name, "temperature_k": float(t), "status": "failed",
                             "reason": ens["reason"], "n_conformers": n, "flag": True,
                             "flag_reason": "no result"})
            continue
        for r in ens["temperatures"]:
            add = r.get("additive") or {}
            rows.append({"molecule": m.name, "temperature_k": r["temperature_k"], "status": "ok", "reason": "",
                         "n_conformers": n, "preferred_family": r["preferred_family"],
                         "chair_dg_kcal": r["chair_dg_kcal"], "a_value_kcal": r["a_value_kcal"],
                         "twist_boat_population": r["twist_boat_population"],
                         "additive_dg_kcal": add.get("dg_kcal"), "additive_source": add.get("source", ""),
                         "flag": bool(r["flag"]), "flag_reason": r["flag_reason"],
                         "refined": bool(ens.get("refined")),
                         "chair_dg_unrefined_kcal": (r.get("unrefined") or {}).get("chair_dg_kcal"),
                         "a_value_unrefined_kcal": (r.get("unrefined") or {}).get("a_value_kcal")})
    return rows


def stage_report(cfg, plan, name=None, threads=1):
    import os
    import time
    import pandas as pd
    from . import __version__
    from . import engine as cq_engine
    from . import report as cq_report
    rows = summary_rows(cfg, plan)
    calibration_note = _calibrate_rows(rows, cfg["settings"])
    refined_cols = ["refined", "chair_dg_unrefined_kcal", "a_value_unrefined_kcal"] \
        if cfg["settings"].get("refine") is not None else []
    summary = pd.DataFrame(rows, columns=SUMMARY_COLUMNS + CALIBRATION_COLUMNS + refined_cols)
    summary["flag"] = summary["flag"].map(lambda v: "true" if bool(v) else "false")
    fileio.write_csv("summary.csv", summary)
    engine_s, calls = 0.0, 0
    for m in plan.molecules:
        for stage in ("minima", "thermo"):
            f = Path(m.name) / f"{stage}.json"
            if f.is_file():
                d = fileio.read_json(f)
                engine_s += d.get("engine_seconds", 0.0)
                calls += d.get("gradient_calls", 0)
    start_file = Path(".chairqm", "run-start.json")
    started = fileio.read_json(start_file) if start_file.is_file() else {}
    now = time.time()
    s = cfg["settings"]
    prov = {"chairqm_version": __version__, "engines": cq_engine.engine_versions(),
            "project": cfg.get("project", ""), "settings": s,
            "config_file": str(cfg.get("_config_path", "")),
            "input_hashes": {m.name: m.input_hash for m in plan.molecules},
            "molecules": [m.name for m in plan.molecules],
            "started": started.get("iso"), "finished": time.strftime("%Y-%m-%dT%H:%M:%S%z", time.localtime(now)),
            "wall_seconds": round(now - started["epoch"], 2) if "epoch" in started else None,
            "engine_seconds": round(engine_s, 2), "gradient_calls": calls,
            "engine_seconds_note": "engine time summed over the stages that computed in this folder, including reused records",
            "n_cpus": os.cpu_count(), "calibration": calibration_note}
    fileio.write_json("provenance.json", prov)
    _write_db(plan)
    cq_report.write_report(Path("."), prov)


def _write_db(plan):
    """One ASE SQLite database of every conformer with its key-value pairs (`ase db conformers.db`)."""
    import os
    import pandas as pd
    from ase.db import connect
    tmp = Path(".conformers.db.part")
    if tmp.exists():
        tmp.unlink()
    db = connect(str(tmp), type="db", append=False)
    for m in plan.molecules:
        conf = Path(m.name) / "conformers.csv"
        if not conf.is_file():
            continue
        cdf = pd.read_csv(conf, keep_default_na=False)
        t0 = cdf["temperature_k"].min() if len(cdf) else None
        for r in cdf[cdf["temperature_k"] == t0].itertuples():
            xyz = Path(m.name) / "work" / "thermo" / f"{r.conformer}.xyz"
            if not xyz.is_file():
                continue
            atoms = atoms_from_xyz(xyz)
            atoms.info = {}
            kv = {"molecule": m.name, "conformer": r.conformer, "seed": r.seed, "ring_form": r.ring_form,
                  "orientation": r.orientation or "none", "status": r.status, "temperature_k": float(r.temperature_k)}
            for k in ("energy_hartree", "g_hartree", "g_rel_kcal", "population", "q", "theta", "phi"):
                v = getattr(r, k)
                if v != "" and v is not None:
                    kv[k] = float(v)
            kv["n_imaginary"] = int(r.n_imaginary) if r.n_imaginary != "" else -1
            db.write(atoms, **kv)
    del db
    os.replace(tmp, "conformers.db")

STAGES = {"intake": stage_intake, "seeds": stage_seeds, "minima": stage_minima, "thermo": stage_thermo, "refine": stage_refine,
          "ensemble": stage_ensemble, "report": stage_report}


def _remove_partial_files(folder: Path, recursive: bool) -> None:
    """Temporary files of an interrupted atomic write (`.NAME.XXXX.part`) are never results: remove them
    before a stage of this molecule (or the report, at the top level) runs again."""
    if not folder.is_dir():
        return
    for f in (folder.rglob(".*.part") if recursive else folder.glob(".*.part")):
        if f.is_file() and not f.is_symlink():
            f.unlink()


def _fail_outputs(stage: str, name: str, message: str) -> None:
    """A molecule's stage broke unexpectedly: record why and write empty outputs with their headers, so
    the other molecules and the report go on and the failure is shown, never dropped."""
    import pandas as pd
    folder = Path(name)
    fileio.write_json(folder / "failed.json", {"stage": stage, "reason": message})
    if stage == "seeds":
        fileio.write_csv(folder / "seeds.csv", pd.DataFrame(columns=["seed", "ring_form", "q", "theta", "phi",
                         "orientation", "ff_energy_kcal", "status", "template", "reason"]))
    elif stage == "minima":
        fileio.write_csv(folder / "minima.csv", pd.DataFrame(columns=OPT_COLUMNS))
        fileio.write_json(folder / "minima.json", {"molecule": name, "conformers": [], "engine_seconds": 0.0,
                                                   "gradient_calls": 0, "failed": message})
    elif stage == "thermo":
        fileio.write_csv(folder / "thermo.csv", pd.DataFrame(columns=THERMO_COLUMNS))
        fileio.write_json(folder / "thermo.json", {"molecule": name, "engine_seconds": 0.0, "gradient_calls": 0,
                                                   "failed": message})
    elif stage == "ensemble":
        fileio.write_csv(folder / "families.csv", pd.DataFrame(columns=FAMILY_COLUMNS))
        fileio.write_csv(folder / "conformers.csv", pd.DataFrame(columns=CONFORMER_COLUMNS))
        fileio.write_text(folder / "conformers.sdf", "")
        fileio.write_json(folder / "ensemble.json", {"molecule": name, "status": "failed",
                                                     "reason": f"{stage} stage: {message}", "temperatures": []})


def upstream_failure(name: str) -> str:
    f = Path(name) / "failed.json"
    if f.is_file():
        d = fileio.read_json(f)
        return f"{d['stage']} stage failed: {d['reason']}"
    return ""


def main(argv=None):
    ap = argparse.ArgumentParser(prog="python -m chairqm.stages")
    ap.add_argument("stage", choices=sorted(STAGES))
    ap.add_argument("--config", required=True)
    ap.add_argument("--molecule", default=None)
    ap.add_argument("--threads", type=int, default=1)
    args = ap.parse_args(argv)
    # Snakemake exports OMP_NUM_THREADS=<rule threads>; chairqm parallelises over conformers with worker
    # processes instead, so each engine runs single-threaded (two spinning OpenMP teams per core are
    # ~15x slower, measured). Must happen before tblite/xtb are imported; workers inherit it.
    from .engine import set_threads
    set_threads(1)
    _remove_partial_files(Path(args.molecule) if args.molecule else Path("."), recursive=True)
    try:
        cfg, plan = _context(args)
        if args.molecule and args.stage != "intake":
            stale = Path(args.molecule) / "failed.json"
            order = ["seeds", "minima", "thermo", "ensemble"]
            if stale.is_file() and order.index(fileio.read_json(stale)["stage"]) >= order.index(args.stage):
                stale.unlink()            # this stage or a later one is being recomputed
        try:
            if fault("crash", f"{args.molecule}/{args.stage}"):
                raise RuntimeError("injected fault: unexpected error inside the stage")
            STAGES[args.stage](cfg, plan, args.molecule, threads=args.threads)
        except ChairqmError:
            raise
        except Exception as exc:
            if not args.molecule or args.stage == "intake":
                raise
            import traceback
            traceback.print_exc()        # into the job's log
            _fail_outputs(args.stage, args.molecule, f"{type(exc).__name__}: {exc}")
    except ChairqmError as exc:
        print(f"chairqm: {exc}", file=sys.stderr)
        return 2
    return 0


if __name__ == "__main__":
    sys.exit(main())
