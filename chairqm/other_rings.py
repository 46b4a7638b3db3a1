"""Rings inside groups: the states each is seeded in, as torsion restraints for the force-field relaxation.

A six-membered ring inside a substituent (morpholino, piperidino, cyclohexyl) is seeded in both chairs
and, in each, with its link to the analysed ring equatorial and axial (a ring N inverts, so the chair
alone does not decide where the link sits); a four-membered one (cyclobutyl, oxetanyl, azetidinyl) in
both puckers. A ring fused to the analysed ring is not restrained: the analysed ring's form decides its
chair (or envelope), which the embedding and the force field find. chairqm.seeds adds each restraint set
to the analysed ring's own.

A restraint set is a list of items: (ring atoms, target torsions) restrains every ring torsion within
chairqm.seeds.RING_TORSION_TOL of its target; ("torsion", (i, j, k, l), low, high) one torsion to a range.
"""

from __future__ import annotations

import itertools

import numpy as np

from . import ring as ringgeo
from .chem import covalent_bond_length

FOUR_RING_TORSION = 20.0    # deg, puckered cyclobutane's ring torsion magnitude (20-27 deg, from memory)


def restraint_sets(mol, others, chairs, max_sets: int) -> list:
    """One restraint set per combination of the other rings' states (at most `max_sets`); [[]] when the
    molecule has no other ring. `others`: chairqm.molecule.Perceived.other_rings; `chairs`: the two chair
    templates as (Q, theta, phi).

    In a chair with ring torsion F–A–B–C = τ at the link atom A (B, C its ring neighbours, X–A the link),
    the equatorial link is anti to C (X–A–B–C ≈ sign(τ)·175°) and the axial one gauche (≈ −sign(τ)·65°),
    ideal tetrahedral geometry; restrained to sign(τ)·[160, 180] and −sign(τ)·(65 ± 15) degrees.
    """
    per_ring = []
    for o in others:
        r0 = [int(a) for a in o["atoms"]]
        if len(r0) == 4:
            # two puckers: ring torsions +τ, −τ, +τ, −τ and the reverse (link pseudo-equatorial in one,
            # pseudo-axial in the other)
            per_ring.append([[(r0, np.array([sg * FOUR_RING_TORSION * (-1) ** j for j in range(4)]))]
                             for sg in (1.0, -1.0)])
            continue
        if o.get("fused"):
            # a fused ring shares a ring torsion with the analysed ring, so the analysed ring's template
            # decides its chair: it is left to the embedding and the force field (restraining it to the
            # other chair only tears the shared bond's torsion apart); its twist forms are not seeded
            continue
        k = r0.index(int(o["link_atom"]))
        r = r0[k:] + r0[:k]                          # the link atom first: torsion 5 is F-A-B-C
        lengths = [covalent_bond_length(mol, r[i], r[(i + 1) % 6]) for i in range(6)]
        states = []
        for q, theta, phi in chairs:
            tors = np.round(ringgeo.ring_torsions(ringgeo.ring_from_pucker(q, theta, phi, lengths)), 4)
            sign = 1.0 if tors[5] > 0 else -1.0
            link = (int(o["link_to"]), r[0], r[1], r[2])
            eq = ("torsion", link, *sorted((sign * 160.0, sign * 180.0)))
            ax = ("torsion", link, -sign * 65.0 - 15.0, -sign * 65.0 + 15.0)
            states += [[(r, tors), eq], [(r, tors), ax]]
        per_ring.append(states)
    if not per_ring:
        return [[]]
    return [[x for part in c for x in part] for c in itertools.product(*per_ring)][:max_sets]


def n_state_sets(others) -> int:
    """How many combinations of the other rings' seeded states exist (before :func:`restraint_sets` keeps
    the first `max_sets`): two per four-membered ring, four per unfused six-membered ring (two chairs,
    link equatorial or axial), fused rings not counted."""
    n = 1
    for o in others:
        if len(o["atoms"]) == 4:
            n *= 2
        elif not o.get("fused") and len(o["atoms"]) == 6:
            n *= 4
    return n


def truncation_note(kept: int, total: int) -> str:
    """'' when every combination was seeded, else the words that say how many were (seeds.csv reasons)."""
    if total <= kept:
        return ""
    return (f"other rings: {kept} of {total} combinations of their states seeded "
            f"(seeds.MAX_OTHER_RING_SETS); the others were not tried")
