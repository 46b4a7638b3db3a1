"""Tests of chairqm.vibrations: projected frequencies against a textbook formula and ase.vibrations, the
resumable Hessian cache, and the proof of minimum that drives a boat cyclohexane saddle to a twist-boat."""

import os

os.environ.setdefault("OMP_NUM_THREADS", "1")

import json  # noqa: E402
import math  # noqa: E402

import numpy as np  # noqa: E402
import pytest  # noqa: E402
from ase import Atoms  # noqa: E402
from ase.build import molecule  # noqa: E402
from ase.units import create_units  # noqa: E402

from chairqm.errors import ChairqmError  # noqa: E402
from chairqm.vibrations import (  # noqa: E402
    external_basis,
    frequencies,
    geometry_key,
    hessian,
    hessian_run,
    prove_minimum,
)

U = create_units("2018")
HARTREE_EV = U.Hartree


# ------------------------------------------------------------------------------------------ helpers
def cyclohexane(theta_deg, phi_deg, q=0.63, cc=1.53, ch=1.09):
    """Idealised C6H12 from Cremer–Pople puckering coordinates (Cremer & Pople, J. Am. Chem. Soc. 1975,
    97, 1354): θ = 0 chair, θ = 90° φ = 0 boat (C2v), θ = 90° φ = 30° twist-boat (D2); CH2 hydrogens
    placed from the local C–C–C frame so they keep the carbon frame's symmetry."""
    th, ph = math.radians(theta_deg), math.radians(phi_deg)
    q2, q3 = q * math.sin(th), q * math.cos(th)
    j = np.arange(6)
    z = math.sqrt(1 / 3) * q2 * np.cos(ph + 4 * np.pi * j / 6) + math.sqrt(1 / 6) * q3 * (-1.0) ** j
    dz = z - np.roll(z, -1)
    radius = math.sqrt(cc ** 2 - np.mean(dz ** 2))
    ang = 2 * np.pi * j / 6
    carbons = np.c_[radius * np.cos(ang), radius * np.sin(ang), z]
    half = math.radians(109.47 / 2)
    hydrogens = []
    for k in range(6):
        a, b, c = carbons[k - 1], carbons[k], carbons[(k + 1) % 6]
        u = (b - a) + (b - c)
        u /= np.linalg.norm(u)
        v = np.cross(a - b, c - b)
        v /= np.linalg.norm(v)
        hydrogens += [b + ch * (math.cos(half) * u + math.sin(half) * v),
                      b + ch * (math.cos(half) * u - math.sin(half) * v)]
    return Atoms("C6H12", positions=np.vstack([carbons, hydrogens]))


def cremer_pople(ring_xyz):
    """(Q, θ°, φ°) of a six-membered ring, Cremer & Pople, J. Am. Chem. Soc. 1975, 97, 1354, eqs. 4–14
    (local helper; chairqm.ring has the project's version)."""
    x = np.asarray(ring_xyz, dtype=float)
    x = x - x.mean(0)
    j = np.arange(6)
    r1 = (x * np.sin(2 * np.pi * j / 6)[:, None]).sum(0)
    r2 = (x * np.cos(2 * np.pi * j / 6)[:, None]).sum(0)
    n = np.cross(r1, r2)
    n /= np.linalg.norm(n)
    z = x @ n
    c2 = math.sqrt(2 / 6) * float(np.sum(z * np.cos(4 * np.pi * j / 6)))
    s2 = -math.sqrt(2 / 6) * float(np.sum(z * np.sin(4 * np.pi * j / 6)))
    q3 = math.sqrt(1 / 6) * float(np.sum(z * (-1.0) ** j))
    q2 = math.hypot(c2, s2)
    return math.hypot(q2, q3), math.degrees(math.atan2(q2, q3)), math.degrees(math.atan2(s2, c2)) % 360.0


