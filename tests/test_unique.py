"""Tests for chairqm.unique: symmetry-aware duplicates, mirror-image conformers and their degeneracy."""

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem, rdMolTransforms

from chairqm.unique import best_rmsd, comparison_atoms, is_chiral_molecule, unique_minima
from chairqm.units import KCAL_PER_HARTREE


def ring_atoms(mol):
    ring = list(next(r for r in mol.GetRingInfo().AtomRings() if len(r) == 6))
    order = [ring[0]]
    while len(order) < 6:
        order.append(next(n.GetIdx() for n in mol.GetAtomWithIdx(order[-1]).GetNeighbors()
                          if n.GetIdx() in ring and n.GetIdx() not in order))
    return order


def mmff_energy_hartree(mol, cid=-1):
    ff = AllChem.MMFFGetMoleculeForceField(mol, AllChem.MMFFGetMoleculeProperties(mol), confId=cid)
    return ff.CalcEnergy() / KCAL_PER_HARTREE


def rec(name, pos, e):
    return {"name": name, "positions": np.asarray(pos, dtype=float), "energy_hartree": float(e)}


def automorphism(mol):
    """A non-identity symmetry permutation of the molecule's graph (including H)."""
    matches = mol.GetSubstructMatches(mol, uniquify=False, useChirality=False, maxMatches=100000)
    ident = tuple(range(mol.GetNumAtoms()))
    # prefer one that moves heavy atoms, so the test needs more than H bookkeeping
    heavy = [a.GetIdx() for a in mol.GetAtoms() if a.GetAtomicNum() > 1]
    for m in matches:
        if any(m[i] != i for i in heavy):
            return m
    return next(m for m in matches if m != ident)


def relabel(pos, match):
    """Same structure, atoms renumbered by the automorphism `match` (atom i's position goes to match[i])."""
    new = np.empty_like(pos)
    for i, j in enumerate(match):
        new[j] = pos[i]
    return new


def plain_rmsd(mol, a, b, all_atoms=False):
    """RMSD after superposition with the identity atom map (no symmetry); heavy atoms + heteroatom H
    unless all_atoms."""
    keep = list(range(mol.GetNumAtoms())) if all_atoms else comparison_atoms(mol)
    pa, pb = np.asarray(a)[keep], np.asarray(b)[keep]
    pa, pb = pa - pa.mean(0), pb - pb.mean(0)
    u, s, vt = np.linalg.svd(pb.T @ pa)
    d = np.sign(np.linalg.det(u @ vt))
    rot = u @ np.diag([1, 1, d]) @ vt
    return float(np.sqrt(((pb @ rot - pa) ** 2).sum(1).mean()))


def chair(smiles, seed=3):
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    assert AllChem.EmbedMolecule(mol, randomSeed=seed) == 0
    AllChem.MMFFOptimizeMolecule(mol, maxIters=5000)
    return mol


def twist_boat_cyclohexane():
    """MMFF94 twist-boat of cyclohexane: ring torsions held near the D2 pattern (+31, −65, +31, ...,
    from memory of the ideal twist-boat ≈ ±33/∓71°), then relaxed without constraints."""
    mol = Chem.AddHs(Chem.MolFromSmiles("C1CCCCC1"))
    assert AllChem.EmbedMolecule(mol, randomSeed=7) == 0
    ring = ring_atoms(mol)
    props = AllChem.MMFFGetMoleculeProperties(mol)
    ff = AllChem.MMFFGetMoleculeForceField(mol, props)
    for k, t in enumerate([31, -65, 31, 31, -65, 31]):
        ff.MMFFAddTorsionConstraint(*(ring[(k + m) % 6] for m in range(4)), False, t - 1, t + 1, 1000.0)
    ff.Minimize(maxIts=5000)
    AllChem.MMFFGetMoleculeForceField(mol, props).Minimize(maxIts=5000)
    tors = [rdMolTransforms.GetDihedralDeg(mol.GetConformer(), *(ring[(k + m) % 6] for m in range(4)))
            for k in range(6)]
    # not a chair: a chair's torsions alternate in sign
    assert any(np.sign(tors[k]) == np.sign(tors[(k + 1) % 6]) for k in range(6))
    return mol


