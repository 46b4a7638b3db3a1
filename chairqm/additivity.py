"""Additive estimate of a chair equilibrium from A-values and pair terms, its limits, and the disagreement flag.

Model (common practice in conformational analysis; E. L. Eliel and S. H. Wilen, Stereochemistry of
Organic Compounds, Wiley 1994, ch. 11). Each chair gets an additive free energy

  G_add(chair) = sum_{groups axial in it} A(group) + sum_{pairs in it} pair term

and between the two chairs (ring-flip partners) the estimate is

  dg_kcal = G_add(second chair) - G_add(preferred chair) >= 0,

i.e. the same sign convention as `chairqm.ensemble.chair_summary`'s chair_dg_kcal. Pair terms:

* syn-1,3-diaxial Me/Me: 3.7 kcal/mol (N. L. Allinger and M. A. Miller, J. Am. Chem. Soc. 1961, 83,
  2145). An A-value already counts its group's two syn-axial group/H interactions, A/2 each (common
  practice: the A-value of methyl is two Me/H 1,3-diaxial, or gauche-butane, interactions). In a syn-
  diaxial pair each group meets the other instead of one H, so the pair adds 3.7 - A1/2 - A2/2; for
  cis-1,3-dimethylcyclohexane this gives 2(1.74) + 3.7 - 1.74 = 5.44 kcal/mol for the diaxial chair,
  close to the 5.5 kcal/mol Allinger and Miller derived (from memory). No other syn-diaxial pair has a
  published term here, so such a pair puts the molecule outside the model.
* gauche interaction of two vicinal (1,2) equatorial groups: 0.9 kcal/mol (common practice: the gauche-
  butane value), applied to every vicinal pair that is equatorial-equatorial in a chair. A vicinal
  axial-equatorial pair is gauche in both chairs of a cis-1,2 ring and cancels; an axial-axial pair is
  anti and gets nothing.

Outside the model (reported, never estimated): two groups on one ring atom (geminal); a ring heteroatom
(O, N, S, ...) bonded to a substituted ring atom, or in its syn-axial 1,3 position, or carrying the
substituent itself (N-H, N-alkyl); a charged group; a syn-1,3-diaxial pair other than Me/Me; a group
with neither a tabulated nor a QM-derived A-value.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from rdkit import Chem

from . import avalues
from .errors import ChairqmError
from .ensemble import RING_FLIP, _id_key, _id_set, format_orientation, parse_orientation

SYN_DIAXIAL_ME_ME_KCAL = 3.7     # Allinger and Miller, J. Am. Chem. Soc. 1961, 83, 2145
GAUCHE_EE_KCAL = 0.9             # common practice (gauche butane)
METHYL = "[*]C"
SOURCES = ("tabulated", "qm-derived", "outside-model")
CYCLOHEXYL_TEMPLATE = "[*:1]C1CCCCC1"


@dataclass(frozen=True)
class RingSubstituent:
    """One group on the ring: its id (as in the orientation strings), ring atom index, fragment SMILES
    with an attachment point and formal charge. chairqm.molecule.Substituent has the same fields."""
    id: str
    ring_atom: int
    fragment: str
    charge: int = 0


@dataclass
class AdditiveEstimate:
    """The additive chair estimate of one molecule (kcal/mol).

    dg_kcal: G_add(second chair) - G_add(preferred chair) >= 0, tabulated A-values where they exist and
    QM-derived ones for the rest; None outside the model. preferred_axial: semicolon-separated ids
    axial in the preferred chair ('' if none); preferred_orientation / second_orientation: the chairs'
    orientation strings. source: 'tabulated', 'qm-derived' (some group needed its QM-derived value) or
    'outside-model'. reason: words. terms: (description, kcal) whose sum is dg_kcal (positive terms favour
    the preferred chair). tabulated_dg_kcal / qm_dg_kcal: the same gap with only tabulated values (None if
    a group has none) and with QM-derived values wherever given (tabulated for the rest; None if no QM
    value was used), both on the axis of dg_kcal, so negative means that variant prefers the other chair.
    """
    dg_kcal: float | None
    preferred_axial: str | None
    preferred_orientation: str | None
    second_orientation: str | None
    source: str
    reason: str
    terms: list = field(default_factory=list)
    tabulated_dg_kcal: float | None = None
    qm_dg_kcal: float | None = None

    @property
    def outside_model(self) -> bool:
        return self.source == "outside-model"


# ------------------------------------------------------------------------------ helpers

def _get(s, name, default=None):
    if isinstance(s, dict):
        return s.get(name, default)
    return getattr(s, name, default)


def _as_substituents(substituents) -> list[RingSubstituent]:
    out = []
    for s in substituents:
        sid, ra, frag = _get(s, "id"), _get(s, "ring_atom"), _get(s, "fragment")
        if sid is None or ra is None or frag is None:
            raise ChairqmError(f"substituent {s!r} needs an id, a ring_atom and a fragment")
        out.append(RingSubstituent(str(sid), int(ra), frag if is_fusion(s) else avalues.canonical_fragment(frag),
                                   int(_get(s, "charge", 0) or 0)))
    ids = [s.id for s in out]
    if len(set(ids)) != len(ids):
        raise ChairqmError(f"substituent ids {ids} are not unique")
    return sorted(out, key=lambda s: _id_key(s.id))


def _fragment_charge(fragment: str) -> int:
    mol = Chem.MolFromSmiles(fragment)
    return 0 if mol is None else Chem.GetFormalCharge(mol)


def _is_charged(s: RingSubstituent) -> bool:
    return s.charge != 0 or _fragment_charge(s.fragment) != 0


def _short_source(row) -> str:
    return avalues.short_citation(row)


def reference_smiles(fragment: str) -> str:
    """Canonical SMILES of the monosubstituted cyclohexane carrying `fragment`
    (e.g. '[*]C(F)(F)F' -> 'FC(F)(F)C1CCCCC1'), built with RDKit's molzip."""
    frag = avalues.canonical_fragment(fragment)
    fmol = Chem.MolFromSmiles(frag)
    for a in fmol.GetAtoms():
        if a.GetAtomicNum() == 0:
            a.SetAtomMapNum(1)
    ring = Chem.MolFromSmiles(CYCLOHEXYL_TEMPLATE)
    joined = Chem.molzip(ring, fmol)
    try:
        joined = Chem.RemoveHs(joined)
        Chem.SanitizeMol(joined)
    except Exception as exc:
        raise ChairqmError(f"cannot attach fragment {fragment!r} to cyclohexane "
                           f"({str(exc).strip().splitlines()[0]}): check the fragment's valences") from None
    return Chem.MolToSmiles(joined)


