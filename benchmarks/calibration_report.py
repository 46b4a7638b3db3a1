"""The figures of docs/accuracy.md for one stored calibration: per-group table with leave-one-out
predictions, statistics, example intervals — printed as Markdown, computed from the calibration file.

    python benchmarks/calibration_report.py [--file chairqm/data/calibration.json] [--refined] [--solvent NAME]
        [--low-t OUT_DIR --low-t-temperature 185] [--retable]
        [--outside OUT_DIR [--outside-cases configs/reference-outside.csv] [--save]]

Picks the gas-phase GFN2-xTB calibration (or, with --refined, the one with a DFT refinement key; with
--solvent NAME, the one computed in that implicit solvent, ALPB unless written MODEL:NAME) from the list
file. --media prints one row per stored calibration instead (medium, n, MAE, residual SD, line, coverage). Leave-one-out: each used group is predicted by a fit (chairqm.calibration.fit) to the others,
with that fit's 95 % prediction interval. The experimental temperature column comes from the package table
(chairqm/data/avalues.csv): 'low T' for direct low-temperature NMR values (170-200 K), a number where one
is printed, '—' where the compilation states none.

--low-t OUT_DIR: also compare, for the groups whose experimental value is a low-temperature one, the
computed A-value at --low-t-temperature (summary.csv of a run of the reference configuration that
includes that temperature) with experiment, beside the 298.15 K comparison.

--outside OUT_DIR: the second, out-of-domain reference set (a finished run of configs/reference-outside.yaml;
experimental values, compared chairs and sources in configs/reference-outside.csv). For each case the
computed G(chair with the named group axial) − G(chair with it equatorial) at 298.15 K is read from the
molecule's families.csv (chair families matching each named orientation, Boltzmann-summed), the in-domain
line is applied, and the residuals give the out-of-domain spread (chairqm.calibration.outside_spread).
Leave-one-out coverage of the widened 95 % intervals: each case's interval uses the spread measured on the
other cases only. --save stores the spread, its source set, date and per-case points in the calibration
file (the entry picked above), where the report stage reads it.
"""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from chairqm import avalues, calibration as cal  # noqa: E402


def _pick(items, refined: bool, solvent: str | None = None):
    """The first calibration with (refined) or without a DFT refinement key, in `solvent` ('alpb:chloroform'
    style or a bare name for ALPB; None: the gas phase)."""
    want = _solvent_key(solvent)
    for c in items:
        has_refine = bool((c.settings or {}).get("refine"))
        if has_refine == refined and cal._norm_solvent((c.settings or {}).get("solvent")) == want:
            return c
    raise SystemExit(f"no matching calibration in the file ({cal.medium_text(want)}"
                     f"{', refined' if refined else ''})")


def _solvent_key(solvent: str | None) -> str | None:
    if not solvent or solvent.strip().lower() in ("gas", "gas phase", "none"):
        return None
    text = solvent.strip().lower()
    return text if ":" in text else f"alpb:{text}"


