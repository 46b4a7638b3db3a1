"""Calibrate computed A-values against experiment: settings key, files, domain, the fit from a run.

A calibration compares the A-values a run computed for monosubstituted cyclohexanes (summary.csv
``a_value_kcal``) with the tabulated experimental values (chairqm/data/avalues.csv): error statistics,
an ordinary-least-squares line that predicts the experimental value from the computed one, and 95 %
prediction intervals.  The statistics — :class:`Calibration`, :func:`fit`, :func:`loo_scale`,
:func:`refresh_interval_scale`, :func:`interval_half_width`, :func:`outside_spread`,
:func:`has_outside_spread`, :func:`interval_half_width_outside`, :func:`apply` — live in
chairqm.calibration_fit (its docstring gives the formulas and their sources) and are importable from
here.  This module says where a calibration applies (:func:`domain`, :func:`widened_outside`,
:func:`applies_at`), finds it, stores it, fits it from a finished run (:func:`calibrate_run`) and
presents it (:func:`parity_plot`, :func:`summary_text`, ``python -m chairqm.calibration``).

Calibrations are keyed by the settings that change computed free energies (:func:`settings_key`:
method, engine, solvent, thermochemistry model, frequency scale and, for refined runs, the DFT level).  The package ships a list of them
in chairqm/data/calibration.json; :func:`load_matching` returns the one whose key equals a run's key, or
None — a run with no matching calibration gets no interval rather than an invented one.
Energies here are in kcal/mol (A-values are free-energy differences reported in kcal/mol).
"""

from __future__ import annotations

import json
import math
from importlib import resources
from pathlib import Path

import numpy as np

# the statistics, importable from here as before
from .calibration_fit import (CONFIDENCE, OUTSIDE_FORMULA, PREDICTS, REFERENCE_TEMPERATURE_K,  # noqa: F401
                              Calibration, apply, fit, has_outside_spread, interval_half_width,
                              interval_half_width_outside, loo_scale, outside_spread, refresh_interval_scale)
from .errors import ChairqmError

CALIBRATION_FILE = "calibration.json"

# the normalised settings a calibration is keyed by (from provenance.CALIBRATION_SETTINGS; the
# defaults behind them are the configuration schema's, chairqm.config.settings_defaults)
KEY_NAMES = ("engine", "method", "solvent", "thermo_model", "frequency_scale")


def _first_element(fragment: str) -> str | None:
    """Element symbol of the atom a group fragment attaches by ('[*]OC(F)(F)F' -> 'O')."""
    from rdkit import Chem
    m = Chem.MolFromSmiles(str(fragment))
    if m is None:
        return None
    for a in m.GetAtoms():
        if a.GetAtomicNum() == 0:
            nbs = list(a.GetNeighbors())
            return nbs[0].GetSymbol() if nbs else None
    return None


def exocyclic_double_bonds(mol, ring) -> int:
    """How many ring atoms carry a double bond to an atom outside the ring (C=O, C=CH2, S=O, P=O, N-oxide
    written with a double bond)."""
    ring = {int(a) for a in ring}
    n = 0
    for a in ring:
        for b in mol.GetAtomWithIdx(a).GetBonds():
            if b.GetOtherAtomIdx(a) not in ring and b.GetBondTypeAsDouble() == 2.0:
                n += 1
                break
    return n


