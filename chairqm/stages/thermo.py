"""Thermo stage: minima.json + minima/*.xyz -> thermo.csv, thermo.json and thermo/CONFORMER.{xyz,vib.json}.

Hessians only where they decide the answer (chairqm.frequency_window, setting
thermo.frequency_window_kcal): the lowest minimum and the lowest of each chair family, then the minima
within the window of the lowest electronic energy, one at a time (the automatic window narrows as each
Hessian adds a known free energy). Every other minimum is kept with its energy, marked
``frequency_checked = false``, and its free energy borrows the thermal correction G − E of the
frequency-checked conformer named in ``thermal_correction_from`` (with its own symmetry number).

For every minimum that gets one: the finite-difference Hessian (its displacements split over the job's
worker processes), the proof that it is a minimum (imaginary modes followed
and re-optimised), bonds and stereocentres checked again, the ring re-measured and the point group found.
Conformers that mode following brought onto the same minimum are merged again, so thermo.json holds the
FINAL conformer list the later stages read. Each conformer's Hessian is published as an ASE VibrationsData
file (thermo/CONFORMER.vib.json), from which free energies at any temperature are computed where needed
(:func:`free_energy_terms`). Per-conformer records (work/thermo/) and Hessian displacements (work/freq/)
are reused on a rerun.
"""

from __future__ import annotations

from pathlib import Path

from .. import fileio
from . import tables
from .faults import eclipse_a_methyl, fault
from .records import (CalcFactory, engine_settings, key_of, load_molecule, read_vibrations, read_xyz, record_key,
                      reusable, write_vibrations, write_xyz)

FOLDER = "thermo"


def thermo_settings(settings: dict) -> dict:
    """The thermochemistry settings with the standard state the solvent implies."""
    t = dict(settings["thermo"])
    t["standard_state"] = "solution" if settings.get("solvent") else "gas"
    return t


def free_energy_terms(atoms, freqs, symmetry_number, multiplicity, th, temperature_k):
    """chairqm.thermo.thermochemistry of one conformer at one temperature with the run's settings."""
    from .. import thermo as cq_thermo
    return cq_thermo.thermochemistry(freqs, atoms, float(temperature_k), symmetry_number, multiplicity=multiplicity,
                                     model=th["model"], scale=th["frequency_scale"],
                                     standard_state=th["standard_state"],
                                     imaginary_threshold_cm1=th["imaginary_threshold_cm1"])


def vibrations_of(vib_path):
    """(atoms, frequencies in cm⁻¹) of a published VibrationsData file (chairqm.vibrations.frequencies:
    translations and rotations projected out)."""
    from .. import vibrations as cq_vib
    atoms, hess = read_vibrations(vib_path)
    freqs, _ = cq_vib.frequencies(hess, atoms)
    return atoms, freqs


def _freq_one(job, executor=None):
    """Hessian, proof of minimum and checks of one conformer; geometry, VibrationsData and record written
    atomically (the record last, as the completion mark). `executor`: worker processes that share the
    Hessian's displacements with this one."""
    from .. import optimize as cq_opt
    from .. import ring as cq_ring
    from .. import symmetry as cq_symmetry
    from .. import vibrations as cq_vib
    name, cid, key, es, opt, th, xyz_in, energy, cache_dir, out_json, out_xyz, out_vib = job
    p = load_molecule(name)
    atoms = read_xyz(xyz_in)
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
        atoms, energy, max_rounds = eclipse_a_methyl(atoms, p.mol), None, 0
    proof = cq_vib.prove_minimum(atoms, factory, reoptimize, cache_dir,
                                 threshold_cm1=th["imaginary_threshold_cm1"], max_rounds=max_rounds,
                                 step=th["step_a"], energy_hartree=energy, executor=executor,
                                 basis=th.get("hessian_directions", "internal"))
    rec = {"key": key, "conformer": cid, "proof": proof.to_record(), "thermo_settings": th,
           "reopt_gradient_calls": opt_calls["n"],
           "engine_seconds": proof.engine_seconds + opt_calls["seconds"],
           "gradient_calls": proof.gradient_calls + opt_calls["n"], "vibrations": False,
           "hessian_gradients": int(sum(h["gradient_calls"] + h["reused"] for h in proof.hessians))}
    status = {"minimum": "ok", "saddle-remains": "saddle", "failed": "failed"}[proof.status]
    reason = "" if status == "ok" else proof.history[-1] if proof.history else proof.status
    final = proof.atoms
    if status != "failed":
        ok_b, why_b, ok_s, why_s = cq_opt.check_structure(p.mol, final)
        if not (ok_b and ok_s):
            status, reason = "failed", "; ".join(x for x in (why_b if not ok_b else "", why_s if not ok_s else "") if x)
        sigma, pg = cq_symmetry.symmetry_number(final)
        rec["symmetry_number"], rec["point_group"] = int(sigma), pg
        rec["measured"] = cq_ring.measure(final.positions, p.ring, p.substituents, p.other_rings,
                                          cq_ring.trigonal_ring_atoms(p.mol, p.ring))
        write_vibrations(out_vib, final, proof.hessian)
        rec["vibrations"] = True
    rec["energy_hartree"] = proof.energy_hartree
    rec["status"], rec["reason"] = status, reason
    write_xyz(out_xyz, final, {"conformer": cid, "energy_hartree": proof.energy_hartree})
    fileio.write_json(out_json, rec)
    return rec


