"""DFT refinement (chairqm.dft, chairqm.refine): PySCF single points against published energies, D3 against
published parameters, the composite free energy and the conformer selection by hand, settings checks,
failure isolation."""

import os

os.environ.setdefault("OMP_NUM_THREADS", "1")  # before tblite / PySCF are imported

import math

import numpy as np
import pandas as pd
import pytest
from ase import Atoms
from ase.build import molecule

pyscf = pytest.importorskip("pyscf")
dftd3_interface = pytest.importorskip("dftd3.interface")

from chairqm import dft as cq_dft  # noqa: E402
from chairqm import refine  # noqa: E402
from chairqm.errors import ChairqmError  # noqa: E402
from chairqm.units import BOHR_A, KCAL_PER_HARTREE  # noqa: E402

HF_STO3G = {"functional": "HF", "basis": "STO-3G", "dispersion": "none", "density_fitting": False,
            "conv_tol": 1e-11}


def water_crawford() -> Atoms:
    # Water geometry of the Crawford group's programming projects, Project #3 (the Hartree-Fock SCF),
    # input file geom.dat, in bohr (from memory).
    bohr = np.array([[0.000000000000, -0.143225816552, 0.000000000000],
                     [1.638036840407, 1.136548822547, -0.000000000000],
                     [-1.638036840407, 1.136548822547, -0.000000000000]])
    return Atoms("OHH", positions=bohr * BOHR_A)


# ---------------------------------------------------------------------------- published SCF energies
def test_hf_sto3g_water_reproduces_the_published_total_energy():
    # Crawford group programming projects, Project #3: nuclear repulsion 8.002367061810450 Eh and
    # RHF/STO-3G total energy -74.942079928192 Eh at this geometry (from memory).
    w = water_crawford()
    mol = cq_dft.build_mole(w, 0, 1, "STO-3G")
    assert mol.energy_nuc() == pytest.approx(8.002367061810450, abs=1e-8)
    r = cq_dft.single_point(w, 0, 1, HF_STO3G)
    assert r["converged"] and r["message"] == ""
    assert r["e_disp"] == 0.0
    assert r["energy_hartree"] == pytest.approx(-74.942079928192, abs=1e-6)


def test_hf_sto3g_water_at_the_experimental_geometry_matches_szabo_ostlund():
    # Szabo & Ostlund, Modern Quantum Chemistry (1989), Table 3.13: H2O at R = 1.809 bohr, angle 104.52 deg,
    # STO-3G energy -74.963 Eh (from memory; published to 1 mEh).
    r, ang = 1.809 * BOHR_A, math.radians(104.52)
    w = Atoms("OHH", positions=[[0, 0, 0], [r, 0, 0], [r * math.cos(ang), r * math.sin(ang), 0]])
    res = cq_dft.single_point(w, 0, 1, HF_STO3G)
    assert res["energy_hartree"] == pytest.approx(-74.963, abs=6e-4)


# ------------------------------------------------------------------- a second program's DFT energies
# Water at the experimental equilibrium geometry r(OH) = 0.9572 A, angle 104.52 deg (Hoy, Bunker,
# J. Mol. Spectrosc. 1979, 74, 1; from memory), def2-SVP, exact integrals, converged tightly.
# Reference: Psi4 1.3.2 (Turney et al., WIREs Comput. Mol. Sci. 2012, 2, 556; the Debian package
# psi4 1:1.3.2+dfsg-5), an independent implementation of the same functionals (through Libxc) and basis;
# printed on 2026-12-02 by `psi4 tests/data/psi4_water.py` (input kept beside the tests).  Psi4's B3LYP
# is the VWN-RPA variant, as PySCF's is.  No literature table of these energies could be read here,
# hence a second program rather than a published number.
PSI4_WATER_DEF2SVP = {"HF": -75.9610148102, "B3LYP": -76.3581208365, "PBE0": -76.2762518010}


def water_experimental() -> Atoms:
    r, ang = 0.9572, math.radians(104.52)
    return Atoms("OHH", positions=[[0, 0, 0], [r, 0, 0], [r * math.cos(ang), r * math.sin(ang), 0]])