def domain(calibration: Calibration, ring_elements, substituents, exo_double: int = 0) -> str:
    """'' when a molecule lies inside the calibration's domain, else why not, in words.

    The domain is what the line was fitted on: monosubstituted cyclohexanes whose group attaches through
    an element that some fitted group attaches through. Outside it — a ring heteroatom, several groups,
    a fused ring, a group on a ring heteroatom, a group type absent from the fit — the fitted residual
    spread says nothing about the error: the report stage widens the interval there by the out-of-domain
    spread the calibration carries (:func:`interval_half_width_outside`) or, without one, reports the value
    uncalibrated rather than with an interval that would look as certain as inside. `exo_double`: the
    ring atoms with an exocyclic double bond (:func:`exocyclic_double_bonds`; cyclohexanones,
    methylenecyclohexanes), whose flattened ring the fit never saw.
    """
    subs = [s for s in substituents if (s.get("fragment") if isinstance(s, dict) else s.fragment) != "[*][H]"]
    frags = [s.get("fragment") if isinstance(s, dict) else s.fragment for s in subs]
    if any(str(f).count("*") > 1 for f in frags):
        return "outside the calibration's domain (a fused ring system; fitted on monosubstituted cyclohexanes)"
    if exo_double and list(ring_elements) == ["C"] * 6:
        return ("outside the calibration's domain (a ring atom with an exocyclic double bond, such as C=O or "
                "C=CH2; fitted on cyclohexanes)")
    if list(ring_elements) != ["C"] * 6:
        hetero = "/".join(sorted({e for e in ring_elements if e != "C"}))
        return f"outside the calibration's domain (a ring {hetero} atom; fitted on cyclohexanes)"
    if len(subs) != 1:
        return (f"outside the calibration's domain ({len(subs)} groups on the ring; fitted on monosubstituted "
                "cyclohexanes)")
    fitted = {_first_element(p.get("fragment", "")) for p in calibration.points if p.get("used", "used") == "used"}
    el = _first_element(frags[0])
    if fitted and el not in fitted:
        return (f"outside the calibration's domain (a group attached through {el}; the fit has groups attached "
                f"through {', '.join(sorted(x for x in fitted if x))} only)")
    return ""


def widened_outside(calibration: Calibration, ring_elements, substituents, exo_double: int = 0) -> bool:
    """True if a molecule outside the domain gets the widened interval rather than no calibrated value.

    The out-of-domain spread was measured on heterocycles (ring O, N, S, Si), groups on a ring heteroatom
    and cyclohexanes with two groups, all of group types the line was fitted on; it is applied to such
    cases only.  A fused ring system or a group attached through an element absent from the fit has no
    measured counterpart and stays uncalibrated; so does everything when the calibration carries no
    out-of-domain spread. A carbocycle with an exocyclic double bond (`exo_double`; no such case in the
    second set) stays uncalibrated too.
    """
    if not has_outside_spread(calibration):
        return False
    if exo_double and list(ring_elements) == ["C"] * 6:
        return False
    subs = [s for s in substituents if (s.get("fragment") if isinstance(s, dict) else s.fragment) != "[*][H]"]
    frags = [s.get("fragment") if isinstance(s, dict) else s.fragment for s in subs]
    if any(str(f).count("*") > 1 for f in frags):
        return False
    fitted = {_first_element(p.get("fragment", "")) for p in calibration.points if p.get("used", "used") == "used"}
    return all(_first_element(f) in fitted for f in frags)


def applies_at(calibration: Calibration, temperature_k: float, tol_k: float = 0.5) -> bool:
    """True if `temperature_k` is the calibration's temperature (within `tol_k` K).

    A calibration fitted on 298.15 K A-values says nothing about the error at other temperatures, so
    values at other temperatures should be reported uncalibrated.
    """
    return abs(float(temperature_k) - float(calibration.temperature_k)) <= tol_k


# ------------------------------------------------------------------------------------------ settings key

# names tblite accepts for the same solvent parameters (GFN2-xTB/ALPB energies of water identical to all
# digits for each pair, checked with tblite 0.8.0 on this machine): one calibration key for both
_SOLVENT_ALIASES = {"chcl3": "chloroform", "h2o": "water", "dimethylsulfoxide": "dmso"}


def _norm_solvent(solvent):
    if solvent in (None, "", {}):
        return None
    if isinstance(solvent, dict):
        model = str(solvent.get("model", "")).strip().lower()
        name = str(solvent.get("name", "")).strip().lower()
        return f"{model}:{_SOLVENT_ALIASES.get(name, name)}"
    text = str(solvent).strip().lower()
    if text in ("", "none", "null", "gas", "gas phase"):
        return None
    model, sep, name = text.partition(":")
    return f"{model}:{_SOLVENT_ALIASES.get(name, name)}" if sep else text