def spring_hessian(atoms, k=5.0):
    """Hessian (eV/Å²) of E = ½ k Σ_{i<j} (r_ij − r_ij⁰)² at its minimum r = r⁰: Σ k u uᵀ blocks.  It is
    exactly invariant to translations and rotations, so its six external eigenvalues are exactly zero."""
    n = len(atoms)
    h = np.zeros((3 * n, 3 * n))
    pos = atoms.positions
    for i in range(n):
        for j in range(i + 1, n):
            u = pos[j] - pos[i]
            u /= np.linalg.norm(u)
            b = k * np.outer(u, u)
            for p, q, sgn in ((i, i, 1), (j, j, 1), (i, j, -1), (j, i, -1)):
                h[3 * p:3 * p + 3, 3 * q:3 * q + 3] += sgn * b
    return h


@pytest.fixture(scope="module")
def gfn2():
    from tblite.ase import TBLite

    return lambda: TBLite(method="GFN2-xTB", verbosity=0)


def _lbfgs(atoms, make_calc, fmax=0.005):
    from ase.optimize import LBFGS

    atoms = atoms.copy()
    atoms.calc = make_calc()
    LBFGS(atoms, logfile=None).run(fmax=fmax, steps=1000)
    return atoms, float(atoms.get_potential_energy()) / HARTREE_EV


# -------------------------------------------------------------------------------------- frequencies
def test_diatomic_frequency_matches_textbook_formula():
    # ν̃ = (1/2πc) √(k/μ) for a harmonic diatomic (e.g. Atkins, Physical Chemistry, ch. 12); H2 with
    # k = 36 eV/Å² and μ = m_H/2.  One linear molecule: 3N − 5 = 1 frequency.
    atoms = Atoms("H2", positions=[[0, 0, 0], [0, 0, 0.74]])
    k_si = 36.0 * U._e / 1e-20                        # J/m²
    mu = atoms.get_masses()[0] / 2 * U._amu           # kg
    expected = math.sqrt(k_si / mu) / (2 * math.pi * U._c) / 100.0   # cm-1
    freqs, modes = frequencies(spring_hessian(atoms, k=36.0), atoms)
    assert freqs.shape == (1,) and modes.shape == (1, 2, 3)
    assert freqs[0] == pytest.approx(expected, rel=1e-9)
    assert np.allclose(np.abs(modes[0][:, 2]), 1 / math.sqrt(2))   # antisymmetric stretch along z


def test_frequencies_match_ase_vibrations_data_for_invariant_hessian():
    """For a Hessian with exact translational/rotational invariance the projection must not change the
    internal spectrum: ours equal ASE's VibrationsData frequencies without its six zeros."""
    from ase.vibrations import VibrationsData

    atoms = cyclohexane(0.0, 0.0)
    h = spring_hessian(atoms)
    ours, modes = frequencies(h, atoms)
    ref = VibrationsData(atoms, h.reshape(len(atoms), 3, len(atoms), 3)).get_frequencies()
    ref = np.sort(ref.real)[6:] * (U.invcm / create_units("2014").invcm)   # ASE's plain units are CODATA 2014
    assert ours.shape == (3 * len(atoms) - 6,)
    assert np.allclose(ours, ref, rtol=1e-6, atol=1e-4)
    # modes: unit Cartesian vectors, free of translation and rotation in the mass-weighted metric
    assert modes.shape == (len(ours), len(atoms), 3)
    assert np.allclose(np.linalg.norm(modes.reshape(len(ours), -1), axis=1), 1.0)
    sq = np.sqrt(np.repeat(atoms.get_masses(), 3))
    ext = external_basis(atoms)
    assert np.abs(ext.T @ (sq[:, None] * modes.reshape(len(ours), -1).T)).max() < 1e-10


def test_projection_removes_external_contamination():
    # adding a large pure-rotation/translation term to H must not change the vibrational frequencies
    atoms = molecule("H2O")
    h = spring_hessian(atoms, k=30.0)
    ext = external_basis(atoms)
    sq = np.sqrt(np.repeat(atoms.get_masses(), 3))
    contamination = (sq[:, None] * ext) @ np.diag(np.arange(1.0, 7.0)) @ (sq[:, None] * ext).T
    assert np.allclose(frequencies(h + contamination, atoms)[0], frequencies(h, atoms)[0], rtol=1e-9)
    with pytest.raises(ChairqmError):
        frequencies(np.zeros((3, 3)), atoms)