@pytest.mark.parametrize("functional", ["HF", "B3LYP", "PBE0"])
def test_water_def2svp_energy_matches_psi4_to_a_microhartree(functional):
    settings = {"functional": functional, "basis": "def2-SVP", "dispersion": "none", "density_fitting": False,
                "grid_level": 9, "conv_tol": 1e-11}
    r = cq_dft.single_point(water_experimental(), 0, 1, settings)
    assert r["converged"] and r["e_disp"] == 0.0
    assert r["energy_hartree"] == pytest.approx(PSI4_WATER_DEF2SVP[functional], abs=1e-6)


def test_density_fitting_costs_water_far_less_than_a_millihartree():
    # the def2 JKFIT auxiliary basis: density-fitting errors in total energies are ~1e-5 Eh per atom
    # (Weigend, J. Comput. Chem. 2008, 29, 167; from memory); relative conformer energies cancel them
    r = cq_dft.single_point(water_experimental(), 0, 1, {"basis": "def2-SVP", "dispersion": "none"})
    assert abs(r["energy_hartree"] - PSI4_WATER_DEF2SVP["B3LYP"]) < 1e-4


@pytest.mark.slow
@pytest.mark.skipif(__import__("shutil").which("psi4") is None, reason="psi4 is not installed (apt install psi4)")
def test_psi4_still_prints_the_stored_reference(tmp_path):
    # reruns the second program, when it is installed, so the stored numbers above can be re-derived
    import subprocess
    from pathlib import Path

    script = Path(__file__).parent / "data" / "psi4_water.py"
    out = subprocess.run(["psi4", str(script)], cwd=tmp_path, capture_output=True, text=True, timeout=600,
                         env=dict(os.environ, OMP_NUM_THREADS="1"))
    assert out.returncode == 0, out.stderr[-2000:]
    got = {line.split()[0].upper(): float(line.split()[1]) for line in out.stdout.splitlines()
           if line.split() and line.split()[0] in ("hf", "b3lyp", "pbe0")}
    assert got.keys() == PSI4_WATER_DEF2SVP.keys()
    for k, v in PSI4_WATER_DEF2SVP.items():
        assert got[k] == pytest.approx(v, abs=1e-8)


# ---------------------------------------------------------------------------------------- dispersion
def _d3_reference(atoms, param):
    model = dftd3_interface.DispersionModel(atoms.get_atomic_numbers(), atoms.get_positions() / BOHR_A)
    return model.get_dispersion(param, grad=False)["energy"]


def test_d3bj_uses_the_published_b3lyp_parameters():
    # B3LYP-D3(BJ): s6 = 1, a1 = 0.3981, s8 = 1.9889, a2 = 4.4211 bohr (Grimme, Ehrlich, Goerigk,
    # J. Comput. Chem. 2011, 32, 1456, Table 2; from memory). Two-body only.
    a = molecule("CH3CH2OH")
    ref = _d3_reference(a, dftd3_interface.RationalDampingParam(s6=1.0, a1=0.3981, s8=1.9889, a2=4.4211, s9=0.0))
    e = cq_dft.dispersion_energy(a.get_atomic_numbers(), a.get_positions(), "B3LYP", "d3bj")
    assert e < 0
    assert e == pytest.approx(ref, abs=1e-10)


def test_d3zero_uses_the_published_b3lyp_parameters():
    # B3LYP-D3(0): s6 = 1, sr6 = 1.261, s8 = 1.703 (Grimme, Antony, Ehrlich, Krieg, J. Chem. Phys. 2010,
    # 132, 154104, Table IV; from memory); sr8 = 1 and alpha = 14 by construction. Two-body only.
    a = molecule("CH3CH2OH")
    ref = _d3_reference(a, dftd3_interface.ZeroDampingParam(s6=1.0, rs6=1.261, s8=1.703, s9=0.0))
    e = cq_dft.dispersion_energy(a.get_atomic_numbers(), a.get_positions(), "B3LYP", "d3zero")
    assert e == pytest.approx(ref, abs=1e-10)
    assert cq_dft.dispersion_energy(a.get_atomic_numbers(), a.get_positions(), "B3LYP", "none") == 0.0


