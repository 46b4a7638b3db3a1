"""Tests for chairqm.optimize: a published conformational energy, failure isolation, bond and stereo checks."""

import os

os.environ.setdefault("OMP_NUM_THREADS", "1")  # before tblite/xtb are imported

import numpy as np
import pytest
from ase import Atoms
from ase.calculators.calculator import CalculationFailed
from rdkit import Chem
from rdkit.Chem import AllChem, rdMolTransforms

from chairqm.engine import make_calculator
from chairqm.optimize import (DEFAULT_OPTIMIZER, OPTIMIZERS, bond_graph, check_bonds, check_stereo, optimize,
                              stereo_reference)
from chairqm.units import KCAL_PER_HARTREE


def gfn2(temperature):
    return make_calculator("tblite", "GFN2-xTB", electronic_temperature=temperature)


def to_atoms(mol, cid=-1):
    return Atoms([a.GetSymbol() for a in mol.GetAtoms()], positions=mol.GetConformer(cid).GetPositions())


def ring_atoms(mol):
    ring = list(next(r for r in mol.GetRingInfo().AtomRings() if len(r) == 6))
    order = [ring[0]]
    while len(order) < 6:
        order.append(next(n.GetIdx() for n in mol.GetAtomWithIdx(order[-1]).GetNeighbors()
                          if n.GetIdx() in ring and n.GetIdx() not in order))
    return order


def ring_torsions(positions, ring):
    p = np.asarray(positions)
    out = []
    for k in range(6):
        a, b, c, d = (p[ring[(k + m) % 6]] for m in range(4))
        b0, b1, b2 = a - b, c - b, d - c
        n1, n2 = np.cross(b0, b1), np.cross(b1, b2)
        x = np.dot(n1, n2)
        y = np.dot(np.cross(n1, n2), b1 / np.linalg.norm(b1))
        out.append(np.degrees(np.arctan2(y, x)))
    return np.array(out)


def is_chair(positions, ring):
    # chair: ring torsions alternate in sign and none is small (common practice; ideal chair ±55°)
    t = ring_torsions(positions, ring)
    return all(np.sign(t[k]) != np.sign(t[(k + 1) % 6]) for k in range(6)) and np.abs(t).min() > 30


def is_axial(positions, ring, ring_atom, sub_atom):
    p = np.asarray(positions)
    centred = p[ring] - p[ring].mean(0)
    normal = np.linalg.svd(centred)[2][2]
    bond = p[sub_atom] - p[ring_atom]
    return abs(np.dot(bond / np.linalg.norm(bond), normal)) > 0.7


def methylcyclohexane_chairs():
    """MMFF94 equatorial and axial chairs of methylcyclohexane (atom 0 = methyl C, atom 1 = ring C1)."""
    mol = Chem.AddHs(Chem.MolFromSmiles("CC1CCCCC1"))
    cids = list(AllChem.EmbedMultipleConfs(mol, 30, randomSeed=7))
    AllChem.MMFFOptimizeMoleculeConfs(mol, maxIters=2000)
    ring = ring_atoms(mol)
    found = {}
    for cid in cids:
        pos = mol.GetConformer(cid).GetPositions()
        if is_chair(pos, ring):
            found.setdefault("ax" if is_axial(pos, ring, 1, 0) else "eq", cid)
    assert set(found) == {"ax", "eq"}
    return mol, ring, {k: to_atoms(mol, cid) for k, cid in found.items()}


@pytest.fixture(scope="module")
def mch():
    return methylcyclohexane_chairs()


