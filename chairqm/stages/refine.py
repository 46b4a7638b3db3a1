"""Refine stage (optional, settings.refine): thermo.json + thermo.csv + thermo/*.xyz -> refine.csv, refine.json.

DFT single points (PySCF) on the conformers within the window of the lowest free energy plus the lowest
of each chair family (chairqm.refine.select, at the first temperature). Single points run in worker
processes; each record (work/refine/CONFORMER.json) is reused on a rerun when its key matches. The
composite free energies are formed by the ensemble stage (chairqm.refine.composite).
"""

from __future__ import annotations

import contextlib
from pathlib import Path

from .. import fileio
from . import tables
from .faults import fault
from .records import engine_settings, load_molecule, pool_map, read_xyz, record_key, reusable


def refine_settings(settings):
    from .. import refine as cq_refine
    block = settings.get("refine")
    return None if block is None else cq_refine.resolve(block)


def _refine_one(job):
    """One DFT single point on a GFN2-xTB minimum, its address space capped (memory_cap); record written
    atomically."""
    from .. import dft
    from .. import refine as cq_refine
    name, cid, key, rs, es, solvent, xyz, out_json, scratch = job
    p = load_molecule(name)
    atoms = read_xyz(xyz)
    if fault("dft_scf", f"{name}/{cid}"):
        rs = dict(rs, max_cycle=1)     # a real SCF that cannot converge in one iteration, fallback included
    cap = cq_refine.worker_memory_cap_mb(rs)
    with memory_cap(cap):
        res = dft.single_point(atoms, p.charge, p.multiplicity, rs, threads=1, scratch_dir=scratch,
                               solvent=solvent)
    if "MemoryError" in res.get("message", ""):
        res["message"] = (f"{res['message']}: the single point needed more than this worker's {cap} MB "
                          f"(settings.refine.max_memory_mb {rs['max_memory_mb']} + {cq_refine.WORKER_OVERHEAD_MB} "
                          "for the interpreter and libraries): raise max_memory_mb, or choose a smaller basis")
    solv = 0.0
    if res.get("converged") and solvent and rs["solvent_model"] == "gfn2-delta":
        solv = dft.xtb_solvation_hartree(atoms, es)
    rec = {"key": key, "conformer": cid, **res, "solvation_hartree": solv,
           "status": "ok" if res.get("converged") else "failed", "reason": res.get("message", "")}
    fileio.write_json(out_json, rec)
    return rec


@contextlib.contextmanager
def memory_cap(mb: int):
    """Limit this process's address space to `mb` MB (RLIMIT_AS, soft) while the block runs, then restore
    it: an allocation beyond it raises MemoryError in this single point instead of the machine swapping
    or the kernel killing a process. Only lowers a limit, never raises one set from outside."""
    import resource
    soft, hard = resource.getrlimit(resource.RLIMIT_AS)
    want = int(mb) * 2 ** 20
    if hard != resource.RLIM_INFINITY:
        want = min(want, hard)
    if soft != resource.RLIM_INFINITY and soft <= want:
        yield
        return
    resource.setrlimit(resource.RLIMIT_AS, (want, hard))
    try:
        yield
    finally:
        resource.setrlimit(resource.RLIMIT_AS, (soft, hard))


def run(cfg, plan, name, threads=1):
    import pandas as pd

    from .. import dft
    from .. import ensemble as cq_ens
    from .. import refine as cq_refine
    settings = cfg["settings"]
    rs = refine_settings(settings)
    p = load_molecule(name)
    folder = Path(name)
    work = folder / "work" / "refine"
    es = engine_settings(settings, p)
    t0 = float(settings["temperatures_k"][0])
    final = fileio.read_json(folder / "thermo.json")["conformers"]
    confs = [c for c in final if c["usable"]]
    rows, jobs, recs = [], [], {}
    if confs:
        th = pd.read_csv(folder / "thermo.csv", keep_default_na=False)
        g_t0 = {r.conformer: float(r.g_hartree) for r in th[th["temperature_k"] == t0].itertuples()}
        df = pd.DataFrame([{"conformer": c["conformer"], "ring_form": c["ring_form"],
                            "orientation": c["orientation"], "g_hartree": g_t0[c["conformer"]],
                            "degeneracy": c["degeneracy"]} for c in confs])
        cp = cq_ens.conformer_populations(df, t0)
        selected = set(cq_refine.select(df.merge(cp[["conformer", "g_rel_kcal"]], on="conformer"), rs["window_kcal"]))
        for c in confs:
            if c["conformer"] not in selected:
                continue
            xyz = folder / c["geometry"]
            key = record_key("refine", settings, p, xyz.read_text())
            out_json = work / f"{c['conformer']}.json"
            old = reusable(out_json, key)
            if old is not None:
                recs[c["conformer"]] = old
                continue
            jobs.append((name, c["conformer"], key, rs, es, settings.get("solvent"), str(xyz), str(out_json),
                         str(work / "scratch")))
        for rec in pool_map(_refine_one, jobs, threads):
            recs[rec["conformer"]] = rec
        for c in confs:
            r = recs.get(c["conformer"])
            rows.append({"conformer": c["conformer"], "selected": r is not None,
                         "energy_hartree": c["energy_hartree"],
                         "energy_refined_hartree": r.get("energy_hartree") if r else None,
                         "solvation_hartree": r.get("solvation_hartree") if r else None,
                         "converged": r.get("converged") if r else None,
                         "seconds": r.get("seconds") if r else None,
                         "status": r["status"] if r else "not-selected", "reason": r.get("reason", "") if r else
                         f"more than {rs['window_kcal']:g} kcal/mol above the lowest and not the lowest of a chair family"})
    fileio.write_csv(folder / "refine.csv", tables.frame(rows, tables.refine(settings)))
    fileio.write_json(folder / "refine.json", {"molecule": name, "settings": rs, "versions": dft.versions(),
                                               "dft_seconds": float(sum(r.get("seconds") or 0 for r in recs.values()))})


def write_empty(name, settings, message):
    folder = Path(name)
    fileio.write_csv(folder / "refine.csv", tables.frame([], tables.refine(settings)))
    fileio.write_json(folder / "refine.json", {"molecule": name, "settings": refine_settings(settings),
                                               "dft_seconds": 0.0, "failed": message})
