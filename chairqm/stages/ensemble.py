"""Ensemble stage: thermo.json + thermo/*.vib.json (+ refine.csv) -> ensemble.json, families.csv,
conformers.csv and conformers.sdf.

Free energies at every requested temperature (and along the population curve) are computed here from
each conformer's published Hessian; with refinement, the composite free energies of chairqm.refine.
Then populations, families, the chair gap and A-value, the additive estimate and the disagreement flag.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

from .. import fileio
from . import tables
from .__main__ import upstream_failure
from .records import load_molecule, read_xyz
from .thermo import free_energy_terms, thermo_settings, vibrations_of

CURVE_T = [float(t) for t in range(150, 451, 10)]      # K: populations-against-temperature curve


def _clean(x):
    """JSON-friendly scalar: NaN -> None, numpy -> Python."""
    if x is None:
        return None
    try:
        if isinstance(x, str):
            return x
        f = float(x)
        return None if math.isnan(f) else f
    except (TypeError, ValueError):
        return x


class Conformer(dict):
    """One entry of the thermo stage's final list, with its GFN2-xTB free energy G(T) (hartree) computed on
    demand from its VibrationsData file, and (after :func:`apply_refinement`) its refined one."""

    def attach(self, folder: Path, th: dict, multiplicity: int):
        self["atoms"] = read_xyz(folder / self["geometry"])
        vib = self.get("vibrations") or self.get("thermal_correction_vibrations")   # the latter: borrowed G − E
        self._vib = folder / vib if vib else None
        self._th, self._mult, self._g = th, multiplicity, {}
        return self

    def g(self, t, refined=True):
        """G(T) in hartree: GFN2-xTB, or the refined composite value when refinement applies; None when the
        conformer has no Hessian."""
        if self._vib is None:
            return None
        t = float(t)
        if t not in self._g:
            if not hasattr(self, "_freqs"):
                self._atoms_vib, self._freqs = vibrations_of(self._vib)
            term = free_energy_terms(self._atoms_vib, self._freqs, self["symmetry_number"], self._mult, self._th, t)
            self._g[t] = self["energy_hartree"] + term.g_corr
        g = self._g[t]
        if refined and "refined_g" in self:
            return self["refined_g"](g)
        return g


def apply_refinement(folder: Path, confs) -> bool:
    """Put refined free energies on the conformers with chairqm.refine.composite: G = E(DFT) + [G − E](GFN2-xTB)
    (+ the GFN2-xTB solvation with 'gfn2-delta'). A conformer that was not refined (or whose SCF failed) gets
    its GFN2-xTB G shifted by the mean E(DFT) + ΔG_solv − E(GFN2-xTB) of the refined ones. Returns False when
    there is nothing to apply."""
    import numpy as np
    import pandas as pd

    from .. import refine as cq_refine
    path = folder / "refine.csv"
    if not path.is_file():
        return False
    df = pd.read_csv(path, keep_default_na=False)
    ok = {r.conformer: r for r in df[df["status"] == "ok"].itertuples()}
    if not ok:
        return False
    mean = float(np.mean([float(r.energy_refined_hartree) + float(r.solvation_hartree or 0.0) - float(r.energy_hartree)
                          for r in ok.values()]))
    for c in confs:
        r = ok.get(c["conformer"])
        c["refined"] = r is not None
        c["energy_refined_hartree"] = float(r.energy_refined_hartree) if r is not None else None
        if r is not None:
            c["refined_g"] = (lambda g, r=r: cq_refine.composite(float(r.energy_refined_hartree), float(r.energy_hartree),
                                                                   g, float(r.solvation_hartree or 0.0)))
        else:
            c["refined_g"] = (lambda g: g + mean)
    return True


def symmetric_partner(folder: Path, partner_orientation) -> str:
    """The conformer a seed of the ring-flip partner chair was merged into as a symmetry-equivalent (a seed
    merged before optimisation in seeds.csv, a duplicate or mirror image in minima.csv, or one merged after
    the frequency check in thermo.json); '' if none.
    Only the orientations of the chair's listed substituents are compared."""
    import re

    import pandas as pd

    from .. import ensemble as cq_ens
    want = cq_ens.parse_orientation(partner_orientation)
    if not want:
        return ""

    def matches(orientation) -> bool:
        got = cq_ens.parse_orientation(orientation)
        return all(got.get(k) == v for k, v in want.items())
    rows = []
    if (folder / "minima.csv").is_file():
        df = pd.read_csv(folder / "minima.csv", keep_default_na=False)
        rows += [(r.ring_form, r.orientation, r.reason) for r in df[df["status"] == "duplicate"].itertuples()]
        conf_of = {r.seed: (r.conformer or r.reason) for r in df.itertuples()}
        # a partner seed merged before optimisation as symmetry-equivalent of a kept seed
        if (folder / "seeds.csv").is_file():
            sd = pd.read_csv(folder / "seeds.csv", keep_default_na=False)
            for r in sd[sd["status"] == "merged"].itertuples():
                hit = re.search(r"symmetry-equivalent of (\S+)", str(r.reason))
                if hit and hit.group(1) in conf_of:
                    rows.append((r.ring_form, r.orientation, conf_of[hit.group(1)]))
    final = fileio.read_json(folder / "thermo.json").get("conformers", [])
    rows += [(c.get("ring_form"), c.get("orientation"), c.get("reason", "")) for c in final
             if c.get("status") == "duplicate"]
    for form, orientation, reason in rows:
        hit = re.search(r"\b(c\d{3,})\b", str(reason))
        if form == "chair" and matches(orientation) and hit:
            return hit.group(1)
    return ""


