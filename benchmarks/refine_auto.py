"""What settings.refine: auto buys on the second reference set: how often the preferred chair of the compared
pair is right with and without the DFT single points, and what the single points cost.

    python benchmarks/refine_auto.py RUN [--unrefined results/reference-outside]

RUN is the output folder of a run of (a subset of) configs/reference-outside.yaml with refinement
(`refine: auto` or a refinement block): for each of its molecules the compared chair difference
G(axial chair) − G(equatorial chair) is read from families.csv twice, refined (g_rel_kcal) and GFN2-xTB only
(g_rel_unrefined_kcal), with benchmarks/calibration_report.py's chair_difference, and its sign compared
with the experimental value of configs/reference-outside.csv. --unrefined names the finished GFN2-xTB run
of the whole set: the cases RUN did not compute are listed from it as not measured with refinement. The
decision refine: auto makes for every case of the set is taken from chairqm.plan (what `chairqm check`
prints). DFT time: each molecule's refine.json (dft_seconds, the single points' own time summed over
workers) and refine.csv (single points).
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "benchmarks"))

from calibration_report import chair_difference, read_outside_cases  # noqa: E402


def _right(value, experimental) -> bool | None:
    """Same preferred chair as the experiment (same sign); None when not computed."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return None
    return (value > 0) == (experimental > 0)


def decisions(config=ROOT / "configs" / "reference-outside.yaml") -> dict:
    """refine: auto's decision for every molecule of the second set (the plan of its configuration with
    settings.refine set to auto)."""
    from chairqm import config as cq_config
    from chairqm import plan as cq_plan
    cfg = cq_config.load(config)
    cfg["settings"]["refine"] = "auto"
    cfg["settings"].setdefault("analysis", {})["reference_groups"] = False
    return cq_plan.make_plan(cfg).refine_auto


def rows(run: Path, unrefined: Path | None):
    import pandas as pd
    cases = read_outside_cases()
    auto = decisions()
    out = []
    for c in cases.itertuples():
        r = {"molecule": c.molecule, "experimental": float(c.experimental_kcal),
             "auto": auto.get(c.molecule, {}), "gfn2": None, "refined": None, "seconds": None, "single_points": None}
        fam = run / c.molecule / "families.csv"
        if fam.is_file() and fam.stat().st_size:
            f = pd.read_csv(fam)
            if "g_rel_unrefined_kcal" in f.columns:
                r["refined"] = chair_difference(f, c.axial_chair, c.equatorial_chair)
                r["gfn2"] = chair_difference(f.assign(g_rel_kcal=f["g_rel_unrefined_kcal"]), c.axial_chair,
                                             c.equatorial_chair)
            else:
                r["gfn2"] = chair_difference(f, c.axial_chair, c.equatorial_chair)
            info = run / c.molecule / "refine.json"
            if info.is_file():
                r["seconds"] = float(json.loads(info.read_text()).get("dft_seconds") or 0.0)
                rc = pd.read_csv(run / c.molecule / "refine.csv", keep_default_na=False)
                r["single_points"] = int((rc["status"] == "ok").sum())
        elif unrefined is not None and (unrefined / c.molecule / "families.csv").is_file():
            r["gfn2"] = chair_difference(pd.read_csv(unrefined / c.molecule / "families.csv"),
                                         c.axial_chair, c.equatorial_chair)
        out.append(r)
    return out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("run", type=Path)
    ap.add_argument("--unrefined", type=Path, default=None)
    a = ap.parse_args(argv)
    rs = rows(a.run, a.unrefined)
    fmt = lambda v: "" if v is None or (isinstance(v, float) and math.isnan(v)) else f"{v:+.2f}"  # noqa: E731
    print("| case | refine: auto decides | experimental | GFN2-xTB | refined | single points | DFT s |")
    print("|---|---|---|---|---|---|---|")
    for r in rs:
        d = r["auto"]
        words = ("refined: " if d.get("refine") else "not refined: ") + d.get("reason", "") if d else ""
        g, f = fmt(r["gfn2"]), fmt(r["refined"])
        g += "" if _right(r["gfn2"], r["experimental"]) in (None, True) else " (wrong chair)"
        f += "" if _right(r["refined"], r["experimental"]) in (None, True) else " (wrong chair)"
        print(f"| {r['molecule']} | {words} | {r['experimental']:+.2f} | {g} | {f or 'not measured'} | "
              f"{r['single_points'] if r['single_points'] is not None else ''} | "
              f"{'' if r['seconds'] is None else round(r['seconds'])} |")
    measured = [r for r in rs if r["refined"] is not None and not math.isnan(r["refined"])]
    n = len(measured)
    right_g = sum(bool(_right(r["gfn2"], r["experimental"])) for r in measured)
    right_f = sum(bool(_right(r["refined"], r["experimental"])) for r in measured)
    err = lambda key: math.sqrt(sum((r[key] - r["experimental"]) ** 2 for r in measured) / n) if n else math.nan  # noqa: E731
    chosen = sum(1 for r in rs if r["auto"].get("refine"))
    seconds = sum(r["seconds"] or 0.0 for r in measured)
    sp = sum(r["single_points"] or 0 for r in measured)
    print()
    print(f"refine: auto refines {chosen} of {len(rs)} cases of the second set")
    print(f"measured with refinement: {n} cases; preferred chair right: GFN2-xTB {right_g} of {n}, "
          f"refined {right_f} of {n}; RMS error GFN2-xTB {err('gfn2'):.2f}, refined {err('refined'):.2f} kcal/mol")
    all_g = [r for r in rs if r["gfn2"] is not None and not math.isnan(r["gfn2"])]
    print(f"whole set, GFN2-xTB: preferred chair right in {sum(bool(_right(r['gfn2'], r['experimental'])) for r in all_g)}"
          f" of {len(all_g)}")
    print(f"DFT time: {seconds:.0f} s summed over {sp} single points ({seconds / max(sp, 1):.0f} s each, "
          f"{seconds / max(n, 1):.0f} s per molecule)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
