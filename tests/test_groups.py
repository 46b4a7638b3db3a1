"""Groups a chemist attaches beyond the plain ones: cages (bicyclo[1.1.1]pentyl, norbornyl, adamantyl, cubyl,
bicyclo[2.2.2]octyl) and hypervalent or unusual groups (SF5, SO2Me, PO(OEt)2, Bpin, Si(OMe)3).

Cages: their bridgeheads are no stereocentres (the cage decides them), real stereocentres next to them
still have to be written, and a cage is left rigid (not seeded in chair or pucker states).
Hypervalent groups: seeded with their real coordination geometry, so that neither the seeds nor the
GFN2-xTB minima trip the bond check, which still catches a bond that really breaks.
"""

import itertools
import math

import numpy as np
import pandas as pd
import pytest
from ase import Atoms
from rdkit import Chem

from chairqm import additivity, cages, coordination, molecule, rotamers, seeds
from chairqm.errors import ChairqmError
from chairqm.optimize import check_structure

CAGES = {
    "bicyclo[1.1.1]pent-1-yl": "[*]C12CC(C1)C2",
    "norborn-1-yl": "[*]C12CCC(CC1)C2",
    "adamant-1-yl": "[*]C12CC3CC(CC(C3)C1)C2",
    "cubyl": "[*]C12C3C4C1C1C2C3C41",
    "bicyclo[2.2.2]oct-1-yl": "[*]C12CCC(CC1)CC2",
}
SF5 = "[*]S(F)(F)(F)(F)F"
HYPERVALENT = {"SF5": SF5, "SO2Me": "[*]S(C)(=O)=O", "PO(OEt)2": "[*]P(=O)(OCC)OCC",
               "Bpin": "[*]B1OC(C)(C)C(C)(C)O1", "Si(OMe)3": "[*][Si](OC)(OC)OC"}


def perceive(smiles, **settings):
    return molecule.perceive({"name": "m", "smiles": smiles}, settings=settings)


def on_cyclohexane(fragment):
    return perceive(additivity.reference_smiles(fragment))[0]


def atoms_of(p, positions):
    return Atoms([a.GetSymbol() for a in p.mol.GetAtoms()], positions=positions)


def kept_seeds(p, **settings):
    return seeds.build_seeds(p.mol, p.ring, p.substituents, settings or None, p.other_rings)


# ------------------------------------------------------------------------------------------------- cages
@pytest.mark.parametrize("fragment", CAGES.values(), ids=CAGES.keys())
def test_cage_bridgeheads_are_not_asked_for(fragment):
    # the bridgeheads of these cages carry three equivalent ring branches or are fixed by the cage: no
    # stereocentre (textbook stereochemistry); the molecule is analysed at its cyclohexane, the cage is
    # one group written without stereo marks, and it is not among the rings seeded in chair states
    p = on_cyclohexane(fragment)
    assert p.ring_elements == ["C"] * 6
    assert [s.fragment for s in p.substituents] == [molecule.canonical_fragment(fragment)]
    assert p.other_rings == []
    assert p.stereo == "none"


def test_cage_next_to_a_real_stereocentre_still_needs_it():
    # 4-methyl-1-(bicyclo[1.1.1]pentyl)cyclohexane exists as cis and trans (common practice): ring atoms 1
    # and 4 must be written; the cage's bridgeheads (atoms 5 and 7) are not asked for
    with pytest.raises(ChairqmError) as err:
        perceive("CC1CCC(C23CC(C2)C3)CC1")
    msg = str(err.value)
    assert "ring atom 1 (C), ring atom 4 (C):" in msg and "atom 5" not in msg and "atom 7" not in msg
    cis = perceive("C[C@H]1CC[C@@H](C23CC(C2)C3)CC1")[0]
    trans = perceive("C[C@H]1CC[C@H](C23CC(C2)C3)CC1")[0]
    assert cis.smiles != trans.smiles
    assert len(perceive("CC1CCC(C23CC(C2)C3)CC1", enumerate_stereo=True)) == 2


