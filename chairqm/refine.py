"""Optional DFT refinement of GFN2-xTB minima: its settings, which conformers to refine, composite free energies.

The low-lying GFN2-xTB minima (see :func:`select`) get one single point each at their GFN2-xTB geometry
(chairqm.dft: PySCF, DFT-D3, implicit solvent), and the GFN2-xTB thermal correction is carried over
(:func:`composite`).  Solvent (``settings.refine.solvent_model``, when the run has a solvent):
``gfn2-delta`` (default) adds the GFN2-xTB solvation free energy at the same geometry to a gas-phase
single point; ``pcm`` puts PySCF's C-PCM into the SCF (see chairqm.dft).

The defaults and ranges of the settings live in one place, the ``settings.refine`` block of the
configuration schema (chairqm/schemas/config.schema.json); :func:`resolve` and :func:`check` read them
from there.

Energies in hartree.
"""

from __future__ import annotations

import copy
import functools
import math
import os

import numpy as np

from chairqm import dft
from chairqm.dft import did_you_mean as _did_you_mean
from chairqm.errors import ChairqmError
from chairqm.units import KCAL_PER_HARTREE



# ------------------------------------------------------------------------------------------ settings
#: settings.refine: auto refines only the molecules where GFN2-xTB is known to err (:func:`auto_decision`)
AUTO = "auto"

@functools.lru_cache(maxsize=1)
def _schema_block() -> dict:
    """The object branch of ``settings.refine`` in the configuration schema (chairqm.config.load_schema)."""
    from chairqm import config
    refine = config.load_schema()["properties"]["settings"]["properties"]["refine"]
    return next(b for b in refine["oneOf"] if b.get("type") == "object")


def _props() -> dict:
    return _schema_block()["properties"]


#: The refinement defaults, read from the configuration schema (key order as there).
DEFAULTS = {key: copy.deepcopy(spec["default"]) for key, spec in _props().items()}
DISPERSIONS = tuple(_props()["dispersion"]["enum"])
SOLVENT_MODELS = tuple(_props()["solvent_model"]["enum"])
MIN_MEMORY_MB = _props()["max_memory_mb"]["minimum"]


def resolve(settings) -> dict:
    """The refinement settings with defaults filled in: `settings` is None, {} or a partial mapping.

    Unknown keys and values of the wrong type raise ChairqmError (what the schema would also reject, so
    the functions here are safe to call on a block that did not pass through the config schema).
    """
    if settings is None:
        settings = {}
    if settings == AUTO:
        settings = {"auto": True}
    if not isinstance(settings, dict):
        raise ChairqmError(f"settings.refine must be a mapping such as {{functional: B3LYP}} or '{AUTO}', "
                           f"got {settings!r}")
    unknown = sorted(set(settings) - set(DEFAULTS))
    if unknown:
        hints = "".join(_did_you_mean(k, DEFAULTS) for k in unknown)
        raise ChairqmError(f"unknown key(s) {unknown} in settings.refine.{hints} Valid keys: {', '.join(DEFAULTS)}.")
    s = copy.deepcopy(DEFAULTS)
    s.update(settings)
    for key in ("functional", "basis"):
        if not isinstance(s[key], str) or not s[key].strip():
            raise ChairqmError(f"settings.refine.{key} must be a non-empty string, got {s[key]!r}")
        s[key] = s[key].strip()
    s["dispersion"] = str(s["dispersion"]).strip().lower()
    s["solvent_model"] = str(s["solvent_model"]).strip().lower()
    for key in ("density_fitting", "auto"):
        if not isinstance(s[key], bool):
            raise ChairqmError(f"settings.refine.{key} must be true or false, got {s[key]!r}")
    for key in ("max_memory_mb", "max_cycle", "grid_level"):
        if isinstance(s[key], bool) or not isinstance(s[key], (int, np.integer)) and not (
                isinstance(s[key], float) and s[key].is_integer()):
            raise ChairqmError(f"settings.refine.{key} must be a whole number, got {s[key]!r}")
        s[key] = int(s[key])
    for key in ("window_kcal", "conv_tol"):
        if isinstance(s[key], bool) or not isinstance(s[key], (int, float, np.floating, np.integer)) \
                or not math.isfinite(float(s[key])):
            raise ChairqmError(f"settings.refine.{key} must be a finite number, got {s[key]!r}")
        s[key] = float(s[key])
    return s


