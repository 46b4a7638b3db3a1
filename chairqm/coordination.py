"""Embedding bounds for five- and six-coordinate centres (the S of SF5, the P of a phosphorane), which
RDKit's distance geometry leaves without a shape.

Measured with RDKit 2026.09 on (pentafluoro-λ6-sulfanyl)cyclohexane: the bounds matrix gives every F···F
pair around the S the range 1.0–3.56 Å (no angle at all), and it sets the 1,4 distances through the S
(F–S–C–C, F–S–C–H) as if the S were tetrahedral; neither MMFF94 nor UFF has parameters for an
octahedral S, so nothing relaxes the embedding afterwards. The seeds kept F–S–F angles of 35–45° (F···F
about 1.1 Å) and S–F bonds from 1.46 to 1.76 Å, and from such starts two of fourteen GFN2-xTB
optimisations moved an F onto the ring carbon (a real bond change, cyclohexyl fluoride and SF4, lower in
energy at that level). :func:`bounds_matrix` gives these centres the distances of a regular polyhedron:

- each bond at the centre: RDKit's own bond length (the middle of its 1,2 bounds) ± BOND_TOL;
- each pair of ligands: at least the distance at 90° (× LIGAND_MARGIN), at most the distance at 180°.
  Six unit vectors whose pairwise angles are all at least 90° are the six directions of an octahedron,
  so a six-coordinate centre comes out octahedral; a five-coordinate one trigonal-bipyramidal or
  square-pyramidal (both have no ligand pair closer than 90°);
- each 1,4 pair through the centre (ligand X, another ligand Z, a neighbour Y of Z): between the
  distances at X–centre–Z = 90° (Y cis to X) and 180°, with the centre–Z–Y angle from RDKit's 1,3 bounds.

Measured on the same molecule with these bounds: over ten random seeds every F–S–F and F–S–C angle lies
within 87–98° or 173–177°; with the ring held by a coordinate map (chairqm.seeds) the embedding leaves
some at 77–134° and 136–157°, and as neither force field can relax the centre, :func:`idealise` then
turns each free ligand (with everything beyond it) onto the nearest direction of the best-fitting
regular polyhedron (octahedron, trigonal bipyramid) at the bond length of the bounds.

Exactly regular starts bring their own trap: a gradient optimisation keeps the symmetry of its start, and
an SF5 whose equatorial F eclipse the ring C–H stops at the saddle point of its rotation (measured:
0.77 kcal/mol above the minimum, 8.8i cm⁻¹, below the thermo stage's imaginary-mode threshold, so it was
counted as a second equatorial conformer and moved the A-value by 0.27 kcal/mol). So the ligands around
the bond to the rest of the molecule are turned as far from every mirror-symmetric position as they go
(:func:`_off_mirrors`), and chairqm.rotamers treats such a group as a symmetric top (one start per form).

Measured, ``chairqm avalue "[*]S(F)(F)(F)(F)F"`` on one core (GFN2-xTB, tblite, gas phase): before, 14
seeds optimised, two of them 'bonds changed' (the F moved onto the ring carbon) and one not converged;
after, 5 seeds, all converged with their bonds; both chairs' minima at the same energies as before
(within 1e-6 hartree) and the same A-value, 1.13 kcal/mol.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
from rdkit import Chem
from rdkit import DistanceGeometry
from rdkit.Chem import AllChem, rdDistGeom

from .chem import kabsch

MIN_DEGREE = 5          # centres with at least this many neighbours get polyhedron bounds
BOND_TOL = 0.01         # Å, half-width of the bond bounds at such a centre
LIGAND_MARGIN = 0.98    # lower bounds at 90° are scaled by this (room for the smoothing and the minimiser)
HELD_WEIGHT = 100.0     # weight of a held ligand's direction in the polyhedron fit (held ones are not moved)
_TBP = [(0.0, 0.0, 1.0), (0.0, 0.0, -1.0)] + [(math.cos(math.radians(a)), math.sin(math.radians(a)), 0.0)
                                             for a in (0.0, 120.0, 240.0)]
POLYHEDRA = {                # unit directions of the regular polyhedron of each coordination number
    5: np.array(_TBP),
    6: np.array([(1.0, 0, 0), (-1.0, 0, 0), (0, 1.0, 0), (0, -1.0, 0), (0, 0, 1.0), (0, 0, -1.0)]),
}


def crowded_centres(mol: Chem.Mol) -> list[int]:
    """Atoms with five or more neighbours (hydrogens included): the centres :func:`bounds_matrix` shapes."""
    return [a.GetIdx() for a in mol.GetAtoms() if a.GetDegree() >= MIN_DEGREE]


def bounds_matrix(mol: Chem.Mol):
    """RDKit's distance bounds of `mol` (explicit H) with the crowded centres given the distances of a
    regular polyhedron (see the module text), triangle-smoothed; None when `mol` has no crowded centre or
    the smoothing finds the bounds inconsistent (then the plain embedding is used)."""
    centres = crowded_centres(mol)
    if not centres:
        return None
    bm = rdDistGeom.GetMoleculeBoundsMatrix(mol)
    topo = Chem.GetDistanceMatrix(mol)          # bonds between atoms: a pair in a small ring keeps RDKit's bounds

    def mid(i, j):
        i, j = min(i, j), max(i, j)
        return 0.5 * (bm[i][j] + bm[j][i])       # upper bound above the diagonal, lower below

    def put(i, j, lo, up):
        i, j = min(i, j), max(i, j)
        bm[j][i], bm[i][j] = lo, up

    for c in centres:
        ligands = [n.GetIdx() for n in mol.GetAtomWithIdx(c).GetNeighbors()]
        length = {n: mid(c, n) for n in ligands}
        cross = []
        for x, z in itertools.permutations(ligands, 2):
            a, b = length[x], length[z]
            if x < z and topo[x][z] == 2:
                put(x, z, LIGAND_MARGIN * math.hypot(a, b), a + b)
            for y in (n.GetIdx() for n in mol.GetAtomWithIdx(z).GetNeighbors()):
                if topo[x][y] != 3:
                    continue
                # centre at the origin, Z on +x; Y off Z at the angle centre–Z–Y from RDKit's 1,3 bounds;
                # X at 90° from Z on Y's side (nearest) or at 180° (farthest)
                d = mid(z, y)
                cos_b = max(-1.0, min(1.0, (b * b + d * d - mid(c, y) ** 2) / (2.0 * b * d)))
                yx, yy = b - d * cos_b, d * math.sqrt(1.0 - cos_b * cos_b)
                cross.append((x, y, LIGAND_MARGIN * math.hypot(yx, yy - a), math.hypot(yx + a, yy)))
        for n in ligands:
            put(c, n, length[n] - BOND_TOL, length[n] + BOND_TOL)
        for x, y, lo, up in cross:
            put(x, y, lo, up)
    if not DistanceGeometry.DoTriangleSmoothing(bm):
        return None
    return bm


def _branch(mol, centre: int, ligand: int) -> set[int]:
    """The ligand and every atom reached from it without passing through the centre."""
    seen, stack = {ligand}, [ligand]
    while stack:
        for n in mol.GetAtomWithIdx(stack.pop()).GetNeighbors():
            j = n.GetIdx()
            if j != centre and j not in seen:
                seen.add(j)
                stack.append(j)
    return seen


def _turn(u, v) -> np.ndarray:
    """The rotation matrix taking unit vector u onto unit vector v by the smallest angle (Rodrigues)."""
    axis = np.cross(u, v)
    s, c = float(np.linalg.norm(axis)), float(u @ v)
    if s < 1e-12:
        if c > 0:
            return np.eye(3)
        w = np.cross(u, [1.0, 0.0, 0.0] if abs(u[0]) < 0.9 else [0.0, 1.0, 0.0])   # half turn
        w = w / np.linalg.norm(w)
        return 2.0 * np.outer(w, w) - np.eye(3)
    k = axis / s
    K = np.array([[0.0, -k[2], k[1]], [k[2], 0.0, -k[0]], [-k[1], k[0], 0.0]])
    return np.eye(3) + s * K + (1.0 - c) * (K @ K)


def _torsion_about(axis, ref, v) -> float:
    """Angle (deg) of v about the unit `axis`, counted from ref's projection."""
    p = ref - (ref @ axis) * axis
    q = v - (v @ axis) * axis
    return math.degrees(math.atan2(float(np.cross(p, q) @ axis), float(p @ q)))


