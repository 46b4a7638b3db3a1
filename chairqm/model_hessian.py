"""A model Hessian for the first step of a quasi-Newton optimisation: bonds, angles and torsions from the
geometry alone.

Lindh, Bernhardsson, Karlström, Malmqvist, Chem. Phys. Lett. 1995, 241, 423: every pair, bend and
torsion gets a force constant that decays with distance,

    ρ_ij = exp(α_ij (r_ref,ij² − r_ij²)),
    k_stretch = 0.45 ρ_ij,  k_bend = 0.15 ρ_ij ρ_jk,  k_torsion = 0.005 ρ_ij ρ_jk ρ_kl   (hartree, bohr, rad),

with α and r_ref tabulated by period (H–He, Li–Ne, Na and beyond; the parameters as recalled from the
paper, from memory), and H = Σ k b bᵀ over the Wilson B vectors b of those coordinates (derivatives
from ase.geometry). Starting BFGS from it instead of a multiple of the unit matrix puts the soft
torsions and bends of a conformer in the first step, which is most of what internal-coordinate
optimisers gain, without their coordinate bookkeeping in every step. Translations and rotations get a
stiff constant so that no step moves along them.

Units: positions Å in, Hessian eV/Å² out.
"""

from __future__ import annotations

import numpy as np
from ase import Atoms

from chairqm.units import BOHR_A, HARTREE_EV

#: α (bohr⁻²) and r_ref (bohr) by period pair, and the three force constants (hartree/bohr², /rad²)
ALPHA = np.array([[1.0000, 0.3949, 0.3949], [0.3949, 0.2800, 0.2800], [0.3949, 0.2800, 0.2800]])
R_REF = np.array([[1.35, 2.10, 2.53], [2.10, 2.87, 3.40], [2.53, 3.40, 3.40]])
K_STRETCH, K_BEND, K_TORSION = 0.45, 0.15, 0.005

#: Terms whose weight (ρ product) falls below this are left out; bends and torsions through an angle
#: above LINEAR_DEG or below 180° − LINEAR_DEG are left out (their B vectors are ill-defined near 180° and
#: 0°: the trans ligands of an octahedral centre, or a neighbour seen through the atom between them).
CUTOFF = 1e-4
LINEAR_DEG = 175.0


def _bendable(angles_deg):
    """True where an angle is far enough from 0° and 180° for its derivative to exist."""
    return (angles_deg <= LINEAR_DEG) & (angles_deg >= 180.0 - LINEAR_DEG)

#: eV/Å² along translations and rotations (ASE's BFGS default diagonal, 70 eV/Å²).
EXTERNAL = 70.0

_TO_EV_A2 = HARTREE_EV / BOHR_A ** 2


def _period(z: int) -> int:
    return 0 if z <= 2 else 1 if z <= 10 else 2


def _add(h, atoms_idx, grads, k):
    """H += k·b bᵀ with b nonzero on `atoms_idx` (rows of `grads`, 3 each)."""
    for a, ga in zip(atoms_idx, grads):
        for b, gb in zip(atoms_idx, grads):
            h[3 * a:3 * a + 3, 3 * b:3 * b + 3] += k * np.outer(ga, gb)


def model_hessian(atoms: Atoms) -> np.ndarray:
    """The (3N, 3N) model Hessian in eV/Å² of `atoms` (see the module docstring)."""
    from ase.geometry import get_angles, get_angles_derivatives, get_dihedrals_derivatives

    from chairqm.vibrations import external_basis
    z = atoms.numbers
    n = len(z)
    pos = np.asarray(atoms.positions, dtype=float)
    per = np.array([_period(int(a)) for a in z])
    diff = pos[:, None, :] - pos[None, :, :]
    r2_bohr = (diff ** 2).sum(-1) / BOHR_A ** 2
    rho = np.exp(ALPHA[per[:, None], per[None, :]] * (R_REF[per[:, None], per[None, :]] ** 2 - r2_bohr))
    np.fill_diagonal(rho, 0.0)
    h = np.zeros((3 * n, 3 * n))
    nb = [[int(j) for j in np.nonzero(rho[i] >= CUTOFF)[0]] for i in range(n)]
    # stretches: b = ±unit vector (dimensionless, so k in hartree/bohr² stays per bohr²)
    for i in range(n):
        for j in nb[i]:
            if j > i:
                u = diff[i, j] / np.linalg.norm(diff[i, j])
                _add(h, (i, j), (u, -u), K_STRETCH * rho[i, j])
    # bends i-j-k (ASE derivatives in degrees per Å → rad per bohr)
    deg_a_to_rad_bohr = np.pi / 180.0 * BOHR_A
    bends = [(i, j, k) for j in range(n) for x, i in enumerate(nb[j]) for k in nb[j][x + 1:]
             if rho[i, j] * rho[j, k] >= CUTOFF]
    if bends:
        t = np.array(bends)
        v0, v1 = pos[t[:, 0]] - pos[t[:, 1]], pos[t[:, 2]] - pos[t[:, 1]]
        keep = _bendable(get_angles(v0, v1))         # ASE raises for the derivative of a 0° or 180° angle
        if keep.any():
            derivs = get_angles_derivatives(v0[keep], v1[keep]) * deg_a_to_rad_bohr
            for (i, j, k), d in zip([b for b, ok in zip(bends, keep) if ok], derivs):
                _add(h, (i, j, k), d, K_BEND * rho[i, j] * rho[j, k])
    # torsions i-j-k-l about j-k
    tors = [(i, j, k, m) for j in range(n) for k in nb[j] if k > j for i in nb[j] if i != k for m in nb[k]
            if m not in (i, j) and rho[i, j] * rho[j, k] * rho[k, m] >= CUTOFF]
    if tors:
        q = np.array(tors)
        v0, v1, v2 = pos[q[:, 1]] - pos[q[:, 0]], pos[q[:, 2]] - pos[q[:, 1]], pos[q[:, 3]] - pos[q[:, 2]]
        keep = _bendable(get_angles(-v0, v1)) & _bendable(get_angles(-v1, v2))
        if keep.any():
            derivs = get_dihedrals_derivatives(v0[keep], v1[keep], v2[keep]) * deg_a_to_rad_bohr
            for (i, j, k, m), d in zip([t for t, ok in zip(tors, keep) if ok], derivs):
                _add(h, (i, j, k, m), d, K_TORSION * rho[i, j] * rho[j, k] * rho[k, m])
    h *= _TO_EV_A2
    ext = external_basis(Atoms(z, positions=pos, masses=np.ones(n)))
    h += EXTERNAL * ext @ ext.T
    return 0.5 * (h + h.T)