def media_table(items) -> str:
    """One Markdown row per stored calibration: medium, refinement, n, raw MAE, residual SD, slope,
    intercept, leave-one-out coverage of the 95 % intervals, out-of-domain spread if measured."""
    out = ["| medium | DFT single points | n | MAE (raw) | residual SD s | slope | intercept | R² | "
           "t·s / q (kcal/mol) | leave-one-out coverage (95 %), t·s alone → max(t·s, q) | out-of-domain τ |",
           "|---|---|---|---|---|---|---|---|---|---|---|"]
    rows = sorted(items, key=lambda c: (bool((c.settings or {}).get("refine")),
                                        cal._norm_solvent((c.settings or {}).get("solvent")) is not None,
                                        cal.medium_text((c.settings or {}).get("solvent")).lower()))
    for c in rows:
        k = c.settings or {}
        cov, n = inside_coverage(c)
        cov0, _ = inside_coverage(c, normal_only=True)
        q = "—" if c.loo_scale_kcal is None else f"{c.loo_scale_kcal:.2f}"
        tau = (f"{float(c.outside_domain['excess_sd_kcal']):.2f} (m = {c.outside_domain.get('n')})"
               if cal.has_outside_spread(c) else "not measured: uncalibrated outside the domain")
        out.append(f"| {cal.medium_text(k.get('solvent'))} | {k.get('refine') or '—'} | {c.n} | {c.mae_kcal:.2f} | "
                   f"{c.residual_sd_kcal:.2f} | {c.slope:.3f} | {c.intercept:+.3f} | {c.r_squared:.3f} | "
                   f"{c.t_quantile * c.residual_sd_kcal:.2f} / {q} | {cov0} → {cov} of {n} | {tau} |")
    # the computed values side by side (unrefined calibrations): what the medium changes, against one experiment
    plain = [c for c in rows if not (c.settings or {}).get("refine")]
    names = [cal.medium_text((c.settings or {}).get("solvent")) for c in plain]
    values = [{p["group"]: p["computed_kcal"] for p in c.points if p.get("used") == "used"} for c in plain]
    exp = {}
    for c in plain:
        exp.update({p["group"]: p["experimental_kcal"] for p in c.points if p.get("used") == "used"})
    out += ["", "| group | experimental | " + " | ".join(f"computed, {m}" for m in names) + " |",
            "|---|---|" + "---|" * len(names)]
    for g in sorted(exp, key=lambda g: exp[g]):
        out.append(f"| {g} | {exp[g]:.2f} | " + " | ".join("—" if g not in v else f"{v[g]:.2f}" for v in values) + " |")
    gas = next((v for c, v in zip(plain, values) if not (c.settings or {}).get("solvent")), None)
    if gas:
        for m, v in zip(names, values):
            d = np.array([v[g] - gas[g] for g in v if g in gas])
            if m != "gas phase" and d.size:
                out.append(f"\n{m} − gas phase, computed: mean {d.mean():+.2f}, range {d.min():+.2f} to {d.max():+.2f} "
                           f"kcal/mol over {d.size} groups.")
    return "\n".join(out)


def _short(source: str) -> str:
    if source.startswith("general refs"):
        return "compilation, general refs"
    if source.startswith("ref "):
        key, _, body = source[4:].partition(": ")
        first = body.split(",")[0].split(";")[0].strip()
        year = next((w.strip(",;.") for w in body.split() if w.strip(",;.").isdigit() and len(w.strip(",;.")) == 4), "")
        return f"compilation ref {key}: {first} {year}"
    year = next((w.strip(",;.") for w in source.split() if w.strip(",;.").isdigit() and len(w.strip(",;.")) == 4), "")
    return f"{source.split(',')[0]} {year}"


def _temperature(fragment: str) -> str:
    row = avalues.lookup(fragment) if fragment else None
    if row is None:
        return ""
    if not math.isnan(row["temperature_k"]):
        return f"{row['temperature_k']:g} K"
    if not math.isnan(row["temperature_low_k"]):
        return "low T"
    return "—"