def needs_reference(substituents, every_group: bool = False) -> list[str]:
    """Canonical fragments of the groups with no tabulated A-value (with `every_group`, of every group:
    the same-method A-values), in order of first appearance.

    `substituents`: objects or dicts with a `fragment` (and optionally `charge`), or fragment strings.
    Charged groups are left out (they are outside the additive model, so no reference would be used),
    and so is '[*][H]' (the H on a ring nitrogen, which has no cyclohexane analogue).
    """
    out = []
    for s in substituents:
        if is_fusion(s):
            continue
        frag = avalues.canonical_fragment(s if isinstance(s, str) else _get(s, "fragment"))
        charge = 0 if isinstance(s, str) else int(_get(s, "charge", 0) or 0)
        if frag == "[*][H]" or charge != 0 or _fragment_charge(frag) != 0:
            continue
        if (every_group or avalues.lookup(frag) is None) and frag not in out:
            out.append(frag)
    return out


# ------------------------------------------------------------------------------ the model's limits

def is_fusion(s) -> bool:
    """True for a bond into a ring fused to the analysed ring (chairqm.molecule.Substituent.fused, or a
    fragment with two attachment points): a ring fusion has no A-value."""
    frag = s if isinstance(s, str) else _get(s, "fragment", "")
    return bool(not isinstance(s, str) and _get(s, "fused", "")) or str(frag).count("*") > 1


def _ring_positions(ring_atoms, ring_elements):
    ring_atoms = [int(a) for a in ring_atoms]
    if len(ring_atoms) != 6 or len(set(ring_atoms)) != 6:
        raise ChairqmError(f"ring atoms {ring_atoms} must be six distinct atom indices in ring order")
    ring_elements = [str(e) for e in ring_elements]
    if len(ring_elements) != 6:
        raise ChairqmError(f"ring elements {ring_elements} must name the six ring atoms in ring order")
    return ring_atoms, ring_elements


def _ring_distance(i: int, j: int) -> int:
    d = abs(i - j) % 6
    return min(d, 6 - d)