# settings that choose which conformers (or molecules) are refined or how much memory PySCF may take,
# not the energy
_NOT_ENERGY = ("window_kcal", "max_memory_mb", "auto")


def energy_settings(settings) -> dict:
    """The resolved settings that change a single point's energy (everything but the selection window
    and the memory cap): what a cached single-point record is keyed by."""
    return {k: v for k, v in resolve(settings).items() if k not in _NOT_ENERGY}


#: Time of one single point at the default level (B3LYP-D3(BJ)/def2-TZVP, density fitting, one PySCF
#: thread) for REFERENCE_BASIS_FUNCTIONS basis functions, and the power it grows with: fitted by eye to the
#: refined reference run in docs/benchmarks.md, part e (82 s for methylcyclohexane's 301 functions, 180 s
#: for 394, 266 s for 468; median 126 s), which the cubic law meets within about 20 %.
REFERENCE_SECONDS = 80.0
REFERENCE_BASIS_FUNCTIONS = 300
TIME_POWER = 3
#: Single points a molecule takes: the lowest conformer of each chair family at least, typically 2-6 with
#: the default window (median 3 in the refined reference run).
TYPICAL_SINGLE_POINTS = 3
#: Memory a refine worker may take beyond settings.refine.max_memory_mb: the interpreter with PySCF and
#: its libraries, and address space they reserve without using it. Measured: 0.5 GB of address space for a
#: water single point; 2.34 GB of address space (1.96 GB resident) at the peak of acetoxycyclohexane's
#: default-level single point (24 atoms, 394 basis functions, max_memory_mb 2000), 1.16 GB below the cap.
#: The workflow rule reserves max_memory_mb + 500 MB of resident memory per worker.
WORKER_OVERHEAD_MB = 1500


def worker_memory_cap_mb(settings) -> int:
    """The address-space limit of one refine worker: max_memory_mb + WORKER_OVERHEAD_MB."""
    return int(resolve(settings)["max_memory_mb"]) + WORKER_OVERHEAD_MB


def estimate(settings, elements) -> dict:
    """What one single point of a molecule will cost, before running it: {"n_basis", "n_aux" (density
    fitting, else None), "seconds" (one thread, default-level timing scaled by the basis size, see
    REFERENCE_SECONDS), "memory_mb" (PySCF's working memory: the density-fitting integrals, capped by
    max_memory_mb, beyond which PySCF works from scratch files), "out_of_core" (True when the integrals do
    not fit in max_memory_mb), "worker_mb" (what the worker may take in all)}. Builds the basis only (no
    integrals): milliseconds after the PySCF import."""
    from pyscf import df, gto
    s = resolve(settings)
    symbols = [str(e) for e in elements]
    atom = [[sym, (0.0, 0.0, 3.0 * i)] for i, sym in enumerate(symbols)]
    nelec = sum(gto.charge(sym) for sym in symbols)
    mol = gto.M(atom=atom, basis=s["basis"], spin=nelec % 2, verbose=0)
    nao = int(mol.nao_nr())
    naux = None
    work_mb = 8 * nao * nao * 12 / 1e6                  # Fock, density and orbital matrices, DIIS history
    if s["density_fitting"]:
        naux = int(df.make_auxmol(mol, df.addons.make_auxbasis(mol, mp2fit=False)).nao_nr())
        work_mb += 8 * naux * nao * (nao + 1) / 2 / 1e6    # the three-index integrals PySCF keeps
    cap = float(s["max_memory_mb"])
    return {"n_basis": nao, "n_aux": naux,
            "seconds": REFERENCE_SECONDS * (nao / REFERENCE_BASIS_FUNCTIONS) ** TIME_POWER,
            "memory_mb": min(work_mb, cap), "out_of_core": work_mb > cap,
            "worker_mb": worker_memory_cap_mb(s)}


def _physical_memory_mb() -> float | None:
    try:
        return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES") / 2 ** 20
    except (ValueError, OSError, AttributeError):
        return None