def _qm_a_values(plan, name, temperature):
    """{fragment: same-method A-value at `temperature`} for the groups of `name`: from this run's reference
    rings, or from the reference cache where the plan took them from there."""
    out = {frag: vals[float(temperature)] for frag, vals in getattr(plan, "cached", {}).items()
           if float(temperature) in vals}
    for frag, ref in plan.references_for(name).items():
        path = Path(ref) / "ensemble.json"
        if not path.is_file():
            continue
        for row in fileio.read_json(path).get("temperatures", []):
            if abs(row["temperature_k"] - float(temperature)) < 1e-6 and row.get("a_value_kcal") is not None:
                out[frag] = row["a_value_kcal"]
    return out


def _analyse_temperature(p, plan, name, settings, usable_df, t):
    from .. import additivity as cq_add
    from .. import ensemble as cq_ens
    an = settings["analysis"]
    fam = cq_ens.families(usable_df, t)
    ids = cq_ens.chair_ids(p.ring, p.ring_elements, p.substituents)
    summ = cq_ens.chair_summary(fam, ids)
    if summ.get("chair_dg_kcal") is None and summ.get("preferred_chair") is not None:
        same_as = symmetric_partner(Path(name), summ["second_chair_orientation"])
        if same_as:
            # the ring-flip partner was merged into a conformer of the preferred chair by a symmetry of the
            # molecule (cis-1,4-di-tert-butylcyclohexane): the two chairs are one conformer, gap 0 exactly
            notes = [n for n in str(summ.get("note", "")).split("; ") if n and "ring-flip partner chair" not in n]
            notes.append(f"the ring-flip partner chair is the same conformer by symmetry (merged into {same_as}): "
                         "the two chairs are degenerate")
            summ.update(second_chair=summ["preferred_chair"], chair_dg_kcal=0.0, note="; ".join(notes))
            if len(ids) == 1:
                summ["a_value_kcal"] = 0.0
    locked = [o for o in p.other_rings if o.get("fusion") == "trans"]
    if summ.get("chair_dg_kcal") is None and summ.get("preferred_chair") is not None and locked:
        # a trans-fused ring: the flipped chair would need both fusion bonds axial (anti), which the fused
        # ring cannot span (the seeds stage screens it as 'locked'); there is no chair equilibrium
        notes = [n for n in str(summ.get("note", "")).split("; ") if n and "ring-flip partner chair" not in n]
        notes.append("the ring cannot flip: " + ", ".join(o["label"] for o in locked) + " is trans-fused to it, "
                     "and the other chair would need both fusion bonds axial (locked), so no chair gap exists")
        summ["note"] = "; ".join(notes)
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
    same = None
    if (an.get("reference_groups", True) and summ.get("chair_dg_kcal") is not None
            and summ.get("preferred_chair_orientation") is not None):
        from .. import calibration as cq_cal
        cal = cq_cal.load_matching(settings)
        sd = cal.residual_sd_kcal if cal is not None else cq_add.DEFAULT_GROUP_SD_KCAL
        same = cq_add.same_method(p.ring, p.ring_elements, p.substituents, summ["preferred_chair_orientation"],
                                  summ["second_chair_orientation"] or "", summ["chair_dg_kcal"], qm, sd)
        if same.dg_kcal is not None:
            # the flag is about additivity against the run's own A-values; the method-against-experiment
            # difference (the tabulated estimate) is shown beside it and never raises the flag by itself
            flag, why = cq_add.interaction_flag(same, an["flag_threshold_kcal"], ring_elements=p.ring_elements)
            tb = summ.get("twist_boat_population", 0.0) or 0.0
            if tb > an["non_chair_threshold"]:
                extra = (f"non-chair families hold {100 * tb:.1f} % of the population "
                         f"(more than {100 * an['non_chair_threshold']:.0f} %)")
                why = f"{why}; {extra}" if flag else f"{extra} ({why})"
                flag = True
    if locked and summ.get("chair_dg_kcal") is None and summ.get("preferred_chair") is not None:
        flag, why = False, summ["note"].split("; ")[-1]
    if own and not reasons:
        flag, why = False, (f"defines the QM-derived A-value of {p.substituents[0].fragment} "
                            "(used for the additive estimate of the other molecules)")
    additive = None
    if est is not None:
        # every gap on the computed chairs' axis: G(second computed chair) − G(preferred computed chair)
        axis = summ.get("preferred_chair_orientation")
        pref = est.preferred_orientation if est.dg_kcal is not None else axis

        def on_axis(v):
            return _clean(cq_ens.on_axis(v, pref, axis) if est.dg_kcal else v)
        additive = {"dg_kcal": on_axis(est.dg_kcal), "source": est.source, "reason": est.reason,
                    "terms": [[str(a), _clean(b)] for a, b in est.terms],
                    "tabulated_dg_kcal": on_axis(est.tabulated_dg_kcal), "qm_dg_kcal": on_axis(est.qm_dg_kcal),
                    "preferred_orientation": est.preferred_orientation}
    row = {"temperature_k": float(t), "preferred_family": summ.get("preferred_family"),
           "chair_dg_kcal": _clean(summ.get("chair_dg_kcal")),
           "a_value_kcal": _clean(summ.get("a_value_kcal")) if len(p.substituents) == 1 else None,
           "twist_boat_population": _clean(summ.get("twist_boat_population")),
           "preferred_chair": summ.get("preferred_chair"), "second_chair": summ.get("second_chair"),
           "additive": additive, "flag": bool(flag), "flag_reason": why, "note": summ.get("note", "")}
    if same is not None:
        row["same_method"] = {"dg_kcal": _clean(same.dg_kcal), "interaction_kcal": _clean(same.interaction_kcal),
                              "uncertainty_kcal": _clean(same.uncertainty_kcal), "missing": same.missing,
                              "carriers": same.carriers, "terms": [[str(a), _clean(b)] for a, b in same.terms]}
    return fam, row