def test_norbornan_2_yl_needs_its_configuration():
    # 2-norbornyl: C2 and the bridgehead pair are stereocentres (exo/endo, each chiral; textbook)
    with pytest.raises(ChairqmError, match=r"ring atom 4 \(C\), ring atom 6 \(C\), ring atom 9 \(C\):"):
        perceive("C1CCC(C2CC3CCC2C3)CC1")
    # C2 alone does not say exo or endo: the bridgeheads are asked for
    with pytest.raises(ChairqmError, match=r"stereo not specified at ring atom 6 \(C\), ring atom 9 \(C\):"):
        perceive("C1CCC([C@@H]2CC3CCC2C3)CC1")
    # enumerated: exactly the exo and the endo isomer (one bridgehead inverted alone cannot be built)
    isomers = perceive("C1CCC([C@@H]2CC3CCC2C3)CC1", enumerate_stereo=True)
    assert len(isomers) == 2
    assert len({p.smiles for p in isomers}) == 2
    # fully written, it is accepted as it stands
    [p] = perceive("C1CCC([C@@H]2C[C@@H]3CC[C@H]2C3)CC1")
    assert p.smiles == Chem.MolToSmiles(Chem.MolFromSmiles("C1CCC([C@@H]2C[C@@H]3CC[C@H]2C3)CC1"))


def test_cage_fixed_centres_found_and_real_ones_left():
    # adamantane's four bridgeheads in 1-cyclohexyladamantane; none of cyclohexane's own ring atoms
    mol = Chem.AddHs(Chem.MolFromSmiles("C1CCC(C23CC4CC(CC(C4)C2)C3)CC1"))
    assert set(cages.cage_fixed_centres(mol, [4, 6, 8, 10])) == {4, 6, 8, 10}
    # cis-decalin-2-yl: the ring fusion atoms can be cis or trans (textbook): not fixed
    dec = Chem.AddHs(Chem.MolFromSmiles("C1CCC(C2CCC3CCCCC3C2)CC1"))
    assert cages.cage_fixed_centres(dec, [4, 7, 12]) == {}


def test_seeding_refuses_a_loose_ring_centre_but_not_a_cage():
    mol = Chem.AddHs(Chem.MolFromSmiles("CC1CCC(C23CC(C2)C3)CC1"))
    with pytest.raises(ChairqmError, match="stereo of ring atom 1 is not specified"):
        seeds.build_seeds(mol, [1, 2, 3, 4, 10, 11], [])
    p = on_cyclohexane(CAGES["bicyclo[1.1.1]pent-1-yl"])
    out = kept_seeds(p)
    assert not [s for s in out if s.status == "failed"]
    for s in out:
        if s.kept:
            ok_b, why_b, ok_s, why_s = check_structure(p.mol, atoms_of(p, s.positions))
            assert ok_b and ok_s, (s.name, why_b, why_s)


def test_only_polycyclic_rings_inside_groups_are_left_rigid():
    # cyclohexylcyclohexane: the second ring still gets its chair states; in 2-cyclohexyldecalin the
    # decalin's rings are fused to each other and stay as built
    assert len(perceive("C1CCC(C2CCCCC2)CC1")[0].other_rings) == 1
    dec = Chem.AddHs(Chem.MolFromSmiles("C1CCC(C2CCC3CCCCC3C2)CC1"))   # cyclohexane: atoms 0-3, 14, 15
    ring = next(list(r) for r in dec.GetRingInfo().AtomRings() if set(r) == {0, 1, 2, 3, 14, 15})
    decalin = [list(r) for r in dec.GetRingInfo().AtomRings() if set(r) != set(ring)]
    assert len(decalin) == 2 and all(cages.in_rigid_ring_system(dec, r, ring) for r in decalin)
    assert not cages.in_rigid_ring_system(dec, ring, decalin[0])


# -------------------------------------------------------------------------------------- hypervalent groups
def _angles(X, centre, ligands):
    out = []
    for i, j in itertools.combinations(ligands, 2):
        u, v = X[i] - X[centre], X[j] - X[centre]
        out.append(math.degrees(math.acos(np.clip(u @ v / np.linalg.norm(u) / np.linalg.norm(v), -1, 1))))
    return sorted(out)


def test_sf5_seeds_are_octahedral():
    # SF5 is octahedral at S: twelve cis angles of 90° and three trans of 180° (VSEPR, textbook); S–F in
    # SF6 1.56 Å, in R–SF5 1.57–1.60 Å (from memory)
    p = on_cyclohexane(SF5)
    s_atom = next(a.GetIdx() for a in p.mol.GetAtoms() if a.GetSymbol() == "S")
    ligands = [n.GetIdx() for n in p.mol.GetAtomWithIdx(s_atom).GetNeighbors()]
    out = kept_seeds(p)
    kept = [s for s in out if s.kept]
    assert not [s for s in out if s.status == "failed"]
    assert {s.orientation for s in kept if s.ring_form == "chair"} == {"s1=axial", "s1=equatorial"}
    for s in kept:
        ang = _angles(s.positions, s_atom, ligands)
        assert all(abs(a - 90.0) < 3.0 for a in ang[:12]) and all(a > 177.0 for a in ang[12:]), (s.name, ang)
        for f in ligands:
            if p.mol.GetAtomWithIdx(f).GetSymbol() == "F":
                assert 1.52 < np.linalg.norm(s.positions[f] - s.positions[s_atom]) < 1.66