def check(settings, elements, charge: int = 0, multiplicity: int = 1, solvent=None) -> None:
    """Raise ChairqmError (saying what to change) unless the refinement can run for this molecule.

    settings: the settings.refine block (None/{} = defaults); elements: one symbol (or atomic number) per
    atom of the molecule, hydrogens included (the electron count needs every atom); solvent: the run's
    settings.solvent ({model, name}) or a name or None.  Checks the keys and value ranges (against the
    configuration schema), the memory setting against the machine, then with chairqm.dft.check_level the
    functional (Libxc via PySCF), that DFT-D3 has parameters for the functional, that the basis has
    functions for every element, that charge and multiplicity fit the electron count (after the ECP
    cores), and that a pcm solvent has a dielectric constant.  Cheap: no integrals are computed (≈ 1 s
    for the PySCF import, then ms).
    """
    s = resolve(settings)
    if s["dispersion"] not in DISPERSIONS:
        raise ChairqmError(f"unknown dispersion {s['dispersion']!r}: choose one of {', '.join(DISPERSIONS)}."
                           + _did_you_mean(s["dispersion"], DISPERSIONS))
    if s["solvent_model"] not in SOLVENT_MODELS:
        raise ChairqmError(f"unknown solvent_model {s['solvent_model']!r}: choose one of "
                           f"{', '.join(SOLVENT_MODELS)}." + _did_you_mean(s["solvent_model"], SOLVENT_MODELS))
    if s["max_memory_mb"] < MIN_MEMORY_MB:
        raise ChairqmError(f"settings.refine.max_memory_mb is {s['max_memory_mb']}: give at least {MIN_MEMORY_MB}.")
    phys = _physical_memory_mb()
    if phys is not None and s["max_memory_mb"] > phys:
        raise ChairqmError(f"settings.refine.max_memory_mb is {s['max_memory_mb']} but this machine has "
                           f"{phys:.0f} MB: give less (it is per single point, and single points run in parallel).")
    p = _props()
    tol_max = p["conv_tol"]["maximum"]
    if not 0 < s["conv_tol"] <= tol_max:
        raise ChairqmError(f"settings.refine.conv_tol is {s['conv_tol']}: give a value in (0, {tol_max:g}] hartree.")
    if s["window_kcal"] < p["window_kcal"]["minimum"]:
        raise ChairqmError(f"settings.refine.window_kcal is {s['window_kcal']}: give "
                           f"{p['window_kcal']['minimum']:g} or more.")
    lo, hi = p["grid_level"]["minimum"], p["grid_level"]["maximum"]
    if s["max_cycle"] < p["max_cycle"]["minimum"] or not lo <= s["grid_level"] <= hi:
        raise ChairqmError(f"settings.refine.max_cycle must be at least {p['max_cycle']['minimum']} and grid_level "
                           f"between {lo} and {hi}.")
    dft.check_level(s, elements, charge, multiplicity, solvent)


# ------------------------------------------------------------------------------------------ selection
def select(conformers_df, window_kcal: float, temperature_k=None) -> list[str]:
    """Conformer ids to refine: every usable conformer whose free energy lies within `window_kcal` of the
    lowest usable one, plus the lowest usable conformer of each chair family, whatever its energy.

    Input columns: ``conformer`` (id), ``ring_form``, ``orientation`` ('s1=axial;...'), ``g_rel_kcal``;
    optional ``usable`` (bool) or else ``status`` (only 'ok' rows are usable; with neither column every row
    with a finite g_rel_kcal is); optional ``temperature_k``.  A chair family is the ring form 'chair' with
    one orientation pattern (:func:`chairqm.ensemble.family_key`).  The window is measured from the lowest
    usable conformer (g_rel_kcal is re-referenced to it), inclusive at the edge (1e-9 kcal/mol slack).
    With several temperatures in the table the selection is made at `temperature_k` if given, else at every
    temperature and the union is returned.  Order: by g_rel_kcal at the first temperature, then id.
    """
    import pandas as pd
    from chairqm import ensemble as cq_ens

    window = float(window_kcal)
    if not math.isfinite(window) or window < 0:
        raise ChairqmError(f"refinement window must be a number >= 0 kcal/mol, got {window_kcal!r}")
    need = ["conformer", "ring_form", "orientation", "g_rel_kcal"]
    missing = [c for c in need if c not in conformers_df.columns]
    if missing:
        raise ChairqmError(f"conformer table lacks columns {missing}: it needs {need}")
    df = conformers_df.copy()
    df["conformer"] = df["conformer"].astype(str)
    if "usable" in df.columns:
        ok = df["usable"].astype(bool)
    elif "status" in df.columns:
        ok = df["status"].astype(str).str.strip() == "ok"
    else:
        ok = pd.Series(True, index=df.index)
    df["g_rel_kcal"] = pd.to_numeric(df["g_rel_kcal"], errors="coerce")
    df = df[ok & np.isfinite(df["g_rel_kcal"])]
    if "temperature_k" in df.columns:
        if temperature_k is not None:
            df = df[np.isclose(df["temperature_k"].astype(float), float(temperature_k))]
        groups = [g for _, g in df.groupby("temperature_k", sort=True)]
    else:
        groups = [df]
    chosen: set[str] = set()
    for g in groups:
        if g.empty:
            continue
        g_rel = g["g_rel_kcal"] - g["g_rel_kcal"].min()
        chosen.update(g.loc[g_rel <= window + 1e-9, "conformer"])
        chairs = g[g["ring_form"].astype(str).str.strip() == "chair"]
        if not chairs.empty:
            keys = [cq_ens.family_key(r, o) for r, o in zip(chairs["ring_form"], chairs["orientation"])]
            chairs = chairs.assign(_family=keys).sort_values(["g_rel_kcal", "conformer"], kind="stable")
            chosen.update(chairs.groupby("_family", sort=False)["conformer"].first())
    if not groups or all(g.empty for g in groups):
        return []
    first = groups[0].sort_values(["g_rel_kcal", "conformer"], kind="stable")
    order = [c for c in first["conformer"] if c in chosen]
    rest = sorted(chosen - set(order))
    return list(dict.fromkeys(order + rest))


