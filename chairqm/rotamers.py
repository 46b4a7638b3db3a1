"""Rotamers: the rotatable bonds of a ring's substituents, their start torsions, and the relaxed rotamers of
one ring-level form, merged and screened.

Every rotatable bond of the substituents (:func:`rotatable_bonds`) gets a grid of start torsions
(:func:`rotor_grid`); the product is enumerated (at most `max_rotamer_starts` starts, an evenly spaced
subset beyond that, :func:`start_torsions`).  :func:`enumerate_rotamers` sets each start's torsions on the
base structure of a ring-level form and hands it to the caller's relaxation (chairqm.seeds does the
force-field relaxation with the ring restrained, the measurement and the stereo check).  Starts that reach
the same structure, or one equivalent by a symmetry of the molecule, are merged; of the rest, those more
than `ff_window_kcal` above the lowest rotamer of the form, and those beyond `max_rotamers_per_form` (by
energy), are screened (:func:`screen`).  The window and the cap act within one ring-level form only.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
from rdkit import Chem
from rdkit.Chem import rdMolTransforms

from . import chem

MERGE_RMSD = 0.10           # Å, all-atom RMSD under which two relaxed rotamers are the same structure
MERGE_MAXDEV = 0.30         # Å, and the largest single-atom deviation
MERGE_DE_KCAL = 0.10        # kcal/mol, energy difference beyond which two structures are never merged


def rotor_grid(mol, a: int, b: int) -> list[float]:
    """Start torsions (deg) for a rotatable bond a-b, by hybridisation (common practice: staggered
    minima of sp3-sp3 bonds, six-fold starts for sp3-sp2, planar s-cis/s-trans starts for sp2-sp2;
    offsets keep starts off exact symmetric saddle points)."""
    sp2 = (Chem.HybridizationType.SP2,)
    ha = mol.GetAtomWithIdx(a).GetHybridization() in sp2 or mol.GetAtomWithIdx(a).GetIsAromatic()
    hb = mol.GetAtomWithIdx(b).GetHybridization() in sp2 or mol.GetAtomWithIdx(b).GetIsAromatic()
    if ha and hb:
        return [10.0, 190.0]
    if ha or hb:
        return [15.0, 75.0, 135.0, 195.0, 255.0, 315.0]
    return [60.0, 180.0, 300.0]


def rotatable_bonds(mol, ring, substituents, ranks=None) -> list[tuple[int, int, int, int]]:
    """Rotatable bonds of the substituents as dihedral quadruples (i, a, b, j), a nearer the ring.

    A bond counts if it is single, not in a ring, has a neighbour on both sides, neither end is sp
    (linear), and neither end is a symmetric top (three graph-equivalent outer neighbours: CH3, CF3,
    C(CH3)3; a five- or six-coordinate centre with equivalent ligands: SF5), whose rotation gives no new
    conformer.
    """
    if ranks is None:
        ranks = list(Chem.CanonicalRankAtoms(mol, breakTies=False, includeChirality=False))
    ring = list(ring)
    group = set()
    for s in substituents:
        group.update(int(i) for i in s.atoms)
    if not group:
        return []
    dm = Chem.GetDistanceMatrix(mol)
    dist = dm[:, ring].min(axis=1)
    out = []
    for bond in mol.GetBonds():
        if bond.GetBondType() != Chem.BondType.SINGLE or bond.IsInRing():
            continue
        a, b = bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()
        if dist[a] > dist[b]:
            a, b = b, a
        if b not in group or (a not in group and a not in ring):
            continue
        A, B = mol.GetAtomWithIdx(a), mol.GetAtomWithIdx(b)
        if Chem.HybridizationType.SP in (A.GetHybridization(), B.GetHybridization()):
            continue
        na = [n.GetIdx() for n in A.GetNeighbors() if n.GetIdx() != b]
        nb = [n.GetIdx() for n in B.GetNeighbors() if n.GetIdx() != a]
        if not na or not nb:
            continue
        if len(nb) == 3 and len({ranks[i] for i in nb}) == 1:
            continue
        if len(na) == 3 and len({ranks[i] for i in na}) == 1:
            continue
        if len(nb) >= 4 and len({ranks[i] for i in nb}) == 1:
            # SF5 and the like, also a symmetric top: one start, which chairqm.coordination turns off the
            # mirror-symmetric (saddle-point) positions; grid starts would put it back on them
            continue

        def pick(ns):
            heavy = [i for i in ns if mol.GetAtomWithIdx(i).GetAtomicNum() > 1]
            return min(heavy) if heavy else min(ns)

        out.append((pick(na), a, b, pick(nb)))
    out.sort(key=lambda t: (dist[t[1]], t[1], t[2]))
    return out


def start_torsions(grids, cap: int) -> tuple[list[tuple[float, ...]], int]:
    """(starts, total): the product of the rotors' torsion grids in enumeration order, or, when it has more
    than `cap` points, the `cap` points at evenly spaced positions of that order; total = size of the product."""
    total = int(np.prod([len(g) for g in grids]))
    if total > cap:
        pick = sorted(set(np.round(np.linspace(0, total - 1, cap)).astype(int).tolist()))
    else:
        pick = list(range(total))
    chosen = set(pick)
    starts = [c for n, c in enumerate(itertools.product(*grids)) if n in chosen]
    return starts, total


def set_torsions(mol, positions, rotors, values, decimals: int) -> np.ndarray:
    """`positions` with each rotor's dihedral (i, a, b, j) set to its value (deg) by RDKit
    (``rdMolTransforms.SetDihedralDeg`` moves the side of b), rounded to `decimals`.  `mol` carries the
    structure afterwards (its conformers are replaced)."""
    cid = chem.set_positions(mol, positions)
    conf = mol.GetConformer(cid)
    for (i, a, b, j), v in zip(rotors, values):
        rdMolTransforms.SetDihedralDeg(conf, i, a, b, j, float(v))
    return np.round(np.array(conf.GetPositions()), decimals)


def _ring_index(mol, ring, atom) -> int | None:
    """Index in `ring` of the ring atom nearest `atom` through the bonds (the atom itself if in the ring)."""
    if atom in ring:
        return ring.index(atom)
    best = None
    for k, r in enumerate(ring):
        path = Chem.GetShortestPath(mol, int(atom), int(r))
        if path and (best is None or len(path) < best[0]):
            best = (len(path), k)
    return None if best is None else best[1]


def hbond_chain_starts(mol, positions, rotors, grids, ring, decimals: int) -> list[tuple[str, tuple]]:
    """Starts that point every hydroxy H at the next oxygen around the ring, once in each direction
    ('ring order +1' and '-1'): the cooperative O-H...O chains of a carbohydrate or polyol, which an evenly
    spaced subset of a large torsion grid almost never contains. A rotor counts as hydroxy when its outer
    atom is an O carrying one H (its dihedral ends on that H); its acceptor is the oxygen (a ring O, a
    hydroxy or ether O of a group) nearest in space among those anchored on the next ring position in that
    direction (or the one after). Each hydroxy rotor takes the grid value that brings H closest to its
    acceptor; the other rotors keep their first grid value. Returns [(label, torsion tuple)], without
    duplicates; [] when the molecule has fewer than two hydroxy rotors or no ring order is known."""
    if ring is None or len(rotors) == 0:
        return []
    ring = [int(r) for r in ring]
    n = len(ring)
    oh = []
    for idx, (i, a, b, j) in enumerate(rotors):
        B = mol.GetAtomWithIdx(b)
        hs = [x.GetIdx() for x in B.GetNeighbors() if x.GetAtomicNum() == 1]
        if B.GetSymbol() == "O" and len(hs) == 1 and j == hs[0]:
            oh.append(idx)
    if len(oh) < 2:
        return []
    oxygens = [a.GetIdx() for a in mol.GetAtoms() if a.GetSymbol() == "O"]
    anchor = {o: _ring_index(mol, ring, o) for o in oxygens}
    X = np.asarray(positions, dtype=float)
    out, seen = [], set()
    for d in (1, -1):
        values = [g[0] for g in grids]
        for idx in oh:
            i, a, b, j = rotors[idx]
            k = anchor.get(b)
            if k is None:
                continue
            acceptors = []
            for step in (d, 2 * d):
                acceptors = [o for o in oxygens if o != b and anchor.get(o) == (k + step) % n]
                if acceptors:
                    break
            if not acceptors:
                continue
            acc = min(acceptors, key=lambda o: float(np.linalg.norm(X[o] - X[b])))
            best = None
            for v in grids[idx]:
                Y = set_torsions(mol, X, [rotors[idx]], [v], decimals)
                dist = float(np.linalg.norm(Y[j] - Y[acc]))
                if best is None or dist < best[0]:
                    best = (dist, v)
            values[idx] = best[1]
        key = tuple(values)
        if key not in seen:
            seen.add(key)
            out.append((f"hydrogen-bond chain, ring order {'+1' if d > 0 else '-1'}", key))
    return out


def coverage(reasons) -> dict | None:
    """{'starts', 'grid', 'chains'} of one molecule's rotor sampling per ring-level form (the largest form),
    read from its seeds' reasons ('start 3 of 216 (evenly spaced subset of 2187 grid points)'); None when
    no rotamer was enumerated."""
    import re
    best = None
    chains = 0
    for text in reasons:
        m = re.search(r"start \d+ of (\d+)(?: \(evenly spaced subset of (\d+) grid points\))?", str(text))
        if m:
            starts = int(m.group(1))
            grid = int(m.group(2)) if m.group(2) else starts
            if best is None or grid > best[1]:
                best = (starts, grid)
        if "hydrogen-bond chain" in str(text):
            chains = 2
    if best is None:
        return None
    return {"starts": best[0], "grid": best[1], "chains": chains}


def enumerate_rotamers(mol, base, base_positions, rotors, settings, relax, same, decimals: int,
                       ring=None) -> list:
    """The rotamers of one ring-level form, in start order: kept, merged, failed and screened.

    base: the seed of the form (a chairqm.seeds.Seed; its name, template and forcefield are inherited);
    base_positions: its relaxed structure; rotors: from :func:`rotatable_bonds`; settings: the seeds
    block (max_rotamer_starts, ff_window_kcal, max_rotamers_per_form).
    relax(seed, X0) relaxes start X0 into `seed` (sets positions, labels and ff_energy_kcal) and returns
    (notes, stereo mismatches); same(XA, XB) returns (equal up to a symmetry of the molecule, by a mirror
    image) for two relaxed structures, with tolerances MERGE_MAXDEV and MERGE_RMSD.
    Two rotamers are compared only when their force-field energies differ by at most MERGE_DE_KCAL.
    """
    grids = [rotor_grid(mol, a, b) for (_, a, b, _) in rotors]
    cap = settings["max_rotamer_starts"]
    starts, total = start_torsions(grids, cap)
    chains = hbond_chain_starts(mol, base_positions, rotors, grids, ring, decimals)
    labels = {}
    for label, values in chains:
        if values not in starts:
            starts.insert(len(labels), values)        # first, so that no cap or window order loses them
        labels[values] = label
    width = max(2, len(str(len(starts))))
    subset = f" (evenly spaced subset of {total} grid points)" if total > cap else ""
    seeds: list = []
    kept: list = []
    for n, values in enumerate(starts):
        s = type(base)(name=f"{base.name}-r{n + 1:0{width}d}", template=base.template, forcefield=base.forcefield)
        X0 = set_torsions(mol, base_positions, rotors, values, decimals)
        notes = [f"start {n + 1} of {len(starts)}{subset}: torsions "
                 + ",".join(f"{v:g}" for v in values) + (f" ({labels[values]})" if values in labels else "")]
        more, mismatch = relax(s, X0)
        notes += more
        if mismatch:
            s.status = "failed"
            s.reason = "; ".join([f"stereo from 3D differs from the input at {', '.join(mismatch)}"] + notes)
            seeds.append(s)
            continue
        energy = s.ff_energy_kcal
        for k in kept:
            if (energy is not None and k.ff_energy_kcal is not None
                    and abs(energy - k.ff_energy_kcal) > MERGE_DE_KCAL):
                continue
            equal, improper = same(k.positions, s.positions)
            if equal:
                s.status, s.equivalent_to = "merged", k.name
                s.reason = "; ".join([f"same structure as {k.name} after relaxation"
                                      + (" (mirror image)" if improper else "")] + notes)
                break
        if s.status != "merged":
            kept.append(s)
            s.reason = "; ".join(notes)
        seeds.append(s)
    screen(kept, settings["ff_window_kcal"], settings["max_rotamers_per_form"])
    return seeds


def screen(kept, window_kcal: float, cap: int) -> None:
    """Screen (in place) the kept rotamers of one ring-level form: those more than `window_kcal` above the
    lowest force-field energy, then all but the `cap` lowest (ties by name).  Status 'screened' and the
    reason are prepended to the seed's reason."""
    with_e = [s for s in kept if s.ff_energy_kcal is not None]
    if with_e:
        emin = min(s.ff_energy_kcal for s in with_e)
        for s in with_e:
            de = s.ff_energy_kcal - emin
            if de > window_kcal:
                s.status = "screened"
                s.reason = (f"force-field energy {de:.2f} kcal/mol above the best rotamer of this form "
                            f"exceeds the window of {window_kcal:g} kcal/mol; " + s.reason)
    alive = [s for s in kept if s.status == "ok"]
    order = sorted(alive, key=lambda s: (s.ff_energy_kcal if s.ff_energy_kcal is not None else math.inf, s.name))
    for s in order[cap:]:
        s.status = "screened"
        s.reason = (f"beyond the cap of {cap} rotamers per form "
                    f"(seeds.max_rotamers_per_form); " + s.reason)