def report(c, low_t_summary=None, low_t_temperature=None) -> str:
    pts = [p for p in c.points if p.get("used") == "used"]
    x = np.array([p["computed_kcal"] for p in pts], dtype=float)
    y = np.array([p["experimental_kcal"] for p in pts], dtype=float)
    n = len(pts)
    out = []
    out.append("| group | experimental (range) | source of the experimental value | exp. T | computed | error | "
               "calibrated, leave-one-out [95 % interval] |")
    out.append("|---|---|---|---|---|---|---|")
    loo_pred, covered, outside = [], 0, []
    for i, p in enumerate(pts):
        mask = np.arange(n) != i
        f = cal.fit(x[mask], y[mask])
        v, lo, hi = cal.apply(f, x[i])
        inside = lo <= y[i] <= hi
        covered += inside
        if not inside:
            outside.append(p["group"])
        loo_pred.append(v)
        mem = ", from memory" if p.get("from_memory") else ""
        rng = ""
        if p.get("range_low_kcal") is not None and p.get("range_high_kcal") is not None:
            rng = f" ({p['range_low_kcal']:.2f}–{p['range_high_kcal']:.2f})"
        out.append(f"| {p['group']} | {y[i]:.2f}{rng} | {_short(p['source'])}{mem} | {_temperature(p['fragment'])} | "
                   f"{x[i]:.2f} | {x[i] - y[i]:+.2f} | {v:.2f} [{lo:.2f}, {hi:.2f}]{'' if inside else ' (outside)'} |")
    unused = [p for p in c.points if p.get("used") != "used"]
    for p in unused:
        out.append(f"| {p['molecule']} | — | not used: {p['used']} | | "
                   f"{'' if p.get('computed_kcal') is None else format(p['computed_kcal'], '.2f')} | | |")
    loo = np.array(loo_pred)
    out.append("")
    out.append(f"## Statistics (n = {n})")
    out.append("")
    out.append("| quantity | value |")
    out.append("|---|---|")
    out.append(f"| mean absolute error, MAE | {c.mae_kcal:.3f} kcal/mol |")
    out.append(f"| mean signed error, MSE (computed − experimental) | {c.mse_kcal:+.3f} kcal/mol |")
    out.append(f"| root-mean-square error, RMSE | {c.rmse_kcal:.3f} kcal/mol |")
    out.append(f"| calibration line (predicts experimental from computed) | experimental = {c.intercept:.3f} + "
               f"{c.slope:.3f} · computed (kcal/mol) |")
    out.append(f"| R² | {c.r_squared:.3f} |")
    out.append(f"| residual standard deviation s (n − 2 = {n - 2} degrees of freedom) | {c.residual_sd_kcal:.3f} kcal/mol |")
    out.append(f"| t<sub>0.975, {n - 2}</sub> | {c.t_quantile:.3f} |")
    rf = c.reverse_fit or {}
    if rf:
        out.append(f"| reverse line, for the record (computed = a′ + b′ · experimental) | computed = "
                   f"{rf['intercept']:.3f} + {rf['slope']:.3f} · experimental, residual SD {rf['residual_sd_kcal']:.3f} |")
    e = loo - y
    out.append(f"| leave-one-out, calibrated: MAE / RMSE | {np.abs(e).mean():.3f} / {math.sqrt((e ** 2).mean()):.3f} kcal/mol |")
    out.append(f"| leave-one-out coverage of the 95 % intervals | {covered} of {n}"
               f"{' (' + ', '.join(outside) + ' outside)' if outside else ''} |")
    q = "— (too few points)" if c.loo_scale_kcal is None else f"{c.loo_scale_kcal:.3f}"
    out.append(f"| interval scale: t·s (normal theory) / q (distribution-free, leave-one-out) / used, the larger | "
               f"{c.t_quantile * c.residual_sd_kcal:.3f} / {q} / {c.scale():.3f} kcal/mol |")
    miss0 = []
    for i in range(n):
        mask = np.arange(n) != i
        f = cal.fit(x[mask], y[mask])
        f.interval_scale_kcal = None
        _, lo, hi = cal.apply(f, x[i])
        if not lo <= y[i] <= hi:
            miss0.append(pts[i]["group"])
    out.append(f"| leave-one-out coverage with t·s alone (the normal-theory interval) | {n - len(miss0)} of {n}"
               f"{' (' + ', '.join(miss0) + ' outside)' if miss0 else ''} |")
    out.append("")
    out.append(f"x̄ = {c.x_mean_kcal:.3f} kcal/mol, Sxx = {c.sxx_kcal2:.2f} kcal²/mol²; half-width at x̄ "
               f"{cal.interval_half_width(c, c.x_mean_kcal):.2f}, at the largest computed value ({x.max():.2f}) "
               f"{cal.interval_half_width(c, x.max()):.2f} kcal/mol.")
    ex = "; ".join(f"{v:.2f} → {a:.2f} [{lo:.2f}, {hi:.2f}]" for v in (0.5, 1.0, 2.0, 3.0)
                   for a, lo, hi in [cal.apply(c, v)])
    out.append(f"Examples (computed → calibrated [95 % interval]): {ex}.")
    big = max(range(n), key=lambda i: x[i])
    mask = np.arange(n) != big
    f = cal.fit(x[mask], y[mask])
    out.append(f"Without {pts[big]['group']} (the largest computed value): raw MAE {f.mae_kcal:.3f}, RMSE "
               f"{f.rmse_kcal:.3f}, MSE {f.mse_kcal:+.3f}; line experimental = {f.intercept:.3f} + {f.slope:.3f} · "
               f"computed, residual SD {f.residual_sd_kcal:.3f}.")
    order = sorted(range(n), key=lambda i: -abs(x[i] - y[i]))[:6]
    out.append("Largest errors: " + ", ".join(f"{pts[i]['group']} {x[i] - y[i]:+.2f}" for i in order) + ".")
    if low_t_summary is not None:
        out.append("")
        out.append(_low_t(pts, low_t_summary, low_t_temperature))
    return "\n".join(out)


