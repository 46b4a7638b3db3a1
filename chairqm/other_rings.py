"""Rings inside groups: the states each is seeded in, as torsion restraints for the force-field relaxation.

A six-membered ring inside a substituent (morpholino, piperidino, cyclohexyl) is seeded in both chairs
and, in each, with its link to the analysed ring equatorial and axial (a ring N inverts, so the chair
alone does not decide where the link sits); a pyramidal ring N of that ring other than the link atom
(the N–H of piperidin-4-yl, the N-methyl of 1-methylpiperidin-4-yl) is inverted in a copy of each seed
(:func:`invert_nitrogen`, used by chairqm.seeds), since N inversion is part of the conformer and the
force field keeps whichever side the embedding happened to give; a four-membered one (cyclobutyl, oxetanyl, azetidinyl) in
both puckers. A ring fused to the analysed ring is not restrained: the analysed ring's form decides its
chair (or envelope), which the embedding and the force field find. chairqm.seeds adds each restraint set
to the analysed ring's own.

An unfused five-membered ring in a group (cyclopentyl, tetrahydrofuranyl, pyrrolidinyl) is seeded as the
two envelopes with its link atom as the flap, up and down (link pseudo-equatorial and pseudo-axial).

A restraint set is a list of items: (ring atoms, target torsions) restrains every ring torsion within
chairqm.seeds.RING_TORSION_TOL of its target; ("torsion", (i, j, k, l), low, high) one torsion to a range.
"""

from __future__ import annotations

import itertools
import math

import numpy as np

from . import ring as ringgeo
from .chem import covalent_bond_length

FOUR_RING_TORSION = 20.0    # deg, puckered cyclobutane's ring torsion magnitude (20-27 deg, from memory)


def _envelope_torsions(flap_height: float = 0.8, bond: float = 1.53) -> np.ndarray:
    """Ring torsions (torsion j: atoms j..j+3) of a five-membered envelope with atom 0 as the flap: atoms 1-4
    on a regular pentagon (bond `bond` Å) in a plane, atom 0 lifted by `flap_height` Å (0.8 Å gives torsions
    of 0, ±29 and ±41 deg; cyclopentane's envelope has about 0, ±26 and ±42, from memory)."""
    radius = bond / (2.0 * np.sin(np.pi / 5.0))
    ang = 2.0 * np.pi * np.arange(5) / 5.0
    x = np.stack([radius * np.cos(ang), radius * np.sin(ang), np.zeros(5)], axis=1)
    x[0, 2] = flap_height
    return np.array([ringgeo.dihedral(*(x[(j + i) % 5] for i in range(4))) for j in range(5)])


ENVELOPE_TORSIONS = np.round(_envelope_torsions(), 2)


def restraint_sets(mol, others, chairs, max_sets: int) -> tuple[list, int]:
    """(sets, total): one restraint set per combination of the other rings' states, the first `max_sets`
    of them, and how many combinations there are in all (ring N inversion is seeded by copies, not sets;
    see :func:`truncation_note`); ([[]], 1) when the molecule has no other ring. `others`:
    chairqm.molecule.Perceived.other_rings; `chairs`: the two chair templates as (Q, theta, phi).

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
        if len(r0) == 5 and not o.get("fused"):
            # two envelopes with the flap at the link atom, up and down (link pseudo-equatorial in one,
            # pseudo-axial in the other); pseudorotation may carry either on to a twist in the optimisation
            k = r0.index(int(o["link_atom"]))
            r = r0[k:] + r0[:k]
            per_ring.append([[(r, sg * ENVELOPE_TORSIONS)] for sg in (1.0, -1.0)])
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
            for side in _sides(tors, r, int(o["link_to"])):
                states.append([(r, tors), side])
        per_ring.append(states)
    if not per_ring:
        return [[]], 1
    total = math.prod(len(states) for states in per_ring)
    sets = [[x for part in c for x in part] for c in itertools.islice(itertools.product(*per_ring), max_sets)]
    return sets, total


def _sides(tors, r, x: int) -> list:
    """The equatorial and the axial restraint of the exocyclic bond r[0]–x in a chair with ring torsions
    `tors` (torsion i runs over r[i], r[i+1], r[i+2], r[i+3]): with A = r[0], B, C the next two ring atoms
    and τ the ring torsion F–A–B–C (torsion 5), the equatorial bond is anti to C (X–A–B–C ≈ sign(τ)·175°)
    and the axial one gauche (≈ −sign(τ)·65°), ideal tetrahedral geometry."""
    sign = 1.0 if tors[5] > 0 else -1.0
    t = (int(x), r[0], r[1], r[2])
    return [("torsion", t, *sorted((sign * 160.0, sign * 180.0))),
            ("torsion", t, -sign * 65.0 - 15.0, -sign * 65.0 + 15.0)]


def inverting_nitrogens(mol, ring, link_atom: int) -> list[tuple[int, int]]:
    """(ring N, its exocyclic neighbour) for every pyramidal ring N of an other ring besides its link atom:
    three neighbours, one outside the ring (H or a group), no neighbour with a double or aromatic bond
    (an amide, carbamate or N-aryl N is planar and has no axial or equatorial side)."""
    ring = [int(a) for a in ring]
    out = []
    for a in ring:
        atom = mol.GetAtomWithIdx(a)
        if a == int(link_atom) or atom.GetAtomicNum() != 7 or atom.GetDegree() != 3 or atom.GetFormalCharge():
            continue
        if atom.GetIsAromatic() or any(n.GetIsAromatic() or any(b.GetBondTypeAsDouble() > 1.0 for b in n.GetBonds())
                                       for n in atom.GetNeighbors()):
            continue
        exo = [n.GetIdx() for n in atom.GetNeighbors() if n.GetIdx() not in ring]
        if len(exo) == 1:
            out.append((a, exo[0]))
    return out


def invert_nitrogen(mol, positions, ring, n: int, x: int):
    """A copy of `positions` with ring atom `n` inverted: its exocyclic neighbour `x` and every atom behind
    it reflected through the plane of `n` and its two ring neighbours (bond lengths and angles kept; the
    ring untouched). None when the exocyclic branch holds a stereocentre (its mirror image would be the
    other configuration) or reaches back into the ring."""
    ring = [int(a) for a in ring]
    k = ring.index(int(n))
    a, b = ring[k - 1], ring[(k + 1) % len(ring)]
    branch, todo = {int(x)}, [int(x)]
    while todo:
        i = todo.pop()
        for nb in mol.GetAtomWithIdx(i).GetNeighbors():
            j = nb.GetIdx()
            if j == int(n) or j in branch:
                continue
            if j in ring:
                return None
            branch.add(j)
            todo.append(j)
    from rdkit import Chem
    if any(mol.GetAtomWithIdx(i).GetChiralTag() != Chem.ChiralType.CHI_UNSPECIFIED for i in branch):
        return None
    X = np.array(positions, dtype=float)
    p0 = X[int(n)]
    normal = np.cross(X[a] - p0, X[b] - p0)
    normal /= np.linalg.norm(normal)
    idx = sorted(branch)
    d = (X[idx] - p0) @ normal
    X[idx] = X[idx] - 2.0 * d[:, None] * normal[None, :]
    return X


def truncation_note(kept: int, total: int) -> str:
    """'' when every combination was seeded, else the words that say how many were (seeds.csv reasons)."""
    if total <= kept:
        return ""
    return (f"other rings: {kept} of {total} combinations of their states seeded "
            f"(seeds.MAX_OTHER_RING_SETS); the others were not tried")