def outside_reasons(ring_atoms, ring_elements, substituents, qm_a_values=None) -> list[str]:
    """Why a molecule lies outside the additive model (empty list if it lies inside), in words.

    Checks: geminal pairs; ring heteroatoms bonded to, 1,3 to, or carrying a substituted position;
    charged groups; groups with neither a tabulated nor a QM-derived A-value. (Syn-1,3-diaxial pairs
    other than Me/Me depend on the chairs and are checked in `additive_estimate`.)
    """
    ring_atoms, ring_elements = _ring_positions(ring_atoms, ring_elements)
    subs = _as_substituents(substituents)
    qm = {avalues.canonical_fragment(k): float(v) for k, v in (qm_a_values or {}).items()}
    pos = {a: k for k, a in enumerate(ring_atoms)}
    reasons = []
    by_atom: dict[int, list[str]] = {}
    for s in subs:
        if s.ring_atom not in pos:
            raise ChairqmError(f"substituent {s.id} sits on atom {s.ring_atom}, which is not a ring atom {ring_atoms}")
        by_atom.setdefault(s.ring_atom, []).append(s.id)
    for atom, ids in by_atom.items():
        if len(ids) > 1:
            reasons.append(f"geminal groups {' and '.join(ids)} on ring atom {atom}: A-values are not "
                           "additive on one ring atom")
    for atom, ids in by_atom.items():
        k = pos[atom]
        el = ring_elements[k]
        if el != "C":
            reasons.append(f"{' and '.join(ids)} {'sits' if len(ids) == 1 else 'sit'} on the ring {el} atom "
                           f"{atom}: cyclohexane A-values do not describe a group on a ring heteroatom")
            continue
        near = [(ring_atoms[m], ring_elements[m], _ring_distance(k, m)) for m in range(6)
                if ring_elements[m] != "C" and _ring_distance(k, m) in (1, 2)]
        for a, e, dist in near:
            where = "bonded to" if dist == 1 else "in the syn-axial (1,3) position of"
            reasons.append(f"ring {e} atom {a} is {where} the substituted ring atom {atom} "
                           f"({', '.join(ids)}): cyclohexane A-values do not apply there")
    fusions = [s for s in subs if is_fusion(s)]
    if fusions:
        reasons.append(f"{' and '.join(s.id for s in fusions)} {'is' if len(fusions) == 1 else 'are'} the "
                       "bond(s) into a fused ring: a fused ring system flips (or is locked) as a whole, which "
                       "cyclohexane A-values do not describe")
    subs = [s for s in subs if not is_fusion(s)]
    for s in subs:
        if _is_charged(s):
            reasons.append(f"{s.id} ({s.fragment}) is a charged group: its conformational energy depends on "
                           "the counter-ion and solvent, which the model does not describe")
    for s in subs:
        if s.fragment == "[*][H]" or _is_charged(s):
            continue
        if avalues.lookup(s.fragment) is None and s.fragment not in qm:
            reasons.append(f"{s.id} ({s.fragment}) has neither a tabulated nor a QM-derived A-value")
    return reasons


# ------------------------------------------------------------------------------ the estimate

def _check_chairs(subs, chair_a, chair_b):
    a, b = parse_orientation(chair_a), parse_orientation(chair_b)
    ids = [s.id for s in subs]
    for name, c in (("first", a), ("second", b)):
        if set(c) != set(ids):
            raise ChairqmError(f"the {name} chair's orientation names {sorted(c, key=_id_key)} but the ring "
                               f"has substituents {ids}: give every substituent's orientation")
        bad = {k: v for k, v in c.items() if v not in RING_FLIP}
        if bad:
            raise ChairqmError(f"chair orientation labels must be 'axial' or 'equatorial', got {bad}")
    wrong = [i for i in ids if a[i] != RING_FLIP[b[i]]]
    if wrong:
        raise ChairqmError(f"the two chairs are not ring-flip partners ({', '.join(wrong)} keep their "
                           "orientation): pass a chair and the chair with every label swapped")
    return a, b