# ----------------------------------------------------------------------------- a published number
def test_methylcyclohexane_axial_minus_equatorial_energy(mch):
    # CCSD(T)/CBS ΔE(axial − equatorial) of methylcyclohexane = 1.75 kcal/mol (Weldon, Vickrey,
    # Tschumper, J. Phys. Chem. A 2005, 109, 11073).  GFN2-xTB must be within 0.5 kcal/mol.
    mol, ring, chairs = mch
    res = {k: optimize(a, gfn2) for k, a in chairs.items()}
    for k, r in res.items():
        assert r.status == "ok" and r.converged and r.fmax_final <= 0.005, (k, r.reason)
        assert r.optimizer == DEFAULT_OPTIMIZER and r.gradient_calls >= r.steps > 0
        # the optimiser kept the form it was given: still a chair, methyl still axial/equatorial
        assert is_chair(r.atoms.positions, ring)
        assert is_axial(r.atoms.positions, ring, 1, 0) == (k == "ax")
    d = (res["ax"].energy_hartree - res["eq"].energy_hartree) * KCAL_PER_HARTREE
    assert abs(d - 1.75) < 0.5, d


@pytest.fixture(scope="module")
def tight_eq(mch):
    return optimize(mch[2]["eq"], gfn2, optimizer="lbfgs", fmax=0.001)


@pytest.mark.parametrize("name", OPTIMIZERS)
def test_every_optimizer_reaches_the_same_minimum(mch, tight_eq, name):
    # Different algorithms on one potential energy surface must find the same minimum from one start
    # (energy within 0.01 kcal/mol at fmax 0.005 eV/Å: quadratic region, E − E_min ~ fmax²/k).
    mol, ring, chairs = mch
    ref = tight_eq
    r = optimize(chairs["eq"], gfn2, optimizer=name)
    assert r.status == "ok", r.reason
    assert abs(r.energy_hartree - ref.energy_hartree) * KCAL_PER_HARTREE < 0.01


def test_unknown_optimizer_is_a_user_error(mch):
    from chairqm.errors import ChairqmError

    with pytest.raises(ChairqmError, match="precon-lbfgs"):
        optimize(mch[2]["eq"], gfn2, optimizer="newton")


# -------------------------------------------------------------------------------- failure handling
def test_forced_scf_failure_is_isolated(mch):
    # A calculator that always raises must give 'failed' with the engine's message, and must not affect
    # the next conformer.
    class Broken(CalculationFailed):
        pass

    def broken_factory(temperature):
        calc = gfn2(temperature)

        def calculate(*args, **kwargs):
            raise Broken(f"SCF did not converge at {temperature:g} K (forced)")
        calc.calculate = calculate
        return calc

    chairs = mch[2]
    bad = optimize(chairs["ax"], broken_factory)
    assert bad.status == "failed" and not bad.converged and np.isnan(bad.energy_hartree)
    assert "SCF did not converge at 300 K (forced)" in bad.reason
    assert "3000 K" in bad.reason           # every fallback temperature was tried
    good = optimize(chairs["eq"], gfn2)
    assert good.status == "ok"


def test_real_scf_failure_reports_engine_message(mch):
    # One SCF iteration cannot converge at any temperature: tblite's own message must reach the record.
    r = optimize(mch[2]["eq"], lambda t: make_calculator("tblite", "GFN2-xTB", electronic_temperature=t,
                                                          max_iterations=1))
    assert r.status == "failed" and "SCF not converged" in r.reason


def test_atoms_on_top_of_each_other_fail_cleanly():
    atoms = Atoms("OHH", positions=[[0, 0, 0], [0, 0, 0], [0.0, 0.76, 0.59]])
    r = optimize(atoms, gfn2)
    assert r.status == "failed" and r.reason


def test_fallback_at_higher_electronic_temperature_recovers(mch):
    # The SCF fails only at the start geometry and only below 900 K: the documented fallback
    # (pre-optimise at 1000 K, re-converge at 300 K) must recover, and report the energy at 300 K.
    from tblite.ase import TBLite

    start = mch[2]["eq"]
    first = start.positions.copy()

    class Flaky(TBLite):
        def calculate(self, atoms=None, properties=None, system_changes=None):
            if self.parameters.electronic_temperature < 900 and np.allclose(atoms.positions, first):
                raise CalculationFailed("SCF not converged (forced)")
            return super().calculate(atoms, properties, system_changes)

    r = optimize(start, lambda t: Flaky(method="GFN2-xTB", electronic_temperature=t, verbosity=0))
    plain = optimize(start, gfn2)
    assert r.status == "ok" and "1000 K" in r.fallback and r.electronic_temperature == 300.0
    assert abs(r.energy_hartree - plain.energy_hartree) * KCAL_PER_HARTREE < 0.01