def test_b3lyp_d3bj_water_matches_pyscf_and_dftd3_computed_directly():
    # reference libraries: PySCF's density-fitted RKS and simple-dftd3's own PySCF bridge, called directly.
    from dftd3.pyscf import DFTD3Dispersion
    from pyscf import dft, gto

    w = molecule("H2O")
    r = cq_dft.single_point(w, 0, 1, {"basis": "def2-SVP"})
    mol = gto.M(atom=[(s, tuple(p)) for s, p in zip(w.get_chemical_symbols(), w.get_positions())],
                basis="def2-SVP", unit="Angstrom", verbose=0)
    mf = dft.RKS(mol, xc="B3LYP").density_fit()
    mf.conv_tol = 1e-10
    e_scf = mf.kernel()
    e_disp = DFTD3Dispersion(mol, xc="b3lyp", version="d3bj").kernel()[0]
    assert r["converged"] and r["functional"] == "B3LYP" and r["basis"] == "def2-SVP"
    assert r["e_scf"] == pytest.approx(e_scf, abs=1e-7)
    assert r["e_disp"] == pytest.approx(float(e_disp), abs=1e-10)
    assert r["energy_hartree"] == pytest.approx(e_scf + float(e_disp), abs=1e-7)
    assert r["n_basis"] == 24  # def2-SVP: O 3s2p1d = 14, H 2s1p = 5 each (Weigend, Ahlrichs 2005)
    assert r["pyscf_version"] == pyscf.__version__ and r["cycles"] > 0 and r["seconds"] > 0


def test_thread_count_does_not_change_the_energy_and_is_restored():
    from pyscf import lib
    before = lib.num_threads()
    w = molecule("H2O")
    r1 = cq_dft.single_point(w, 0, 1, HF_STO3G, threads=1)
    r2 = cq_dft.single_point(w, 0, 1, HF_STO3G, threads=2)
    assert r1["energy_hartree"] == pytest.approx(r2["energy_hartree"], abs=1e-9)
    assert lib.num_threads() == before


def test_open_shell_uses_unrestricted_kohn_sham():
    # the methyl radical is a doublet: <S^2> = S(S+1) = 0.75 exactly, and a little spin contamination in
    # UKS (common practice: below 0.76 for a simple radical)
    r = cq_dft.single_point(molecule("CH3"), 0, 2, {"basis": "def2-SVP"})
    assert r["converged"]
    assert 0.75 <= r["spin_square"] < 0.76


# ------------------------------------------------------------------------------------------- solvent
def test_dielectric_constants_come_from_the_minnesota_table_with_tblite_names():
    # Minnesota Solvent Descriptor Database (Marenich et al. 2012): water 78.355, THF 7.4257, DMSO 46.826
    # (from memory)
    assert cq_dft.solvent_dielectric("water") == pytest.approx(78.355)
    assert cq_dft.solvent_dielectric("thf") == pytest.approx(7.4257)
    assert cq_dft.solvent_dielectric("dmso") == pytest.approx(46.826)
    with pytest.raises(ChairqmError, match="gfn2-delta"):
        cq_dft.solvent_dielectric("woctanol")


def test_pcm_hydrates_water_by_a_few_kcal_per_mol():
    # hydration free energy of water -6.3 kcal/mol (Ben-Naim, Marcus, J. Chem. Phys. 1984, 81, 2016; from
    # memory); a C-PCM electrostatic term alone lands within a few kcal/mol of it (common practice).
    w = molecule("H2O")
    solvent = {"model": "alpb", "name": "water"}
    gas = cq_dft.single_point(w, 0, 1, {}, solvent=solvent)          # default gfn2-delta: gas-phase DFT
    pcm = cq_dft.single_point(w, 0, 1, {"solvent_model": "pcm"}, solvent=solvent)
    assert gas["solvent_model"] == "gas" and pcm["solvent_model"] == "pcm"
    assert pcm["dielectric"] == pytest.approx(78.355)
    dg = (pcm["energy_hartree"] - gas["energy_hartree"]) * KCAL_PER_HARTREE
    assert -10.0 < dg < -3.0