def _chair_terms(chair, subs, pos, values):
    """[(description, kcal)] of G_add(chair); values: id -> (A, label). Returns (terms, outside_reasons)."""
    terms, outside = [], []
    axial = [s for s in subs if chair[s.id] == "axial"]
    for s in axial:
        a, label = values[s.id]
        terms.append((f"A({s.id} {s.fragment}) = {a:.2f} ({label}), {s.id} axial", a))
    for i, s in enumerate(subs):
        for t in subs[i + 1:]:
            dist = _ring_distance(pos[s.ring_atom], pos[t.ring_atom])
            if dist == 2 and chair[s.id] == chair[t.id] == "axial":
                if s.fragment == METHYL and t.fragment == METHYL:
                    a1, a2 = values[s.id][0], values[t.id][0]
                    terms.append((f"syn-1,3-diaxial Me/Me {s.id}/{t.id}: {SYN_DIAXIAL_ME_ME_KCAL} "
                                  "(Allinger and Miller, J. Am. Chem. Soc. 1961, 83, 2145)",
                                  SYN_DIAXIAL_ME_ME_KCAL))
                    terms.append((f"minus the two Me/H syn-axial halves already in A({s.id}) and A({t.id}): "
                                  f"-({a1:.2f} + {a2:.2f})/2 (common practice)", -(a1 + a2) / 2.0))
                else:
                    outside.append(f"syn-1,3-diaxial pair {s.id}/{t.id} ({s.fragment} / {t.fragment}): the model "
                                   "has a published pair term only for Me/Me")
            elif dist == 1 and chair[s.id] == chair[t.id] == "equatorial":
                terms.append((f"gauche {s.id}/{t.id} vicinal equatorial-equatorial: {GAUCHE_EE_KCAL} "
                              "(common practice)", GAUCHE_EE_KCAL))
    return terms, outside


def _value_sets(subs, qm):
    """id -> (A, label) for the primary (tabulated, else QM-derived), tabulated-only and QM-preferring
    (QM-derived where given, else tabulated) variants; a variant is None when it cannot be formed."""
    primary, tab, qmv, used_qm = {}, {}, {}, []
    tab_ok, any_qm = True, False
    for s in subs:
        row = avalues.lookup(s.fragment)
        tv = None if row is None else (float(row["a_value_kcal"]), f"tabulated: {_short_source(row)}")
        qv = (qm[s.fragment], "QM-derived") if s.fragment in qm else None
        primary[s.id] = tv if tv is not None else qv
        if tv is None:
            used_qm.append(s)
            tab_ok = False
        else:
            tab[s.id] = tv
        if qv is not None:
            any_qm = True
        qmv[s.id] = qv if qv is not None else tv
    return primary, (tab if tab_ok else None), (qmv if any_qm else None), used_qm


def additive_estimate(ring_atoms, ring_elements, substituents, chair_a, chair_b,
                      qm_a_values: dict | None = None) -> AdditiveEstimate:
    """The additive estimate between the two chairs `chair_a` and `chair_b` (ring-flip partners).

    ring_atoms: the six ring atom indices in ring order; ring_elements: their element symbols;
    substituents: objects or dicts with id, ring_atom, fragment, charge (chairqm.molecule.Substituent
    or `RingSubstituent`); chair_a, chair_b: orientation strings or dicts ('s1=axial;s2=equatorial');
    qm_a_values: {fragment: QM-derived A-value in kcal/mol} for groups without a tabulated value (or to
    compare with the tabulated one). See the module docstring for the model, its pair terms and limits.
    """
    ring_atoms, ring_elements = _ring_positions(ring_atoms, ring_elements)
    subs = _as_substituents(substituents)
    qm = {}
    for k, v in (qm_a_values or {}).items():
        if v is None or not math.isfinite(float(v)):
            continue
        qm[avalues.canonical_fragment(k)] = float(v)
    a, b = _check_chairs(subs, chair_a, chair_b)
    pos = {at: k for k, at in enumerate(ring_atoms)}
    reasons = outside_reasons(ring_atoms, ring_elements, subs, qm)
    if reasons:
        return AdditiveEstimate(None, None, None, None, "outside-model", "; ".join(reasons))

    primary, tab, qmv, used_qm = _value_sets(subs, qm)
    ta, out_a = _chair_terms(a, subs, pos, primary)
    tb, out_b = _chair_terms(b, subs, pos, primary)
    if out_a or out_b:
        return AdditiveEstimate(None, None, None, None, "outside-model", "; ".join(out_a + out_b))
    ga, gb = sum(v for _, v in ta), sum(v for _, v in tb)
    if gb < ga:
        pref, second, tp, ts, gp, gs = b, a, tb, ta, gb, ga
    else:
        pref, second, tp, ts, gp, gs = a, b, ta, tb, ga, gb
    terms = [(f"{d} in the second chair", v) for d, v in ts] + \
            [(f"{d} in the preferred chair", -v) for d, v in tp]

    def variant(values):
        if values is None:
            return None
        tp_, _ = _chair_terms(pref, subs, pos, values)
        ts_, _ = _chair_terms(second, subs, pos, values)
        return sum(v for _, v in ts_) - sum(v for _, v in tp_)

    words = []
    if used_qm:
        source = "qm-derived"
        words.append("QM-derived A-value(s) for " + ", ".join(f"{s.id} {s.fragment}" for s in used_qm)
                     + " (no tabulated value); tabulated values for the rest")
    else:
        source = "tabulated"
        words.append("tabulated A-values for every group" if subs else "no substituents: the two chairs are the same")
    hetero = sorted({e for e in ring_elements if e != "C"})
    if hetero:
        words.append(f"ring contains {', '.join(hetero)} away from the substituted atoms; cyclohexane A-values used")
    if any("gauche" in d for d, _ in terms):
        words.append(f"gauche term {GAUCHE_EE_KCAL} kcal/mol for each vicinal equatorial-equatorial pair")
    if any("syn-1,3-diaxial" in d for d, _ in terms):
        words.append(f"syn-1,3-diaxial Me/Me term {SYN_DIAXIAL_ME_ME_KCAL} kcal/mol (Allinger and Miller 1961)")
    return AdditiveEstimate(dg_kcal=gs - gp,
                            preferred_axial=";".join(k for k, v in pref.items() if v == "axial"),
                            preferred_orientation=format_orientation(pref),
                            second_orientation=format_orientation(second),
                            source=source, reason="; ".join(words), terms=terms,
                            tabulated_dg_kcal=variant(tab), qm_dg_kcal=variant(qmv))