def retable(c):
    """A copy of calibration `c` refitted on its stored computed values against the current package table
    (groups no longer tabulated are dropped)."""
    points = []
    for p in c.points:
        q = dict(p)
        row = avalues.lookup(p["fragment"]) if p.get("fragment") else None
        if p.get("used") == "used" and row is None:
            q["used"] = "group not in the A-value table"
        elif row is not None:
            q.update(group=row["group"], experimental_kcal=float(row["a_value_kcal"]),
                     range_low_kcal=float(row["range_low_kcal"]), range_high_kcal=float(row["range_high_kcal"]),
                     source=row["source"], from_memory=bool(row["from_memory"]))
        points.append(q)
    used = [p for p in points if p.get("used") == "used"]
    new = cal.fit([p["computed_kcal"] for p in used], [p["experimental_kcal"] for p in used], settings=c.settings)
    new.points = points
    new.temperature_k = c.temperature_k
    return new


def _low_t(pts, summary_path, temperature):
    import pandas as pd
    df = pd.read_csv(summary_path)
    lines = [f"| group | experimental (T) | computed at 298.15 K | error | computed at {temperature:g} K | error |",
             "|---|---|---|---|---|---|"]
    e298, elow = [], []
    for p in pts:
        t = _temperature(p["fragment"])
        if t in ("—", ""):
            continue
        sel = df[(df["molecule"] == p["molecule"]) & np.isclose(df["temperature_k"].astype(float), temperature)]
        if sel.empty or pd.isna(sel.iloc[0]["a_value_kcal"]):
            continue
        a_low = float(sel.iloc[0]["a_value_kcal"])
        y = p["experimental_kcal"]
        e298.append(p["computed_kcal"] - y)
        elow.append(a_low - y)
        lines.append(f"| {p['group']} | {y:.2f} ({t}) | {p['computed_kcal']:.2f} | {p['computed_kcal'] - y:+.2f} | "
                     f"{a_low:.2f} | {a_low - y:+.2f} |")
    if e298:
        a, b = np.array(e298), np.array(elow)
        lines.append("")
        lines.append(f"{len(a)} low-temperature groups: MAE {np.abs(a).mean():.3f} at 298.15 K, "
                     f"{np.abs(b).mean():.3f} at {temperature:g} K; MSE {a.mean():+.3f} and {b.mean():+.3f}; "
                     f"RMSE {math.sqrt((a ** 2).mean()):.3f} and {math.sqrt((b ** 2).mean()):.3f} kcal/mol.")
    return "\n".join(lines)