def _unchecked(name, p, c, xyz_in, out_xyz, window):
    """The record of a minimum outside the frequency window: no Hessian, its energy, geometry, ring
    measurement and symmetry number (for its rotational entropy) kept."""
    from .. import symmetry as cq_symmetry
    atoms = read_xyz(xyz_in)
    sigma, pg = cq_symmetry.symmetry_number(atoms)
    write_xyz(out_xyz, atoms, {"conformer": c["conformer"], "energy_hartree": c["energy_hartree"]})
    return {"conformer": c["conformer"], "status": "ok", "frequency_checked": False,
            "reason": (f"not frequency-checked: {window['delta_kcal']:.2f} kcal/mol above the lowest electronic "
                       f"energy, outside the {window['window_kcal']:.2f} kcal/mol window"),
            "proof": {"n_imaginary": None, "lowest_frequency_cm1": None, "rounds": 0},
            "energy_hartree": c["energy_hartree"], "symmetry_number": int(sigma), "point_group": pg,
            "measured": None, "vibrations": False, "engine_seconds": 0.0, "gradient_calls": 0,
            "hessian_gradients": 0}


def _final_list(p, minima, recs, work, settings):
    """The conformers after the frequency check, re-measured on their final geometry and merged again: a
    mode followed downhill can land on a minimum that another seed reached too. A conformer outside the
    frequency window is usable without a Hessian (frequency_checked False)."""
    from .. import ring as cq_ring
    from .. import unique as cq_unique
    confs = []
    for c in minima["conformers"]:
        cid = c["conformer"]
        rec = recs[cid]
        checked = rec.get("frequency_checked", True)
        usable = rec["status"] == "ok" and (not checked or rec["proof"]["n_imaginary"] == 0)
        meas = rec.get("measured") or {k: c.get(k) for k in ("ring_form", "q", "theta", "phi", "orientation",
                                                             "other_rings")}
        if rec.get("measured") and (work / f"{cid}.xyz").is_file():   # labels (not numbers) by the current
            now = cq_ring.measure(read_xyz(work / f"{cid}.xyz").positions, p.ring, p.substituents,  # rules,
                                  p.other_rings, cq_ring.trigonal_ring_atoms(p.mol, p.ring))   # also when reused
            meas = {**meas, **{k: now[k] for k in ("ring_form", "orientation", "other_rings") if k in now}}
        confs.append({"conformer": cid, "seed": c["seed"], "usable": usable,
                      "status": rec["status"] if rec["status"] != "ok" or usable else "saddle",
                      "reason": rec.get("reason", ""), "degeneracy": c["degeneracy"], **meas,
                      "energy_hartree": rec["energy_hartree"], "n_imaginary": rec["proof"]["n_imaginary"],
                      "lowest_frequency_cm1": rec["proof"]["lowest_frequency_cm1"],
                      "symmetry_number": rec.get("symmetry_number"), "point_group": rec.get("point_group"),
                      "geometry": f"{FOLDER}/{cid}.xyz",
                      "vibrations": f"{FOLDER}/{cid}.vib.json" if rec.get("vibrations") else None,
                      "frequency_checked": bool(checked),
                      "thermal_correction_from": cid if rec.get("vibrations") else None})
    good = [c for c in confs if c["usable"]]
    geoms = {c["conformer"]: read_xyz(work / f"{c['conformer']}.xyz") for c in good}
    by_id = {c["conformer"]: c for c in confs}
    groups = cq_unique.unique_minima(
        p.mol, [cq_unique.Record(c["conformer"], geoms[c["conformer"]].positions, c["energy_hartree"]) for c in good],
        rmsd_tol=settings["unique"]["rmsd_a"], energy_tol_kcal=settings["unique"]["energy_kcal"],
        prefer=lambda cid: cq_unique.other_ring_rank(by_id[cid].get("other_rings")))
    for g in groups:
        by_id[g.name]["degeneracy"] = int(g.degeneracy)
        for m in list(g.duplicates) + list(g.mirror_members):
            c = by_id[m]
            c["usable"] = False
            c["status"] = "duplicate"
            c["reason"] = (f"after the frequency check this is the {'mirror image' if m in g.mirror_members else 'same minimum'}"
                           f" of {g.name}")
    _borrow_thermal_corrections(confs)
    return confs


