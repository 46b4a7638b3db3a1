"""The report's data: read once from a run's output folder into plain dataclasses the templates consume.

Per molecule the declared outputs of the earlier stages are read — molecule.json, ensemble.json,
families.csv, conformers.csv, minima.csv and, after a DFT refinement, refine.csv and refine.json — and the
run's summary rows are either handed over in memory (the report stage has just computed them) or, for
older callers, read from summary.csv. Nothing here formats a value or writes HTML; nothing is computed
beyond merging the summary row of a temperature under ensemble.json's entry for it. Every chair gap
arrives on one axis, G(second) − G(preferred) of the computed (refined, when refinement ran) chairs.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path

from .filters import missing, num, same_t, truthy

REFINED_TAG = "DFT//GFN2-xTB"          # DFT single point at the GFN2-xTB geometry + GFN2-xTB thermal correction
GFN2_TAG = "GFN2-xTB only"             # the same quantity without the DFT single points
_DISPERSION_SUFFIX = {"d3bj": "-D3(BJ)", "d3zero": "-D3(0)"}


# ------------------------------------------------------------------------------------------ files

def _read_csv(path: Path) -> list[dict]:
    """The rows of a CSV file as dicts of strings ('' for an empty cell); [] when missing or unreadable."""
    import pandas as pd
    if not path.is_file():
        return []
    try:
        return pd.read_csv(path, dtype=str, keep_default_na=False).to_dict("records")
    except Exception:        # an empty or unreadable table is shown as missing, not fatal
        return []


def _read_json(path: Path):
    if not path.is_file():
        return None
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def _cell(v):
    """An in-memory summary value as the CSV reader would give it where that matters: '' for None/NaN,
    'true'/'false' for a bool; numbers and text unchanged (the page reads them through num())."""
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return ""
    if isinstance(v, bool):
        return "true" if v else "false"
    try:                                    # numpy scalars (a DataFrame's values) as Python numbers
        import numpy as np
        if isinstance(v, np.bool_):
            return "true" if bool(v) else "false"
        if isinstance(v, np.generic):
            return _cell(v.item())
    except ImportError:                     # pragma: no cover - numpy is a dependency
        pass
    return v


def normalise_rows(rows) -> list[dict]:
    return [{str(k): _cell(v) for k, v in dict(r).items()} for r in rows or []]


# ------------------------------------------------------------------------------------------ data model

@dataclass
class Unrefined:
    """The GFN2-xTB-only values a refined run recorded beside the refined ones, at one temperature."""
    preferred_family: str | None
    chair_dg_kcal: float | None
    a_value_kcal: float | None
    twist_boat_population: float | None
    flag: bool | None
    flag_reason: str


@dataclass
class Entry:
    """Everything known about a molecule at one temperature: its summary row merged under ensemble.json."""
    t: float
    preferred_family: str | None
    chair_dg_kcal: float | None
    a_value_kcal: float | None
    twist_boat_population: float | None
    flag: bool
    flag_reason: str
    additive_dg: float | None
    additive_source: str
    additive_reason: str
    terms: list
    tabulated_dg: float | None
    qm_dg: float | None
    calibrated: float | None
    low: float | None
    high: float | None
    unrefined: Unrefined | None
    same_method_dg: float | None = None       # additive gap from the run's own A-values
    interaction: float | None = None          # chair gap minus same_method_dg
    interaction_u: float | None = None        # its 95 % half-width
    note: str = ""                            # the ensemble stage's notes (symmetry, lock, rotor coverage)
    calibration_domain: str = ""              # 'inside', or why the value is left uncalibrated


@dataclass
class Molecule:
    name: str
    folder: Path
    rows: list[dict]                  # its summary rows
    ensemble: dict                    # ensemble.json ({} when missing)
    record: dict                      # molecule.json ({} when missing)
    families: list[dict]              # families.csv rows (strings)
    conformers: list[dict]            # conformers.csv rows
    minima: list[dict]                # minima.csv rows
    refine_rows: list[dict]           # refine.csv rows
    refine_info: dict                 # refine.json
    refined: bool                     # headline free energies are DFT-refined
    status: str                       # "ok" or "failed"
    reason: str
    reference: bool                   # a reference ring the run added
    temperatures: list[float] = field(default_factory=list)
    entries: list[Entry] = field(default_factory=list)      # one per temperature, same order

    @property
    def refine_decision(self) -> dict | None:
        """Under settings.refine: auto, whether this molecule was refined and why (ensemble.json's
        refine_decision: {"refine", "reason"}); None otherwise."""
        d = self.ensemble.get("refine_decision") if isinstance(self.ensemble, dict) else None
        return d if isinstance(d, dict) else None

    @property
    def refine_skipped(self) -> bool:
        """Left unrefined on purpose by settings.refine: auto."""
        d = self.refine_decision
        return d is not None and not truthy(d.get("refine"))

    @property
    def lead(self):
        """The temperature the headline numbers are quoted at: the one closest to 298.15 K."""
        return min(self.temperatures, key=lambda t: (abs(t - 298.15), t)) if self.temperatures else None

    def entry(self, t) -> Entry:
        return next(e for e in self.entries if same_t(e.t, t))

    @property
    def lead_entry(self) -> Entry:
        """The entry at the lead temperature; an entry with nothing known when there is no temperature."""
        return self.entry(self.lead) if self.lead is not None else _entry({}, [], None)

    @property
    def flagged(self) -> bool:
        return any(e.flag for e in self.entries)

    def families_at(self, t) -> list[dict]:
        return [f for f in self.families if same_t(f.get("temperature_k"), t)]

    def families_ranked(self, t) -> list[dict]:
        """The families at t by free energy (those without one last), then ring form and orientation."""
        def key(f):
            g = num(f.get("g_rel_kcal"))
            return (g if g is not None else 1e9, f.get("ring_form", ""), f.get("orientation", ""))
        return sorted(self.families_at(t), key=key)

    def conformers_ranked(self, t) -> list[dict]:
        """The conformers at t: counted ones (status ok) first, by free energy, then by id."""
        def key(c):
            ok = str(c.get("status", "")).strip() == "ok"
            g = num(c.get("g_rel_kcal"))
            return (0 if ok else 1, g if g is not None else 1e9, str(c.get("conformer", "")))
        return sorted((c for c in self.conformers if same_t(c.get("temperature_k"), t)), key=key)

    def chair_of(self, t, which: str, column: str = "g_rel_kcal"):
        """The preferred (lowest G, read from `column`) chair family at t, or the other chair; None if absent."""
        chairs = [f for f in self.families_at(t) if f.get("ring_form") == "chair" and num(f.get(column)) is not None]
        chairs.sort(key=lambda f: (num(f[column]), f.get("orientation", "")))
        if which == "best":
            return chairs[0] if chairs else None
        return chairs[1] if len(chairs) > 1 else None

    def gfn2_chair_gap(self, e: Entry):
        """A refined molecule's GFN2-xTB-only chair gap, already on the refined chairs' axis (the ensemble
        stage writes every gap on one axis; positive: the same chair is preferred without the single
        points), with GFN2-xTB's preferred chair family; (None, family) if unknown."""
        u = e.unrefined
        best_u = self.chair_of(e.t, "best", "g_rel_unrefined_kcal")
        gap_u = u.chair_dg_kcal if u is not None else None
        return gap_u, best_u


