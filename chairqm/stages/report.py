"""Report stage: every molecule's ensemble.json, conformers.csv and thermo/ -> summary.csv,
provenance.json, conformers.db (ASE SQLite) and report.html. The summary rows are built once, in memory,
and handed to the page."""

from __future__ import annotations

import os
from pathlib import Path

from .. import fileio
from . import tables
from .faults import fault
from .records import read_xyz


def calibrate_rows(rows, settings, cal=False, plan=None, per_molecule=True) -> str:
    """Calibrated value and 95 % prediction interval for each row's A-value (or, for rings with several
    groups, its chair gap), from the packaged calibration whose settings match this run, and only at the
    calibration's own temperature (chairqm.calibration.applies_at); returns the note for provenance.
    Outside the calibration's domain (calibration_domain keeps the reason) the interval is widened by the
    calibration's out-of-domain spread (chairqm.calibration.widened_outside, interval_half_width_outside);
    without one, or for a case the spread was not measured on, the row stays uncalibrated."""
    from .. import calibration as cq_cal
    auto = per_molecule and plan is not None and getattr(plan, "refine_auto", None)
    if auto:
        # refine: auto: the unrefined molecules take the GFN2-xTB calibration, the refined ones the
        # calibration of their DFT level (chairqm.refine.molecule_settings), each as its own run would
        from .. import refine as cq_refine
        notes = []
        for refined, label in ((False, "molecules not refined"), (True, "refined molecules")):
            part = [r for r in rows if r.get("molecule") in auto and bool(auto[r["molecule"]]["refine"]) == refined]
            if part:
                notes.append(f"{label}: " + calibrate_rows(part, cq_refine.molecule_settings(settings, refined),
                                                           plan=plan, per_molecule=False))
        return "; ".join(notes)
    if cal is False:                   # not looked up by the caller
        cal = cq_cal.load_matching(settings)
    if cal is None:
        # say why in words on every row (e.g. "no calibration for ALPB toluene; shipped: gas phase, ...")
        why = cq_cal.missing_reason(settings) or "no calibration matches these settings"
        for r in rows:
            if r.get("status") == "ok":
                r["calibration_domain"] = why
        return f"{why}: values are uncalibrated"
    skipped = set()
    outside = widened = 0
    for r in rows:
        if r.get("status") != "ok":
            continue
        mol = _plan_molecule(plan, r.get("molecule"))
        exo = (cq_cal.exocyclic_double_bonds(mol.mol, mol.ring)
               if mol is not None and getattr(mol, "mol", None) is not None else 0)
        why = cq_cal.domain(cal, mol.ring_elements, mol.substituents, exo) if mol is not None else ""
        widen = bool(why) and cq_cal.widened_outside(cal, mol.ring_elements, mol.substituents, exo)
        if why:
            r["calibration_domain"] = why
            outside += 1
            if not widen:
                continue
            widened += 1
        else:
            r["calibration_domain"] = "inside"
        if not cq_cal.applies_at(cal, r["temperature_k"]):
            skipped.add(float(r["temperature_k"]))
            continue
        for quantity in ("a_value_kcal", "chair_dg_kcal"):
            v = r.get(quantity)
            if v is not None and v == v:
                if quantity == "chair_dg_kcal" and float(v) == 0.0:
                    break           # two chairs equal by symmetry (set exactly by the ensemble stage): exact
                # outside the domain: the same line, the interval widened by the out-of-domain spread
                c, lo, hi = cq_cal.apply(cal, float(v), outside=widen)
                r.update({"calibrated_kcal": c, "interval_low_kcal": lo, "interval_high_kcal": hi,
                          "calibrated_quantity": quantity})
                break
    o = cal.outside_domain or {}
    if cq_cal.has_outside_spread(cal):
        note = (f"calibrated against {cal.n} experimental A-values (residual SD {cal.residual_sd_kcal:.2f} kcal/mol) "
                "inside its domain (monosubstituted cyclohexanes of the group types fitted); outside it (ring "
                "heteroatoms, several groups) the 95 % interval is widened by the out-of-domain spread "
                f"{float(o['excess_sd_kcal']):.2f} kcal/mol measured on {o.get('n')} cases of "
                f"{o.get('source_set', 'a second reference set')}"
                + (f"; {widened} row(s) outside it carry the widened interval" if widened else "")
                + (f"; {outside - widened} row(s) outside it (fused rings, group types absent from the fit) are "
                   "uncalibrated" if outside - widened else "")
                + ("; calibration_domain gives the reason for every row outside" if outside else ""))
    else:
        note = (f"calibrated against {cal.n} experimental A-values (residual SD {cal.residual_sd_kcal:.2f} kcal/mol), "
                "applied only inside its domain (monosubstituted cyclohexanes of the group types fitted)"
                + (f"; {outside} row(s) outside it are uncalibrated, with the reason in calibration_domain"
                   if outside else ""))
    if skipped:
        note += (f"; applied only at {float(cal.temperature_k):g} K, its own temperature: values at "
                 f"{', '.join(f'{t:g}' for t in sorted(skipped))} K are uncalibrated")
    return note