def _borrow_thermal_corrections(confs):
    """Name, for every usable conformer without a Hessian, the frequency-checked conformer whose thermal
    correction it borrows (chairqm.frequency_window.donor); without any, it cannot be counted."""
    from .. import frequency_window as cq_fw
    checked = [c for c in confs if c["usable"] and c["frequency_checked"] and c["vibrations"]]
    for c in confs:
        if c["frequency_checked"] or not c["usable"]:
            continue
        d = cq_fw.donor(c, checked)
        if d is None:
            c["usable"], c["status"] = False, "failed"
            c["reason"] += "; no frequency-checked conformer to borrow a thermal correction from"
            continue
        c["thermal_correction_from"] = d
        c["thermal_correction_vibrations"] = f"{FOLDER}/{d}.vib.json"
        c["reason"] += f"; G estimated with the thermal correction of {d}"


def _executor(threads, jobs):
    """Worker processes (threads − 1; this process is the last worker) that share each Hessian's
    displacements, or None for one thread or nothing to compute."""
    if threads <= 1 or not jobs:
        return None
    from concurrent.futures import ProcessPoolExecutor

    from .records import worker_context
    return ProcessPoolExecutor(max_workers=threads - 1, mp_context=worker_context())


def _phase_window(th, temps, recs, work, minima, es, first, vib):
    """The automatic window with the Hessians known so far: chairqm.frequency_window.auto_window_kcal
    with Z_S/w_0 from the frequency-checked conformers among `first` (1 when the conformer of lowest
    electronic energy has no usable Hessian). `vib`: {conformer: (atoms, frequencies)}, filled here with
    those not yet read, so each Hessian is read and diagonalised once over all passes."""
    from .. import frequency_window as cq_fw
    confs = minima["conformers"]
    if not confs:                       # every seed failed: nothing to weigh, the default window stands
        return cq_fw.auto_window_kcal(temps)
    lowest = min(confs, key=lambda c: (c["energy_hartree"], c["conformer"]))["conformer"]
    usable = [c["conformer"] for c in confs if c["conformer"] in first and recs[c["conformer"]]["status"] == "ok"
              and recs[c["conformer"]]["proof"]["n_imaginary"] == 0 and recs[c["conformer"]].get("vibrations")]
    if lowest not in usable:
        return cq_fw.auto_window_kcal(temps)
    deg = {c["conformer"]: c["degeneracy"] for c in confs}
    for cid in usable:
        if cid not in vib:
            vib[cid] = vibrations_of(work / f"{cid}.vib.json")
    z = {}
    for t in temps:
        g = {cid: recs[cid]["energy_hartree"] + free_energy_terms(*vib[cid], recs[cid]["symmetry_number"],
                                                                  es["multiplicity"], th, t).g_corr
             for cid in usable}
        z[t] = cq_fw.partition_ratio(g, deg, lowest, t)
    return cq_fw.auto_window_kcal(temps, z_ratios=z)