def test_gfn2_water_frequencies_match_ase_vibrations(gfn2, tmp_path):
    # same engine, same step: ASE's Vibrations (reference library, no projection) and ours agree to
    # < 1 cm-1 for the three modes of an optimised water molecule
    from ase.vibrations import Vibrations

    atoms, _ = _lbfgs(molecule("H2O"), gfn2, fmax=1e-4)
    ours, _ = frequencies(hessian(atoms, gfn2, tmp_path / "ours"), atoms)
    vib_atoms = atoms.copy()
    vib_atoms.calc = gfn2()
    vib = Vibrations(vib_atoms, name=str(tmp_path / "ase"), delta=0.005, nfree=2)
    vib.run()
    ref = np.sort(vib.get_frequencies().real)[-3:]
    assert np.allclose(ours, ref, atol=1.0)
    assert 1500 < ours[0] < 1700 and 3500 < ours[1] < ours[2] < 3900   # GFN2 water, cf. exp. 1595/3657/3756


# --------------------------------------------------------------------------------------------- cache
@pytest.fixture(scope="module")
def ethane(gfn2):
    return _lbfgs(molecule("C2H6"), gfn2)[0]


def test_hessian_cache_resumes_and_is_identical(gfn2, ethane, tmp_path):
    folder = tmp_path / "ethane"
    first = hessian_run(ethane, gfn2, folder)
    n6 = 2 * (3 * len(ethane) - 6)          # internal directions, both ways
    assert (first.gradient_calls, first.reused) == (n6, 0)
    assert np.allclose(first.hessian, first.hessian.T)
    files = sorted(folder.glob("disp-*.npz"))
    assert len(files) == n6 and not list(folder.glob("*.part"))
    # a full rerun reads everything and computes nothing
    again = hessian_run(ethane, gfn2, folder)
    assert again.gradient_calls == 0 and np.array_equal(again.hessian, first.hessian)
    # an interrupted run: half the displacements lost
    for f in files[::2]:
        f.unlink()
    resumed = hessian_run(ethane, gfn2, folder)
    assert (resumed.gradient_calls, resumed.reused) == (n6 // 2, n6 // 2)
    assert np.array_equal(resumed.hessian, first.hessian)
    record = json.loads((folder / "run.json").read_text())
    assert record["gradient_calls"] == n6 // 2 and record["engine_seconds"] > 0


def test_hessian_split_over_worker_processes_is_bitwise_the_serial_one(ethane, tmp_path):
    """Displacements shared between a spawned worker and this process (including a resumed cache) give
    exactly the serial Hessian: the reliability tests compare output files byte for byte between runs."""
    import multiprocessing as mp
    from concurrent.futures import ProcessPoolExecutor

    from chairqm.stages.records import CalcFactory
    factory = CalcFactory({"engine": "tblite", "method": "GFN2-xTB", "solvent": None, "accuracy": 1.0,
                           "electronic_temperature": 300.0, "charge": 0, "multiplicity": 1})
    serial = hessian_run(ethane, factory, tmp_path / "serial")
    with ProcessPoolExecutor(max_workers=1, mp_context=mp.get_context("spawn")) as ex:
        split = hessian_run(ethane, factory, tmp_path / "split", executor=ex)
        for f in sorted((tmp_path / "split").glob("disp-*.npz"))[::3]:
            f.unlink()
        resumed = hessian_run(ethane, factory, tmp_path / "split", executor=ex)
    n6 = 2 * (3 * len(ethane) - 6)
    assert split.gradient_calls == n6 and resumed.reused == n6 - resumed.gradient_calls > 0
    assert np.array_equal(split.hessian, serial.hessian)
    assert np.array_equal(resumed.hessian, serial.hessian)


def test_hessian_cache_refuses_another_geometry(gfn2, ethane, tmp_path):
    folder = tmp_path / "conformer"
    hessian_run(ethane, gfn2, folder)
    moved = ethane.copy()
    moved.positions[0] += [0.02, 0.0, 0.0]
    assert geometry_key(moved, 0.005) != geometry_key(ethane, 0.005)
    other = hessian_run(moved, gfn2, folder)            # same folder, different geometry
    n = 2 * (3 * len(ethane) - 6)
    assert other.gradient_calls == n and other.reused == 0 and other.cleared == n
    fresh = hessian_run(moved, gfn2, tmp_path / "fresh")
    assert np.array_equal(other.hessian, fresh.hessian)
    # a stray file of a foreign key (copied in by hand) is never read
    stray = sorted((tmp_path / "fresh").glob("disp-*.npz"))[0]
    foreign = np.load(stray)
    np.savez(stray, forces=foreign["forces"] * 0 + 1.0, key=np.array("not-this-geometry"))
    again = hessian_run(moved, gfn2, tmp_path / "fresh")
    assert again.gradient_calls == 1 and np.array_equal(again.hessian, fresh.hessian)
    # a different step is a different key, too
    assert geometry_key(ethane, 0.01) != geometry_key(ethane, 0.005)
    with pytest.raises(ChairqmError):
        hessian(ethane, gfn2, tmp_path / "bad", step=0.0)


def _g_corr_kcal(freqs, atoms):
    from chairqm.thermo import thermochemistry
    return thermochemistry(freqs, atoms, 298.15, 1).g_corr * 627.509


@pytest.mark.parametrize("name", ["C2H6", "C2H2", "CH3CH2OH"])
def test_internal_directions_give_the_cartesian_frequencies(gfn2, name, tmp_path):
    """The default Hessian displaces only along the 3N − 6 (3N − 5 linear) directions that are not
    translations or rotations: 2(3N − 6) gradients instead of 6N.  Its projected frequencies must be the
    full Cartesian Hessian's up to the finite-difference error (both are O(h²) central differences of the
    same gradients): within 1 cm⁻¹ per mode and 0.01 kcal/mol in G − E (common practice: well below
    the 0.1 kcal/mol a free energy is quoted to), for a nonlinear, a linear and a soft-rotor molecule."""
    atoms, _ = _lbfgs(molecule(name), gfn2, fmax=1e-3)
    internal = hessian_run(atoms, gfn2, tmp_path / "int")
    cartesian = hessian_run(atoms, gfn2, tmp_path / "cart", basis="cartesian")
    linear = name == "C2H2"
    assert internal.basis == "internal" and cartesian.basis == "cartesian"
    assert internal.gradient_calls == 2 * (3 * len(atoms) - (5 if linear else 6))
    assert cartesian.gradient_calls == 6 * len(atoms)
    fi, _ = frequencies(internal.hessian, atoms)
    fc, _ = frequencies(cartesian.hessian, atoms)
    assert len(fi) == len(fc) == 3 * len(atoms) - (5 if linear else 6)
    assert np.max(np.abs(fi - fc)) < 1.0
    assert abs(_g_corr_kcal(fi, atoms) - _g_corr_kcal(fc, atoms)) < 0.01
    # the returned Cartesian Hessian has the translations and rotations projected out exactly
    m = np.repeat(atoms.get_masses(), 3)
    fm = internal.hessian / np.sqrt(np.outer(m, m))
    assert np.max(np.abs(fm @ external_basis(atoms))) < 1e-8 * np.max(np.abs(fm))


def test_internal_directions_are_kept_with_their_displacements(gfn2, ethane, tmp_path):
    """A resumed internal Hessian uses the directions on record; displacements whose directions are lost
    are not trusted (recomputed, never mixed with freshly computed directions)."""
    folder = tmp_path / "eth"
    first = hessian_run(ethane, gfn2, folder)
    n = first.gradient_calls
    assert (folder / "directions.npz").is_file() and len(list(folder.glob("disp-v*.npz"))) == n
    (folder / "directions.npz").unlink()
    again = hessian_run(ethane, gfn2, folder)
    assert again.gradient_calls == n and again.reused == 0
    assert np.allclose(again.hessian, first.hessian, atol=1e-8)
    # the same geometry's Cartesian cache is another key: the folder is cleared, not mixed
    cart = hessian_run(ethane, gfn2, folder, basis="cartesian")
    assert cart.gradient_calls == 6 * len(ethane) and cart.cleared == n
    assert not (folder / "directions.npz").exists()
    with pytest.raises(ChairqmError):
        hessian_run(ethane, gfn2, tmp_path / "bad", basis="spherical")


# -------------------------------------------------------------------------------------- minimum proof
@pytest.fixture(scope="module")
def boat(gfn2):
    """The C2v boat optimised from its exact symmetric start: the optimiser keeps the symmetry, so it
    converges to the boat saddle point (GFN2-xTB: one imaginary mode ≈ 100i cm-1)."""
    return _lbfgs(cyclohexane(90.0, 0.0), gfn2)


def test_boat_saddle_is_driven_to_a_twist_boat(gfn2, boat, tmp_path_factory):
    from chairqm.symmetry import symmetry_number

    atoms, energy = boat
    assert symmetry_number(atoms) == (2, "C2v")
    _, theta, phi = cremer_pople(atoms.positions[:6])
    assert abs(theta - 90) < 1 and min(phi % 60, 60 - phi % 60) < 1          # a boat: φ = k·60°
    cache = tmp_path_factory.mktemp("boat-proof")
    proof = prove_minimum(atoms, gfn2, lambda a: _lbfgs(a, gfn2), cache, energy_hartree=energy)
    assert proof.status == "minimum" and proof.n_imaginary == 0 and 1 <= proof.rounds <= 3
    assert proof.freqs[0] > 15.0 and len(proof.freqs) == 48
    assert "imaginary" in proof.history[0] and "lowered" in proof.history[0]
    # the boat lies above the twist-boat: ≈ 1 kcal/mol (force fields and ab initio: 0.8–1.5 kcal/mol,
    # e.g. Dixon & Komornicki, J. Phys. Chem. 1990, 94, 5630, from memory)
    lowered = (energy - proof.energy_hartree) * 627.509
    assert 0.3 < lowered < 3.0
    # Cremer–Pople classification of the result: θ ≈ 90°, φ ≈ 30° + k·60° (twist-boat)
    _, theta, phi = cremer_pople(proof.atoms.positions[:6])
    assert abs(theta - 90) < 5 and abs((phi - 30) % 60 - 30) > 25
    assert symmetry_number(proof.atoms) == (4, "D2")
    assert (cache / "round0").is_dir() and (cache / f"round{proof.rounds}").is_dir()
    assert proof.gradient_calls == 2 * (3 * len(atoms) - 6) * (proof.rounds + 1)


def test_proof_records_failures_and_exhausted_rounds(gfn2, boat, tmp_path):
    atoms, energy = boat
    cache = tmp_path / "proof"
    stuck = prove_minimum(atoms, gfn2, lambda a: _lbfgs(a, gfn2), cache, max_rounds=0, energy_hartree=energy)
    assert stuck.status == "saddle-remains" and stuck.n_imaginary == 1 and stuck.rounds == 0
    assert -130 < stuck.freqs[0] < -70            # GFN2 boat: ≈ 100i cm-1 (measured 102–104i here)

    def broken(_):
        raise RuntimeError("SCF did not converge")

    failed = prove_minimum(atoms, gfn2, broken, cache, energy_hartree=energy)   # round 0 comes from the cache
    assert failed.status == "failed" and "SCF did not converge" in failed.history[-1]
    assert failed.gradient_calls == 0
    # a residual mode below the threshold is reported, not followed
    relaxed = prove_minimum(atoms, gfn2, broken, cache, threshold_cm1=200.0, energy_hartree=energy)
    assert relaxed.status == "minimum" and relaxed.small_imaginary == [pytest.approx(-stuck.freqs[0])]