def test_gfn2_solvation_delta_is_solvated_minus_gas_energy():
    from ase.units import Hartree
    from tblite.ase import TBLite

    w = molecule("H2O")
    es = {"engine": "tblite", "method": "GFN2-xTB", "solvent": {"model": "alpb", "name": "water"},
          "accuracy": 1.0, "electronic_temperature": 300.0, "charge": 0, "multiplicity": 1}
    energies = {}
    for key, solv in (("solv", ("alpb", "water")), ("gas", None)):
        a = w.copy()
        a.calc = TBLite(method="GFN2-xTB", verbosity=0, **({"solvation": solv} if solv else {}))
        energies[key] = a.get_potential_energy() / Hartree
    d = cq_dft.xtb_solvation_hartree(w, es)
    assert d == pytest.approx(energies["solv"] - energies["gas"], abs=1e-8)
    assert d < 0  # water is stabilised by water
    assert cq_dft.xtb_solvation_hartree(w, dict(es, solvent=None)) == 0.0


# ----------------------------------------------------------------------------------------- composite
def test_composite_keeps_the_xtb_thermal_correction():
    # by hand: G = E_DFT + (G_xtb - E_xtb) + dG_solv
    assert refine.composite(-275.0, -22.15, -21.99) == pytest.approx(-275.0 + 0.16, abs=1e-12)
    assert refine.composite(-275.0, -22.15, -21.99, -0.004) == pytest.approx(-275.0 + 0.16 - 0.004, abs=1e-12)
    g = refine.composite(np.array([-1.0, -2.0]), np.array([-0.5, -0.6]), np.array([-0.4, -0.45]))
    np.testing.assert_allclose(g, [-0.9, -1.85], atol=1e-12)
    # a relative refined free energy: the GFN2 thermal difference plus the DFT electronic difference
    ga, gb = refine.composite(-1.003, -0.501, -0.400), refine.composite(-1.000, -0.500, -0.398)
    assert ga - gb == pytest.approx((-1.003 + 1.000) + (0.101 - 0.102), abs=1e-12)


# ----------------------------------------------------------------------------------------- selection
def worked_example():
    # a disubstituted ring worked by hand: lowest chair c1 at 0, c2 (same family as c1) at 1.0, a second
    # chair family at 4.2 (c3) and 5.0 (c4), twist-boats at 2.9 (c5) and 6.0 (c6), a failed c7 and a saddle
    # c8 below everything
    return pd.DataFrame([
        ("c1", "chair", "s1=equatorial;s2=equatorial", 0.0, "ok"),
        ("c2", "chair", "s2=equatorial;s1=equatorial", 1.0, "ok"),
        ("c3", "chair", "s1=axial;s2=axial", 4.2, "ok"),
        ("c4", "chair", "s1=axial;s2=axial", 5.0, "ok"),
        ("c5", "twist-boat", "s1=pseudo-equatorial;s2=isoclinal", 2.9, "ok"),
        ("c6", "twist-boat", "s1=isoclinal;s2=pseudo-axial", 6.0, "ok"),
        ("c7", "chair", "s1=equatorial;s2=axial", float("nan"), "failed"),
        ("c8", "chair", "s1=equatorial;s2=axial", -1.0, "saddle"),
    ], columns=["conformer", "ring_form", "orientation", "g_rel_kcal", "status"])


def test_select_takes_the_window_and_the_lowest_of_each_chair_family():
    df = worked_example()
    # window 3: c1, c2, c5 (<= 3.0); plus c3, the lowest of the diaxial chair family; not c4, c6, c7, c8
    assert refine.select(df, 3.0) == ["c1", "c2", "c5", "c3"]
    # window 0: the lowest of each chair family only
    assert refine.select(df, 0.0) == ["c1", "c3"]
    # the window edge is inclusive
    assert refine.select(df, 2.9) == ["c1", "c2", "c5", "c3"]
    assert refine.select(df, 10.0) == ["c1", "c2", "c5", "c3", "c4", "c6"]


