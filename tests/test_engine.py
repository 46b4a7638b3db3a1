"""Tests for chairqm.engine: two implementations of GFN2-xTB agree, solvent names are checked, ALPB works."""

import os

os.environ.setdefault("OMP_NUM_THREADS", "1")  # before tblite/xtb are imported

import importlib.metadata
import importlib.util

import numpy as np
import pytest
from ase import Atoms
from rdkit import Chem
from rdkit.Chem import AllChem

from chairqm import engine
from chairqm.errors import ChairqmError
from chairqm.units import BOHR_A, HARTREE_EV, KCAL_PER_HARTREE

HAVE_XTB = importlib.util.find_spec("xtb") is not None
needs_xtb = pytest.mark.skipif(not HAVE_XTB, reason="xtb-python not installed")


def embedded(smiles, seed=11):
    """An MMFF94 geometry (not a GFN2 minimum: non-zero gradients make the comparison stricter)."""
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    assert AllChem.EmbedMolecule(mol, randomSeed=seed) == 0
    AllChem.MMFFOptimizeMolecule(mol)
    return Atoms([a.GetSymbol() for a in mol.GetAtoms()], positions=mol.GetConformer().GetPositions())


def energy_gradient(atoms, calc):
    a = atoms.copy()
    a.calc = calc
    e = a.get_potential_energy() / HARTREE_EV
    g = -a.get_forces() * BOHR_A / HARTREE_EV
    return e, g


# ------------------------------------------------------------------------ two implementations agree
@needs_xtb
@pytest.mark.parametrize("smiles", ["CC1CCCCC1", "CO", "CC#N"])
def test_tblite_and_xtb_python_agree_gfn2_gas(smiles):
    # Both engines implement the same published GFN2-xTB (Bannwarth, Ehlert, Grimme, JCTC 2019, 15,
    # 1652); independent codes must give the same energy and gradient at the same geometry.
    # Tolerances 1e-5 Eh and 1e-5 Eh/bohr as set in the project's issue (DESIGN.md measured < 4e-7).
    atoms = embedded(smiles)
    e1, g1 = energy_gradient(atoms, engine.make_calculator("tblite", "GFN2-xTB"))
    e2, g2 = energy_gradient(atoms, engine.make_calculator("xtb-python", "GFN2-xTB"))
    assert abs(e1 - e2) < 1e-5
    assert np.abs(g1 - g2).max() < 1e-5
    assert np.abs(g1).max() > 1e-4  # a real gradient was compared, not two zeros


@needs_xtb
@pytest.mark.parametrize("symbols,positions,charge,mult", [
    ("OH", [[0, 0, 0], [0, 0, 0.97]], -1, 1),          # hydroxide anion
    ("CH3", [[0, 0, 0], [1.08, 0, 0], [-0.54, 0.935, 0], [-0.54, -0.935, 0]], 0, 2),  # methyl radical
])
def test_charge_and_multiplicity_reach_both_engines(symbols, positions, charge, mult):
    # Same method in two codes (Bannwarth et al. 2019): they agree for an ion and a radical only if
    # charge and spin are passed correctly to each; the neutral/closed-shell value must differ.
    atoms = Atoms(symbols, positions=positions)
    e1, _ = energy_gradient(atoms, engine.make_calculator("tblite", "GFN2-xTB", charge=charge, multiplicity=mult))
    e2, _ = energy_gradient(atoms, engine.make_calculator("xtb-python", "GFN2-xTB", charge=charge,
                                                          multiplicity=mult))
    assert abs(e1 - e2) < 1e-5
    other = dict(charge=0, multiplicity=2) if charge else dict(charge=1, multiplicity=1)
    e3, _ = energy_gradient(atoms, engine.make_calculator("tblite", "GFN2-xTB", **other))
    assert abs(e3 - e1) > 1e-2


@needs_xtb
def test_gbsa_water_agrees_between_engines():
    # GBSA(water) with GFN2-xTB is one published parametrisation in both codes, so they must agree.
    atoms = embedded("CO")
    solv = {"model": "gbsa", "name": "water"}
    e1, g1 = energy_gradient(atoms, engine.make_calculator("tblite", "GFN2-xTB", solvent=solv))
    e2, g2 = energy_gradient(atoms, engine.make_calculator("xtb-python", "GFN2-xTB", solvent=solv))
    assert abs(e1 - e2) < 1e-5
    assert np.abs(g1 - g2).max() < 1e-5


# ------------------------------------------------------------------------------- solvent checking
@pytest.mark.parametrize("eng,model", [("tblite", "alpb"), ("tblite", "gbsa"),
                                       pytest.param("xtb-python", "gbsa", marks=needs_xtb)])
def test_misspelt_solvent_rejected_with_valid_list(eng, model):
    with pytest.raises(ChairqmError) as info:
        engine.check_settings(eng, "GFN2-xTB", {"model": model, "name": "watr"})
    msg = str(info.value)
    assert "watr" in msg and "Did you mean 'water'" in msg
    for name in engine.valid_solvents(eng, model):
        assert name in msg
    with pytest.raises(ChairqmError):
        engine.make_calculator(eng, "GFN2-xTB", solvent={"model": model, "name": "watr"})


@needs_xtb
def test_alpb_with_xtb_python_is_an_error_naming_the_fix():
    with pytest.raises(ChairqmError) as info:
        engine.check_settings("xtb-python", "GFN2-xTB", {"model": "alpb", "name": "water"})
    assert "tblite" in str(info.value) and "gbsa" in str(info.value).lower()