OUTSIDE_CASES = ROOT / "configs" / "reference-outside.csv"
OUTSIDE_CONFIG = "configs/reference-outside.yaml"


def read_outside_cases(path=OUTSIDE_CASES):
    """The second set's cases (one row per molecule): molecule, compared, axial_chair, equatorial_chair,
    experimental_kcal, conditions, source, from_memory.  Read without a comment character."""
    import pandas as pd
    df = pd.read_csv(path, comment=None, dtype={"molecule": str, "source": str})
    df["from_memory"] = df["from_memory"].astype(str).str.lower().eq("true")
    return df


def _pairs(orientation: str) -> set:
    return {tuple(x.split("=", 1)) for x in str(orientation).split(";") if "=" in x}


def chair_difference(families, axial_chair: str, equatorial_chair: str, temperature_k: float = 298.15):
    """G(chairs matching `axial_chair`) − G(chairs matching `equatorial_chair`) in kcal/mol from a families
    table (chairqm.ensemble.FAMILY_COLUMNS).  A chair family matches an orientation spec such as
    's1=axial;s2=axial' when it carries every id=label pair of the spec (other ids, e.g. a ring N-H that
    inverts on its own, may take any label); matching families are combined by the Boltzmann sum
    G = −RT ln Σ exp(−G_F/RT) (the same sum chairqm.ensemble.chair_summary uses).  NaN if either side has
    no matching chair family."""
    from chairqm.units import R_KCAL
    f = families[np.isclose(families["temperature_k"].astype(float), temperature_k)
                 & (families["ring_form"].astype(str) == "chair")]
    rt = R_KCAL * temperature_k

    def g(spec):
        want = _pairs(spec)
        sel = [float(r.g_rel_kcal) for r in f.itertuples() if want <= _pairs(r.orientation)]
        if not sel:
            return math.nan
        a = np.array(sel)
        return float(a.min() - rt * math.log(np.exp(-(a - a.min()) / rt).sum()))
    return g(axial_chair) - g(equatorial_chair)


def outside_points(c, out_dir, cases=None, temperature_k: float = 298.15) -> list[dict]:
    """One dict per case of the second set: experimental, computed (chair_difference from the run's
    families.csv), calibrated (the in-domain line of `c`), residual = experimental − calibrated, raw error
    = computed − experimental, source; 'used' is 'used' or why not."""
    import pandas as pd
    cases = read_outside_cases() if cases is None else cases
    pts = []
    for r in cases.itertuples():
        p = {"molecule": r.molecule, "compared": r.compared, "experimental_kcal": float(r.experimental_kcal),
             "source": r.source, "from_memory": bool(r.from_memory), "conditions": r.conditions,
             "computed_kcal": None, "calibrated_kcal": None, "residual_kcal": None, "error_kcal": None, "used": ""}
        fam = Path(out_dir) / r.molecule / "families.csv"
        if not fam.is_file() or fam.stat().st_size == 0:
            p["used"] = "no families.csv (the molecule failed or did not run)"
        else:
            d = chair_difference(pd.read_csv(fam), r.axial_chair, r.equatorial_chair, temperature_k)
            if math.isnan(d):
                p["used"] = "a compared chair is missing from the minima"
            else:
                yhat = c.intercept + c.slope * d
                p.update(computed_kcal=d, calibrated_kcal=yhat, residual_kcal=p["experimental_kcal"] - yhat,
                         error_kcal=d - p["experimental_kcal"], used="used")
        pts.append(p)
    return pts


