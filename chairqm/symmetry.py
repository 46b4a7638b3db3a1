"""Symmetry of geometries: point group and rotational symmetry number, and structures equal up to a symmetry.

- :func:`detect_symmetry`: the point group (Schoenflies symbol), the rotational symmetry number σ (the
  order of the proper-rotation subgroup) and whether the geometry is chiral.
- :func:`symmetry_number`: (σ, point group), what the ideal-gas rotational entropy of
  :func:`chairqm.thermo.thermochemistry` needs.
- :func:`is_chiral_point_group`: whether a conformer has a distinct mirror image.  Degeneracy is the
  ensemble's business; the rule this module supports: σ counts only rotations, so a chiral conformer of
  an achiral molecule (e.g. the D2 twist-boat of cyclohexane) stands for itself and its enantiomer of
  equal G, and gets degeneracy 2 (−RT ln 2 in G) when it is listed once.
- :func:`ring_automorphisms` / :func:`equivalent_structures`: whether two structures of one molecule are
  the same up to a permutation of symmetry-equivalent atoms combined with a rotation (or a reflection),
  what chairqm.seeds and chairqm.rotamers merge by.

Positions in Å; masses (for the centre) from ase.data.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np
from ase import Atoms
from rdkit import Chem
from scipy.optimize import linear_sum_assignment

from chairqm import chem
from chairqm.errors import ChairqmError
from chairqm.molecule import mirror_image

#: Default distance tolerance (Å) of the point-group detection.  An operation counts if it maps every
#: atom onto an atom of the same element within this distance.  GFN2-xTB optimisations to fmax 0.005 eV/Å
#: leave a symmetric minimum off its ideal symmetry by up to 0.045 Å (measured: chair and twist-boat
#: cyclohexane and equatorial methylcyclohexane, optimised with geomeTRIC and with LBFGS from starts
#: randomly perturbed by 0.02–0.05 Å: 0.001–0.043 Å), while the distortions that change σ here are larger
#: (boat → twist-boat moves ring atoms by ≈ 0.3 Å; a methyl turned 20° off staggered moves its H by
#: ≈ 0.36 Å).  0.1 Å keeps a factor ≥ 2 on both sides (common practice in symmetry finders).
SYMMETRY_TOL = 0.1




@dataclass
class SymmetryInfo:
    """Point group of a geometry and the rotational symmetry number σ."""

    point_group: str           # Schoenflies symbol, e.g. 'D3d', 'C2v', 'Td', 'C1', 'Dinfh', 'Cinfv'
    sigma: int                 # order of the proper-rotation subgroup
    n_proper: int              # number of proper operations (incl. identity), = sigma for nonlinear
    n_improper: int            # number of improper operations (mirror, inversion, S_n)
    chiral: bool               # no improper operation: the geometry differs from its mirror image
    max_deviation: float       # largest atom mismatch (Å) over the accepted operations
    tol: float


def _rotation(axis, angle) -> np.ndarray:
    """Rotation matrix by `angle` (rad) about unit vector `axis` (Rodrigues' formula)."""
    x, y, z = axis
    c, s = math.cos(angle), math.sin(angle)
    k = np.array([[0, -z, y], [z, 0, -x], [-y, x, 0]])
    return np.eye(3) + s * k + (1 - c) * (k @ k)


def _reflection(normal) -> np.ndarray:
    n = np.asarray(normal, dtype=float)
    return np.eye(3) - 2.0 * np.outer(n, n)


def _match(x: np.ndarray, y: np.ndarray, same: np.ndarray) -> tuple[np.ndarray | None, float]:
    """Permutation p with y[p[i]] ≈ x[i] (nearest atom of the same element; `same` masks like pairs) and
    the largest mismatch; (None, inf) unless the nearest atoms form a permutation."""
    d = np.linalg.norm(x[:, None, :] - y[None, :, :], axis=-1)
    d = np.where(same, d, np.inf)
    perm = np.argmin(d, axis=1)
    if len(np.unique(perm)) != len(perm):
        return None, math.inf
    return perm, float(d[np.arange(len(perm)), perm].max())


def _unit(v):
    n = np.linalg.norm(v)
    return None if n < 1e-8 else v / n


def _candidate_axes(x: np.ndarray, groups: list, tol: float) -> list:
    """Candidate symmetry-element directions: principal axes, the Cartesian axes, centre→atom, and for
    each pair of like atoms equally far from the centre (only such pairs can be exchanged by an operation
    that fixes the centre): centre→midpoint, their difference, and the normal to their plane with the
    centre; plus normals to the plane of an atom and its two nearest like, equidistant atoms (C_n axes,
    n ≥ 3, that pass through no atom)."""
    cands = list(np.linalg.eigh(x.T @ x)[1].T) + list(np.eye(3)) + list(x)
    r = np.linalg.norm(x, axis=1)
    for idx in groups:
        for i, j in itertools.combinations(idx, 2):
            if abs(r[i] - r[j]) < tol:
                cands += [x[i] + x[j], x[i] - x[j], np.cross(x[i], x[j])]
        for a in idx:
            like = [b for b in idx if b != a and abs(r[a] - r[b]) < tol]
            if len(like) >= 2:
                near = sorted(like, key=lambda b: np.linalg.norm(x[b] - x[a]))[:2]
                cands.append(np.cross(x[near[0]] - x[a], x[near[1]] - x[a]))
    out = []
    for v in cands:
        u = _unit(np.asarray(v, dtype=float))
        if u is None:
            continue
        # canonical sign, then de-duplicate by angle (< ~0.5°)
        k = int(np.argmax(np.abs(u)))
        if u[k] < 0:
            u = -u
        if all(abs(float(u @ o)) < 0.99996 for o in out):
            out.append(u)
    return out


def _kabsch_deviation(x, p, proper: bool) -> tuple[float, np.ndarray]:
    """Best orthogonal matrix R (det +1 if proper, −1 otherwise) with x @ R.T ≈ x[p], about the fixed
    centre (the origin); its max deviation."""
    back, _, _ = chem.kabsch(x, x[p], improper=not proper, centre=False)     # fits x[p] onto x ...
    r = back.T                                                                # ... its inverse x onto x[p]
    return chem.max_deviation(x @ r.T, x[p]), r


def detect_symmetry(atoms: Atoms, tol: float = SYMMETRY_TOL, max_order: int = 12) -> SymmetryInfo:
    """Point group and rotational symmetry number of `atoms`, with distance tolerance `tol` (Å).

    Method (hand-written): the geometry is centred at its centre of mass; candidate axes (principal
    axes, centre→atom, centre→midpoint and difference of like-atom pairs, normals to like-atom pairs)
    are tested for proper rotations C_n^k (n ≤ `max_order`) and improper ones (σ, i, S_n^k): an
    operation counts if every rotated atom lands within `tol` of an atom of the same element and these
    nearest atoms form a permutation.  Operations are identified by the atom permutation they induce, the set
    is closed under composition (each product re-checked by an orthogonal fit), σ = number of proper
    operations (symmetry number, e.g. Herzberg, *Infrared and Raman Spectra*, 1945; Fernández-Ramos et
    al., Theor. Chem. Acc. 2007, 118, 813), and the Schoenflies symbol follows from the axes and planes
    found.  Linear molecules: C∞v (σ 1) or D∞h (σ 2), written 'Cinfv' / 'Dinfh'.
    """
    tol = float(tol)
    if not tol > 0:
        raise ChairqmError(f"symmetry tolerance must be positive, got {tol} Å")
    numbers = np.asarray(atoms.numbers)
    n = len(numbers)
    if n == 0:
        raise ChairqmError("cannot find the point group of an empty structure")
    masses = np.asarray(atoms.get_masses(), dtype=float)
    x = np.asarray(atoms.positions, dtype=float)
    x = x - (masses[:, None] * x).sum(0) / masses.sum()
    groups = [np.nonzero(numbers == z)[0] for z in np.unique(numbers)]
    same = numbers[:, None] == numbers[None, :]

    if n == 1:
        return SymmetryInfo("Kh", 1, 1, 0, False, 0.0, tol)
    # linear: every atom within tol of one line through the centre
    axis = np.linalg.eigh(x.T @ x)[1][:, -1]
    off = np.linalg.norm(x - np.outer(x @ axis, axis), axis=1)
    if off.max() < tol:
        perm, dev = _match(-x, x, same)
        if dev < tol:
            return SymmetryInfo("Dinfh", 2, 2, 2, False, dev, tol)
        return SymmetryInfo("Cinfv", 1, 1, 1, False, 0.0, tol)

    proper: dict = {tuple(range(n)): (np.eye(3), 0.0)}
    improper: dict = {}
    worst = 0.0
    axes = _candidate_axes(x, groups, tol)
    # quick rejection on the few atoms farthest from the centre before the full match
    probe = np.argsort(-np.linalg.norm(x, axis=1))[:4]
    orders = range(2, max(2, min(max_order, n)) + 1)

    def test(mat, store):
        nonlocal worst
        moved = x[probe] @ mat.T
        d = np.linalg.norm(moved[:, None, :] - x[None, :, :], axis=-1)
        if np.where(same[probe], d, np.inf).min(axis=1).max() >= tol:
            return False
        perm, dev = _match(x @ mat.T, x, same)
        if perm is not None and dev < tol:
            key = tuple(int(p) for p in perm)
            if key not in store:
                store[key] = (mat, dev)
                worst = max(worst, dev)
            return True
        return False

    for u in axes:
        found = [order for order in orders if test(_rotation(u, 2 * math.pi / order), proper)]
        test(_reflection(u), improper)                                  # σ with normal u
        # S_2m needs C_m on the same axis, S_m (m odd) needs C_m; S_2 = i is tested below
        for m in [1] + found:
            for order in {2 * m} | ({m} if m % 2 and m > 1 else set()):
                if order > 2:
                    test(_reflection(u) @ _rotation(u, 2 * math.pi / order), improper)
    test(-np.eye(3), improper)                                          # inversion

    # close both sets under composition (permutations compose exactly; each product is re-checked)
    changed = True
    while changed:
        changed = False
        allops = [(k, True) for k in proper] + [(k, False) for k in improper]
        for (p1, s1), (p2, s2) in itertools.product(allops, repeat=2):
            prod = tuple(p1[p2[i]] for i in range(n))
            is_proper = s1 == s2
            store = proper if is_proper else improper
            if prod in store:
                continue
            dev, mat = _kabsch_deviation(x, np.array(prod), is_proper)
            if dev < tol:
                store[prod] = (mat, dev)
                worst = max(worst, dev)
                changed = True
    # a planar molecule's σh induces the identity permutation: handled by the key (improper store)

    n_proper, n_improper = len(proper), len(improper)
    pg = _schoenflies(proper, improper)
    return SymmetryInfo(pg, n_proper, n_proper, n_improper, n_improper == 0, worst, tol)


def _axis_and_order(mat: np.ndarray) -> tuple[np.ndarray, int]:
    """Axis (unit) and order of a proper rotation matrix (order from its angle)."""
    w, v = np.linalg.eig(mat)
    k = int(np.argmin(np.abs(w - 1.0)))
    axis = np.real(v[:, k])
    axis /= np.linalg.norm(axis)
    cos = max(-1.0, min(1.0, (np.trace(mat) - 1.0) / 2.0))
    angle = math.acos(cos)
    order = int(round(2 * math.pi / angle)) if angle > 1e-3 else 1
    return axis, order


def _schoenflies(proper: dict, improper: dict) -> str:
    """Schoenflies symbol from the proper and improper operations (flow chart of e.g. Cotton,
    *Chemical Applications of Group Theory*, 3rd ed., 1990, ch. 3.14)."""
    g = len(proper)
    axes = []   # (axis, order) of non-identity rotations, keeping the highest order per axis
    for mat, _ in proper.values():
        ax, order = _axis_and_order(mat)
        if order == 1:
            continue
        for a in axes:
            if abs(float(a[0] @ ax)) > 0.98:
                a[1] = max(a[1], order)
                break
        else:
            axes.append([ax, order])
    mirrors = []
    inversion = False
    for mat, _ in improper.values():
        tr = np.trace(mat)
        if tr < -2.9:
            inversion = True
        elif tr > 0.9:   # reflection: eigenvalues (1, 1, −1)
            w, v = np.linalg.eigh(0.5 * (mat + mat.T))
            mirrors.append(v[:, int(np.argmin(w))])
    has_improper = bool(improper)
    high = [a for a in axes if a[1] >= 3]
    if len(high) > 1:
        base = {12: "T", 24: "O", 60: "I"}.get(g, f"?{g}")
        if not has_improper:
            return base
        if base == "T":
            return "Th" if inversion else "Td"
        return base + "h"
    if g == 1:
        if not has_improper:
            return "C1"
        return "Ci" if inversion else "Cs"
    nmax = max(a[1] for a in axes)
    main = [a[0] for a in axes if a[1] == nmax]

    def perpendicular_mirror(axis_list):
        return any(abs(float(m @ ax)) > 0.98 for m in mirrors for ax in axis_list)

    if g == nmax:          # cyclic C_n
        if not has_improper:
            return f"C{nmax}"
        if perpendicular_mirror(main):
            return f"C{nmax}h"
        if mirrors:
            return f"C{nmax}v"
        return f"S{2 * nmax}"
    if g == 2 * nmax:      # dihedral D_n (for D2 every C2 may serve as the main axis)
        if not has_improper:
            return f"D{nmax}"
        if perpendicular_mirror(main if nmax > 2 else [a[0] for a in axes]):
            return f"D{nmax}h"
        return f"D{nmax}d"
    return f"?{g}"


def symmetry_number(atoms: Atoms, tol: float = SYMMETRY_TOL) -> tuple[int, str]:
    """(σ, point group) of `atoms`: the rotational symmetry number and Schoenflies symbol, found with
    distance tolerance `tol` Å (see :func:`detect_symmetry` and SYMMETRY_TOL)."""
    info = detect_symmetry(atoms, tol=tol)
    return info.sigma, info.point_group


def is_chiral_point_group(point_group: str) -> bool:
    """True for point groups without improper operations (C1, Cn, Dn, T, O, I): such a conformer is not
    superimposable on its mirror image, so an achiral molecule has an enantiomeric conformer of equal free
    energy (degeneracy 2 for the ensemble)."""
    pg = point_group.strip()
    if pg in ("T", "O", "I", "C1"):
        return True
    if pg.startswith(("C", "D")) and pg[1:].isdigit():
        return True
    return False


# ===================================================================== structures equal up to a symmetry
#: RDKit substructure-match cap when enumerating the automorphisms of a molecule
MAX_AUTOMORPHISMS = 5000


def ring_automorphisms(work, ring, max_matches: int = MAX_AUTOMORPHISMS) -> list[tuple[np.ndarray, bool]]:
    """Stereo-preserving heavy-atom automorphisms (improper=False) and mirror mappings (improper=True) of
    the RDKit molecule `work` (explicit H, stereo assigned) that map `ring` onto itself and keep every heavy
    atom's hydrogen count, as (integer array new_index[old] over all atoms (H: -1), improper) pairs.
    Found as RDKit substructure matches of the molecule (and of its mirror image) onto itself, with
    chirality, at most `max_matches` of each."""
    tagged = Chem.Mol(work)
    for a in tagged.GetAtoms():
        a.SetIntProp("_cq", a.GetIdx())
    hmol = Chem.RemoveHs(tagged, sanitize=False)
    idx = [a.GetIntProp("_cq") for a in hmol.GetAtoms()]
    mirror = mirror_image(hmol)
    ring_set = set(ring)
    nh = [len([n for n in work.GetAtomWithIdx(i).GetNeighbors() if n.GetAtomicNum() == 1])
          for i in range(work.GetNumAtoms())]
    out, seen = [], set()
    for improper, query in ((False, hmol), (True, mirror)):
        for match in hmol.GetSubstructMatches(query, useChirality=True, uniquify=False,
                                              maxMatches=max_matches):
            m = np.full(work.GetNumAtoms(), -1, dtype=int)
            for qi, ti in enumerate(match):
                m[idx[qi]] = idx[ti]
            if {int(m[i]) for i in ring} != ring_set:
                continue
            if any(nh[i] != nh[m[i]] for i in idx):
                continue
            key = (improper, tuple(m.tolist()))
            if key not in seen:
                seen.add(key)
                out.append((m, improper))
    return out


def equivalent_structures(XA, XB, maps, atoms_heavy, h_of, tol_max, tol_rmsd=None) -> tuple[bool, bool]:
    """Is structure B the same as A up to a symmetry of the molecule? Returns (bool, improper flag).

    XA, XB: positions (Å) in the molecule's atom order; maps: (mapping, improper) pairs as
    :func:`ring_automorphisms` gives them; atoms_heavy: the heavy atoms compared; h_of: heavy atom → its
    hydrogens.  For each mapping m (A atom i sits where B atom m[i] sits) the heavy atoms are superposed
    (Kabsch, proper or improper; chairqm.chem.fit), hydrogens of each heavy atom are paired with those of
    its image by the Hungarian method (scipy.optimize.linear_sum_assignment), and the largest deviation is
    compared with `tol_max` and, if given, their root mean square with `tol_rmsd` (Å).
    """
    atoms_heavy = np.asarray(atoms_heavy)
    for m, improper in maps:
        img = m[atoms_heavy]
        T = chem.fit(XA[atoms_heavy], XB[img], improper)
        YB = T(XB)
        dev = list(np.linalg.norm(YB[img] - XA[atoms_heavy], axis=1))
        if max(dev) > tol_max:
            continue
        ok = True
        for i in atoms_heavy:
            ha, hb = h_of.get(int(i), []), h_of.get(int(m[i]), [])
            if len(ha) != len(hb):
                ok = False
                break
            if not ha:
                continue
            D = np.linalg.norm(XA[ha][:, None, :] - YB[hb][None, :, :], axis=2)
            r, c = linear_sum_assignment(D)
            dev.extend(D[r, c].tolist())
        if not ok or max(dev) > tol_max:
            continue
        if tol_rmsd is not None and math.sqrt(float(np.mean(np.square(dev)))) > tol_rmsd:
            continue
        return True, improper
    return False, False