def test_sf5_start_is_off_its_mirror_planes():
    # a gradient optimisation keeps the symmetry of its start (common practice): an SF5 that eclipses the
    # ring C–H exactly would stop at the saddle point of its rotation. The C–S bond is no rotor (one start
    # per ring form) and that start stands clear of every mirror-symmetric position
    p = on_cyclohexane(SF5)
    rotors = rotamers.rotatable_bonds(p.mol, p.ring, p.substituents)
    s_atom = next(a.GetIdx() for a in p.mol.GetAtoms() if a.GetSymbol() == "S")
    assert not [r for r in rotors if s_atom in r[1:3]]
    c1 = p.substituents[0].ring_atom
    frame = [n.GetIdx() for n in p.mol.GetAtomWithIdx(c1).GetNeighbors() if n.GetIdx() != s_atom]
    for s in kept_seeds(p):
        if not s.kept:
            continue
        X = s.positions
        u = (X[s_atom] - X[c1]) / np.linalg.norm(X[s_atom] - X[c1])
        ref = X[frame[0]] - X[c1]
        planes = [coordination._torsion_about(u, ref, X[f] - X[c1]) for f in frame]
        planes += [0.5 * (a + b) for a, b in itertools.combinations(planes, 2)]
        cis = [f for f in p.mol.GetAtomWithIdx(s_atom).GetNeighbors()
               if f.GetIdx() != c1 and abs((X[f.GetIdx()] - X[s_atom]) @ u) < 0.5 * 1.6]
        assert len(cis) == 4
        phi = coordination._torsion_about(u, ref, X[cis[0].GetIdx()] - X[s_atom])
        clearance = min(abs((phi - q + 22.5) % 45.0 - 22.5) for q in planes)
        assert clearance > 5.0, (s.name, phi, planes)


@pytest.mark.parametrize("fragment", HYPERVALENT.values(), ids=HYPERVALENT.keys())
def test_hypervalent_seeds_pass_the_bond_check(fragment):
    p = on_cyclohexane(fragment)
    out = kept_seeds(p, twist_boats=False, max_rotamer_starts=12)     # the chairs suffice here
    assert not [s.reason for s in out if s.status == "failed"]
    for s in out:
        if s.kept:
            ok_b, why_b, ok_s, why_s = check_structure(p.mol, atoms_of(p, s.positions))
            assert ok_b and ok_s, (s.name, why_b, why_s)


def test_a_real_bond_break_is_still_caught():
    # the failure measured before SF5 was seeded octahedral: an F moved from S onto the ring carbon
    # (C–F 1.42 Å, S···F 2.3 Å); the bond check must name both the broken and the new bond
    p = on_cyclohexane(SF5)
    seed = next(s for s in kept_seeds(p) if s.kept)
    X = np.array(seed.positions)
    s_atom = next(a.GetIdx() for a in p.mol.GetAtoms() if a.GetSymbol() == "S")
    c1 = p.substituents[0].ring_atom
    f = next(n.GetIdx() for n in p.mol.GetAtomWithIdx(s_atom).GetNeighbors() if n.GetSymbol() == "F")
    away = X[c1] - X[s_atom]
    X[f] = X[c1] + 1.42 * np.cross(away, [0.0, 0.0, 1.0]) / np.linalg.norm(np.cross(away, [0.0, 0.0, 1.0]))
    ok_b, why_b, _, _ = check_structure(p.mol, atoms_of(p, X))
    assert not ok_b
    assert f"broken F{f}–S{s_atom}" in why_b or f"broken S{s_atom}–F{f}" in why_b
    assert f"new C{c1}–F{f}" in why_b or f"new F{f}–C{c1}" in why_b


def test_ordinary_molecules_keep_the_plain_embedding():
    mol = Chem.AddHs(Chem.MolFromSmiles("CS(C)(=O)=O"))
    assert coordination.crowded_centres(mol) == [] and coordination.bounds_matrix(mol) is None
    assert coordination.crowded_centres(Chem.AddHs(Chem.MolFromSmiles("FS(F)(F)(F)(F)C"))) == [1]