def _frame(confs, t, refined=True):
    import pandas as pd
    return pd.DataFrame([{"conformer": c["conformer"], "ring_form": c["ring_form"], "orientation": c["orientation"],
                          "g_hartree": c.g(t, refined), "degeneracy": c["degeneracy"]} for c in confs])


def run(cfg, plan, name, threads=1):
    import pandas as pd

    from .. import ensemble as cq_ens
    settings = cfg["settings"]
    p = load_molecule(name)
    folder = Path(name)
    temps = [float(t) for t in settings["temperatures_k"]]
    th = thermo_settings(settings)
    confs = [Conformer(c).attach(folder, th, p.multiplicity)
             for c in fileio.read_json(folder / "thermo.json")["conformers"]]
    # under refine: auto the plan decided whether this molecule is refined; from here on its settings are
    # those of a run that made the same choice for every molecule (chairqm.refine.molecule_settings)
    requested = plan.refines(name)
    decision = plan.refine_decision(name)
    if decision is not None:
        from .. import refine as cq_refine
        settings = cq_refine.molecule_settings(settings, requested)
    refined = requested and apply_refinement(folder, confs)
    usable = [c for c in confs if c["usable"]]
    by_id = {c["conformer"]: c for c in confs}
    out = {"molecule": name, "smiles": p.smiles, "reference": p.reference, "status": "ok", "reason": "",
           "refined": bool(refined), "temperatures": [], "curve": {"temperature_k": CURVE_T, "families": {}}}
    if decision is not None:
        out["refine_decision"] = decision
    failed_before = upstream_failure(name)
    if failed_before or not usable:
        out["status"] = "failed"
        out["reason"] = failed_before or ("no conformer survived optimisation, verification and the frequency check"
                                          if confs else "no conformer could be built or optimised (see seeds.csv and minima.csv)")
    conf_rows, fam_frames = [], []
    for t in temps:
        pops = {}
        if usable:
            df = _frame(usable, t)
            cp = cq_ens.conformer_populations(df, t)
            pops = {r.conformer: (r.g_rel_kcal, r.population) for r in cp.itertuples()}
            fam, row = _analyse_temperature(p, plan, name, settings, df, t)
            if refined:
                # the GFN2-xTB values beside the refined ones
                fam_u, row_u = _analyse_temperature(p, plan, name, settings, _frame(usable, t, refined=False), t)
                fam = fam.merge(fam_u[["ring_form", "orientation", "g_rel_kcal", "population"]].rename(
                    columns={"g_rel_kcal": "g_rel_unrefined_kcal", "population": "population_unrefined"}),
                    on=["ring_form", "orientation"], how="left")
                row["unrefined"] = {k: row_u[k] for k in ("preferred_family", "chair_dg_kcal", "a_value_kcal",
                                                          "twist_boat_population", "flag", "flag_reason")}
                # the one chair-gap axis: the refined chairs' (negative: GFN2-xTB alone prefers the other chair)
                row["unrefined"]["chair_dg_kcal"] = cq_ens.on_axis(row_u["chair_dg_kcal"], row_u["preferred_chair"],
                                                                   row["preferred_chair"])
            # the other rings' state in each family's lowest conformer (a family is the analysed ring's form)
            lowest = cp.drop_duplicates(["ring_form", "orientation"])
            other = {(r.ring_form, r.orientation): by_id[r.conformer].get("other_rings", "")
                     for r in lowest.itertuples()}
            fam["other_rings"] = [other.get((r.ring_form, r.orientation), "") for r in fam.itertuples()]
            fam_frames.append(fam)
            out["temperatures"].append(row)
        for c in confs:
            g_rel, pop = pops.get(c["conformer"], (None, 0.0 if c["usable"] is False else None))
            r = {"conformer": c["conformer"], "seed": c["seed"], "temperature_k": t,
                 "ring_form": c["ring_form"], "q": c["q"], "theta": c["theta"], "phi": c["phi"],
                 "orientation": c["orientation"], "energy_hartree": c["energy_hartree"],
                 "g_hartree": c.g(t, refined=False), "g_rel_kcal": g_rel, "population": pop,
                 "n_imaginary": c["n_imaginary"], "status": c["status"],
                 "degeneracy": c["degeneracy"], "symmetry_number": c.get("symmetry_number"),
                 "reason": c["reason"], "other_rings": c.get("other_rings", ""),
                 "frequency_checked": c.get("frequency_checked", True),
                 "thermal_correction_from": c.get("thermal_correction_from")}
            if requested:
                r["energy_refined_hartree"] = c.get("energy_refined_hartree")
                r["g_refined_hartree"] = c.g(t) if "refined_g" in c else None
                r["refined_single_point"] = bool(c.get("refined"))
            conf_rows.append(r)
    if usable:
        for t in CURVE_T:
            fam = cq_ens.families(_frame(usable, t), t)
            for r in fam.itertuples():
                key = cq_ens.family_key(r.ring_form, r.orientation)
                out["curve"]["families"].setdefault(key, [0.0] * len(CURVE_T))
                out["curve"]["families"][key][CURVE_T.index(t)] = float(r.population)
    minima = fileio.read_json(folder / "minima.json")
    skipped = minima.get("not_optimised") or []
    if skipped and out["status"] == "ok":
        why = (f"{len(skipped)} seed(s) were not optimised because the gradient budget of "
               f"{minima.get('gradient_budget')} calls was spent (settings.optimize.max_gradient_calls): the "
               "ensemble may miss conformers")
        for row in out["temperatures"]:
            row["flag"] = True
            row["flag_reason"] = "; ".join(x for x in (row["flag_reason"], why) if x)
    _medium_and_coverage(p, settings, folder, usable, out)
    _store_reference(p, settings, out)
    fam_cols = tables.families(settings)
    fams = pd.concat(fam_frames, ignore_index=True) if fam_frames else tables.frame([], fam_cols)
    fileio.write_csv(folder / "families.csv", fams.reindex(columns=fam_cols))
    conf_df = tables.frame(conf_rows, tables.conformers(settings))
    fileio.write_csv(folder / "conformers.csv", conf_df)
    write_sdf(folder / "conformers.sdf", p, confs, temps[0], conf_df)
    fileio.write_json(folder / "ensemble.json", out)