def methylcyclohexane_ax_eq():
    mol = Chem.AddHs(Chem.MolFromSmiles("CC1CCCCC1"))
    cids = list(AllChem.EmbedMultipleConfs(mol, 30, randomSeed=7))
    AllChem.MMFFOptimizeMoleculeConfs(mol, maxIters=2000)
    ring = ring_atoms(mol)
    out = {}
    for cid in cids:
        p = mol.GetConformer(cid).GetPositions()
        tors = [rdMolTransforms.GetDihedralDeg(mol.GetConformer(cid), *(ring[(k + m) % 6] for m in range(4)))
                for k in range(6)]
        if not all(np.sign(tors[k]) != np.sign(tors[(k + 1) % 6]) for k in range(6)):
            continue
        normal = np.linalg.svd(p[ring] - p[ring].mean(0))[2][2]
        bond = (p[0] - p[1]) / np.linalg.norm(p[0] - p[1])
        out.setdefault("ax" if abs(bond @ normal) > 0.7 else "eq", cid)
    assert set(out) == {"ax", "eq"}
    return mol, {k: (mol.GetConformer(c).GetPositions(), mmff_energy_hartree(mol, c)) for k, c in out.items()}


# ---------------------------------------------------------------------------------------- duplicates
def test_rotated_methyl_copy_merges_and_axial_equatorial_stay_apart():
    mol, conf = methylcyclohexane_ax_eq()
    eq_pos, eq_e = conf["eq"]
    ax_pos, ax_e = conf["ax"]
    methyl_h = [n.GetIdx() for n in mol.GetAtomWithIdx(0).GetNeighbors() if n.GetAtomicNum() == 1]
    rotated = eq_pos.copy()
    rotated[methyl_h] = eq_pos[methyl_h[1:] + methyl_h[:1]]   # methyl turned by 120°: H's permuted
    for all_atoms in (False, True):
        groups = unique_minima(mol, [rec("eq", eq_pos, eq_e), rec("ax", ax_pos, ax_e),
                                     rec("eq-rot", rotated, eq_e + 1e-8)], all_atoms=all_atoms)
        assert [g.name for g in groups] == ["eq", "ax"]
        assert groups[0].duplicates == ["eq-rot"] and groups[1].duplicates == []
        assert all(g.degeneracy == 1 and not g.chiral_conformer for g in groups)   # Cs conformers
    # with all atoms, merging needed the symmetry-aware alignment: the identity map does not match
    assert best_rmsd(mol, eq_pos, rotated, all_atoms=True) < 0.05
    assert plain_rmsd(mol, eq_pos, rotated, all_atoms=True) > 0.2
    # axial and equatorial are kept apart by geometry even at equal energy
    assert len(unique_minima(mol, [rec("eq", eq_pos, eq_e), rec("ax", ax_pos, eq_e)])) == 2


def test_renumbered_ring_is_the_same_conformer():
    mol = chair("C1CCCCC1")
    pos = mol.GetConformer().GetPositions()
    perm = relabel(pos, automorphism(mol))
    assert plain_rmsd(mol, pos, perm) > 0.3           # a naive comparison would call them different
    groups = unique_minima(mol, [rec("a", pos, -1.0), rec("b", perm, -1.0)])
    assert len(groups) == 1 and groups[0].members == ["a", "b"]
    assert not groups[0].chiral_conformer and groups[0].degeneracy == 1   # the chair is achiral (D3d)


def test_energy_criterion_keeps_distinct_energies_apart():
    mol = chair("C1CCCCC1")
    pos = mol.GetConformer().GetPositions()
    groups = unique_minima(mol, [rec("a", pos, -1.0), rec("b", pos, -1.0 + 1.0 / KCAL_PER_HARTREE)])
    assert len(groups) == 2