# ------------------------------------------------------------------------------- GFN2-xTB, end to end
@pytest.mark.slow
@pytest.mark.parametrize("fragment", ["[*]S(C)(=O)=O", "[*]P(=O)(OCC)OCC", "[*]B1OC(C)(C)C(C)(C)O1",
                                      "[*][Si](OC)(OC)OC"], ids=["SO2Me", "PO(OEt)2", "Bpin", "Si(OMe)3"])
def test_hypervalent_minima_keep_their_bonds(fragment):
    from functools import partial

    from chairqm import engine, optimize
    p = on_cyclohexane(fragment)
    seed = next(s for s in kept_seeds(p) if s.kept and s.orientation == "s1=equatorial")
    res = optimize.optimize(atoms_of(p, seed.positions), partial(lambda t: engine.make_calculator(
        electronic_temperature=t)))
    assert res.status == "ok", res.reason
    ok_b, why_b, ok_s, why_s = check_structure(p.mol, res.atoms)
    assert ok_b and ok_s, (why_b, why_s)


@pytest.fixture(scope="module")
def sf5_and_bcp(tmp_path_factory):
    from chairqm import api
    out = tmp_path_factory.mktemp("groups") / "av"
    return api.avalues([SF5, CAGES["bicyclo[1.1.1]pent-1-yl"]], out=out, cores=2, progress=False)


@pytest.mark.slow
@pytest.mark.parametrize("fragment", [SF5, CAGES["bicyclo[1.1.1]pent-1-yl"]], ids=["SF5", "BCP"])
def test_a_value_computed_with_no_failed_seed(sf5_and_bcp, fragment):
    # no published A-value is used here: the behaviour is checked. Both groups are bulky, bonded through
    # a quaternary or hexacoordinate atom: equatorial preferred (common practice), a finite A-value, and
    # every seed and minimum either fine or a reported, explained duplicate
    r = sf5_and_bcp.result(fragment)
    assert math.isfinite(r.a_value_kcal) and r.a_value_kcal > 0.0, r.reason
    fam = r.families
    chairs = fam[fam["ring_form"] == "chair"].set_index("orientation")["population"].astype(float)
    assert chairs["s1=equatorial"] > chairs["s1=axial"]
    folder = r.out / r.molecule
    seeds_csv = pd.read_csv(folder / "seeds.csv", keep_default_na=False)
    minima = pd.read_csv(folder / "minima.csv", keep_default_na=False)
    assert not (seeds_csv["status"] == "failed").any(), seeds_csv[seeds_csv["status"] == "failed"]
    assert set(minima["status"]) <= {"ok", "duplicate"}, minima[["seed", "status", "reason"]]
    assert (minima.loc[minima["status"] == "duplicate", "reason"] != "").all()


@pytest.mark.slow
def test_sf5_minimum_is_octahedral_and_the_cage_intact(sf5_and_bcp):
    from ase.io import read
    r = sf5_and_bcp.result(SF5)
    best = r.conformers.sort_values("g_rel_kcal").iloc[0]
    at = read(r.out / r.molecule / "thermo" / f"{best['conformer']}.xyz")
    s = at.get_chemical_symbols().index("S")
    lig = [j for j in range(len(at)) if j != s and at.get_distance(s, j) < 2.1]
    ang = _angles(at.positions, s, lig)
    assert len(lig) == 6 and all(abs(a - 90.0) < 8.0 for a in ang[:12]) and all(a > 170.0 for a in ang[12:])
    # bicyclo[1.1.1]pentane keeps its cage: bridgehead C1···C3 1.85 Å (electron diffraction, from memory),
    # well apart from a bond, which the bond check (1.82 Å for C–C) would otherwise report
    b = sf5_and_bcp.result(CAGES["bicyclo[1.1.1]pent-1-yl"])
    best = b.conformers.sort_values("g_rel_kcal").iloc[0]
    at = read(b.out / b.molecule / "thermo" / f"{best['conformer']}.xyz")
    p = on_cyclohexane(CAGES["bicyclo[1.1.1]pent-1-yl"])
    heads = [a.GetIdx() for a in p.mol.GetAtoms() if a.GetSymbol() == "C" and a.IsInRingSize(4)
             and sum(1 for n in a.GetNeighbors() if n.GetSymbol() == "C") >= 3]
    assert len(heads) == 2
    assert 1.80 < at.get_distance(*heads) < 1.95
