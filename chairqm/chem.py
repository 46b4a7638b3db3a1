"""Small geometry helpers shared by the science modules: coordinates onto RDKit molecules, stereo from 3D,
Kabsch superposition and torsion angles.

Positions are in Å and in the molecule's atom order; angles in degrees.
"""

from __future__ import annotations

import math

import numpy as np
from rdkit import Chem


def covalent_bond_length(mol: Chem.Mol, i: int, j: int) -> float:
    """Sum of the two atoms' covalent radii (RDKit's periodic table), Å: a start bond length."""
    pt = Chem.GetPeriodicTable()
    return pt.GetRcovalent(mol.GetAtomWithIdx(i).GetAtomicNum()) + pt.GetRcovalent(mol.GetAtomWithIdx(j).GetAtomicNum())


# ------------------------------------------------------------------------------------ RDKit conformers
def set_positions(mol: Chem.Mol, positions) -> int:
    """Replace every conformer of `mol` (in place) by one 3D conformer at `positions` (N × 3, Å);
    return its conformer id.  ValueError if the shape does not match the molecule."""
    pos = np.asarray(positions, dtype=float)
    if pos.shape != (mol.GetNumAtoms(), 3):
        raise ValueError(f"positions have shape {pos.shape}, molecule has {mol.GetNumAtoms()} atoms")
    mol.RemoveAllConformers()
    conf = Chem.Conformer(mol.GetNumAtoms())
    conf.SetPositions(pos)
    conf.Set3D(True)
    return mol.AddConformer(conf, assignId=True)


def with_positions(mol: Chem.Mol, positions) -> Chem.Mol:
    """A copy of `mol` whose only conformer is a 3D one at `positions` (N × 3, Å); `mol` is untouched."""
    copy = Chem.Mol(mol)
    set_positions(copy, positions)
    return copy


def stereo_from_3d(mol: Chem.Mol, positions) -> Chem.Mol:
    """A copy of `mol` at `positions` whose tetrahedral chiral tags and double-bond stereo are assigned
    from the 3D structure (RDKit ``Chem.AssignStereochemistryFrom3D``); `mol` is untouched."""
    copy = Chem.Mol(mol)
    cid = set_positions(copy, positions)
    Chem.AssignStereochemistryFrom3D(copy, confId=cid)
    return copy


def reference_stereo(mol):
    """(a copy of `mol` with its stereo perceived, {atom: chiral tag}, {bond: E/Z}) of its stereo elements."""
    work = Chem.Mol(mol)
    Chem.AssignStereochemistry(work, cleanIt=True, force=True)
    tags = {a.GetIdx(): a.GetChiralTag() for a in work.GetAtoms()
            if a.GetChiralTag() in (Chem.ChiralType.CHI_TETRAHEDRAL_CW, Chem.ChiralType.CHI_TETRAHEDRAL_CCW)}
    bonds = {b.GetIdx(): b.GetStereo() for b in work.GetBonds()
             if b.GetStereo() in (Chem.BondStereo.STEREOE, Chem.BondStereo.STEREOZ)}
    return work, tags, bonds


def stereo_differences(mol, tags, bonds, X) -> list:
    """The stereo elements of `tags`/`bonds` whose configuration perceived at positions X differs."""
    tmp = stereo_from_3d(mol, X)
    bad = [f"atom {i}" for i, t in tags.items() if tmp.GetAtomWithIdx(i).GetChiralTag() != t]
    bad += [f"bond {b}" for b, st in bonds.items() if tmp.GetBondWithIdx(b).GetStereo() != st]
    return bad


def stereo_mismatch(mol, positions) -> list[str]:
    """Stereo elements (tetrahedral atoms, double bonds) whose configuration perceived from `positions`
    (RDKit AssignStereochemistryFrom3D) differs from the one `mol` carries; empty if all agree."""
    work, tags, bonds = reference_stereo(mol)
    return stereo_differences(work, tags, bonds, positions)