def _plan_molecule(plan, name):
    if plan is None:
        return None
    try:
        return plan.get(name)
    except Exception:
        return None


def summary_rows(cfg, plan) -> list[dict]:
    import pandas as pd
    rows = []
    for m in plan.molecules:
        ens = fileio.read_json(Path(m.name) / "ensemble.json")
        cdf = pd.read_csv(Path(m.name) / "conformers.csv")
        n = int(cdf.loc[cdf["status"] == "ok", "conformer"].nunique()) if len(cdf) else 0
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
                         "additive_same_method_kcal": (r.get("same_method") or {}).get("dg_kcal"),
                         "interaction_kcal": (r.get("same_method") or {}).get("interaction_kcal"),
                         "interaction_uncertainty_kcal": (r.get("same_method") or {}).get("uncertainty_kcal"),
                         "flag": bool(r["flag"]), "flag_reason": r["flag_reason"],
                         "refined": bool(ens.get("refined")),
                         "chair_dg_unrefined_kcal": (r.get("unrefined") or {}).get("chair_dg_kcal"),
                         "a_value_unrefined_kcal": (r.get("unrefined") or {}).get("a_value_kcal")})
    for r in cfg.get("refused") or []:       # chairqm run --skip-invalid: refused before anything ran
        for t in cfg["settings"]["temperatures_k"]:
            rows.append({"molecule": r["name"], "temperature_k": float(t), "status": "failed",
                         "reason": f"refused, not run: {r['reason']}", "n_conformers": 0, "flag": True,
                         "flag_reason": "no result"})
    return rows


def provenance(cfg, plan, calibration_note) -> dict:
    import time

    from .. import __version__
    from .. import engine as cq_engine
    engine_s, calls = 0.0, 0
    for m in plan.molecules:
        for stage in ("minima", "thermo"):
            d = fileio.read_json(Path(m.name) / f"{stage}.json")
            engine_s += d.get("engine_seconds", 0.0)
            calls += d.get("gradient_calls", 0)
    start_file = Path(".chairqm", "run-start.json")
    started = fileio.read_json(start_file) if start_file.is_file() else {}
    now = time.time()
    return {"chairqm_version": __version__, "output_version": tables.OUTPUT_VERSION,
            "engines": cq_engine.engine_versions(),
            "project": cfg.get("project", ""), "settings": cfg["settings"],
            "config_file": str(cfg.get("_config_path", "")),
            "input_hashes": {m.name: m.input_hash for m in plan.molecules},
            "molecules": [m.name for m in plan.molecules],
            "started": started.get("iso"), "finished": time.strftime("%Y-%m-%dT%H:%M:%S%z", time.localtime(now)),
            "wall_seconds": round(now - started["epoch"], 2) if "epoch" in started else None,
            "engine_seconds": round(engine_s, 2), "gradient_calls": calls,
            "engine_seconds_note": "engine time summed over the stages that computed in this folder, including reused records",
            "n_cpus": os.cpu_count(), "calibration": calibration_note,
            "reference_cache": _cache_note(cfg, plan),
            **({"refine_auto": getattr(plan, "refine_auto")} if getattr(plan, "refine_auto", None) else {})}


def _cache_note(cfg, plan) -> dict:
    """Which same-method A-values came from the reference cache instead of this run's reference rings."""
    from .. import reference_cache
    root = reference_cache.folder(cfg["settings"])
    return {"folder": str(root) if root is not None else None,
            "used": {frag: {f"{t:g}": v for t, v in vals.items()} for frag, vals in getattr(plan, "cached", {}).items()}}