def outside_coverage(c, pts):
    """Leave-one-out coverage of the widened 95 % intervals on the second set: for each used case the
    out-of-domain spread is measured on the others (chairqm.calibration.outside_spread) and the case's
    interval is calibrated ∓ chairqm.calibration.interval_half_width_outside.  Returns (covered, n,
    per-case list of (low, high, inside))."""
    import copy
    used = [p for p in pts if p["used"] == "used"]
    res = np.array([p["residual_kcal"] for p in used], dtype=float)
    per = []
    for i, p in enumerate(used):
        ci = copy.copy(c)
        ci.outside_domain = cal.outside_spread(np.delete(res, i), c.residual_sd_kcal)
        _, lo, hi = cal.apply(ci, p["computed_kcal"], outside=True)
        per.append((lo, hi, bool(lo <= p["experimental_kcal"] <= hi)))
    return sum(x[2] for x in per), len(used), per


def inside_coverage(c, normal_only: bool = False):
    """Leave-one-out coverage of the in-domain 95 % intervals on the calibration's own points (each point
    predicted by a fit to the others, whose interval scale comes from those others alone).  With
    `normal_only` the intervals use t·s alone (the normal-theory interval, without chairqm.calibration.loo_scale).
    Returns (covered, n)."""
    pts = [p for p in c.points if p.get("used") == "used"]
    x = np.array([p["computed_kcal"] for p in pts], dtype=float)
    y = np.array([p["experimental_kcal"] for p in pts], dtype=float)
    covered = 0
    for i in range(len(pts)):
        mask = np.arange(len(pts)) != i
        f = cal.fit(x[mask], y[mask])
        if normal_only:
            f.interval_scale_kcal = None
        _, lo, hi = cal.apply(f, x[i])
        covered += bool(lo <= y[i] <= hi)
    return covered, len(pts)


def outside_report(c, pts) -> tuple[str, dict]:
    """The second set's table and statistics (Markdown) and the spread dict to store."""
    used = [p for p in pts if p["used"] == "used"]
    res = np.array([p["residual_kcal"] for p in used], dtype=float)
    err = np.array([p["error_kcal"] for p in used], dtype=float)
    spread = cal.outside_spread(res, c.residual_sd_kcal)
    cov, n, per = outside_coverage(c, pts)
    full = copy_with(c, spread)
    out = ["| case | compared (G axial − G equatorial) | experimental | source | computed | error | "
           "calibrated [widened 95 % interval, leave-one-out] |", "|---|---|---|---|---|---|---|"]
    k = 0
    for p in pts:
        mem = ", from memory" if p["from_memory"] else ""
        if p["used"] != "used":
            out.append(f"| {p['molecule']} | {p['compared']} | {p['experimental_kcal']:.2f} | {p['source']}{mem} | "
                       f"— | | not used: {p['used']} |")
            continue
        lo, hi, inside = per[k]
        k += 1
        sign = " (wrong sign)" if p["computed_kcal"] * p["experimental_kcal"] < 0 else ""
        out.append(f"| {p['molecule']} | {p['compared']} | {p['experimental_kcal']:.2f} | {p['source']}{mem} | "
                   f"{p['computed_kcal']:.2f}{sign} | {p['error_kcal']:+.2f} | {p['calibrated_kcal']:.2f} "
                   f"[{lo:.2f}, {hi:.2f}]{'' if inside else ' (outside)'} |")
    ic, inn = inside_coverage(c)
    wrong = sum(1 for p in used if p["computed_kcal"] * p["experimental_kcal"] < 0)
    out += ["", f"## Out-of-domain statistics (m = {n})", "", "| quantity | value |", "|---|---|",
            f"| raw error (computed − experimental): MAE / MSE / RMSE | {np.abs(err).mean():.3f} / {err.mean():+.3f} / "
            f"{math.sqrt((err ** 2).mean()):.3f} kcal/mol |",
            f"| median absolute raw error | {np.median(np.abs(err)):.3f} kcal/mol |",
            f"| preferred chair of the compared pair wrong (sign differs from experiment) | {wrong} of {n} |",
            f"| residual of the in-domain line, experimental − calibrated: RMS_out | {spread['rms_kcal']:.3f} kcal/mol |",
            f"| in-domain residual SD s | {c.residual_sd_kcal:.3f} kcal/mol |",
            f"| out-of-domain excess spread τ = sqrt(max(0, RMS_out² − s²)) | {spread['excess_sd_kcal']:.3f} kcal/mol |",
            f"| t<sub>0.975, m − 1 = {n - 1}</sub> | {spread['t_quantile']:.3f} |",
            f"| widened half-width at x̄ = {c.x_mean_kcal:.2f} | {cal.interval_half_width_outside(full, c.x_mean_kcal):.2f} kcal/mol "
            f"(in the domain {cal.interval_half_width(c, c.x_mean_kcal):.2f}) |",
            f"| leave-one-out coverage of the widened 95 % intervals, second set | {cov} of {n} ({100 * cov / n:.0f} %) |",
            f"| leave-one-out coverage of the in-domain 95 % intervals, calibration set | {ic} of {inn} ({100 * ic / inn:.0f} %) |"]
    return "\n".join(out), spread