def estimate_for(perceived, chair_a, chair_b, qm_a_values: dict | None = None) -> AdditiveEstimate:
    """`additive_estimate` for a chairqm.molecule.Perceived (uses its ring, ring_elements, substituents)."""
    return additive_estimate(perceived.ring, perceived.ring_elements, perceived.substituents,
                             chair_a, chair_b, qm_a_values)


# ------------------------------------------------------------------------------ disagreement flag

def _describe_chair(axial: set[str], ids: list[str]) -> str:
    if not ids:
        return "the (only) chair"
    return ", ".join(f"{i} {'axial' if i in axial else 'equatorial'}" for i in ids)


def disagreement(computed_preferred, computed_dg, additive: AdditiveEstimate, non_chair_population,
                 threshold_kcal: float = 1.0, non_chair_threshold: float = 0.05,
                 tie_kcal: float = 0.05) -> tuple[bool, str]:
    """(flag, reason): does the computed chair equilibrium disagree with the additive estimate?

    computed_preferred: the computed preferred chair, as its axial ids ('s1;s2', '' for none; as
    chair_summary's preferred_chair_axial) or as an orientation string. computed_dg: the computed chair
    gap G(second) - G(preferred) >= 0 in kcal/mol (None if unknown). Flag rules, every one that applies
    is reported (joined by '; '):
      1. outside the additive model (the estimate's reason);
      2. the computed preferred chair differs from the additive one (ignored when either gap is below
         `tie_kcal`, where the chairs are degenerate, e.g. cis-1,4-dimethylcyclohexane);
      3. |ΔG_computed - ΔG_additive| > threshold_kcal, with both gaps on the additive estimate's axis;
      4. non-chair families hold more than `non_chair_threshold` of the population;
      5. the computed gap is unknown while the molecule is inside the model.
    The reason is '' when nothing is flagged.
    """
    thr, nct, tie = float(threshold_kcal), float(non_chair_threshold), float(tie_kcal)
    if not math.isfinite(thr) or thr <= 0:
        raise ChairqmError(f"disagreement threshold {threshold_kcal} kcal/mol must be a positive number")
    if not math.isfinite(nct) or not 0 < nct < 1:
        raise ChairqmError(f"non-chair population threshold {non_chair_threshold} must lie between 0 and 1")
    reasons = []
    if additive.outside_model:
        reasons.append(f"outside the additive model: {additive.reason}")
    else:
        ids = list(parse_orientation(additive.preferred_orientation))
        add_axial = _id_set(additive.preferred_axial)
        if isinstance(computed_preferred, dict) or (isinstance(computed_preferred, str) and "=" in computed_preferred):
            comp_axial = {k for k, v in parse_orientation(computed_preferred).items() if v == "axial"}
        else:
            comp_axial = _id_set(computed_preferred)
        comp_axial &= set(ids)
        known = computed_dg is not None and math.isfinite(float(computed_dg))
        if not known:
            reasons.append("the computed chair gap is unknown (the ring-flip partner chair was not found "
                           "among the minima), so the additive estimate cannot be checked")
        else:
            cdg, adg = float(computed_dg), float(additive.dg_kcal)
            same = comp_axial == add_axial
            add_words = _describe_chair(add_axial, ids)
            comp_words = _describe_chair(comp_axial, ids)
            if adg < tie or cdg < tie:
                signed = cdg if (same or adg < tie) else -cdg
            else:
                signed = cdg if same else -cdg
            if not same and adg >= tie and cdg >= tie:
                reasons.append(f"the computed preferred chair has {comp_words} (by {cdg:.1f} kcal/mol) but the "
                               f"additive estimate prefers {add_words} (by {adg:.1f} kcal/mol)")
            diff = abs(signed - adg)
            if diff > thr:
                if signed >= 0:
                    comp_txt = f"computed chair gap is {cdg:.1f} kcal/mol"
                else:
                    comp_txt = f"the computation prefers {comp_words} by {cdg:.1f} kcal/mol"
                reasons.append(f"additive estimate prefers {add_words} by {adg:.1f} kcal/mol but {comp_txt} "
                               f"(difference {diff:.1f} > {thr:.1f})")
    ncp = float(non_chair_population) if non_chair_population is not None else 0.0
    if ncp > nct:
        reasons.append(f"non-chair families hold {100 * ncp:.1f} % of the population "
                       f"(more than {100 * nct:.0f} %)")
    return bool(reasons), "; ".join(reasons)