#: intramolecular hydrogen bonds in the leading gas-phase conformer from which the result is said to rest
#: on them (a chain of two or more: the cooperative O-H...O networks of polyols and sugars)
HBOND_CHAIN_MIN = 2


def _medium_and_coverage(p, settings, folder, usable, out):
    """Two statements a result needs beside its numbers: how much of the rotor space the seeds covered
    (chairqm.rotamers.coverage, from seeds.csv), and, in the gas phase, whether the leading conformer
    rests on a chain of intramolecular hydrogen bonds, which a solvent would compete with (flagged)."""
    import pandas as pd

    from .. import chem as cq_chem
    from .. import rotamers as cq_rot
    seeds_csv = folder / "seeds.csv"
    cov = None
    if seeds_csv.is_file():
        reasons = pd.read_csv(seeds_csv, keep_default_na=False)["reason"].tolist()
        cov = cq_rot.coverage(reasons)
        cut = next((m.group(0) for r in reasons for m in [re.search(r"other rings: \d+ of \d+ combinations[^;]*", str(r))]
                    if m), "")
        if cut:
            out["other_ring_sets_cut"] = cut
            for row in out["temperatures"]:
                row["note"] = "; ".join(x for x in (row.get("note", ""), cut) if x)
    if cov is not None:
        out["rotor_coverage"] = cov
        text = (f"rotor space: {cov['starts']} of {cov['grid']} torsion-grid starts per ring form "
                f"({100.0 * cov['starts'] / cov['grid']:.0f} %)"
                + (", including both hydrogen-bond chains" if cov["chains"] else "")
                + ("; raise seeds.max_rotamer_starts to cover more" if cov["starts"] < cov["grid"] else ""))
        for row in out["temperatures"]:
            row["note"] = "; ".join(x for x in (row.get("note", ""), text) if x)
    if settings.get("solvent") not in (None, "", {}) or out.get("status") != "ok" or not out["temperatures"]:
        return
    t0 = out["temperatures"][0]["temperature_k"]
    cands = [c for c in usable if c.g(t0) is not None]
    if not cands:
        return
    lead = min(cands, key=lambda c: c.g(t0))
    bonds = cq_chem.intramolecular_hbonds(p.mol, lead["atoms"].positions)
    out["leading_hydrogen_bonds"] = [list(map(int, b)) for b in bonds]
    if len(bonds) >= HBOND_CHAIN_MIN:
        why = (f"gas phase: the leading conformer {lead['conformer']} holds {len(bonds)} intramolecular hydrogen "
               "bonds; in solution the medium competes with them and may change the answer — run with a "
               "solvent (settings.solvent, e.g. ALPB water or chloroform) before relying on it")
        for row in out["temperatures"]:
            row["flag"] = True
            row["flag_reason"] = "; ".join(x for x in (row["flag_reason"], why) if x)