def run(cfg, plan, name, threads=1):
    from .. import __version__
    from .. import frequency_window as cq_fw
    from ..units import KCAL_PER_HARTREE
    settings = cfg["settings"]
    p = load_molecule(name)
    folder = Path(name)
    work = folder / "work" / "thermo"
    out = folder / FOLDER
    out.mkdir(parents=True, exist_ok=True)
    es = engine_settings(settings, p)
    opt = dict(settings["optimize"])
    th = thermo_settings(settings)
    temps = [float(t) for t in settings["temperatures_k"]]
    minima = fileio.read_json(folder / "minima.json")
    setting = th["frequency_window_kcal"]
    auto = isinstance(setting, str) and setting.strip().lower() == cq_fw.AUTO
    recs, pool = {}, {"ex": None}
    vib_cache = {}                      # conformer -> (atoms, frequencies) of its published Hessian

    def compute(ids):
        """Hessians of conformers `ids` (records reused by key), displacements shared over the workers."""
        jobs = []
        for c in minima["conformers"]:
            cid = c["conformer"]
            if cid not in ids:
                continue
            xyz_in = folder / "minima" / f"{cid}.xyz"
            text = xyz_in.read_text()
            key = record_key("thermo", settings, p, text)
            out_json = work / f"{cid}.json"
            old = reusable(out_json, key, needs=[work / f"{cid}.xyz"])
            if old is not None and (not old.get("vibrations") or (work / f"{cid}.vib.json").is_file()):
                recs[cid] = old               # reuse; a failed record is retried
                continue
            cache = folder / "work" / "freq" / f"{cid}-{key_of(text, es, th['step_a'])[:10]}"
            jobs.append((name, cid, key, es, opt, th, str(xyz_in), c["energy_hartree"], str(cache),
                         str(out_json), str(work / f"{cid}.xyz"), str(work / f"{cid}.vib.json")))
        if jobs and pool["ex"] is None:
            pool["ex"] = _executor(threads, jobs)
        for job in jobs:
            rec = _freq_one(job, pool["ex"])
            recs[rec["conformer"]] = rec

    try:
        # first the Hessians every answer needs (and, with a fixed window, all of them)
        selected = set(cq_fw.select(minima["conformers"], 0.0 if auto else cq_fw.window_kcal(setting, temps)))
        compute(selected)
        window = cq_fw.window_kcal(setting, temps)
        by_energy = sorted(minima["conformers"], key=lambda c: (c["energy_hartree"], c["conformer"]))
        while auto:
            # then, lowest electronic energy first, every conformer inside the automatic window, which is
            # recomputed after each Hessian: one more known free energy can only narrow it
            window = _phase_window(th, temps, recs, work, minima, es, selected, vib_cache)
            inside = set(cq_fw.select(minima["conformers"], window)) - selected
            todo = [c["conformer"] for c in by_energy if c["conformer"] in inside]
            if not todo:
                break
            compute({todo[0]})
            selected.add(todo[0])
    finally:
        if pool["ex"] is not None:
            pool["ex"].shutdown()
    e0 = min((c["energy_hartree"] for c in minima["conformers"]), default=0.0)
    for c in minima["conformers"]:
        cid = c["conformer"]
        if cid not in selected:
            recs[cid] = _unchecked(name, p, c, folder / "minima" / f"{cid}.xyz", work / f"{cid}.xyz",
                                   {"delta_kcal": (c["energy_hartree"] - e0) * KCAL_PER_HARTREE, "window_kcal": window})
    final = _final_list(p, minima, recs, work, settings)
    by_id = {c["conformer"]: c for c in final}

    def terms_of(c):
        src = c.get("thermal_correction_from")
        if src is None:
            return {}
        if src not in vib_cache:
            vib_cache[src] = vibrations_of(work / f"{src}.vib.json")
        atoms, freqs = vib_cache[src]
        return {t: free_energy_terms(atoms, freqs, c["symmetry_number"], es["multiplicity"], th, t).to_record()
                for t in temps}

    rows = []
    for c in minima["conformers"]:
        cid = c["conformer"]
        r, f = recs[cid], by_id[cid]
        fileio.write_text(out / f"{cid}.xyz", (work / f"{cid}.xyz").read_text())
        if r.get("vibrations"):
            fileio.write_text(out / f"{cid}.vib.json", (work / f"{cid}.vib.json").read_text())
        terms = terms_of(f)
        for t in temps:
            term = terms.get(t)
            e = r["energy_hartree"]
            rows.append({"conformer": cid, "temperature_k": t,
                         "zpe_hartree": term["zpe"] if term else None,
                         "h_hartree": e + term["h_corr"] if term else None,
                         "s_hartree_per_k": term["s_total"] if term else None,
                         "g_hartree": e + term["g_corr"] if term else None,
                         "symmetry_number": r.get("symmetry_number"), "degeneracy": c["degeneracy"],
                         "lowest_frequency_cm1": r["proof"]["lowest_frequency_cm1"],
                         "n_imaginary": r["proof"]["n_imaginary"], "status": r["status"],
                         "energy_hartree": e, "g_corr_hartree": term["g_corr"] if term else None,
                         "point_group": r.get("point_group"), "model": th["model"],
                         "rounds": r["proof"]["rounds"], "reason": f["reason"] if not f["frequency_checked"] else r["reason"],
                         "frequency_checked": f["frequency_checked"],
                         "thermal_correction_from": f.get("thermal_correction_from")})
    fileio.write_json(folder / "thermo.json", {
        "molecule": name, "thermo": th, "chairqm_version": __version__, "conformers": final,
        "frequency_window_kcal": None if window == float("inf") else window,
        "hessians": len(selected), "minima": len(minima["conformers"]),
        "hessian_gradients": int(sum(r.get("hessian_gradients", 0) for r in recs.values())),
        "engine_seconds": float(sum(r["engine_seconds"] for r in recs.values())),
        "gradient_calls": int(sum(r["gradient_calls"] for r in recs.values()))})
    fileio.write_csv(folder / "thermo.csv", tables.frame(rows, tables.thermo(settings)))


def write_empty(name, settings, message):
    folder = Path(name)
    (folder / FOLDER).mkdir(parents=True, exist_ok=True)
    fileio.write_csv(folder / "thermo.csv", tables.frame([], tables.thermo(settings)))
    fileio.write_json(folder / "thermo.json", {"molecule": name, "conformers": [], "engine_seconds": 0.0,
                                               "gradient_calls": 0, "failed": message})