# ------------------------------------------------------------------------------ same-method additivity

#: kcal/mol, the spread of one computed A-value about experiment when no calibration matches the run:
#: the packaged gas-phase calibration's residual SD (docs/accuracy.md: 0.261), rounded up
DEFAULT_GROUP_SD_KCAL = 0.3


@dataclass
class SameMethod:
    """The chair gap the run's own A-values predict, and what the computed gap adds to it."""
    dg_kcal: float | None             # G(second computed chair) - G(preferred computed chair), additive
    interaction_kcal: float | None    # computed gap minus dg_kcal
    uncertainty_kcal: float | None    # 95 % half-width of interaction_kcal
    missing: list = field(default_factory=list)      # groups without a same-method A-value
    carriers: list = field(default_factory=list)     # the pairs and positions that may carry it, in words
    terms: list = field(default_factory=list)        # (description, kcal/mol)


def _carriers(ring_atoms, ring_elements, subs, moving) -> list[str]:
    """In words, where a non-additive term can sit: pairs of groups that change orientation together
    (geminal, vicinal, 1,3 — syn when both are axial in one chair) and groups next to a ring heteroatom
    or on a ring N."""
    pos = {a: k for k, a in enumerate(ring_atoms)}
    out = []
    for i, s in enumerate(subs):
        for t in subs[i + 1:]:
            if s.id not in moving and t.id not in moving:
                continue
            d = _ring_distance(pos[s.ring_atom], pos[t.ring_atom])
            if d == 0:
                out.append(f"geminal pair {s.id}/{t.id}")
            elif d == 1:
                out.append(f"vicinal pair {s.id}/{t.id}")
            elif d == 2:
                out.append(f"1,3 pair {s.id}/{t.id} (syn-diaxial in one chair when cis)")
    for s in subs:
        k = pos[s.ring_atom]
        if ring_elements[k] != "C":
            out.append(f"{s.id} on the ring {ring_elements[k]} atom {s.ring_atom}")
            continue
        for m in range(6):
            if ring_elements[m] != "C" and _ring_distance(k, m) in (1, 2):
                where = "next to" if _ring_distance(k, m) == 1 else "1,3 to"
                out.append(f"{s.id} {where} the ring {ring_elements[m]} atom {ring_atoms[m]}")
    return out