# -------------------------------------------------------------------------------------------- mirrors
def test_mirror_image_of_cyclohexane_twist_boat_is_recognised():
    # The twist-boat (D2) is chiral: its reflection is the other twist-boat enantiomer, a distinct
    # minimum of equal energy.  Reflected and renumbered, it must be found as the mirror partner, merged
    # once with degeneracy 2, and not mistaken for a duplicate.
    mol = twist_boat_cyclohexane()
    pos = mol.GetConformer().GetPositions()
    e = mmff_energy_hartree(mol)
    mirror = relabel(pos * [-1.0, 1.0, 1.0], automorphism(mol))
    assert best_rmsd(mol, pos, mirror) > 0.125               # not superimposable: a chiral conformer
    assert best_rmsd(mol, pos, mirror, reflect_b=True) < 0.01

    groups = unique_minima(mol, [rec("tb", pos, e), rec("tb-mirror", mirror, e + 1e-9)])
    assert len(groups) == 1
    g = groups[0]
    assert g.name == "tb" and g.mirror_of == "tb-mirror" and g.duplicates == []
    assert g.chiral_conformer and g.degeneracy == 2 and g.members == ["tb", "tb-mirror"]

    alone = unique_minima(mol, [rec("tb", pos, e)])
    assert alone[0].mirror_of is None and alone[0].degeneracy == 2   # partner implied, counted once


def test_gauche_rotamers_of_ethylcyclohexane_are_a_mirror_pair():
    # Equatorial ethylcyclohexane: the anti rotamer of the ethyl group is achiral (Cs); the two gauche
    # rotamers are mirror images of each other (common textbook fact).  Dihedral H1–C1–Cα–Cβ set to
    # 180° (anti) and ±60° (gauche), then MMFF94 relaxed.
    base = Chem.AddHs(Chem.MolFromSmiles("CCC1CCCCC1"))   # 0 = Cβ, 1 = Cα, 2 = C1
    cids = list(AllChem.EmbedMultipleConfs(base, 20, randomSeed=5))
    AllChem.MMFFOptimizeMoleculeConfs(base)
    ring = ring_atoms(base)
    h1 = next(n.GetIdx() for n in base.GetAtomWithIdx(2).GetNeighbors() if n.GetAtomicNum() == 1)

    def equatorial_chair(cid):
        p = base.GetConformer(cid).GetPositions()
        normal = np.linalg.svd(p[ring] - p[ring].mean(0))[2][2]
        bond = (p[1] - p[2]) / np.linalg.norm(p[1] - p[2])
        tors = [rdMolTransforms.GetDihedralDeg(base.GetConformer(cid), *(ring[(k + m) % 6] for m in range(4)))
                for k in range(6)]
        return abs(bond @ normal) < 0.5 and all(np.sign(tors[k]) != np.sign(tors[(k + 1) % 6]) for k in range(6))

    cid = next(c for c in cids if equatorial_chair(c))
    records = []
    for name, angle in (("anti", 180.0), ("gauche+", 60.0), ("gauche-", -60.0)):
        m = Chem.Mol(base, confId=cid)
        rdMolTransforms.SetDihedralDeg(m.GetConformer(), h1, 2, 1, 0, angle)
        AllChem.MMFFOptimizeMolecule(m, maxIters=5000)
        records.append(rec(name, m.GetConformer().GetPositions(), mmff_energy_hartree(m)))
    groups = {g.name: g for g in unique_minima(base, records, energy_tol_kcal=0.1)}
    anti = groups["anti"]
    assert not anti.chiral_conformer and anti.degeneracy == 1
    gauche = [g for g in groups.values() if g.name != "anti"]
    assert len(gauche) == 1 and gauche[0].chiral_conformer and gauche[0].degeneracy == 2
    assert {gauche[0].name, gauche[0].mirror_of} == {"gauche+", "gauche-"}