def _off_mirrors(mol, X, centre, anchor, T, u) -> np.ndarray:
    """The polyhedron directions T turned about the anchor bond (direction u from the centre) so that the
    ligands around that bond stand as far as they can from every mirror-symmetric position over the
    anchor's other neighbours: a gradient optimisation keeps the symmetry of its start, so a group whose
    ligands eclipse or bisect the anchor's neighbours exactly (an eclipsed SF5) would stop at the
    saddle point of its rotation (measured: the eclipsed equatorial SF5-cyclohexane, 0.77 kcal/mol above
    the minimum, a stationary point of GFN2-xTB that rotating the SF5 by 10° either way leaves)."""
    frame = [n.GetIdx() for n in mol.GetAtomWithIdx(anchor).GetNeighbors() if n.GetIdx() != centre]
    around = [t for t in T if abs(float(t @ u)) < 0.5]       # the ligands about the bond (cis to the anchor)
    if not frame or len(around) < 2:
        return T
    half = 180.0 / len(around)              # symmetric when a ligand or a bisector meets a mirror plane
    ref = X[frame[0]] - X[anchor]
    planes = [_torsion_about(u, ref, X[f] - X[anchor]) for f in frame]
    planes += [0.5 * (a + b) for a, b in itertools.combinations(planes, 2)]
    now = _torsion_about(u, ref, around[0])

    def clearance(phi):
        return min(abs((phi - p + half / 2) % half - half / 2) for p in planes)

    target = max((now + 0.5 * k for k in range(int(2 * half))), key=clearance)
    th = math.radians(target - now)
    K = np.array([[0.0, -u[2], u[1]], [u[2], 0.0, -u[0]], [-u[1], u[0], 0.0]])
    R = np.eye(3) + math.sin(th) * K + (1.0 - math.cos(th)) * (K @ K)
    return T @ R.T


