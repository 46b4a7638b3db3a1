"""Minima stage: seeds.csv + seeds/*.xyz -> minima.csv, minima.json and minima/CONFORMER.xyz.

Every kept seed is optimised with the engine in a worker process, its bonds and stereocentres are checked
and its ring form re-measured; duplicates are merged (mirror images counted in the degeneracy). Each
seed's record (work/opt/SEED.json, written after its XYZ) is reused on a rerun when its key matches.
"""

from __future__ import annotations

from pathlib import Path

from .. import fileio
from . import tables
from .faults import fault, failing_calculator, stretch_a_bond
from .records import (CalcFactory, budgeted_map, engine_settings, load_molecule, read_xyz, record_key, reusable,
                      write_xyz)


def _optimise_one(job):
    """Optimise one seed and verify it; write its record (XYZ, then JSON as the completion mark)."""
    from .. import optimize as cq_opt
    from .. import ring as cq_ring
    name, seed, key, es, opt, xyz_in, out_xyz, out_json = job
    p = load_molecule(name)
    mol = p.mol
    atoms = read_xyz(xyz_in)
    factory = (lambda t=None: failing_calculator()) if fault("scf", f"{name}/{seed}") else CalcFactory(es)
    res = cq_opt.optimize(atoms, factory, fmax=opt["fmax_ev_per_a"], max_steps=opt["max_steps"],
                          optimizer=opt["optimizer"], electronic_temperature=es["electronic_temperature"])
    rec = {"key": key, "seed": seed, "engine": es, "optimize": opt, **res.record()}
    status, reasons = res.status, [res.reason] if res.reason else []
    geom = res.atoms
    if fault("bond", f"{name}/{seed}"):
        geom = stretch_a_bond(geom)
    if status != "failed":
        ok_b, why_b, ok_s, why_s = cq_opt.check_structure(mol, geom)
        rec["checks"] = {"bonds": ok_b, "bonds_reason": why_b, "stereo": ok_s, "stereo_reason": why_s}
        if not ok_b:
            status, reasons = "failed", reasons + [f"bonds changed: {why_b}"]
        if not ok_s:
            status, reasons = "failed", reasons + [f"stereo changed: {why_s}"]
        rec["measured"] = cq_ring.measure(geom.positions, p.ring, p.substituents, p.other_rings,
                                          cq_ring.trigonal_ring_atoms(p.mol, p.ring))
    else:
        rec["checks"] = {}
        rec["measured"] = None
    rec["status"] = status
    rec["reason"] = "; ".join(r for r in reasons if r)
    write_xyz(out_xyz, geom, {"seed": seed, "energy_hartree": rec["energy_hartree"]})
    fileio.write_json(out_json, rec)
    return rec


LABELS = ("ring_form", "orientation", "other_rings")     # the measured words a reused record takes anew


def run(cfg, plan, name, threads=1):
    import pandas as pd

    from .. import __version__
    from .. import ring as cq_ring
    from .. import unique as cq_unique
    settings = cfg["settings"]
    p = load_molecule(name)
    folder = Path(name)
    work = folder / "work" / "opt"
    (folder / "minima").mkdir(parents=True, exist_ok=True)
    es = engine_settings(settings, p)
    opt = dict(settings["optimize"])
    seeds_df = pd.read_csv(folder / "seeds.csv", keep_default_na=False)
    kept = seeds_df[seeds_df["status"] == "ok"]
    jobs, recs = [], {}
    for seed in kept["seed"]:
        xyz_in = folder / "seeds" / f"{seed}.xyz"
        key = record_key("minima", settings, p, xyz_in.read_text())
        out_json = work / f"{seed}.json"
        old = reusable(out_json, key, needs=[work / f"{seed}.xyz"])
        if old is not None:
            recs[seed] = old                # finished earlier with the same input and settings (a failed
            if old.get("measured"):         # record is retried); its labels (not its numbers, which the
                now = cq_ring.measure(      # file's rounding would change) follow the current rules
                    read_xyz(work / f"{seed}.xyz").positions, p.ring, p.substituents, p.other_rings,
                    cq_ring.trigonal_ring_atoms(p.mol, p.ring))
                old["measured"].update({k: now[k] for k in LABELS if k in now})
            continue
        jobs.append((name, seed, key, es, opt, str(xyz_in), str(work / f"{seed}.xyz"), str(out_json)))
    budget = int(opt.get("max_gradient_calls") or 0)
    spent = sum(int(r.get("gradient_calls") or 0) for r in recs.values())
    results = budgeted_map(_optimise_one, jobs, threads, budget, lambda r: int(r["gradient_calls"]), spent)
    for job, rec in zip(jobs, results):
        if rec is None:                     # the molecule's gradient budget was spent before this seed
            rec = {"seed": job[1], "status": "not-optimised", "energy_hartree": None, "gradient_calls": 0,
                   "steps": 0, "fmax_final": None, "engine_seconds": 0.0, "measured": None,
                   "reason": (f"not optimised: the molecule's gradient budget of {budget} calls was spent "
                              "(settings.optimize.max_gradient_calls; 0 lifts it)")}
        recs[rec["seed"]] = rec
    good = [s for s in kept["seed"] if recs[s]["status"] == "ok"]
    geoms = {s: read_xyz(work / f"{s}.xyz") for s in good}
    groups = cq_unique.unique_minima(
        p.mol, [cq_unique.Record(name=s, positions=geoms[s].positions, energy_hartree=recs[s]["energy_hartree"])
                for s in good],
        rmsd_tol=settings["unique"]["rmsd_a"], energy_tol_kcal=settings["unique"]["energy_kcal"],
        prefer=lambda s: cq_unique.other_ring_rank((recs[s]["measured"] or {}).get("other_rings")))
    groups = sorted(groups, key=lambda g: (recs[g.name]["energy_hartree"], g.name))
    conf_of, dup_of, conformers = {}, {}, []
    for k, g in enumerate(groups, 1):
        cid = f"c{k:03d}"
        conf_of[g.name] = cid
        for m in list(g.members) + list(g.mirror_members):
            if m != g.name:
                dup_of[m] = cid
    for g in groups:
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
                     "fmax_ev_per_a": r["fmax_final"], "engine_seconds": r["engine_seconds"],
                     "other_rings": meas.get("other_rings", "")})
    fileio.write_json(folder / "minima.json", {
        "molecule": name, "engine": es, "optimize": opt, "conformers": conformers,
        "engine_seconds": float(sum(recs[s]["engine_seconds"] for s in kept["seed"])),
        "gradient_calls": int(sum(recs[s]["gradient_calls"] for s in kept["seed"])),
        "chairqm_version": __version__, "gradient_budget": budget,
        "not_optimised": [s for s in kept["seed"] if recs[s]["status"] == "not-optimised"]})
    fileio.write_csv(folder / "minima.csv", tables.frame(rows, tables.minima(settings)))


def write_empty(name, settings, message):
    folder = Path(name)
    (folder / "minima").mkdir(parents=True, exist_ok=True)
    fileio.write_csv(folder / "minima.csv", tables.frame([], tables.minima(settings)))
    fileio.write_json(folder / "minima.json", {"molecule": name, "conformers": [], "engine_seconds": 0.0,
                                               "gradient_calls": 0, "failed": message})