# --------------------------------------------------------------------------------------------- composite
def composite(e_dft, e_xtb, g_xtb, solvation_hartree=0.0):
    """Refined free energy G = E(DFT) + [G − E](GFN2-xTB) + ΔG_solv, in hartree (scalars or numpy arrays).

    The GFN2-xTB free energy G_xtb = E_xtb + (thermal/zero-point quasi-RRHO terms) at the GFN2-xTB
    minimum; replacing its electronic energy by the DFT single point keeps the GFN2-xTB thermal correction
    [G − E] (the usual composite "high-level single point on low-level geometry and frequencies", e.g.
    Grimme, Chem. Eur. J. 2012, 18, 9955).  e_xtb must be the energy G_xtb was built on (solvated if the run
    was).  solvation_hartree: 0 for gas-phase runs and for solvent_model 'pcm' (e_dft then holds the
    solvation); for 'gfn2-delta' the GFN2-xTB E(solvated) − E(gas) from :func:`xtb_solvation_hartree`.
    """
    g = (np.asarray(e_dft, dtype=float) + (np.asarray(g_xtb, dtype=float) - np.asarray(e_xtb, dtype=float))
         + np.asarray(solvation_hartree, dtype=float))
    return float(g) if g.ndim == 0 else g


def delta_kcal(e_a, e_b) -> float:
    """(e_a − e_b) in kcal/mol from hartree."""
    return (float(e_a) - float(e_b)) * KCAL_PER_HARTREE


# ------------------------------------------------------------------------------- refine: auto (per molecule)
def is_auto(block) -> bool:
    """True for settings.refine: auto and for a mapping with auto: true."""
    return block == AUTO or (isinstance(block, dict) and block.get("auto") is True)


def molecule_settings(settings: dict, refined: bool) -> dict:
    """The run's settings as they apply to one molecule under refine: auto — refine null for a molecule
    left unrefined, the refinement block without `auto` for a refined one — so that the calibration (and
    anything else keyed by the settings) is looked up as for a run that made the same choice for every
    molecule. Settings without auto come back unchanged."""
    block = (settings or {}).get("refine")
    if not is_auto(block):
        return settings
    own = None
    if refined:
        own = {k: v for k, v in (block if isinstance(block, dict) else {}).items() if k != "auto"}
    return {**settings, "refine": own}


#: Reason of a molecule left unrefined because nothing marks it, in words.
INSIDE_DOMAIN = "monosubstituted cyclohexane inside the calibration's domain"