def _store_reference(p, settings, out):
    """A monosubstituted cyclohexane's A-values go to the reference cache (chairqm.reference_cache), where
    later runs with the same settings take them instead of computing the ring again."""
    if out.get("status") != "ok" or len(p.substituents) != 1 or p.ring_elements != ["C"] * 6:
        return
    if not (settings.get("analysis") or {}).get("reference_groups", True):
        return
    from .. import reference_cache
    values = {row["temperature_k"]: row["a_value_kcal"] for row in out["temperatures"]
              if row.get("a_value_kcal") is not None}
    if values:
        reference_cache.store(p.substituents[0].fragment, settings, values,
                              source=f"{Path.cwd() / p.name} ({p.smiles})")


def write_sdf(path, p, confs, t0, conf_df):
    """Every minimum (final geometry) with its properties, lowest free energy first."""
    import io

    from rdkit import Chem

    from ..chem import with_positions
    buf = io.StringIO()
    w = Chem.SDWriter(buf)
    w.SetKekulize(False)
    at_t0 = conf_df[conf_df["temperature_k"] == t0].set_index("conformer")
    for c in confs:
        m = with_positions(p.mol, c["atoms"].positions)
        m.SetProp("_Name", f"{p.name} {c['conformer']}")
        row = at_t0.loc[c["conformer"]]
        props = {"conformer": c["conformer"], "seed": c["seed"], "ring_form": c["ring_form"],
                 "orientation": c["orientation"], "status": c["status"], "degeneracy": c["degeneracy"],
                 "energy_hartree": c["energy_hartree"], "temperature_k": t0,
                 "g_hartree": row["g_hartree"], "g_rel_kcal": row["g_rel_kcal"], "population": row["population"],
                 "n_imaginary": c["n_imaginary"], "q": c["q"], "theta": c["theta"], "phi": c["phi"]}
        for k, v in props.items():
            m.SetProp(k, "" if v is None or (isinstance(v, float) and v != v) else str(v))
        w.write(m)
    w.close()
    fileio.write_text(path, buf.getvalue())


def write_empty(name, settings, message):
    folder = Path(name)
    fileio.write_csv(folder / "families.csv", tables.frame([], tables.families(settings)))
    fileio.write_csv(folder / "conformers.csv", tables.frame([], tables.conformers(settings)))
    fileio.write_text(folder / "conformers.sdf", "")
    fileio.write_json(folder / "ensemble.json", {"molecule": name, "status": "failed",
                                                 "reason": f"ensemble stage: {message}", "temperatures": []})