def test_step_limit_gives_not_converged(mch):
    # the second optimiser itself is not continued by anything: max_steps is where it stops
    from chairqm.optimize import SECOND_OPTIMIZER
    r = optimize(mch[2]["ax"], gfn2, max_steps=2, optimizer=SECOND_OPTIMIZER)
    assert r.status == "not-converged" and not r.converged and r.fmax_final > 0.005
    assert "max_steps" in r.reason and np.isfinite(r.energy_hartree)
    assert "continued" not in r.fallback and r.steps == 2


def test_another_optimiser_left_short_is_continued_by_the_second(mch):
    # bfgs-model stopped at max_steps: PreconLBFGS goes on from the geometry reached for max_steps more,
    # and says so (the default optimiser, so `optimize` without a name does the same); with room to
    # converge, the result is the minimum PreconLBFGS alone finds
    from chairqm.optimize import SECOND_OPTIMIZER
    short = optimize(mch[2]["ax"], gfn2, max_steps=2, optimizer="bfgs-model")
    assert "bfgs-model stopped short" in short.fallback and "precon-lbfgs" in short.fallback
    assert short.steps == 4 and short.optimizer == "bfgs-model"
    default = optimize(mch[2]["ax"], gfn2, max_steps=2)
    assert default.optimizer == "bfgs-model" and default.steps == 4 and "continued with" in default.fallback
    done = optimize(mch[2]["ax"], gfn2, max_steps=6, optimizer="bfgs-model")
    plain = optimize(mch[2]["ax"], gfn2, optimizer=SECOND_OPTIMIZER)
    assert done.status == "ok" and plain.status == "ok"
    assert abs(done.energy_hartree - plain.energy_hartree) * KCAL_PER_HARTREE < 0.01


# ----------------------------------------------------------------------------------------- bonds
def test_bond_graph_of_methylcyclohexane(mch):
    # C7H14: 7 C–C bonds (6 ring + 1 methyl) and 14 C–H bonds, nothing else.
    g = bond_graph(mch[2]["eq"])
    assert len(g) == 21


def test_stretched_bond_is_caught(mch):
    atoms = mch[2]["eq"].copy()
    ref = bond_graph(atoms)
    assert check_bonds(ref, atoms) == (True, "")
    # pull the methyl carbon (with its H) 0.9 Å away from C1 along the bond: C–C 1.53 → 2.4 Å
    v = atoms.positions[0] - atoms.positions[1]
    v /= np.linalg.norm(v)
    methyl = [0] + [n for n in range(atoms.get_global_number_of_atoms())
                    if atoms.numbers[n] == 1 and atoms.get_distance(0, n) < 1.2]
    atoms.positions[methyl] += 0.9 * v
    ok, reason = check_bonds(ref, atoms)
    assert not ok and "broken C0–C1" in reason


def test_new_bond_is_caught(mch):
    atoms = mch[2]["eq"].copy()
    ref = bond_graph(atoms)
    hs = [i for i, z in enumerate(atoms.numbers) if z == 1]
    atoms.positions[hs[0]] = atoms.positions[hs[5]] + [0.0, 0.0, 0.7]   # H on top of another H
    ok, reason = check_bonds(ref, atoms)
    assert not ok and "new" in reason and f"H{hs[0]}" in reason


# ---------------------------------------------------------------------------------------- stereo
def embed(smiles, seed=5):
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    assert AllChem.EmbedMolecule(mol, randomSeed=seed) == 0
    AllChem.MMFFOptimizeMolecule(mol)
    return mol


def test_stereo_unchanged_passes():
    mol = embed("C[C@H]1CC[C@@H](C)CC1")   # trans-1,4-dimethylcyclohexane: ring stereo, no R/S
    assert check_stereo(mol, mol.GetConformer().GetPositions()) == (True, "")


