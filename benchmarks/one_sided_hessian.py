"""How far a one-sided (forward-difference) Hessian moves a conformer's free energy, measured on the
displacements a finished run already cached: no new Hessian is computed.

    python benchmarks/one_sided_hessian.py RUN_DIR [RUN_DIR ...] [--temperature 298.15]

A central-difference Hessian costs 2n gradients (n = 3N − 6 internal directions, the default, or 3N
Cartesian ones): H e = −(F(x + h e) − F(x − h e)) / 2h. The forward one costs n + 1:
H e = −(F(x + h e) − F(x)) / h, with the forces F(x) at the minimum (one extra
gradient). Its truncation error is O(h) (half the third derivative times h) where the central one's is
O(h²), so the forward G − E carries a bias; the question is whether that bias is alike for the
conformers of one molecule, so that a conformer's G − E could be taken as its forward value plus the
central-minus-forward difference of a reference conformer (the molecule's lowest chair, whose central
Hessian contains the forward one: its + displacements).

For every conformer of every molecule in RUN_DIR whose Hessian was computed once (no mode following),
the script reads the cached + and − displacement forces (work/freq/CONFORMER-KEY/round0), computes F(x)
with the run's engine settings, and prints, in kcal/mol at the temperature:

- G − E from the central Hessian rebuilt from the cache (the run's own thermo.csv value);
- delta: G − E from the forward Hessian minus that from the central one;
- corrected: delta minus the reference conformer's delta (the error of the corrected estimate);
- the gradients a forward Hessian would save (n − 1).
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _common import ROOT, print_machine  # noqa: E402

sys.path.insert(0, str(ROOT))

from chairqm import engine as cq_engine  # noqa: E402
from chairqm import thermo as cq_thermo  # noqa: E402
from chairqm import vibrations as cq_vib  # noqa: E402
from chairqm.hessian import assemble_hessian, cached_displacements  # noqa: E402
from chairqm.stages.records import read_xyz  # noqa: E402
from chairqm.units import KCAL_PER_HARTREE  # noqa: E402


def _forces_at(atoms, settings):
    calc = cq_engine.make_calculator(settings["engine"], settings["method"], 0, 1, settings.get("solvent"),
                                     settings["accuracy"], settings["electronic_temperature_k"])
    a = atoms.copy()
    a.calc = calc
    return np.array(a.get_forces(), dtype=float)


def _hessians(atoms, folder, key, f0, step):
    """(central, forward) Hessians from a cache folder, along whichever directions the run used
    (internal or Cartesian) and the number of directions; (None, None, 0) if a displacement is missing."""
    got = cached_displacements(atoms, folder, key, step)
    if got is None:
        return None, None, 0
    pairs, u = got
    central = np.array([-(fp - fm).ravel() / (2.0 * step) for (fp, fm), _ in pairs])
    forward = np.array([-(fp - f0).ravel() / step for (fp, _fm), _ in pairs])
    return assemble_hessian(atoms, central, u)[0], assemble_hessian(atoms, forward, u)[0], len(pairs)


def _g_corr(hess, atoms, sigma, th, temperature, standard_state):
    freqs, _ = cq_vib.frequencies(hess, atoms)
    t = cq_thermo.thermochemistry(freqs, atoms, temperature, sigma, model=th["model"], scale=th["frequency_scale"],
                                  standard_state=standard_state,
                                  imaginary_threshold_cm1=th["imaginary_threshold_cm1"])
    return t.g_corr * KCAL_PER_HARTREE, float(freqs[0])


def molecule_rows(folder: Path, settings: dict, temperature: float):
    th = settings["thermo"]
    state = "solution" if settings.get("solvent") else "gas"
    thermo = json.loads((folder / "thermo.json").read_text())
    confs = {c["conformer"]: c for c in thermo["conformers"] if c.get("usable") and c.get("frequency_checked")}
    e0 = min((c["energy_hartree"] for c in confs.values()), default=0.0)
    rows = []
    for cid, c in sorted(confs.items()):
        rec = json.loads((folder / "work" / "thermo" / f"{cid}.json").read_text())
        proof = rec["proof"]
        if proof.get("rounds", 0) != 0 or not proof.get("hessians"):
            continue
        h = proof["hessians"][0]
        cache = Path(h["cache_dir"])
        if not cache.is_absolute():
            cache = folder.parent / cache if not (folder / cache).exists() else folder / cache
        if not cache.is_dir():
            cache = next(iter((folder / "work" / "freq").glob(f"{cid}-*/round0")), None)
            if cache is None:
                continue
        atoms = read_xyz(folder / "minima" / f"{cid}.xyz")
        f0 = _forces_at(atoms, settings)
        central, forward, ndir = _hessians(atoms, cache, h["key"], f0, float(h["step_angstrom"]))
        if central is None:
            continue
        gc, nu_c = _g_corr(central, atoms, c["symmetry_number"], th, temperature, state)
        gf, nu_f = _g_corr(forward, atoms, c["symmetry_number"], th, temperature, state)
        rows.append({"molecule": folder.name, "conformer": cid, "form": c.get("ring_form"),
                     "orientation": c.get("orientation"), "de_kcal": (c["energy_hartree"] - e0) * KCAL_PER_HARTREE,
                     "g_corr_central": gc, "delta": gf - gc, "lowest_central": nu_c, "lowest_forward": nu_f,
                     "saved": ndir - 1, "chair": c.get("ring_form") == "chair"})
    chairs = [r for r in rows if r["chair"]]
    if not chairs:
        return []
    ref = min(chairs, key=lambda r: r["de_kcal"])
    for r in rows:
        r["corrected"] = r["delta"] - ref["delta"]
        r["reference"] = ref["conformer"]
    return rows


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("runs", nargs="+")
    ap.add_argument("--temperature", type=float, default=298.15)
    args = ap.parse_args(argv)
    print_machine()
    allrows = []
    for run in args.runs:
        run = Path(run).resolve()
        settings = json.loads((run / "provenance.json").read_text())["settings"]
        for folder in sorted(p for p in run.iterdir() if (p / "thermo.json").is_file()):
            allrows.extend(molecule_rows(folder, settings, args.temperature))
    print("| molecule | conformer | form | ΔE kcal/mol | G − E central kcal/mol | lowest ν central / forward cm⁻¹ "
          "| delta | corrected |")
    print("|---|---|---|---|---|---|---|---|")
    for r in allrows:
        print(f"| {r['molecule']} | {r['conformer']} | {r['form']} {r['orientation'] or ''} | {r['de_kcal']:.2f} | "
              f"{r['g_corr_central']:.4f} | {r['lowest_central']:.1f} / {r['lowest_forward']:.1f} | {r['delta']:+.3f} | {r['corrected']:+.3f} |")
    others = [r for r in allrows if r["conformer"] != r["reference"]]
    for label, sel in (("every conformer but the reference", others),
                       ("not a chair", [r for r in others if not r["chair"]]),
                       ("a chair", [r for r in others if r["chair"]])):
        if not sel:
            continue
        d = np.array([r["delta"] for r in sel])
        c = np.array([r["corrected"] for r in sel])
        print(f"\n{label}: n = {len(sel)}; delta median {np.median(d):+.3f}, range {d.min():+.3f} to {d.max():+.3f}; "
              f"corrected median |.| {np.median(np.abs(c)):.3f}, 95th percentile |.| "
              f"{np.percentile(np.abs(c), 95):.3f}, max |.| {np.abs(c).max():.3f} kcal/mol; "
              f"gradients a forward Hessian saves: {sum(r['saved'] for r in sel)}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