def settings_key(settings: dict | None) -> dict:
    """The settings that change computed free energies, normalised: the key a calibration is stored under.

    Accepts a run's ``settings`` block (defaults filled or not) or a whole configuration (its
    ``settings`` is used).  Returns {'engine', 'method', 'solvent' ('alpb:water'-style or None for gas
    phase), 'thermo_model', 'frequency_scale'}; missing entries take the configuration schema's defaults.
    """
    from .config import settings_defaults
    from .provenance import CALIBRATION_SETTINGS
    given = dict(settings or {})
    if "settings" in given and isinstance(given["settings"], dict):
        given = dict(given["settings"])
    defaults = settings_defaults()
    s = {k: given.get(k, defaults.get(k)) for k in CALIBRATION_SETTINGS}
    thermo = {**defaults["thermo"], **(s.get("thermo") or {})}
    scale = thermo["frequency_scale"]
    solvent = _norm_solvent(s["solvent"])
    return {"engine": str(s["engine"]),
            "method": str(s["method"]),
            "solvent": solvent,
            "thermo_model": str(thermo["model"]),
            "frequency_scale": round(float(scale), 6),
            "refine": _norm_refine(s.get("refine"), solvent)}


def _optimizer_of(settings: dict | None) -> str:
    """The optimiser a run's minima came from ('auto' resolved), stored beside a calibration's key for the
    record: it is not part of the key (chairqm.optimize.DEFAULT_OPTIMIZER says which optimiser the
    shipped calibrations were fitted with)."""
    from .optimize import resolve_optimizer
    return resolve_optimizer(str(((settings or {}).get("optimize") or {}).get("optimizer", "auto")))


def _norm_refine(block, solvent=None):
    """The DFT level of a refined run as one string, None for an unrefined run (or a stored calibration
    that predates refinement).  Only what changes the refined energies enters: functional, basis,
    dispersion, density fitting and, with a solvent, the solvent model.  A string is taken as already
    normalised (a stored key)."""
    if block is None:
        return None
    if isinstance(block, str):
        return block
    from . import refine as cq_refine
    r = cq_refine.resolve(block)
    text = f"{r['functional']}-{r['dispersion'].upper()}/{r['basis']}".lower()
    if not r["density_fitting"]:
        text += " no-df"
    if solvent is not None:
        text += f" {r['solvent_model']}"
    return text


def key_text(key: dict) -> str:
    """A one-line description of a settings key, for reports and messages."""
    k = settings_key(key) if "thermo_model" not in key else key
    text = (f"{k['method']} with {k['engine']}, {medium_text(k['solvent'])}, "
            f"{k['thermo_model']}, frequency scale {k['frequency_scale']:g}")
    return text + (f", DFT single points {k['refine']}" if k.get("refine") else "")


# solvent names shown in capitals in messages (the key keeps the lower-case name the engine is given)
_SOLVENT_DISPLAY = {"dmso": "DMSO", "dmf": "DMF", "thf": "THF", "chcl3": "CHCl3", "ch2cl2": "CH2Cl2",
                    "cs2": "CS2", "ccl4": "CCl4", "h2o": "H2O"}


def medium_text(solvent) -> str:
    """A medium in words: 'gas phase' or e.g. 'ALPB chloroform', 'ALPB DMSO' (solvent as a settings block
    {model, name}, a key string 'alpb:dmso' or None)."""
    norm = _norm_solvent(solvent)
    if norm is None:
        return "gas phase"
    model, _, name = norm.partition(":")
    if not name:
        return norm
    return f"{model.upper()} {_SOLVENT_DISPLAY.get(name, name)}"


def missing_reason(settings: dict | None, path=None) -> str:
    """Why a run with these settings has no calibration, in words, naming the media that are calibrated.

    For a run whose settings match stored calibrations in everything but the solvent: 'no calibration for
    ALPB toluene; shipped: gas phase, ALPB chloroform, ...'.  Otherwise the settings that have no
    calibration and those of the stored ones.  '' if a calibration matches (see :func:`load_matching`).
    """
    key = settings_key(settings)
    stored = [k for k in (settings_key_of(c) for c in load_all(path)) if k is not None]
    if any(_same_key(k, key) for k in stored):
        return ""
    p = Path(path) if path is not None else active_path()
    where = "shipped" if p == packaged_path() else f"calibrated in {p}"
    if not stored:
        return f"no calibration for {key_text(key)}; none {where}"
    same_rest = [k for k in stored if _same_key({**k, "solvent": key["solvent"]}, key)]
    if same_rest:
        media = sorted({medium_text(k["solvent"]) for k in same_rest},
                       key=lambda m: (m != "gas phase", m.lower()))
        return f"no calibration for {medium_text(key['solvent'])}; {where}: {', '.join(media)}"
    return (f"no calibration for {key_text(key)}; {where}: "
            + "; ".join(dict.fromkeys(key_text(k) for k in stored)))