def write_db(plan, path="conformers.db"):
    """One ASE SQLite database of every conformer with its key-value pairs (`ase db conformers.db`)."""
    import pandas as pd
    from ase.db import connect
    tmp = Path(f".{Path(path).name}.part")
    if tmp.exists():
        tmp.unlink()
    db = connect(str(tmp), type="db", append=False)
    for m in plan.molecules:
        cdf = pd.read_csv(Path(m.name) / "conformers.csv", keep_default_na=False)
        t0 = cdf["temperature_k"].min() if len(cdf) else None
        for r in cdf[cdf["temperature_k"] == t0].itertuples():
            xyz = Path(m.name) / "thermo" / f"{r.conformer}.xyz"
            if not xyz.is_file():
                continue
            atoms = read_xyz(xyz)
            atoms.info = {}
            kv = {"molecule": m.name, "conformer": r.conformer, "seed": r.seed, "ring_form": r.ring_form,
                  "orientation": r.orientation or "none", "status": r.status, "temperature_k": float(r.temperature_k)}
            for k in ("energy_hartree", "g_hartree", "g_rel_kcal", "population", "q", "theta", "phi"):
                v = getattr(r, k)
                if v != "" and v is not None:
                    kv[k] = float(v)
            # a column with an empty cell is read back as floats ("0.0")
            kv["n_imaginary"] = int(float(r.n_imaginary)) if r.n_imaginary not in ("", None) else -1
            db.write(atoms, **kv)
    del db
    if not tmp.exists():                 # nothing written: still a valid, empty database
        empty_db(tmp)
    os.replace(tmp, path)


def empty_db(path) -> None:
    """An ASE database with no rows at `path`: the schema is made by opening a connection explicitly and
    committing (ASE creates the file lazily, on the first write or query, which is not always made)."""
    from ase.db import connect
    db = connect(str(path), type="db", append=False)
    with db:                             # opens, initialises the tables, commits on leaving
        db.count()
    if not Path(path).is_file():         # pragma: no cover - a library that still wrote nothing
        import sqlite3
        sqlite3.connect(str(path)).close()


def run(cfg, plan, name=None, threads=1):
    from .. import report as cq_report
    settings = cfg["settings"]
    rows = summary_rows(cfg, plan)
    from .. import calibration as cq_cal
    cal = cq_cal.load_matching(settings)
    note = calibrate_rows(rows, settings, cal, plan)
    summary = tables.frame(rows, tables.summary(settings))
    summary["flag"] = summary["flag"].map(lambda v: "true" if bool(v) else "false")
    fileio.write_csv("summary.csv", summary, significant_digits=fileio.SUMMARY_SIGNIFICANT_DIGITS)
    prov = provenance(cfg, plan, note)
    prov["calibration_temperature_k"] = None if cal is None else float(cal.temperature_k)
    # summary.csv and provenance.json are the answer; the database and the page are views of it. An error
    # in a view must not cost the answer (Snakemake deletes every output of a failed job), so it is
    # written to the job's log and to provenance.json ("report_problems"), the view is replaced by a plain
    # one, and `chairqm run` exits non-zero naming the problem.
    problems = []
    try:
        if fault("crash", "report/conformers.db"):
            raise RuntimeError("injected fault: the database could not be written")
        write_db(plan)
    except Exception as exc:
        problems.append(_problem("conformers.db", exc))
        fallback = Path(".conformers.db.fallback.part")
        empty_db(fallback)
        os.replace(fallback, "conformers.db")
    try:
        if fault("crash", "report/report.html"):
            raise RuntimeError("injected fault: the page could not be built")
        cq_report.write_report(Path("."), prov, summary_rows=summary.to_dict("records"))
    except Exception as exc:
        problems.append(_problem("report.html", exc))
        fileio.write_text("report.html", plain_page(summary, problems))
    if problems:
        prov["report_problems"] = problems
    fileio.write_json("provenance.json", prov)


def _problem(what: str, exc: Exception) -> str:
    import sys
    import traceback
    traceback.print_exc(file=sys.stderr)             # into logs/report.log
    return f"{what} could not be built ({type(exc).__name__}: {exc}); a plain stand-in was written instead"


def plain_page(summary, problems) -> str:
    """A minimal self-contained page (the summary table and what went wrong) for when the full report
    cannot be built."""
    from html import escape
    head = "".join(f"<th>{escape(str(c))}</th>" for c in summary.columns)
    body = "".join("<tr>" + "".join(f"<td>{escape('' if v is None or v != v else str(v))}</td>" for v in row)
                   + "</tr>" for row in summary.itertuples(index=False))
    notes = "".join(f"<li>{escape(p)}</li>" for p in problems)
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>chairqm summary</title></head>"
            f"<body><h1>chairqm summary</h1><p>The full report could not be built:</p><ul>{notes}</ul>"
            f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table></body></html>\n")


def write_empty(name, settings, message):
    raise RuntimeError("the report stage is not isolated: its errors stop the run")