@dataclass
class Run:
    info: dict                        # the provenance record (run_info)
    molecules: list[Molecule]
    refine: dict | None               # the DFT refinement settings, None when the run had none

    @property
    def settings(self) -> dict:
        return self.info.get("settings") or {}

    @property
    def solvent(self):
        return self.settings.get("solvent")

    @property
    def project(self) -> str:
        return self.info.get("project") or "chairqm run"

    @property
    def main(self) -> list[Molecule]:
        return [m for m in self.molecules if not m.reference]

    @property
    def references(self) -> list[Molecule]:
        return [m for m in self.molecules if m.reference]

    @property
    def dft_seconds(self) -> float:
        """The DFT single points' time summed over the molecules' refine.json records."""
        return sum(num(m.refine_info.get("dft_seconds")) or 0.0 for m in self.molecules)


# ------------------------------------------------------------------------------------------ reading

def _molecule_names(out: Path, summary_rows: list[dict]) -> list[str]:
    names = []
    for r in summary_rows:
        n = str(r.get("molecule", ""))
        if n and n not in names:
            names.append(n)
    # then every folder holding a molecule record that the summary does not mention, in name order
    names += sorted(p.parent.name for p in out.glob("*/molecule.json") if p.parent.name not in names)
    return names


def _is_refined(ens, rows, families, conformers) -> bool:
    """Whether a molecule's headline free energies are DFT-refined (ensemble.json says so; for older or
    partial folders, the summary's `refined` column or the GFN2-xTB side columns of its tables)."""
    if isinstance(ens, dict) and "refined" in ens:
        return truthy(ens["refined"])
    if any("refined" in r and not missing(r["refined"]) for r in rows):
        return any(truthy(r.get("refined")) for r in rows)
    return (any("g_rel_unrefined_kcal" in f for f in families)
            or any(truthy(c.get("refined_single_point")) for c in conformers))