def _same_key(a: dict | None, b: dict | None) -> bool:
    if a is None or b is None:
        return False
    return (a["engine"] == b["engine"] and a["method"] == b["method"] and a["solvent"] == b["solvent"]
            and a["thermo_model"] == b["thermo_model"] and a.get("refine") == b.get("refine")
            and math.isclose(float(a["frequency_scale"]), float(b["frequency_scale"]), abs_tol=1e-6))


# ------------------------------------------------------------------------------------------ files

def packaged_path() -> Path:
    """Path of the calibration file that ships with the package."""
    return Path(str(resources.files("chairqm") / "data" / CALIBRATION_FILE))


def active_path() -> Path:
    """The calibration file runs use: $CHAIRQM_CALIBRATION when set (a file written by
    `chairqm calibrate --save`), else the packaged one."""
    import os
    env = os.environ.get("CHAIRQM_CALIBRATION")
    return Path(env) if env else packaged_path()


def load_all(path=None) -> list[Calibration]:
    """Every calibration in `path` (default: :func:`active_path`); [] if the file does not exist."""
    p = Path(path) if path is not None else active_path()
    if not p.is_file():
        return []
    try:
        data = json.loads(p.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise ChairqmError(f"calibration file {p} is not readable JSON ({exc}): restore it or recompute it "
                           "with a run of configs/reference.yaml") from None
    items = data.get("calibrations", []) if isinstance(data, dict) else data
    return [Calibration.from_dict(d) for d in items]


def save(calibration: Calibration, path) -> None:
    """Store `calibration` in the list file `path` (atomic write): it replaces an entry with the same key."""
    from . import fileio
    p = Path(path)
    if settings_key_of(calibration) is None:
        raise ChairqmError("this calibration has no settings key: fit it with settings=settings_key(run settings)")
    items = [c for c in load_all(p) if not _same_key(settings_key_of(c), settings_key_of(calibration))]
    items.append(calibration)
    fileio.write_json(p, [c.to_dict() for c in items])


def settings_key_of(c: Calibration) -> dict | None:
    """The stored key of a calibration, or None if it lacks one of the keyed settings (it then matches nothing)."""
    k = c.settings or {}
    if any(name not in k for name in KEY_NAMES):
        return None
    return {"engine": str(k["engine"]), "method": str(k["method"]), "solvent": _norm_solvent(k["solvent"]),
            "thermo_model": str(k["thermo_model"]), "frequency_scale": float(k["frequency_scale"]),
            "refine": _norm_refine(k.get("refine"))}


def file_fingerprint(path=None) -> str:
    """SHA-256 (first 16 hex digits) of the calibration file, '' if absent: pass it through a workflow
    rule's params so results are re-made when the calibration changes."""
    import hashlib
    p = Path(path) if path is not None else active_path()
    return hashlib.sha256(p.read_bytes()).hexdigest()[:16] if p.is_file() else ""


def load_matching(settings: dict | None, path=None) -> Calibration | None:
    """The calibration stored for these settings (see :func:`settings_key`), or None if none matches.

    `path` defaults to the packaged chairqm/data/calibration.json.  If several match, the last stored wins.
    """
    key = settings_key(settings)
    hits = [c for c in load_all(path) if _same_key(settings_key_of(c), key)]
    return hits[-1] if hits else None


# ------------------------------------------------------------------------------------------ from a run

def calibrate_run(out_dir, config, temperature_k: float = REFERENCE_TEMPERATURE_K) -> Calibration:
    """Fit a calibration from a finished run of a reference configuration (e.g. configs/reference.yaml).

    Reads ``out_dir/summary.csv`` (``a_value_kcal`` at `temperature_k`) and each molecule's
    ``out_dir/<molecule>/molecule.json`` (its one substituent's canonical fragment), looks the fragment
    up in the packaged A-value table and fits :func:`fit` on the pairs.  `config` is the configuration
    path or the loaded configuration dict; its settings give the key.  The returned Calibration's
    ``points`` (``.table()``) lists every molecule of the configuration with its group, experimental
    value, source, computed value, error and whether it was used ('used' or why not).
    Raises ChairqmError if the run is not finished or fewer than 3 molecules are usable.
    """
    import pandas as pd

    from . import avalues
    from . import config as cq_config

    out = Path(out_dir)
    cfg = cq_config.load(config) if not isinstance(config, dict) else config
    summary = out / "summary.csv"
    if not summary.is_file():
        raise ChairqmError(f"{summary} not found: finish the run first "
                           f"(chairqm run {cfg.get('_config_path', 'CONFIG')} --out {out})")
    df = pd.read_csv(summary)
    table = avalues.load_table()
    points = []
    for m in cfg["molecules"]:
        name = m["name"]
        row = {"molecule": name, "group": "", "fragment": "", "experimental_kcal": math.nan,
               "range_low_kcal": math.nan, "range_high_kcal": math.nan, "source": "", "from_memory": None,
               "computed_kcal": math.nan, "error_kcal": math.nan, "used": ""}
        mj = out / name / "molecule.json"
        if not mj.is_file():
            row["used"] = "no molecule.json (intake did not run)"
            points.append(row)
            continue
        perceived = json.loads(mj.read_text(encoding="utf-8"))
        subs = perceived.get("substituents", [])
        elements = perceived.get("ring_elements", [])
        if len(subs) != 1 or any(e != "C" for e in elements):
            row["used"] = "not a monosubstituted cyclohexane"
            points.append(row)
            continue
        frag = subs[0]["fragment"]
        row["fragment"] = frag
        hit = table[table["fragment"] == frag]
        if hit.empty:
            row["used"] = "group not in the A-value table"
            points.append(row)
            continue
        t = hit.iloc[0]
        row.update(group=t["group"], experimental_kcal=float(t["a_value_kcal"]),
                   range_low_kcal=float(t["range_low_kcal"]), range_high_kcal=float(t["range_high_kcal"]),
                   source=t["source"], from_memory=bool(t["from_memory"]))
        sel = df[(df["molecule"] == name) & (np.isclose(df["temperature_k"].astype(float), float(temperature_k)))]
        if sel.empty:
            row["used"] = f"no summary row at {temperature_k:g} K"
        elif str(sel.iloc[0]["status"]) != "ok":
            row["used"] = f"run status {sel.iloc[0]['status']}: {sel.iloc[0].get('reason', '')}"
        elif pd.isna(sel.iloc[0]["a_value_kcal"]):
            row["used"] = "no computed A-value"
        else:
            row["computed_kcal"] = float(sel.iloc[0]["a_value_kcal"])
            row["error_kcal"] = row["computed_kcal"] - row["experimental_kcal"]
            row["used"] = "used"
        points.append(row)
    used = [p for p in points if p["used"] == "used"]
    if len(used) < 3:
        raise ChairqmError(f"only {len(used)} molecule(s) of {out} have both a computed and a tabulated "
                           "A-value; a calibration needs at least 3: check summary.csv for failures")
    cal = fit([p["computed_kcal"] for p in used], [p["experimental_kcal"] for p in used],
              settings={**settings_key(cfg.get("settings")), "optimizer": _optimizer_of(cfg.get("settings"))})
    cal.temperature_k = float(temperature_k)
    cal.points = [{k: (None if isinstance(v, float) and math.isnan(v) else v) for k, v in p.items()}
                  for p in points]
    cfg_name = Path(cfg["_config_path"]).name if cfg.get("_config_path") else "a reference configuration"
    cal.note = (f"fitted on {cal.n} monosubstituted cyclohexanes of {cfg_name}"
                f" computed in {'the ' if cal.settings.get('solvent') is None else ''}"
                f"{medium_text(cal.settings.get('solvent'))}"
                f" at {temperature_k:g} K; experimental values from chairqm/data/avalues.csv"
                f" (published compilation; {sum(bool(p['from_memory']) for p in used)} of them from memory). "
                + SAME_EXPERIMENT_NOTE)
    return cal


#: what every calibration's note says about its experimental values (the same table for every medium)
SAME_EXPERIMENT_NOTE = (
    "The experimental A-values are the same for every medium: one table, mostly low-temperature NMR "
    "measurements in solution (the solvent often not stated by the compilation; toluene-d8 for methoxy, "
    "hydroxy and amino), not values measured in this medium; so the line maps values computed in this medium "
    "onto those experiments, and any real difference between the A-value in this medium and in the "
    "experiments' solvents is counted as model error in the residual SD and the interval, not measured")


# ------------------------------------------------------------------------------------------ presentation

def parity_plot(calibration: Calibration, path, title: str | None = None) -> None:
    """Parity plot (computed against experimental A-value, with the y = x line, the fitted correction and
    the 95 % prediction band) written to `path` (PNG or SVG, by suffix) with matplotlib's Agg backend."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    pts = [p for p in calibration.points if p.get("used") == "used"]
    x = np.array([p["computed_kcal"] for p in pts])
    y = np.array([p["experimental_kcal"] for p in pts])
    lo_err = y - np.array([p["range_low_kcal"] if p.get("range_low_kcal") is not None else p["experimental_kcal"] for p in pts])
    hi_err = np.array([p["range_high_kcal"] if p.get("range_high_kcal") is not None else p["experimental_kcal"] for p in pts]) - y
    lim = (min(0.0, x.min(), y.min()) - 0.3, max(x.max(), y.max()) + 0.5)
    grid = np.linspace(lim[0], lim[1], 200)
    band = np.array([apply(calibration, g) for g in grid])
    fig, ax = plt.subplots(figsize=(6.0, 6.0), dpi=110)
    ax.fill_between(grid, band[:, 1], band[:, 2], color="tab:blue", alpha=0.12,
                    label=f"{calibration.confidence:.0%} prediction interval")
    ax.plot(grid, grid, color="0.4", lw=1, ls="--", label="experimental = computed")
    ax.plot(grid, band[:, 0], color="tab:blue", lw=1.5,
            label=f"fit: exp = {calibration.intercept:.2f} + {calibration.slope:.2f}·computed")
    ax.errorbar(x, y, yerr=[np.clip(lo_err, 0, None), np.clip(hi_err, 0, None)], fmt="o", ms=4,
                color="tab:red", ecolor="0.6", elinewidth=0.8, capsize=2, label="reference groups (range)")
    for p, xi, yi in zip(pts, x, y):
        ax.annotate(p["group"], (xi, yi), textcoords="offset points", xytext=(4, 3), fontsize=6.5)
    ax.set_xlim(lim)
    ax.set_ylim(lim)
    ax.set_aspect("equal")
    ax.set_xlabel("computed A-value (kcal/mol)")
    ax.set_ylabel("experimental A-value (kcal/mol)")
    ax.set_title(title or f"{key_text(calibration.settings)}, {calibration.temperature_k:g} K", fontsize=9)
    ax.legend(fontsize=7, loc="upper left")
    fig.tight_layout()
    fig.savefig(str(path))
    plt.close(fig)


def summary_text(calibration: Calibration) -> str:
    """A few lines stating the statistics and the fitted correction."""
    c = calibration
    return (f"n = {c.n} ({key_text(c.settings)}, {c.temperature_k:g} K)\n"
            f"MAE {c.mae_kcal:.3f}, mean signed error (computed - experimental) {c.mse_kcal:+.3f}, "
            f"RMSE {c.rmse_kcal:.3f} kcal/mol\n"
            f"{c.predicts}: intercept {c.intercept:.3f} kcal/mol, slope {c.slope:.3f}; R² {c.r_squared:.3f}; "
            f"residual SD {c.residual_sd_kcal:.3f} kcal/mol; t(0.975, {c.n - 2}) = {c.t_quantile:.3f}")


def main(argv=None) -> int:
    """python -m chairqm.calibration OUT_DIR CONFIG [--save FILE] [--plot FILE]: fit and print a calibration."""
    import argparse
    import sys

    ap = argparse.ArgumentParser(prog="python -m chairqm.calibration",
                                 description="Fit a calibration from a finished run of a reference configuration.")
    ap.add_argument("out_dir")
    ap.add_argument("config")
    ap.add_argument("--save", default=None, help="store the calibration in this list file (e.g. chairqm/data/calibration.json)")
    ap.add_argument("--plot", default=None, help="write a parity plot (.png or .svg)")
    args = ap.parse_args(argv)
    try:
        c = calibrate_run(args.out_dir, args.config)
    except ChairqmError as exc:
        print(f"chairqm: {exc}", file=sys.stderr)
        return 2
    t = c.table()
    print(t[["molecule", "group", "experimental_kcal", "computed_kcal", "error_kcal", "used"]].to_string(index=False))
    print(summary_text(c))
    if args.save:
        save(c, args.save)
    if args.plot:
        parity_plot(c, args.plot)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
