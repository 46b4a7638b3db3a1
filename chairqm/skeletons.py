"""Ring templates and skeletons for chairqm.seeds: steps 1 and 2 of its recipe, the geometry before embedding.

* Ring templates (`TEMPLATES`): two chairs (Cremer–Pople theta = 0 and 180 deg) and the six twist-boats of
  the pseudorotation cycle (theta = 90 deg, phi = 30 + k*60 deg), built by `ring.ring_from_pucker` with
  bond lengths from RDKit's covalent radii (`_template_ring`).  The amplitudes (CHAIR_Q, TWIST_Q) are those
  of MMFF94-relaxed cyclohexane measured on this machine (0.553 and 0.717 Å), rounded.
* Skeletons (`_skeleton`): each ring atom's exocyclic neighbours on the template's two tetrahedral slots,
  one "up" and one "down"; a trigonal exocyclic atom (C=O, C=CH2) and the exocyclic bond of a planar ring
  N on the bisector in the ring atom's plane; an N-aryl ring N tilted by N_ARYL_TILT towards the chosen
  slot.  `_choices` says where up/down is free and where the input's chirality decides it; `_fix_stereo`
  flips the stereo-fixed positions until RDKit perceives the input's tags on the skeleton (`_ring_tags`).
* Fused rings (`_fusion_pairs`): `_unspannable_fusion` screens a skeleton whose two bonds into a fused
  ring are anti-periplanar (beyond FUSION_MAX_TORSION: a trans fusion in the wrong chair), and
  `_fused_chairs` gives the torsion restraints that hold a fused six-membered ring in the one chair the
  fusion allows while the seed is relaxed.

`ctx` is chairqm.seeds' molecule-level context (its mol, ring, exo, ranks, ref_tags, planar, tilted,
subs and others).  Every name here is importable from chairqm.seeds as well.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from rdkit import Chem

from . import chem
from . import ring as ringgeo
from .molecule import is_trigonal_exocyclic

CHAIR_Q = 0.55          # Å, template amplitude of the chairs (MMFF94 cyclohexane chair: 0.553 Å, measured)
TWIST_Q = 0.72          # Å, template amplitude of the twist-boats (MMFF94 cyclohexane twist-boat: 0.717 Å)
# An N-aryl ring N is a shallow pyramid (about 20 deg from planar, common practice): its exocyclic bond is
# seeded tilted this fraction of the way from the in-plane bisector towards each tetrahedral slot (0.35:
# about 18 deg, the largest tilt RDKit's embedding accepts for an sp2 N, tried here on N-phenylpiperidine).
N_ARYL_TILT = 0.35
# deg: two bonds into a fused five- or six-membered ring on adjacent ring atoms can be gauche (cis- or
# trans-diequatorial fusion, |torsion| near 60) but not anti (trans-diaxial, near 180); beyond this the
# template is screened as locked (the ring's own torsion inside the fused ring could not be closed)
FUSION_MAX_TORSION = 150.0
# numpy's results can differ in the last bits between processes: templates and skeletons are rounded
# (see chairqm.seeds, DECIMALS_*)
DECIMALS_TEMPLATE = 6       # Å, templates and skeletons


@dataclass(frozen=True)
class Template:
    """A ring template: name, intended form and Cremer–Pople (q [Å], theta, phi [deg])."""
    name: str
    form: str
    q: float
    theta: float
    phi: float


TEMPLATES = (
    [Template("chair-1", "chair", CHAIR_Q, 0.0, 0.0), Template("chair-2", "chair", CHAIR_Q, 180.0, 0.0)]
    + [Template(f"tb-{k + 1}", "twist-boat", TWIST_Q, 90.0, 30.0 + 60.0 * k) for k in range(6)]
)


# ---- small geometry helpers -------------------------------------------------------------------------
def _bond_length(mol, i, j) -> float:
    return chem.covalent_bond_length(mol, i, j)


# ---- skeletons --------------------------------------------------------------------------------------
def _template_ring(ctx, tpl: Template) -> np.ndarray:
    lengths = [_bond_length(ctx.mol, ctx.ring[k], ctx.ring[(k + 1) % 6]) for k in range(6)]
    return np.round(ringgeo.ring_from_pucker(tpl.q, tpl.theta, tpl.phi, lengths), DECIMALS_TEMPLATE) + 0.0


def _skeleton(ctx, X, choice) -> dict:
    """Positions of ring atoms and their exocyclic neighbours; choice[k] = 1 swaps up/down at position k."""
    pos = {}
    for k, a in enumerate(ctx.ring):
        pos[a] = X[k]
        if len(ctx.exo[k]) == 1 and (is_trigonal_exocyclic(ctx.mol, a, ctx.exo[k][0])
                                     or (k in ctx.planar and k not in ctx.tilted)):
            # C=O, C=CH2, and the one exocyclic bond of a planar ring N (amide, carbamate, urea): in the
            # plane of the ring atom and its two ring neighbours, on their bisector
            d = (X[k] - X[k - 1]) + (X[k] - X[(k + 1) % 6])
            e = ctx.exo[k][0]
            pos[e] = np.round(X[k] + _bond_length(ctx.mol, a, e) * d / np.linalg.norm(d), DECIMALS_TEMPLATE)
            continue
        d1, d2 = ringgeo.exocyclic_slots(X, list(range(6)), k)
        up, down = (d1, d2) if d1[2] >= d2[2] else (d2, d1)
        slots = (down, up) if choice[k] else (up, down)
        if k in ctx.tilted:
            # N-aryl: a shallow pyramid, tilted from the bisector towards the chosen slot (both are seeded)
            b = (X[k] - X[k - 1]) + (X[k] - X[(k + 1) % 6])
            b = b / np.linalg.norm(b)
            d = b + N_ARYL_TILT * (slots[0] - b)
            slots = (d / np.linalg.norm(d),)
        for e, d in zip(ctx.exo[k], slots):
            pos[e] = np.round(X[k] + _bond_length(ctx.mol, a, e) * d, DECIMALS_TEMPLATE)
    return pos


def _ring_tags(ctx, pos) -> dict:
    """Chiral tags RDKit perceives at the ring atoms from skeleton positions."""
    X = np.zeros((ctx.mol.GetNumAtoms(), 3))       # atoms off the skeleton stay at the origin
    for i, p in pos.items():
        X[int(i)] = p
    tmp = chem.with_positions(ctx.mol, X)
    cid = tmp.GetConformer().GetId()
    Chem.AssignAtomChiralTagsFromStructure(tmp, confId=cid, replaceExistingTags=True)
    return {a: tmp.GetAtomWithIdx(a).GetChiralTag() for a in ctx.ring}


def _choices(ctx):
    """(free positions, stereo-fixed positions) of the ring: where up/down of the exocyclic atoms is a
    conformational choice, and where the input's chirality decides it."""
    free, fixed = [], []
    for k, a in enumerate(ctx.ring):
        e = ctx.exo[k]
        if not e:
            continue
        if a in ctx.ref_tags:
            fixed.append(k)
        elif len(e) == 2 and ctx.ranks[e[0]] == ctx.ranks[e[1]]:
            continue
        elif len(e) == 1 and (is_trigonal_exocyclic(ctx.mol, a, e[0]) or (k in ctx.planar and k not in ctx.tilted)):
            continue                    # C=O, C=CH2, planar N: the optimisation decides its pyramidality
        else:
            free.append(k)
    return free, fixed