def test_inverted_ring_stereocentre_is_caught():
    # trans → cis-1,4-dimethylcyclohexane by swapping the methyl C and the H on ring atom C1 (index 1).
    mol = embed("C[C@H]1CC[C@@H](C)CC1")
    pos = mol.GetConformer().GetPositions()
    h = next(n.GetIdx() for n in mol.GetAtomWithIdx(1).GetNeighbors() if n.GetAtomicNum() == 1)
    pos[[0, h]] = pos[[h, 0]]
    ok, reason = check_stereo(mol, pos)
    assert not ok and "C1 inverted" in reason and "C4" not in reason


def test_mirror_image_of_chiral_molecule_is_caught():
    mol = embed("C[C@@H]1CCCC[C@H]1C")   # trans-1,2-dimethylcyclohexane, chiral
    pos = mol.GetConformer().GetPositions() * [-1.0, 1.0, 1.0]
    ok, reason = check_stereo(mol, pos)
    assert not ok and "C1 inverted" in reason and "C6 inverted" in reason


def test_mirror_image_of_meso_compound_is_the_same_molecule():
    # cis-1,2-dimethylcyclohexane is meso: its reflection is the same stereoisomer, not a change.
    mol = embed("C[C@@H]1CCCC[C@@H]1C")
    pos = mol.GetConformer().GetPositions() * [-1.0, 1.0, 1.0]
    assert check_stereo(mol, pos)[0]


def test_double_bond_isomerisation_is_caught():
    mol = embed("C/C=C/C1CCCCC1")          # (E)-prop-1-enylcyclohexane
    conf = mol.GetConformer()
    assert check_stereo(mol, conf.GetPositions())[0]
    rdMolTransforms.SetDihedralDeg(conf, 0, 1, 2, 3, 0.0)   # make it Z
    ok, reason = check_stereo(mol, conf.GetPositions())
    assert not ok and "double bond C1=C2" in reason


def test_unspecified_centre_checked_against_seed_geometry():
    mol = embed("CC1CCC(C)CC1")            # stereo left unspecified in the input
    seed = mol.GetConformer().GetPositions()
    ref = stereo_reference(mol, seed)
    assert check_stereo(ref, seed)[0]
    flipped = seed.copy()
    h = next(n.GetIdx() for n in mol.GetAtomWithIdx(1).GetNeighbors() if n.GetAtomicNum() == 1)
    flipped[[0, h]] = flipped[[h, 0]]
    assert not check_stereo(ref, flipped)[0]


def test_optimizer_error_is_retried_with_lbfgs(mch, monkeypatch):
    # An exception raised by the optimiser itself (not by the engine) must not be taken for an SCF
    # failure: the run is repeated once with L-BFGS and that is recorded.
    import chairqm.optimize as opt_mod

    original = opt_mod._run_ase

    def exploding(name, *args, **kwargs):
        if name == "precon-lbfgs":
            raise ValueError("preconditioner blew up (forced)")
        return original(name, *args, **kwargs)

    monkeypatch.setattr(opt_mod, "_run_ase", exploding)
    r = optimize(mch[2]["eq"], gfn2, optimizer="precon-lbfgs")
    assert r.status == "ok" and "repeated with lbfgs" in r.fallback and "blew up" in r.fallback
    assert not any("Tel=1000" in a for a in r.attempts)      # no electronic-temperature fallback


def test_record_is_json_and_units_are_consistent(mch):
    import json

    from chairqm.units import BOHR_A, HARTREE_EV

    r = optimize(mch[2]["eq"], gfn2)
    rec = json.loads(json.dumps(r.record()))
    assert rec["status"] == "ok" and rec["fmax_criterion"] == 0.005
    # the RMS Cartesian gradient (Eh/bohr) cannot exceed the largest atomic force (eV/Å) converted
    assert 0 < rec["gradient_norm"] <= rec["fmax_final"] * BOHR_A / HARTREE_EV
    a = r.atoms.copy()
    a.calc = gfn2(300.0)
    assert abs(a.get_potential_energy() / HARTREE_EV - r.energy_hartree) < 1e-8