def idealise(mol: Chem.Mol, positions, bm, held=()) -> np.ndarray:
    """Positions (N × 3, Å) with each five- or six-coordinate centre's free ligands on a regular polyhedron.

    The polyhedron's orientation and which ligand takes which direction come from a weighted fit to the
    present ligand directions (every assignment tried); a ligand whose branch (it and all beyond it, away
    from the centre) holds an atom of `held` or leads back to the centre (a ring through it) is held: it
    is not moved, and with one held ligand the polyhedron is turned to contain its direction exactly. Each
    free branch is turned rigidly about the centre onto its direction and moved along it to the bond
    length in `bm` (the middle of its bounds)."""
    X = np.array(positions, dtype=float)
    held = set(int(i) for i in held)
    for c in crowded_centres(mol):
        ligands = [n.GetIdx() for n in mol.GetAtomWithIdx(c).GetNeighbors()]
        ideal = POLYHEDRA.get(len(ligands))
        if ideal is None:
            continue
        branches = {l: _branch(mol, c, l) for l in ligands}
        fixed = [l for l in ligands if branches[l] & held or any(m in branches[l] for m in ligands if m != l)]
        if len(fixed) == len(ligands):
            continue
        U = np.array([(X[l] - X[c]) / np.linalg.norm(X[l] - X[c]) for l in ligands])
        w = np.sqrt(np.array([HELD_WEIGHT if l in fixed else 1.0 for l in ligands]))[:, None]
        best = None
        for perm in itertools.permutations(range(len(ligands))):
            D = ideal[list(perm)]
            R, _, _ = kabsch(w * U, w * D, centre=False)
            err = float((w[:, 0] ** 2 * ((D @ R.T - U) ** 2).sum(axis=1)).sum())
            if best is None or err < best[0] - 1e-12:
                best = (err, D @ R.T)
        T = best[1]
        if len(fixed) == 1:
            k = ligands.index(fixed[0])
            T = T @ _turn(T[k], U[k]).T
            T = _off_mirrors(mol, X, c, fixed[0], T, U[k])
        for k, l in enumerate(ligands):
            if l in fixed:
                continue
            atoms = sorted(branches[l])
            R = _turn(U[k], T[k] / np.linalg.norm(T[k]))
            X[atoms] = (X[atoms] - X[c]) @ R.T + X[c]
            i, j = min(c, l), max(c, l)
            length = 0.5 * (bm[i][j] + bm[j][i])
            X[atoms] += (length - np.linalg.norm(X[l] - X[c])) * (X[l] - X[c]) / np.linalg.norm(X[l] - X[c])
    return X


def embed(mol: Chem.Mol, coordMap=None, randomSeed: int = -1, useRandomCoords: bool = False,
          enforceChirality: bool = True, maxAttempts: int = 0) -> int:
    """``AllChem.EmbedMolecule`` with the same keywords. A molecule with a crowded centre is embedded from
    :func:`bounds_matrix` (ETKDGv3 parameters, otherwise as the keywords say) and then :func:`idealise`
    shapes it, the atoms of `coordMap` held. Returns the conformer id, −1 on failure."""
    bm = bounds_matrix(mol)
    if bm is None:
        return AllChem.EmbedMolecule(mol, coordMap=coordMap or {}, randomSeed=randomSeed,
                                     useRandomCoords=useRandomCoords, enforceChirality=enforceChirality,
                                     maxAttempts=maxAttempts)
    params = rdDistGeom.ETKDGv3()
    params.randomSeed = randomSeed
    params.useRandomCoords = useRandomCoords
    params.enforceChirality = enforceChirality
    params.maxIterations = maxAttempts
    params.SetBoundsMat(bm)
    if coordMap:
        params.SetCoordMap(coordMap)
    cid = rdDistGeom.EmbedMolecule(mol, params)
    if cid >= 0:
        conf = mol.GetConformer(cid)
        conf.SetPositions(idealise(mol, conf.GetPositions(), bm, held=(coordMap or {}).keys()))
    return cid