def _fix_stereo(ctx, X, choice, fixed):
    """Flip the choice at stereo-fixed positions until the skeleton has the input's tags there."""
    choice = list(choice)
    tags = _ring_tags(ctx, _skeleton(ctx, X, choice))
    for k in fixed:
        if tags[ctx.ring[k]] != ctx.ref_tags[ctx.ring[k]]:
            choice[k] = 1
    tags = _ring_tags(ctx, _skeleton(ctx, X, choice))
    bad = [ctx.ring[k] for k in fixed if tags[ctx.ring[k]] != ctx.ref_tags[ctx.ring[k]]]
    return choice, bad


def _fusion_pairs(ctx) -> list:
    """(label, ring atom a, its fused-ring neighbour, ring atom b, its fused-ring neighbour) per fused ring."""
    by_label = {}
    for sub in ctx.subs:
        label = sub.get("fused", "") if isinstance(sub, dict) else getattr(sub, "fused", "")
        if label:
            ra = int(sub["ring_atom"] if isinstance(sub, dict) else sub.ring_atom)
            fa = int(sub["first_atom"] if isinstance(sub, dict) else sub.first_atom)
            by_label.setdefault(label, []).append((ra, fa))
    return [(label, *pairs[0], *pairs[1]) for label, pairs in by_label.items() if len(pairs) == 2]


def _unspannable_fusion(ctx, pos) -> str:
    """Why a skeleton cannot be built ('' if it can): the two bonds into a fused ring are anti-periplanar
    (|torsion| above FUSION_MAX_TORSION), as both fusion bonds of a trans-fused ring are in the other
    chair, and a five- or six-membered ring cannot span them. This is the ring-flip lock of the
    trans-decalins and trans-hydrindanes."""
    for label, a, fa, b, fb in _fusion_pairs(ctx):
        if not all(i in pos for i in (a, fa, b, fb)):
            continue
        tau = chem.dihedral(pos[fa], pos[a], pos[b], pos[fb])
        if abs(tau) > FUSION_MAX_TORSION:
            size = len(next((o["atoms"] for o in ctx.others if o["label"] == label), ()))
            return (f"locked: the bonds into the fused ring {label} would be anti-periplanar here (torsion "
                    f"{tau:.0f} deg), which a {size}-membered ring cannot span (trans ring fusion: this ring "
                    "form cannot be reached)")
    return ""


def _fused_chairs(ctx, pos) -> list:
    """Restraints for each fused six-membered ring: the chair whose torsion about the shared bond has the
    sign the analysed ring's template gives it (fa–a–b–fb on the skeleton), i.e. the one chair the
    fusion allows in this form; left unrestrained, the embedding often leaves it a twist-boat."""
    out = []
    chairs = [(t.q, t.theta, t.phi) for t in TEMPLATES if t.form == "chair"]
    for label, a, fa, b, fb in _fusion_pairs(ctx):
        o = next((o for o in ctx.others if o["label"] == label), None)
        if o is None or len(o["atoms"]) != 6 or not all(i in pos for i in (a, fa, b, fb)):
            continue
        tau = chem.dihedral(pos[fa], pos[a], pos[b], pos[fb])
        r0 = [int(i) for i in o["atoms"]]
        k = r0.index(fa)
        r = r0[k:] + r0[:k]                       # fa first: torsion 0 is fa-a-b-fb when a follows fa
        if r[1] != a:
            r = [r[0]] + r[1:][::-1]
        lengths = [_bond_length(ctx.mol, r[i], r[(i + 1) % 6]) for i in range(6)]
        for q, theta, phi in chairs:
            tors = np.round(ringgeo.ring_torsions(ringgeo.ring_from_pucker(q, theta, phi, lengths)), 4)
            if tors[0] * tau > 0:
                out.append((r, tors))
                break
    return out