def _temperatures(ens: dict, rows: list[dict]) -> list[float]:
    ts = []
    for e in ens.get("temperatures") or []:
        if isinstance(e, dict) and num(e.get("temperature_k")) is not None:
            ts.append(num(e["temperature_k"]))
    for r in rows:
        t = num(r.get("temperature_k"))
        if t is not None and not any(same_t(t, x) for x in ts):
            ts.append(t)
    return ts


def _unrefined(un: dict, row: dict) -> Unrefined | None:
    """ensemble.json's `unrefined` entry, else the summary's *_unrefined_kcal columns; None when neither."""
    keys = ("chair_dg_unrefined_kcal", "a_value_unrefined_kcal")
    if not un and not any(not missing(row.get(k)) for k in keys):
        return None

    def pick(key, col):
        v = un.get(key)
        return num(v) if not missing(v) else num(row.get(col))
    return Unrefined(
        preferred_family=un.get("preferred_family") if not missing(un.get("preferred_family")) else None,
        chair_dg_kcal=pick("chair_dg_kcal", "chair_dg_unrefined_kcal"),
        a_value_kcal=pick("a_value_kcal", "a_value_unrefined_kcal"),
        twist_boat_population=num(un.get("twist_boat_population")),
        flag=truthy(un["flag"]) if not missing(un.get("flag")) else None,
        flag_reason=un.get("flag_reason") or "")


def _entry(ens_all: dict, rows: list[dict], t) -> Entry:
    row = next((r for r in rows if same_t(r.get("temperature_k"), t)), {})
    ens = next((e for e in ens_all.get("temperatures") or []
                if isinstance(e, dict) and same_t(e.get("temperature_k"), t)), {})
    add = ens.get("additive") if isinstance(ens.get("additive"), dict) else {}
    un = ens.get("unrefined") if isinstance(ens.get("unrefined"), dict) else {}

    def pick(key):
        for src in (ens, row):
            if key in src and not missing(src[key]):
                return src[key]
        return None
    flag = pick("flag")
    return Entry(
        t=t,
        preferred_family=pick("preferred_family"),
        chair_dg_kcal=num(pick("chair_dg_kcal")),
        a_value_kcal=num(pick("a_value_kcal")),
        twist_boat_population=num(pick("twist_boat_population")),
        flag=truthy(flag) if flag is not None else False,
        flag_reason=pick("flag_reason") or "",
        additive_dg=num(add.get("dg_kcal")) if not missing(add.get("dg_kcal")) else num(row.get("additive_dg_kcal")),
        additive_source=add.get("source") or row.get("additive_source") or "",
        additive_reason=add.get("reason") or "",
        terms=add.get("terms") or [],
        tabulated_dg=num(add.get("tabulated_dg_kcal")),
        qm_dg=num(add.get("qm_dg_kcal")),
        calibrated=num(row.get("calibrated_kcal")),
        low=num(row.get("interval_low_kcal")),
        high=num(row.get("interval_high_kcal")),
        unrefined=_unrefined(un, row),
        same_method_dg=num((ens.get("same_method") or {}).get("dg_kcal")),
        interaction=num((ens.get("same_method") or {}).get("interaction_kcal")),
        interaction_u=num((ens.get("same_method") or {}).get("uncertainty_kcal")),
        note=str(ens.get("note") or ""),
        calibration_domain=str(row.get("calibration_domain") or ""))