def test_chiral_molecule_never_uses_mirror_degeneracy():
    # trans-1,2-dimethylcyclohexane is chiral: a reflected conformer is the other enantiomer, a
    # different molecule, so nothing is merged as a mirror and every degeneracy is 1.
    mol = chair("C[C@@H]1CCCC[C@H]1C")
    assert is_chiral_molecule(mol)
    pos = mol.GetConformer().GetPositions()
    groups = unique_minima(mol, [rec("a", pos, -1.0), rec("a-mirror", pos * [-1.0, 1.0, 1.0], -1.0)])
    assert len(groups) == 2 and all(g.degeneracy == 1 and g.mirror_of is None for g in groups)


@pytest.mark.parametrize("smiles,chiral", [
    ("CC1CCCCC1", False),                 # methylcyclohexane
    ("C[C@H]1CC[C@@H](C)CC1", False),     # trans-1,4-dimethylcyclohexane (achiral, C2h)
    ("C[C@@H]1CCCC[C@@H]1C", False),      # cis-1,2-dimethylcyclohexane (meso)
    ("C[C@@H]1CCCC[C@H]1C", True),        # trans-1,2-dimethylcyclohexane
    ("CC(C)[C@@H]1CC[C@@H](C)C[C@H]1O", True),   # menthol
])
def test_molecule_chirality(smiles, chiral):
    # textbook stereochemistry (e.g. Eliel & Wilen, Stereochemistry of Organic Compounds, 1994)
    assert is_chiral_molecule(Chem.AddHs(Chem.MolFromSmiles(smiles))) == chiral


def test_record_objects_are_accepted():
    from chairqm.unique import Record

    mol = chair("C1CCCCC1")
    pos = mol.GetConformer().GetPositions()
    groups = unique_minima(mol, [Record("a", pos, -1.0), Record("b", pos + 1.0, -1.0)])   # translated copy
    assert len(groups) == 1 and groups[0].duplicates == ["b"]


def test_ring_swapped_twin_of_bicyclohexyl_is_represented_by_the_preferred_labelling():
    # bicyclohexyl: the graph automorphism that swaps the two rings makes "ring A's link axial, ring B's
    # equatorial" and "A equatorial, B axial" one minimum; which labelling represents it must not be left
    # to numerical noise in the energy (it decides the analysed ring's family, and the cyclohexyl A-value)
    from chairqm.unique import other_ring_rank
    mol = Chem.AddHs(Chem.MolFromSmiles("C1CCC(CC1)C1CCCCC1"))
    AllChem.EmbedMolecule(mol, randomSeed=7)
    AllChem.MMFFOptimizeMolecule(mol)
    pos = mol.GetConformer().GetPositions()
    ring_a = set(mol.GetRingInfo().AtomRings()[0])
    swap = next(m for m in mol.GetSubstructMatches(mol, uniquify=False, maxMatches=5000)
                if not ring_a & {m[i] for i in ring_a})
    twin = pos[list(swap)]                      # the same geometry with the rings' labels exchanged
    e = -40.0
    recs = [{"name": "labelled-a", "positions": pos, "energy_hartree": e},
            {"name": "labelled-b", "positions": twin, "energy_hartree": e - 1e-8}]
    plain = unique_minima(mol, recs)
    assert len(plain) == 1 and plain[0].name == "labelled-b"          # lowest energy wins by default
    ranks = {"labelled-a": other_ring_rank("r2=chair:equatorial"), "labelled-b": other_ring_rank("r2=chair:axial")}
    chosen = unique_minima(mol, recs, prefer=ranks.get)
    assert len(chosen) == 1 and chosen[0].name == "labelled-a" and chosen[0].duplicates == ["labelled-b"]
    assert chosen[0].energy_hartree == e


def test_other_ring_rank_orders_the_other_rings_states():
    from chairqm.unique import other_ring_rank
    assert other_ring_rank("") == 0 and other_ring_rank(None) == 0
    assert other_ring_rank("r2=chair:equatorial") == 0
    assert other_ring_rank("r2=chair:axial") == 1
    assert other_ring_rank("r2=twist-boat:pseudo-equatorial") == 2
    assert other_ring_rank("r2=twist-boat:pseudo-axial") == 3
    assert other_ring_rank("r2=chair:equatorial;r3=chair:axial;r4=envelope") == 1
