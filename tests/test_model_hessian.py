"""The model Hessian that starts the default optimiser (chairqm.model_hessian)."""

import numpy as np
import pytest
from ase import Atoms
from ase.build import molecule

from chairqm.model_hessian import EXTERNAL, model_hessian

BOHR_A = 0.529177210903      # Å (CODATA 2018, from memory)
HARTREE_EV = 27.211386245988  # eV (CODATA 2018, from memory)


def test_h2_at_the_reference_distance_has_the_papers_stretch_constant():
    # Lindh et al., Chem. Phys. Lett. 1995, 241, 423 (from memory): k_r = 0.45 hartree/bohr² at ρ = 1,
    # i.e. r = r_ref(H,H) = 1.35 bohr; along the unit bond vector (−u, +u)/√2 the curvature is 2·k_r.
    h2 = Atoms("H2", positions=[[0, 0, 0], [0, 0, 1.35 * BOHR_A]])
    b = np.array([0, 0, -1, 0, 0, 1]) / np.sqrt(2)
    assert b @ model_hessian(h2) @ b == pytest.approx(2 * 0.45 * HARTREE_EV / BOHR_A ** 2, rel=1e-9)
    # stretched by 0.2 bohr the constant decays as exp(α (r_ref² − r²)), α(H,H) = 1.0 bohr⁻²
    far = Atoms("H2", positions=[[0, 0, 0], [0, 0, 1.55 * BOHR_A]])
    rho = np.exp(1.0 * (1.35 ** 2 - 1.55 ** 2))
    assert b @ model_hessian(far) @ b == pytest.approx(2 * 0.45 * rho * HARTREE_EV / BOHR_A ** 2, rel=1e-9)


def test_translations_and_rotations_get_the_stiff_constant_and_nothing_else_moves_them():
    m = molecule("CH3CH2OH")
    h = model_hessian(m)
    assert np.allclose(h, h.T)
    for axis in range(3):
        t = np.zeros((len(m), 3))
        t[:, axis] = 1.0
        t = t.ravel() / np.linalg.norm(t)
        assert np.allclose(h @ t, EXTERNAL * t, atol=1e-8)
    w = np.linalg.eigvalsh(h)
    assert w.min() > 0          # positive definite: a descent direction from the first step


def test_bend_constant_of_water_matches_the_wilson_b_vector_by_hand():
    # H–O–H at 104.5°, r = 0.96 Å: the bend's B vector on the H atoms is 1/r (rad per length), so the
    # curvature along a pure in-plane bend of both H atoms follows from k_bend ρ_OH² (Lindh et al. 1995,
    # α(H,O) = 0.3949 bohr⁻², r_ref = 2.10 bohr, from memory) plus the stretches, which this motion
    # leaves unchanged to first order. The O atom moves against the H atoms so that the stiff external
    # constant does not enter.
    r, th = 0.96, np.radians(104.5)
    pos = np.array([[0, 0, 0], [r * np.sin(th / 2), r * np.cos(th / 2), 0], [-r * np.sin(th / 2), r * np.cos(th / 2), 0]])
    w = Atoms("OH2", positions=pos)
    # move each H perpendicular to its O–H bond, opening the angle: dθ = 2·δ/r
    e1 = np.array([np.cos(th / 2), -np.sin(th / 2), 0])
    e2 = np.array([-np.cos(th / 2), -np.sin(th / 2), 0])
    d = np.zeros((3, 3))
    d[1], d[2] = e1, e2
    d = (d - d.mean(axis=0)).ravel()     # no net translation (the motion is symmetric: no rotation either)
    curv = d @ model_hessian(w) @ d                       # eV/Å² per unit displacement norm² (= 2 δ²)
    rho = np.exp(0.3949 * (2.10 ** 2 - (r / BOHR_A) ** 2))
    dtheta_per_bohr = 2 / (r / BOHR_A)                   # rad per bohr of δ, δ on each H
    # the H···H pair (about 1.52 Å) also contributes a stretch: its length changes by 2 δ cos(θ/2)
    rho_hh = np.exp(1.0 * (1.35 ** 2 - (2 * r * np.sin(th / 2) / BOHR_A) ** 2))
    expected = (0.15 * rho ** 2 * dtheta_per_bohr ** 2 + 0.45 * rho_hh * (2 * np.cos(th / 2)) ** 2) \
        * HARTREE_EV / BOHR_A ** 2
    # left out of the hand sum: the two bends centred on an H atom (weight ρ_OH·ρ_HH ≈ 2.6e-3, under 0.1 %)
    assert curv == pytest.approx(expected, rel=1e-3)


def test_an_octahedral_centre_with_180_degree_angles_gets_a_model_hessian():
    # SF6 (ideal octahedron, S-F 1.56 A, from memory): its trans F-S-F angles are 180 degrees, whose bend
    # derivative does not exist; they are left out (LINEAR_DEG) instead of stopping the optimiser, which
    # is what stopped bfgs-model on the SF5 group (ASE: "Singularity for derivative of a planar angle")
    from ase import Atoms
    d = 1.56
    pos = [[0, 0, 0]] + [[s * d * (i == k) for k in range(3)] for i in range(3) for s in (1, -1)]
    h = model_hessian(Atoms("SF6", positions=pos))
    assert h.shape == (21, 21) and np.isfinite(h).all() and np.allclose(h, h.T)
    assert np.linalg.eigvalsh(h).min() > 0
