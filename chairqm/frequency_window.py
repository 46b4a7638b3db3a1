"""Which minima get a Hessian, and whose thermal correction the others borrow.

A finite-difference Hessian costs 2(3N − 6) gradients (chairqm.hessian), several times a conformer's
optimisation, and only the conformers that carry population decide the answer. After optimisation, a
conformer gets its Hessian (and so its proof of minimum and its own thermal correction) when

- its electronic energy lies within the window of the lowest one (:func:`window_kcal`), or
- it is the lowest of its chair family (ring form 'chair' with one orientation pattern), so both chairs
  of a ring flip, and with them the chair gap and the A-value, always rest on computed frequencies.

Every other conformer stays in the results with its own energy; its free energy borrows G − E from the
nearest frequency-checked conformer of its own family, else of its own ring form, else of any form
(:func:`donor`), and it is marked as not frequency-checked.

The automatic window. A conformer's population at temperature T is
p_i = w_i / Σ_j w_j with w_j = d_j·exp(−G_j/RT) (Boltzmann over conformers with degeneracies d). Let 0
be the conformer of lowest electronic energy and S any set of conformers whose free energies are known;
then p_i ≤ w_i / Σ_{j∈S} w_j = (w_i/w_0)·(w_0/Z_S). Writing G_i − G_0 = ΔE_i + Δ(G − E)_i,
w_i/w_0 = exp(−(ΔE_i − b_i)/RT) with b_i = RT·ln(d_i/d_0) − Δ(G − E)_i, so p_i stays below p whenever

    ΔE_i > RT·ln(1/p) + b_i − RT·ln(Z_S/w_0).

b_i is how much lower a conformer's free energy sits relative to its electronic energy than conformer
0's does (more entropy, a mirror image). MARGIN_KCAL stands for its largest value: measured over every
conformer of 17 molecules of the reference set (configs/reference.yaml, full frequencies, 298.15 K) in
docs/benchmarks.md part f, with room above it. The stage first computes the Hessians every answer needs
(the lowest conformer and the lowest of each chair family: S), then the window
RT·ln(1/p) + MARGIN_KCAL − RT·ln(Z_S/w_0) at every requested temperature, and takes the widest
(:func:`auto_window_kcal`); without S known, Z_S/w_0 = 1. The bound holds for any S whose free energies
are known, and a larger S only narrows the window, so the stage then takes the conformers inside it one
at a time, lowest electronic energy first, adds each to S once its Hessian is known and recomputes the
window, until no conformer without a Hessian is left inside it.
"""

from __future__ import annotations

import math

from chairqm.errors import ChairqmError
from chairqm.units import KCAL_PER_HARTREE, R_KCAL

#: Population (fraction) below which a conformer may go without its own Hessian (the issue's 0.1 %).
POPULATION_FLOOR = 1e-3

#: kcal/mol added to RT·ln(1/POPULATION_FLOOR): covers b_i = RT·ln(d_i/d_0) − Δ(G − E)_i, at most
#: 0.88 kcal/mol over the 156 conformers of 17 reference-set molecules at 298.15 K (precon-lbfgs minima)
#: and 0.92 over the 247 conformers of all 27 (bfgs-model minima; twist-boats: the mirror pair's RT ln 2 plus
#: their extra entropy; docs/benchmarks.md part f); about 0.3 kcal/mol of room is left for groups outside
#: that set.
MARGIN_KCAL = 1.2

#: Setting values: 'auto' (the window above), 'all' (every conformer gets its Hessian), or a number.
AUTO, ALL = "auto", "all"


def auto_window_kcal(temperatures_k, population: float = POPULATION_FLOOR, margin_kcal: float = MARGIN_KCAL,
                     z_ratios=None) -> float:
    """max over `temperatures_k` of RT·ln(1/population) + margin − RT·ln(Z_S/w_0) (kcal/mol).

    z_ratios: {temperature: Z_S/w_0} from :func:`partition_ratio` (≥ 1), or None for 1 at every
    temperature (the widest window)."""
    temps = [float(t) for t in temperatures_k]
    if not temps or min(temps) <= 0:
        raise ChairqmError(f"temperatures must be positive kelvin, got {temperatures_k!r}")
    if not 0 < population < 1:
        raise ChairqmError(f"population floor must lie between 0 and 1, got {population!r}")
    widths = []
    for t in temps:
        z = 1.0 if z_ratios is None else max(1.0, float(z_ratios[t]))
        widths.append(R_KCAL * t * (math.log(1.0 / population) - math.log(z)) + float(margin_kcal))
    return max(widths)