# ------------------------------------------------------------------------------------------ superposition
def kabsch(P, Q, improper: bool = False, centre: bool = True) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Orthogonal matrix R and centres (q̄, p̄) minimising Σ_i |R (q_i − q̄) + p̄ − p_i|² (Kabsch, Acta
    Cryst. 1976, A32, 922; the determinant correction of Kabsch, Acta Cryst. 1978, A34, 827).

    P, Q: N × 3 paired points (row i of Q goes onto row i of P).  R has determinant +1 (a rotation), or −1
    (a rotation-reflection) when `improper`.  With `centre` the centres are the centroids; without, both
    are the origin (the points are already placed about a common fixed point).
    """
    P = np.asarray(P, dtype=float)
    Q = np.asarray(Q, dtype=float)
    if centre:
        pc, qc = P.mean(axis=0), Q.mean(axis=0)
    else:
        pc = qc = np.zeros(3)
    H = (Q - qc).T @ (P - pc)
    U, _, Vt = np.linalg.svd(H)
    d = np.sign(np.linalg.det(Vt.T @ U.T)) or 1.0
    R = Vt.T @ np.diag([1.0, 1.0, d * (-1.0 if improper else 1.0)]) @ U.T
    return R, qc, pc


def fit(P, Q, improper: bool = False):
    """The best-fit map (:func:`kabsch`, centroids matched) of Q's frame onto P's, as a function taking
    coordinates X (M × 3) in Q's frame to (X − q̄) Rᵀ + p̄ in P's."""
    R, qc, pc = kabsch(P, Q, improper)
    return lambda X: (np.asarray(X, dtype=float) - qc) @ R.T + pc


def max_deviation(P, Q) -> float:
    """Largest distance |p_i − q_i| (Å) between paired points, without any fitting."""
    return float(np.linalg.norm(np.asarray(P, dtype=float) - np.asarray(Q, dtype=float), axis=1).max())


# ---------------------------------------------------------------------------------------------- torsions
def dihedral(p0, p1, p2, p3) -> float:
    """Torsion angle p0-p1-p2-p3 in degrees, in [−180, 180]: positive when, looking along p1→p2, the
    bond p1–p0 turns clockwise by less than 180° to eclipse p2–p3 (IUPAC sign convention; Moss, Pure
    Appl. Chem. 1996, 68, 2193, from memory)."""
    b0 = np.asarray(p0) - np.asarray(p1)
    b1 = np.asarray(p2) - np.asarray(p1)
    b2 = np.asarray(p3) - np.asarray(p2)
    b1n = b1 / np.linalg.norm(b1)
    v = b0 - (b0 @ b1n) * b1n
    w = b2 - (b2 @ b1n) * b1n
    return math.degrees(math.atan2(float(np.cross(b1n, v) @ w), float(v @ w)))


#: Å and degrees: an intramolecular hydrogen bond D-H...A (D, A = N or O) has H...A at most HBOND_MAX_HA
#: and the D-H...A angle at least HBOND_MIN_ANGLE. A permissive geometric criterion (common practice for
#: weak hydrogen bonds): it counts the bent contacts of vicinal diols (H...O 2.2-2.4 Å at about 110 deg
#: in a glucopyranoside's O-H...O chain, measured here on MMFF94 seeds), which a 120-deg cut would miss
HBOND_MAX_HA = 2.5
HBOND_MIN_ANGLE = 100.0


def intramolecular_hbonds(mol, positions) -> list[tuple[int, int, int]]:
    """(donor, H, acceptor) of every intramolecular N/O-H...N/O hydrogen bond of one structure by the
    geometric criterion above; the acceptor is neither the donor nor bonded to it."""
    x = np.asarray(positions, dtype=float)
    polar = [a.GetIdx() for a in mol.GetAtoms() if a.GetSymbol() in ("N", "O")]
    out = []
    for d in polar:
        for h in [n.GetIdx() for n in mol.GetAtomWithIdx(d).GetNeighbors() if n.GetAtomicNum() == 1]:
            for a in polar:
                if a == d or mol.GetBondBetweenAtoms(a, d) is not None:
                    continue
                ha = float(np.linalg.norm(x[a] - x[h]))
                if ha > HBOND_MAX_HA:
                    continue
                u, v = x[d] - x[h], x[a] - x[h]
                ang = math.degrees(math.acos(max(-1.0, min(1.0, float(u @ v) / (np.linalg.norm(u) * np.linalg.norm(v))))))
                if ang >= HBOND_MIN_ANGLE:
                    out.append((d, h, a))
    return out
