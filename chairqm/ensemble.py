"""Ranked ensemble: Boltzmann populations of conformers and families, family free energies, the chair gap and A-value.

Pure functions on numpy arrays and pandas frames; energies in hartree in, kcal/mol out where a column
name says `_kcal`; temperatures in K. The statistics are the canonical-ensemble ones of any physical
chemistry text (e.g. D. A. McQuarrie, Statistical Mechanics, Harper & Row 1976, ch. 2 and 4):

  population of conformer i:   p_i = g_i exp(-G_i/RT) / sum_j g_j exp(-G_j/RT)
  free energy of a family F:   G_F = -RT ln sum_{i in F} g_i exp(-G_i/RT)

with g_i the degeneracy (e.g. 2 for a chiral conformer of an achiral molecule, whose mirror image has
the same G). A family is a ring form plus the orientation of every substituent; the conformers inside
it are rotamers of the substituents, so G_F contains their mixing entropy: two degenerate rotamers give
G_F = G - RT ln 2. Everything is evaluated relative to the lowest G (log-sum-exp), so absolute
energies of hundreds of hartree lose no precision.

Orientation strings are the seeds stage's: 'id=label' items joined by ';' (e.g. 's1=axial;s2=equatorial').
Chair labels are 'axial'/'equatorial'; twist-boat (and other non-chair) labels 'pseudo-axial',
'pseudo-equatorial', 'isoclinal'; boat labels add 'flagpole' and 'bowsprit'; in any form, the one
exocyclic bond of a trigonal ring N (amide, carbamate, N-aryl) is 'planar' (chairqm.ring.orientation).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from scipy.special import logsumexp

from .errors import ChairqmError
from .units import KB_HARTREE, KCAL_PER_HARTREE, R_KCAL

AXIAL_LABELS = ("axial", "pseudo-axial")
CHAIR = "chair"
# a trigonal ring N's one exocyclic bond (amide, N-aryl) is 'planar' in both chairs
RING_FLIP = {"axial": "equatorial", "equatorial": "axial", "planar": "planar"}
FAMILY_COLUMNS = ["temperature_k", "ring_form", "orientation", "axial", "g_rel_kcal", "population",
                  "n_conformers"]


# ------------------------------------------------------------------------------ orientation strings

def _id_key(sid: str):
    """Natural order of substituent ids: s2 before s10."""
    digits = "".join(ch for ch in str(sid) if ch.isdigit())
    return (int(digits) if digits else 10 ** 9, str(sid))


def _blank(value) -> bool:
    return value is None or (isinstance(value, float) and math.isnan(value)) or str(value).strip() == ""


def parse_orientation(orientation) -> dict[str, str]:
    """{'s1': 'axial', ...} from 's1=axial;s2=equatorial' (a dict is returned as a copy); ids in natural order.

    An empty string (or NaN, as pandas reads an empty CSV cell) means no substituents.
    """
    if isinstance(orientation, dict):
        items = [(str(k), str(v)) for k, v in orientation.items()]
    elif _blank(orientation):
        items = []
    else:
        items = []
        for part in str(orientation).split(";"):
            part = part.strip()
            if not part:
                continue
            if part.count("=") != 1:
                raise ChairqmError(f"orientation item {part!r} in {orientation!r} is not 'id=label' "
                                   "(write e.g. 's1=axial;s2=equatorial')")
            sid, label = (x.strip() for x in part.split("="))
            if not sid or not label:
                raise ChairqmError(f"orientation item {part!r} in {orientation!r} lacks an id or a label")
            items.append((sid, label))
    out: dict[str, str] = {}
    for sid, label in items:
        if sid in out:
            raise ChairqmError(f"orientation {orientation!r} names substituent {sid} twice")
        out[sid] = label
    return {k: out[k] for k in sorted(out, key=_id_key)}


def format_orientation(mapping: dict[str, str]) -> str:
    """'s1=axial;s2=equatorial' from a mapping, ids in natural order."""
    return ";".join(f"{k}={mapping[k]}" for k in sorted(mapping, key=_id_key))


def normalise_orientation(orientation) -> str:
    """The orientation string with ids in natural order and whitespace removed ('' for none)."""
    return format_orientation(parse_orientation(orientation))


def on_axis(gap_kcal, preferred, axis_preferred):
    """A chair gap re-expressed on one axis: the project's chair-gap axis is G(second) − G(preferred) of the
    molecule's computed chairs (the refined ones when refinement ran). `gap_kcal` ≥ 0 was measured with
    `preferred` as its lower chair (a family key or orientation string); on the axis whose lower chair is
    `axis_preferred` it keeps its sign when both name the same chair and changes it otherwise (negative:
    that estimate prefers the other chair). None stays None; 0 stays 0."""
    if gap_kcal is None or not gap_kcal:
        return gap_kcal
    return gap_kcal if preferred == axis_preferred else -gap_kcal


def family_key(ring_form: str, orientation) -> str:
    """One string naming a family: the ring form, a space, the normalised orientation.

    e.g. family_key('chair', 's2=axial;s1=equatorial') == 'chair s1=equatorial;s2=axial';
    a ring without substituents gives just the ring form ('chair').
    """
    if _blank(ring_form) or " " in str(ring_form).strip():
        raise ChairqmError(f"ring form {ring_form!r} must be a single word such as 'chair' or 'twist-boat'")
    text = normalise_orientation(orientation)
    return f"{str(ring_form).strip()} {text}" if text else str(ring_form).strip()


def axial_ids(orientation) -> str:
    """Semicolon-separated ids of the substituents labelled 'axial' or 'pseudo-axial' ('' if none).

    Boat 'flagpole'/'bowsprit' and twist-boat 'isoclinal' positions are not counted as axial.
    """
    return ";".join(k for k, v in parse_orientation(orientation).items() if v in AXIAL_LABELS)


def _id_set(text) -> set[str]:
    if _blank(text):
        return set()
    return {x.strip() for x in str(text).split(";") if x.strip()}


# ------------------------------------------------------------------------------ Boltzmann statistics

def _rt_hartree(temperature_k) -> float:
    try:
        t = float(temperature_k)
    except (TypeError, ValueError):
        raise ChairqmError(f"temperature {temperature_k!r} is not a number: give it in kelvin") from None
    if not math.isfinite(t) or t <= 0:
        raise ChairqmError(f"temperature {temperature_k!r} K must be a positive number of kelvin")
    return KB_HARTREE * t


def boltzmann(g_hartree, degeneracy, temperature_k):
    """(g_rel_kcal, population) of levels with free energies `g_hartree` and degeneracies at T.

    p_i = g_i exp(-(G_i - G_min)/RT) / sum_j g_j exp(-(G_j - G_min)/RT)   (canonical ensemble; McQuarrie
    1976 ch. 2), evaluated as a softmax of ln g_i - ΔG_i/RT so no term overflows or underflows to 0/0.
    g_rel_kcal = (G_i - G_min) in kcal/mol, without the degeneracy. `degeneracy` may be a scalar.
    """
    g = np.asarray(g_hartree, dtype=float).ravel()
    if g.size == 0:
        raise ChairqmError("no conformers to weight: at least one usable conformer free energy is needed")
    if not np.all(np.isfinite(g)):
        raise ChairqmError("a conformer free energy is missing or not finite: pass only usable conformers")
    d = np.broadcast_to(np.asarray(degeneracy, dtype=float), g.shape).astype(float)
    if not np.all(np.isfinite(d)) or np.any(d <= 0):
        raise ChairqmError("degeneracies must be positive numbers (1 for a single structure, 2 for a "
                           "chiral conformer of an achiral molecule)")
    rt = _rt_hartree(temperature_k)
    dg = g - g.min()
    logw = np.log(d) - dg / rt
    p = np.exp(logw - logw.max())
    p /= p.sum()
    return dg * KCAL_PER_HARTREE, p


def _usable_frame(conformers_df: pd.DataFrame, temperature_k) -> pd.DataFrame:
    need = ["conformer", "ring_form", "orientation", "g_hartree", "degeneracy"]
    missing = [c for c in need if c not in conformers_df.columns]
    if missing:
        raise ChairqmError(f"conformer table lacks columns {missing}: it needs {need}")
    df = conformers_df
    if "temperature_k" in df.columns:
        sel = np.isclose(df["temperature_k"].astype(float), float(temperature_k), rtol=0, atol=1e-6)
        df = df[sel]
        if df.empty:
            raise ChairqmError(f"the conformer table has no rows at {temperature_k} K")
    if df["conformer"].duplicated().any():
        dup = sorted(df.loc[df["conformer"].duplicated(), "conformer"].astype(str))
        raise ChairqmError(f"conformer(s) {dup} appear twice at {temperature_k} K: pass one row per conformer")
    df = df.copy()
    df["orientation"] = [normalise_orientation(o) for o in df["orientation"]]
    return df


def conformer_populations(conformers_df: pd.DataFrame, temperature_k) -> pd.DataFrame:
    """A copy of the usable-conformer frame with `temperature_k`, `g_rel_kcal` and `population` columns
    (see `boltzmann`), sorted by g_rel_kcal. If the frame has a temperature_k column, only the rows at
    `temperature_k` are used."""
    df = _usable_frame(conformers_df, temperature_k)
    g_rel, p = boltzmann(df["g_hartree"].to_numpy(), df["degeneracy"].to_numpy(), temperature_k)
    df["temperature_k"] = float(temperature_k)
    df["g_rel_kcal"] = g_rel
    df["population"] = p
    return df.sort_values(["g_rel_kcal", "conformer"], kind="stable").reset_index(drop=True)


def families(conformers_df: pd.DataFrame, temperature_k) -> pd.DataFrame:
    """Families (ring form + orientation of every substituent) ranked by free energy at T.

    Input: usable conformers with columns conformer, ring_form, orientation, g_hartree, degeneracy
    (optionally temperature_k: then only the rows at `temperature_k` are used).
    G_F = -RT ln sum_{i in F} g_i exp(-G_i/RT) (McQuarrie 1976 ch. 4); g_rel_kcal = G_F - min_F G_F;
    population = exp(-(G_F - G_min)/RT) / sum_F exp(-(G_F - G_min)/RT), which equals the sum of the
    member conformers' populations. Columns `FAMILY_COLUMNS`; sorted by g_rel_kcal (ties: chair first,
    then ring form and orientation alphabetically).
    """
    df = _usable_frame(conformers_df, temperature_k)
    g = df["g_hartree"].astype(float).to_numpy()
    d = df["degeneracy"].astype(float).to_numpy()
    boltzmann(g, d, temperature_k)                       # validates energies, degeneracies, temperature
    rt = _rt_hartree(temperature_k)
    gmin = g.min()
    logw = np.log(d) - (g - gmin) / rt
    df = df.assign(_logw=logw, ring_form=df["ring_form"].astype(str).str.strip())
    rows = []
    for (form, orient), grp in df.groupby(["ring_form", "orientation"], sort=True):
        g_fam = gmin - rt * logsumexp(grp["_logw"].to_numpy())
        rows.append({"ring_form": form, "orientation": orient, "axial": axial_ids(orient),
                     "_g": g_fam, "n_conformers": int(len(grp))})
    fam = pd.DataFrame(rows)
    gf = fam["_g"].to_numpy()
    w = np.exp(-(gf - gf.min()) / rt)
    fam["population"] = w / w.sum()
    fam["g_rel_kcal"] = (gf - gf.min()) * KCAL_PER_HARTREE
    fam["temperature_k"] = float(temperature_k)
    fam["_not_chair"] = fam["ring_form"] != CHAIR
    fam = fam.sort_values(["g_rel_kcal", "_not_chair", "ring_form", "orientation"], kind="stable")
    return fam[FAMILY_COLUMNS].reset_index(drop=True)


# ------------------------------------------------------------------------------ the two chairs

def chair_ids(ring_atoms, ring_elements, substituents) -> list[str]:
    """The substituent ids whose orientation defines a chair: those on ring carbons.

    A substituent on a ring nitrogen (N-H, N-alkyl) also changes orientation by nitrogen inversion,
    which is fast on the time scale of ring inversion, so its two orientations are the same chair as far
    as the chair equilibrium is concerned (common practice). If no substituent sits on a ring carbon
    (e.g. N-methylpiperidine), every substituent id is returned. `substituents` are objects or dicts
    with `id` and `ring_atom`.
    """
    elem = {int(a): str(e) for a, e in zip(ring_atoms, ring_elements)}
    ids, on_carbon = [], []
    for s in substituents:
        sid = s["id"] if isinstance(s, dict) else s.id
        ra = int(s["ring_atom"] if isinstance(s, dict) else s.ring_atom)
        ids.append(str(sid))
        if elem.get(ra) == "C":
            on_carbon.append(str(sid))
    chosen = on_carbon or ids
    return sorted(chosen, key=_id_key)


def _set_label(key: tuple[str, ...], ids: list[str]) -> str:
    return format_orientation(dict(zip(ids, key)))


def chair_summary(families_df: pd.DataFrame, substituent_ids) -> dict:
    """The chair equilibrium of one molecule at one temperature, from its `families` frame.

    The two chairs. A chair is identified by the orientation of the substituents in `substituent_ids`
    (use `chair_ids`: those on ring carbons). Chair families that differ only in substituents not
    listed (e.g. the N-H of a piperidine, which inverts independently) are merged into one chair by
    the same Boltzmann sum as a family: G = -RT ln sum exp(-G_F/RT). The preferred chair is the chair
    of lowest G; the second chair is its ring-flip partner, the chair with every listed substituent's
    axial/equatorial label swapped. For a fixed configuration these are the only two chairs.

    Sign convention: chair_dg_kcal = G(second chair) - G(preferred chair) >= 0 (None if the ring-flip
    partner is not among the families). For exactly one listed substituent the A-value is
    a_value_kcal = G(chair with it axial) - G(chair with it equatorial), which is negative when the
    axial chair is preferred. With no listed substituents both chairs are the same and the gap is 0.

    Returns a dict: temperature_k; preferred_family (key of the lowest family of any ring form, see
    `family_key`); preferred_chair, second_chair (family keys of the lowest family inside each chair,
    or None); preferred_chair_axial, second_chair_axial (semicolon-separated axial ids among
    `substituent_ids`); preferred_chair_orientation, second_chair_orientation (orientation strings of
    the listed ids); chair_dg_kcal; a_value_kcal (None unless exactly one listed id and both chairs
    found); twist_boat_population (the summed population of every non-chair family); chair_population;
    chairs (list of dicts per chair: orientation, axial, g_rel_kcal relative to the lowest family,
    population, families); n_chair_families; note (words on merges, missing partners, extra chairs).
    """
    need = ["temperature_k", "ring_form", "orientation", "g_rel_kcal", "population"]
    missing = [c for c in need if c not in families_df.columns]
    if missing:
        raise ChairqmError(f"family table lacks columns {missing}: make it with chairqm.ensemble.families")
    if families_df.empty:
        raise ChairqmError("the family table is empty: no usable conformer reached the ensemble stage")
    temps = np.unique(families_df["temperature_k"].astype(float))
    if temps.size != 1:
        raise ChairqmError(f"chair_summary needs the families of one temperature, got {temps.tolist()} K")
    t = float(temps[0])
    rt = R_KCAL * t
    ids = sorted({str(i) for i in substituent_ids}, key=_id_key)

    fam = families_df.sort_values("g_rel_kcal", kind="stable")
    top = fam.iloc[0]
    forms = fam["ring_form"].astype(str).str.strip()
    chair_rows = fam[forms == CHAIR]
    non_chair_pop = float(fam.loc[forms != CHAIR, "population"].sum())
    out = {"temperature_k": t, "preferred_family": family_key(top["ring_form"], top["orientation"]),
           "preferred_chair": None, "second_chair": None, "preferred_chair_axial": None,
           "second_chair_axial": None, "preferred_chair_orientation": None,
           "second_chair_orientation": None, "chair_dg_kcal": None, "a_value_kcal": None,
           "twist_boat_population": non_chair_pop, "chair_population": float(chair_rows["population"].sum()),
           "chairs": [], "n_chair_families": int(len(chair_rows)), "note": ""}
    notes = []
    if chair_rows.empty:
        out["note"] = "no chair family among the minima: the chair gap and A-value are undefined"
        return out

    sets: dict[tuple, list] = {}
    merged_ids = set()
    for _, row in chair_rows.iterrows():
        omap = parse_orientation(row["orientation"])
        lacking = [i for i in ids if i not in omap]
        if lacking:
            raise ChairqmError(f"chair family '{row['orientation']}' has no orientation for {lacking}: "
                               "pass substituent ids that the orientation strings name")
        bad = {i: omap[i] for i in ids if omap[i] not in RING_FLIP}
        if bad:
            raise ChairqmError(f"chair family '{row['orientation']}' labels {bad}; chair labels must be "
                               "'axial', 'equatorial' or 'planar'")
        merged_ids.update(k for k in omap if k not in ids)
        key = tuple(omap[i] for i in ids)
        sets.setdefault(key, []).append(row)

    chairs = {}
    for key, rows in sets.items():
        g_rel = np.array([float(r["g_rel_kcal"]) for r in rows])
        g_set = float(-rt * logsumexp(-g_rel / rt))
        best = min(rows, key=lambda r: float(r["g_rel_kcal"]))
        chairs[key] = {"orientation": _set_label(key, ids),
                       "axial": ";".join(i for i, o in zip(ids, key) if o == "axial"),
                       "g_rel_kcal": g_set,
                       "population": float(sum(float(r["population"]) for r in rows)),
                       "families": [family_key(r["ring_form"], r["orientation"]) for r in rows],
                       "_best": family_key(best["ring_form"], best["orientation"])}
    order = sorted(chairs, key=lambda k: chairs[k]["g_rel_kcal"])
    pref = order[0]
    partner = tuple(RING_FLIP[o] for o in pref)
    out["preferred_chair"] = chairs[pref]["_best"]
    out["preferred_chair_axial"] = chairs[pref]["axial"]
    out["preferred_chair_orientation"] = chairs[pref]["orientation"]
    out["second_chair_axial"] = ";".join(i for i, o in zip(ids, partner) if o == "axial")
    out["second_chair_orientation"] = _set_label(partner, ids)
    if partner in chairs:
        out["second_chair"] = chairs[partner]["_best"]
        out["chair_dg_kcal"] = max(0.0, chairs[partner]["g_rel_kcal"] - chairs[pref]["g_rel_kcal"])
    else:
        notes.append(f"the ring-flip partner chair ({_set_label(partner, ids) or 'no substituents'}) is not "
                     "among the minima, so the chair gap is undefined")
    if len(ids) == 1 and len(chairs) == 2 and partner in chairs:
        ax = ("axial",)
        eq = ("equatorial",)
        out["a_value_kcal"] = chairs[ax]["g_rel_kcal"] - chairs[eq]["g_rel_kcal"]
    if merged_ids and any(len(v) > 1 for v in sets.values()):
        notes.append("chair families differing only in the orientation of "
                     f"{', '.join(sorted(merged_ids, key=_id_key))} were merged into one chair (Boltzmann sum)")
    extra = [k for k in order if k not in (pref, partner)]
    if extra:
        notes.append(f"{len(extra)} further chair(s) beyond the ring-flip pair: "
                     + ", ".join(chairs[k]["orientation"] for k in extra)
                     + " (their orientations are inconsistent with one configuration; check the structures)")
    out["chairs"] = [{k2: v for k2, v in chairs[k].items() if not k2.startswith("_")} for k in order]
    out["note"] = "; ".join(notes)
    return out