def same_method(ring_atoms, ring_elements, substituents, preferred, second, computed_dg, qm_a_values,
                group_sd_kcal: float = DEFAULT_GROUP_SD_KCAL) -> SameMethod:
    """The same-method additive chair gap and the interaction (chairqm's own non-additivity measure).

    preferred, second: the computed preferred chair and its ring-flip partner (orientation strings, the
    chair-defining groups only, as chairqm.ensemble.chair_summary gives them); computed_dg: the computed
    gap G(second) - G(preferred) (None: unknown); qm_a_values: {fragment: A-value computed with the run's
    own settings (its monosubstituted cyclohexane)}.

    dg = sum over the groups of A * (axial in second - axial in preferred): A-values only, no pair terms,
    so that the interaction (computed - dg) is everything that is not additive — syn-1,3-diaxial and
    gauche pairs, geminal effects, ring heteroatoms. Its 95 % half-width: 1.96 * group_sd * sqrt(n + 1)
    for n A-values that enter (each reference ring and the molecule itself carry about one group's
    residual spread; the method's systematic error largely cancels between the molecule and its
    reference rings, which is the point of a same-method comparison).
    """
    ring_atoms, ring_elements = _ring_positions(ring_atoms, ring_elements)
    subs = [s for s in _as_substituents(substituents) if not is_fusion(s) and s.fragment != "[*][H]"]
    pref = parse_orientation(preferred) if isinstance(preferred, str) else dict(preferred or {})
    sec = parse_orientation(second) if isinstance(second, str) else dict(second or {})
    qm = {}
    for k, v in (qm_a_values or {}).items():
        if v is not None and math.isfinite(float(v)):
            qm[avalues.canonical_fragment(k)] = float(v)
    terms, missing, moving = [], [], set()
    for s in subs:
        if s.id not in pref or s.id not in sec:
            continue                     # not a chair-defining group (e.g. on a ring N, which inverts)
        change = (sec[s.id] == "axial") - (pref[s.id] == "axial")
        if change == 0:
            continue
        moving.add(s.id)
        if s.fragment not in qm:
            missing.append(f"{s.id} {s.fragment}")
            continue
        terms.append((f"A({s.id} {s.fragment}) = {qm[s.fragment]:.2f}, {s.id} axial in the "
                      f"{'second' if change > 0 else 'preferred'} chair", change * qm[s.fragment]))
    carriers = _carriers(ring_atoms, ring_elements, subs, moving)
    if missing or not moving and not pref:
        return SameMethod(None, None, None, missing, carriers, terms)
    dg = float(sum(v for _, v in terms))
    u = 1.96 * float(group_sd_kcal) * math.sqrt(len(terms) + 1)
    inter = None if computed_dg is None else float(computed_dg) - dg
    return SameMethod(dg, inter, u, missing, carriers, terms)


def interaction_flag(sm: SameMethod, threshold_kcal: float, tie_kcal: float = 0.05,
                     ring_elements=None) -> tuple[bool, str]:
    """(flag, reason) about additivity: the interaction exceeds its uncertainty (and the configurable
    threshold), or the same-method additive estimate prefers the other chair. Never about the method
    against experiment."""
    if sm.dg_kcal is None or sm.interaction_kcal is None:
        return False, ""
    limit = max(float(sm.uncertainty_kcal or 0.0), float(threshold_kcal))
    where = ("; carried by " + ", ".join(sm.carriers)) if sm.carriers else ""
    hetero = sorted({e for e in (ring_elements or []) if e != "C"})
    reasons = []
    if sm.dg_kcal < -tie_kcal and abs(sm.interaction_kcal) > tie_kcal:
        reasons.append(f"the run's own A-values prefer the other chair (additive {sm.dg_kcal:+.2f} kcal/mol on "
                       "the computed chairs' axis)")
    if abs(sm.interaction_kcal) > limit:
        what = (f"the cyclohexane A-values do not transfer to this {'/'.join(hetero)} ring" if hetero and not
                any("pair" in c for c in sm.carriers) else "non-additive")
        reasons.append(f"{what}: interaction {sm.interaction_kcal:+.2f} ± {sm.uncertainty_kcal:.2f} kcal/mol "
                       f"beyond the same-method additive gap {sm.dg_kcal:.2f} (limit {limit:.2f}){where}")
    if reasons:
        return True, "; ".join(reasons)
    verdict = ("the cyclohexane A-values transfer to this ring" if hetero else "additive")
    return False, (f"{verdict} within {limit:.2f} kcal/mol: interaction {sm.interaction_kcal:+.2f} ± "
                   f"{sm.uncertainty_kcal:.2f} against the same-method additive gap {sm.dg_kcal:.2f}"
                   + (f" (checked: {', '.join(sm.carriers)})" if sm.carriers else ""))