def partition_ratio(free_energies_hartree: dict, degeneracies: dict, lowest: str, temperature_k: float) -> float:
    """Z_S/w_0 = Σ_j d_j·exp(−(G_j − G_0)/RT) / d_0 over the conformers j of `free_energies_hartree`
    ({id: G in hartree at `temperature_k`}), 0 = `lowest` (the conformer of lowest electronic energy,
    one of them). Conformers whose G lies within 1e-6 hartree of another's are counted once (a conformer
    that mode following brought onto another minimum must not be counted twice)."""
    g0 = free_energies_hartree[lowest]
    rt = R_KCAL * float(temperature_k)
    seen, total = [], 0.0
    for cid in sorted(free_energies_hartree, key=lambda c: (c != lowest, c)):
        g = free_energies_hartree[cid]
        if any(abs(g - x) < 1e-6 for x in seen):
            continue
        seen.append(g)
        total += degeneracies[cid] * math.exp(-(g - g0) * KCAL_PER_HARTREE / rt)
    return total / degeneracies[lowest]


def window_kcal(setting, temperatures_k) -> float:
    """The electronic-energy window (kcal/mol) of a `thermo.frequency_window_kcal` setting: 'auto' →
    :func:`auto_window_kcal` (before any free energy is known), 'all' → infinity, a number ≥ 0 → itself."""
    if isinstance(setting, str):
        key = setting.strip().lower()
        if key == AUTO:
            return auto_window_kcal(temperatures_k)
        if key == ALL:
            return math.inf
        raise ChairqmError(f"frequency window {setting!r}: give 'auto', 'all' or a number of kcal/mol")
    try:
        w = float(setting)
    except (TypeError, ValueError):
        raise ChairqmError(f"frequency window {setting!r}: give 'auto', 'all' or a number of kcal/mol") from None
    if not w >= 0:
        raise ChairqmError(f"frequency window must be ≥ 0 kcal/mol, got {setting!r}")
    return w


def _family(c) -> str:
    from chairqm.ensemble import family_key
    return family_key(c["ring_form"], c.get("orientation", ""))


def select(conformers, window: float) -> list[str]:
    """Ids of the conformers that get a Hessian, in input order.

    `conformers`: dicts with 'conformer', 'energy_hartree', 'ring_form', 'orientation'. Chosen: every
    conformer within `window` kcal/mol of the lowest electronic energy (inclusive, 1e-9 kcal/mol slack),
    and the lowest of each chair family (ties by id). A conformer without a finite energy is chosen too
    (nothing is known against it).
    """
    confs = list(conformers)
    energies = {c["conformer"]: c.get("energy_hartree") for c in confs}
    finite = [float(e) for e in energies.values() if e is not None and math.isfinite(float(e))]
    if not finite:
        return [c["conformer"] for c in confs]
    e0 = min(finite)
    chosen = set()
    for c in confs:
        e = c.get("energy_hartree")
        if e is None or not math.isfinite(float(e)) or (float(e) - e0) * KCAL_PER_HARTREE <= float(window) + 1e-9:
            chosen.add(c["conformer"])
    lowest = {}
    for c in confs:
        if str(c.get("ring_form", "")).strip() != "chair":
            continue
        e = c.get("energy_hartree")
        if e is None or not math.isfinite(float(e)):
            continue
        fam = _family(c)
        best = lowest.get(fam)
        if best is None or (float(e), c["conformer"]) < (float(best["energy_hartree"]), best["conformer"]):
            lowest[fam] = c
    chosen.update(c["conformer"] for c in lowest.values())
    return [c["conformer"] for c in confs if c["conformer"] in chosen]


def donor(target, checked) -> str | None:
    """Id of the frequency-checked conformer whose thermal correction G − E `target` borrows: the nearest in
    electronic energy of its own family, else of its own ring form, else of any; ties by id. None when
    `checked` is empty. Both arguments: dicts as for :func:`select`."""
    pool = [c for c in checked if c.get("energy_hartree") is not None and math.isfinite(float(c["energy_hartree"]))]
    if not pool:
        return None
    e = float(target["energy_hartree"])

    def nearest(cands):
        return min(cands, key=lambda c: (abs(float(c["energy_hartree"]) - e), c["conformer"]))["conformer"]

    fam = _family(target)
    same_family = [c for c in pool if _family(c) == fam]
    if same_family:
        return nearest(same_family)
    same_form = [c for c in pool if str(c["ring_form"]).strip() == str(target["ring_form"]).strip()]
    return nearest(same_form or pool)