def weak_spots(p) -> list[str]:
    """Why GFN2-xTB is known to err for molecule `p` (a chairqm.molecule.Perceived), in words, one entry
    per reason in a fixed order; [] when none applies. The domain where it errs was measured on the
    second reference set (docs/accuracy.md, "Outside the domain": errors of 1-2 kcal/mol, two wrong
    chairs, all in these classes):

    - a ring heteroatom next to a substituted ring carbon ("ring O next to the substituted carbon"):
      anomeric and 1,3-diaxial effects with lone pairs (2-methyloxane, 2-methyl-1,3-dioxane and -dithiane);
    - a group on a ring heteroatom ("a group on the ring N (N-methyl)"): N-, Si-, S-substitution, whose
      inversion barriers and bond lengths GFN2-xTB handles worst;
    - a ring N-H (its axial/equatorial balance, piperidine);
    - C-F bonds on two or more carbons, or two or more on ring carbons (polyfluorinated rings; a single
      CF3 group is a fitted group type);
    - a sulfoxide or a sulfone (S=O anywhere in the molecule).
    """
    from rdkit import Chem
    mol = p.mol
    ring = list(p.ring)
    el = dict(zip(ring, p.ring_elements))
    n = len(ring)
    out = []
    subs = [s for s in p.substituents if not s.fused]
    for s in subs:
        if el.get(s.ring_atom) == "C" and s.fragment != "[*][H]":
            i = ring.index(s.ring_atom)
            near = sorted({el[ring[(i + d) % n]] for d in (-1, 1)} - {"C"})
            for x in near:
                out.append(f"ring {x} next to the substituted carbon")
    for s in subs:
        x = el.get(s.ring_atom)
        if x not in (None, "C") and s.fragment != "[*][H]" and not s.fragment.startswith("[*]="):
            group = s.fragment.replace("[*]", "")
            out.append(f"a group on the ring {x} ({group})")
    for a in ring:
        atom = mol.GetAtomWithIdx(a)
        if atom.GetSymbol() == "N" and any(nb.GetAtomicNum() == 1 for nb in atom.GetNeighbors()):
            out.append("a ring N–H (its axial/equatorial balance)")
    cf = [(b.GetBeginAtom(), b.GetEndAtom()) for b in mol.GetBonds()
          if {b.GetBeginAtom().GetSymbol(), b.GetEndAtom().GetSymbol()} == {"C", "F"}]
    carbons = [a.GetIdx() if a.GetSymbol() == "C" else b.GetIdx() for a, b in cf]
    on_ring = sum(1 for c in carbons if c in el)
    if len(set(carbons)) >= 2 or on_ring >= 2:
        out.append(f"{len(carbons)} C–F bonds on {len(set(carbons))} carbon(s)")
    for atom in mol.GetAtoms():
        if atom.GetSymbol() != "S":
            continue
        oxo = sum(1 for b in atom.GetBonds() if b.GetBondType() == Chem.BondType.DOUBLE
                  and b.GetOtherAtom(atom).GetSymbol() == "O")
        if oxo == 1:
            out.append("a sulfoxide (S=O)")
        elif oxo >= 2:
            out.append("a sulfone (S(=O)2)")
    return list(dict.fromkeys(out))


def auto_decision(p, calibration) -> dict:
    """Whether settings.refine: auto refines molecule `p`, and why, in words: {"refine": bool,
    "reason": str, "reasons": [str]}. Refined when :func:`weak_spots` names anything or when the molecule
    lies outside the GFN2-xTB calibration's domain (chairqm.calibration.domain; with no calibration for
    the run's settings nothing lies inside one); a ring without groups has two equal chairs and is not
    refined."""
    from . import calibration as cq_cal
    reasons = weak_spots(p)
    groups = [s for s in p.substituents if s.fragment != "[*][H]" or p.ring_elements[p.ring.index(s.ring_atom)] != "C"]
    if not groups and not reasons:
        return {"refine": False, "reason": "no group on the ring (its two chairs are the same)", "reasons": []}
    if calibration is None:
        reasons.append("no GFN2-xTB calibration for these settings (no molecule lies inside a calibrated domain)")
    else:
        why = cq_cal.domain(calibration, p.ring_elements, p.substituents,
                            cq_cal.exocyclic_double_bonds(p.mol, p.ring))
        if why:
            reasons.append(why)
    if reasons:
        return {"refine": True, "reason": "; ".join(reasons), "reasons": reasons}
    return {"refine": False, "reason": f"{INSIDE_DOMAIN} (the group {p.substituents[0].fragment})"
            if p.substituents else INSIDE_DOMAIN, "reasons": []}


def decision_words(decision: dict | None) -> str:
    """'refined: ring O next to the substituted carbon; ...' / 'not refined: ...' ('' without auto)."""
    if not decision:
        return ""
    return f"{'refined' if decision.get('refine') else 'not refined'}: {decision.get('reason', '')}"