def test_select_re_references_to_the_lowest_usable_and_reads_a_usable_column():
    df = worked_example()
    df["g_rel_kcal"] += 2.0                          # not relative to the lowest usable any more
    df["usable"] = df["status"] == "ok"
    df.loc[df["conformer"] == "c1", "usable"] = False  # now c2 is the lowest usable
    assert refine.select(df, 1.9) == ["c2", "c5", "c3"]


def test_select_with_two_temperatures_takes_the_union_unless_one_is_named():
    a = worked_example().assign(temperature_k=298.15)
    b = worked_example().assign(temperature_k=400.0)
    b.loc[b["conformer"] == "c6", "g_rel_kcal"] = 2.0   # a twist-boat comes into the window when hot
    both = pd.concat([a, b], ignore_index=True)
    assert refine.select(both, 3.0) == ["c1", "c2", "c5", "c3", "c6"]
    assert refine.select(both, 3.0, temperature_k=298.15) == ["c1", "c2", "c5", "c3"]


def test_select_rejects_bad_input():
    with pytest.raises(ChairqmError, match="window"):
        refine.select(worked_example(), -1.0)
    with pytest.raises(ChairqmError, match="g_rel_kcal"):
        refine.select(worked_example().drop(columns="g_rel_kcal"), 3.0)
    assert refine.select(worked_example().iloc[0:0], 3.0) == []


# -------------------------------------------------------------------------------------------- checks
def test_check_accepts_the_defaults_for_iodine_and_rejects_a_basis_without_it():
    ch3i = ["C", "H", "H", "H", "I"]
    refine.check({}, ch3i, 0, 1)                    # the def2 sets cover H-Rn (Weigend, Ahlrichs 2005)
    refine.check(None, ch3i, 0, 1)
    # Pople's 6-31G* is defined only up to Kr, and not for I (Rassolov et al. 1998; from memory)
    with pytest.raises(ChairqmError, match="6-31G.*I"):
        refine.check({"basis": "6-31G*"}, ch3i, 0, 1)
    refine.check({"basis": "6-31G*"}, ["C", "H", "H", "H", "Br"], 0, 1)
    with pytest.raises(ChairqmError, match="basis"):
        refine.check({"basis": "def2-SVQ"}, ["C", "H", "H", "H", "H"], 0, 1)


def test_check_rejects_unknown_functional_dispersion_and_bad_settings():
    ch4 = ["C", "H", "H", "H", "H"]
    with pytest.raises(ChairqmError, match="unknown functional 'B3LPY'"):
        refine.check({"functional": "B3LPY"}, ch4)
    with pytest.raises(ChairqmError, match="dispersion"):
        refine.check({"functional": "B3LYP-D3BJ"}, ch4)
    with pytest.raises(ChairqmError, match="unknown dispersion"):
        refine.check({"dispersion": "d5"}, ch4)
    # M06-2X has zero-damping D3 parameters only (Grimme et al. 2010 vs 2011 tables; from memory)
    with pytest.raises(ChairqmError, match="no parameters"):
        refine.check({"functional": "M06-2X", "dispersion": "d3bj"}, ch4)
    refine.check({"functional": "M06-2X", "dispersion": "none"}, ch4)
    with pytest.raises(ChairqmError, match="max_memory_mb"):
        refine.check({"max_memory_mb": 100}, ch4)
    with pytest.raises(ChairqmError, match="max_memory_mb"):
        refine.check({"max_memory_mb": 10 ** 9}, ch4)
    with pytest.raises(ChairqmError, match="whole number"):
        refine.check({"max_memory_mb": "lots"}, ch4)
    with pytest.raises(ChairqmError, match="conv_tol"):
        refine.check({"conv_tol": 0.1}, ch4)
    with pytest.raises(ChairqmError, match="unknown key"):
        refine.check({"functionl": "PBE0"}, ch4)
    with pytest.raises(ChairqmError, match="solvent_model"):
        refine.check({"solvent_model": "smd"}, ch4)
    with pytest.raises(ChairqmError, match="gfn2-delta"):
        refine.check({"solvent_model": "pcm"}, ch4, solvent={"model": "alpb", "name": "woctanol"})