def read_molecule(out: Path, name: str, summary_rows: list[dict]) -> Molecule:
    folder = out / name
    rows = [r for r in summary_rows if str(r.get("molecule")) == name]
    ens = _read_json(folder / "ensemble.json")
    record = _read_json(folder / "molecule.json")
    status, reason = "ok", ""
    if isinstance(ens, dict) and ens.get("status") == "failed":
        status, reason = "failed", str(ens.get("reason", ""))
    failed_rows = [r for r in rows if str(r.get("status", "")).strip() == "failed"]
    if failed_rows:
        status = "failed"
        reason = reason or str(failed_rows[0].get("reason", ""))
    if ens is None and not rows:
        status, reason = "failed", "no results were written for this molecule (ensemble.json and summary rows missing)"
    if status == "failed" and not reason:
        reason = "no reason recorded"
    families = _read_csv(folder / "families.csv")
    conformers = _read_csv(folder / "conformers.csv")
    refine_info = _read_json(folder / "refine.json")
    ens = ens if isinstance(ens, dict) else {}
    record = record if isinstance(record, dict) else {}
    ts = _temperatures(ens, rows)
    return Molecule(
        name=name, folder=folder, rows=rows, ensemble=ens, record=record,
        families=families, conformers=conformers,
        minima=_read_csv(folder / "minima.csv"),
        refine_rows=_read_csv(folder / "refine.csv"),
        refine_info=refine_info if isinstance(refine_info, dict) else {},
        refined=_is_refined(ens, rows, families, conformers),
        status=status, reason=reason, reference=bool(record.get("reference", False)),
        temperatures=ts, entries=[_entry(ens, rows, t) for t in ts])


def refine_settings(run_info: dict, mols: list[Molecule]):
    """The DFT refinement settings of the run, or None when the run neither asked for nor recorded one.

    The resolved settings a molecule's refine.json records win over the configuration's `settings.refine`
    (which may be partial, e.g. {}); a key found in neither takes the package default, as the run did."""
    block = (run_info.get("settings") or {}).get("refine")
    recorded = next((m.refine_info["settings"] for m in mols if isinstance(m.refine_info.get("settings"), dict)),
                    None)
    if block is None and recorded is None and not any(m.refined or m.refine_rows for m in mols):
        return None
    rs = {}
    try:
        from ..refine import DEFAULTS
        rs.update(DEFAULTS)
    except Exception:           # the page must not depend on the refinement module importing
        pass
    if isinstance(block, dict):
        rs.update(block)
    if block == "auto":
        rs["auto"] = True
    if recorded:
        rs.update(recorded)
    return rs


def read_run(out_dir, run_info: dict, summary_rows=None) -> Run:
    """The whole run, read once. `summary_rows` (the rows of summary.csv, in memory) are used as given;
    only when they are None is summary.csv read from the folder."""
    out = Path(out_dir)
    rows = normalise_rows(summary_rows) if summary_rows is not None else _read_csv(out / "summary.csv")
    mols = [read_molecule(out, n, rows) for n in _molecule_names(out, rows)]
    return Run(info=run_info or {}, molecules=mols, refine=refine_settings(run_info or {}, mols))


# ------------------------------------------------------------------------------------------ levels of theory

def dft_level(rs: dict) -> str:
    """'PBE0-D3(BJ)/def2-TZVP' — functional, dispersion correction and basis of the single points."""
    functional = str(rs.get("functional") or "DFT (functional not recorded)")
    disp = _DISPERSION_SUFFIX.get(str(rs.get("dispersion", "")).strip().lower(), "")
    basis = rs.get("basis")
    return f"{functional}{disp}/{basis}" if basis else f"{functional}{disp}"


def dft_words(rs: dict, solvent) -> str:
    """The single-point level in a sentence."""
    disp = str(rs.get("dispersion", "")).strip().lower()
    parts = [{"d3bj": "D3 dispersion with Becke–Johnson damping", "d3zero": "D3 dispersion with zero damping",
              "none": "no dispersion correction"}.get(disp, f"dispersion {disp}" if disp else "dispersion not recorded")]
    if "density_fitting" in rs:
        parts.append("density fitting" if truthy(rs["density_fitting"]) else "no density fitting")
    if solvent:
        model = str(rs.get("solvent_model", "")).strip().lower()
        parts.append({"gfn2-delta": "gas-phase single points plus the GFN2-xTB solvation free energy",
                      "pcm": "C-PCM continuum solvent inside the SCF"}.get(model, f"solvent model {model or 'not recorded'}"))
    return f"{dft_level(rs)} ({', '.join(parts)})"