def test_unknown_engine_and_method():
    with pytest.raises(ChairqmError, match="tblite"):
        engine.check_settings("tblight", "GFN2-xTB", None)
    with pytest.raises(ChairqmError, match="GFN2-xTB"):
        engine.check_settings("tblite", "GFN3-xTB", None)
    with pytest.raises(ChairqmError, match="alpb or gbsa"):
        engine.check_settings("tblite", "GFN2-xTB", {"model": "cosmo", "name": "water"})
    engine.check_settings("tblite", "gfn2-xtb", None)  # spelling of the method is forgiving


def test_alias_accepted_by_tblite_itself():
    # tblite's own lookup also knows 'h2o' (not a parameter-set name); check_settings asks tblite.
    engine.check_settings("tblite", "GFN2-xTB", {"model": "alpb", "name": "h2o"})
    engine.check_settings("tblite", "GFN2-xTB", {"model": "alpb", "name": "Water"})


def _methanol():
    return embedded("CO")


@pytest.mark.parametrize("eng,model,method", [
    ("tblite", "alpb", "GFN2-xTB"), ("tblite", "alpb", "GFN1-xTB"),
    ("tblite", "gbsa", "GFN2-xTB"), ("tblite", "gbsa", "GFN1-xTB"),
    pytest.param("xtb-python", "gbsa", "GFN2-xTB", marks=needs_xtb),
    pytest.param("xtb-python", "gbsa", "GFN1-xTB", marks=needs_xtb),
])
def test_every_listed_solvent_really_solvates(eng, model, method):
    # Each listed name must reach the engine's parameters: a polar solute (methanol) is stabilised in
    # every liquid (negative solvation free energies for methanol in all these solvents, from memory of
    # the Minnesota Solvation Database), so the energy must drop, by more than 0.1 kcal/mol, versus gas.
    # A name that silently fell back to the gas phase would give exactly zero.
    names = engine.valid_solvents(eng, model, method)
    assert len(names) >= 10
    atoms = _methanol()
    gas, _ = energy_gradient(atoms, engine.make_calculator(eng, method))
    for name in names:
        e, _ = energy_gradient(atoms, engine.make_calculator(eng, method, solvent={"model": model, "name": name}))
        assert (e - gas) * KCAL_PER_HARTREE < -0.1, name


def test_tblite_table_read_from_library_matches_what_library_accepts():
    # The names come from the parameter-set symbols in tblite's shared library; the library itself must
    # accept each, and reject a name that is not there (so the list is neither too long nor invented).
    table = engine._tblite_symbol_table()
    assert table, "tblite library symbols not readable: the fallback table is in use"
    for (model, method), names in table.items():
        for name in names:
            assert engine._tblite_accepts(model, method, name), (model, method, name)
        assert not engine._tblite_accepts(model, method, "watr")
    # GFN1-xTB has no GBSA parameters for DMF (tblite/xtb parameter files); the listing must say so.
    assert "dmf" in table[("gbsa", "GFN2-xTB")] and "dmf" not in table[("gbsa", "GFN1-xTB")]


def test_fallback_table_matches_installed_tblite_0_8():
    if not importlib.metadata.version("tblite").startswith("0.8."):
        pytest.skip("fallback table was measured for tblite 0.8")
    table = engine._tblite_symbol_table()
    assert table[("alpb", "GFN2-xTB")] == engine._TBLITE_SOLVENTS_0_8["alpb"]
    assert table[("alpb", "GFN1-xTB")] == engine._TBLITE_SOLVENTS_0_8["alpb"]
    for method in ("GFN2-xTB", "GFN1-xTB"):
        assert table[("gbsa", method)] == engine._TBLITE_SOLVENTS_0_8[("gbsa", method)]


def test_alpb_water_lowers_energy_of_methanol_near_experiment():
    # ALPB (Ehlert et al., JCTC 2021, 17, 4250) at a fixed geometry gives the solvation free energy.
    # Experimental hydration free energy of methanol: -5.1 kcal/mol (from memory; FreeSolv/MNSol).
    # ALPB's published error for water is about 1 kcal/mol; allow 1.5.
    atoms = _methanol()
    gas, _ = energy_gradient(atoms, engine.make_calculator("tblite", "GFN2-xTB"))
    wat, _ = energy_gradient(atoms, engine.make_calculator("tblite", "GFN2-xTB",
                                                           solvent={"model": "alpb", "name": "water"}))
    dg = (wat - gas) * KCAL_PER_HARTREE
    assert dg < 0
    assert abs(dg - (-5.1)) < 1.5


# ------------------------------------------------------------------------------------ bookkeeping
def test_counting_calculator_counts_single_points():
    atoms = _methanol()
    calc = engine.CountingCalculator(engine.make_calculator("tblite", "GFN2-xTB"))
    atoms.calc = calc
    e0 = atoms.get_potential_energy()
    atoms.get_forces()            # same geometry: cached, no new call
    assert calc.calls == 1
    atoms.positions[0, 0] += 0.01
    e1 = atoms.get_potential_energy()
    assert calc.calls == 2 and e1 != e0 and calc.seconds > 0


def test_engine_versions_from_metadata():
    v = engine.engine_versions()
    assert v["tblite"] == importlib.metadata.version("tblite")
    assert (v["xtb-python"] is not None) == HAVE_XTB


def test_set_threads_sets_variables(monkeypatch):
    for var in engine.THREAD_VARIABLES:
        monkeypatch.setenv(var, "7")
    import sys
    effective = engine.set_threads(1)
    assert all(os.environ[v] == "1" for v in engine.THREAD_VARIABLES)
    assert effective == ("tblite" not in sys.modules and "xtb" not in sys.modules)
    with pytest.raises(ChairqmError):
        engine.set_threads(0)