def copy_with(c, spread):
    import copy
    ci = copy.copy(c)
    ci.outside_domain = dict(spread)
    return ci


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--file", type=Path, default=ROOT / "chairqm" / "data" / "calibration.json")
    ap.add_argument("--refined", action="store_true")
    ap.add_argument("--solvent", default=None,
                    help="the calibration of this medium: a solvent name (ALPB) or MODEL:NAME (default gas phase)")
    ap.add_argument("--media", action="store_true",
                    help="print one row per stored calibration (medium, n, MAE, residual SD, line, coverage)")
    ap.add_argument("--low-t", type=Path, default=None, help="output folder of a run that includes the low temperature")
    ap.add_argument("--low-t-temperature", type=float, default=185.0)
    ap.add_argument("--retable", action="store_true",
                    help="pair the calibration's stored computed values with the current package table and refit "
                         "(no recomputation: shows what the table change alone does to a stored fit)")
    ap.add_argument("--outside", type=Path, default=None,
                    help="output folder of a finished run of configs/reference-outside.yaml (the second set)")
    ap.add_argument("--outside-cases", type=Path, default=OUTSIDE_CASES)
    ap.add_argument("--save", action="store_true",
                    help="with --outside: store the measured out-of-domain spread in the calibration file")
    ap.add_argument("--refresh-intervals", action="store_true",
                    help="compute the distribution-free interval scale (chairqm.calibration.loo_scale) of every "
                         "stored calibration from its own points and store it (the lines are unchanged)")
    a = ap.parse_args(argv)
    if a.refresh_intervals:
        from chairqm import fileio
        items = [cal.refresh_interval_scale(c) for c in cal.load_all(a.file)]
        fileio.write_json(a.file, [c.to_dict() for c in items])
        print(media_table(items))
        print(f"\nstored in {a.file}")
        return 0
    if a.media:
        print(media_table(cal.load_all(a.file)))
        return 0
    c = _pick(cal.load_all(a.file), a.refined, a.solvent)
    if a.retable:
        c = retable(c)
    if a.outside is None:
        print(report(c, None if a.low_t is None else a.low_t / "summary.csv", a.low_t_temperature))
        return 0
    import time
    pts = outside_points(c, a.outside, read_outside_cases(a.outside_cases))
    text, spread = outside_report(c, pts)
    print(text)
    if a.save:
        c.outside_domain = {**spread, "source_set": OUTSIDE_CONFIG, "cases": str(a.outside_cases.name),
                            "quantity": "G(chair with the named group axial) - G(chair with it equatorial), 298.15 K",
                            "formula": cal.OUTSIDE_FORMULA,
                            "created": time.strftime("%Y-%m-%d"),
                            "points": [{k: v for k, v in p.items() if k != "conditions"} for p in pts]}
        cal.save(c, a.file)
        print(f"\nstored in {a.file}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