def test_check_rejects_charge_and_multiplicity_that_do_not_fit_the_electrons():
    ch3 = ["C", "H", "H", "H"]                       # 9 electrons
    with pytest.raises(ChairqmError, match="multiplicity"):
        refine.check({}, ch3, 0, 1)
    refine.check({}, ch3, 0, 2)
    refine.check({}, ch3, 1, 1)                      # CH3+ has 8
    # with an ECP the core electrons are gone but the parity stays: I has 25 valence electrons in the def2 sets
    # (a 28-electron core; Peterson et al. 2003)
    with pytest.raises(ChairqmError, match="multiplicity"):
        refine.check({}, ["I"], 0, 1)
    refine.check({}, ["I"], 0, 2)


def test_the_config_schema_is_the_one_home_of_the_refine_defaults():
    import jsonschema

    from chairqm import config

    block = config.load_schema()["properties"]["settings"]["properties"]["refine"]
    assert block["default"] is None                                    # absent or null: no refinement
    obj = next(b for b in block["oneOf"] if b.get("type") == "object")
    props = obj["properties"]
    resolved = refine.resolve({})
    assert list(resolved) == list(props)
    assert resolved == {k: v["default"] for k, v in props.items()}
    # B3LYP-D3(BJ)/def2-TZVP is the level chosen by measurement on the held-out heterocycles (README,
    # docs/accuracy.md), so it must be what {} gives
    assert (resolved["functional"], resolved["basis"], resolved["dispersion"]) == ("B3LYP", "def2-TZVP", "d3bj")
    jsonschema.validate(resolved, obj)
    jsonschema.validate({}, obj)
    for bad in ({"basis": ""}, {"extra": 1}, {"dispersion": "d4"}, {"max_memory_mb": 10}, {"window_kcal": -1}):
        with pytest.raises(jsonschema.ValidationError):
            jsonschema.validate(bad, obj)
    # a configuration with refine: {} passes the schema, and resolving its block gives the same defaults
    cfg = config.validate({"molecules": [{"name": "x", "smiles": "C1CCCCC1"}], "settings": {"refine": {}}})
    assert refine.resolve(cfg["settings"]["refine"]) == resolved
    assert refine.resolve({"window_kcal": 2})["window_kcal"] == 2.0
    assert refine.resolve(None) == resolved


# ------------------------------------------------------------------------------------------- failures
def test_an_scf_that_does_not_converge_is_reported_not_raised():
    r = cq_dft.single_point(molecule("H2O"), 0, 1, {"max_cycle": 1})
    assert r["converged"] is False
    assert r["energy_hartree"] is None
    assert "not converged" in r["message"] and "fallback" in r["message"]


def test_an_scf_that_crashes_is_reported_not_raised(monkeypatch):
    class Broken:
        def kernel(self, *a, **k):
            raise np.linalg.LinAlgError("singular overlap")

    monkeypatch.setattr(cq_dft, "_scf_object", lambda *a, **k: Broken())
    r = cq_dft.single_point(molecule("H2O"), 0, 1, {})
    assert r["converged"] is False and r["energy_hartree"] is None
    assert "LinAlgError" in r["message"] and "singular overlap" in r["message"]


def test_user_fixable_settings_raise_from_single_point():
    with pytest.raises(ChairqmError, match="6-31G"):
        cq_dft.single_point(Atoms("HI", positions=[[0, 0, 0], [0, 0, 1.61]]), 0, 1, {"basis": "6-31G*"})
    with pytest.raises(ChairqmError, match="multiplicity"):
        cq_dft.single_point(molecule("CH3"), 0, 1, {})
