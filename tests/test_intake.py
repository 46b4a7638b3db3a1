"""Intake: substituent perception on good inputs, relative configuration kept against 3D geometry."""

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem

from chairqm.errors import ChairqmError
from chairqm.molecule import Perceived, canonical_fragment, perceive


def one(smiles, **kw):
    out = perceive({"name": "m", "smiles": smiles, **kw})
    assert len(out) == 1
    return out[0]


@pytest.mark.parametrize("smiles,fragment", [
    ("CC1CCCCC1", "[*]C"),
    ("CC(C)(C)C1CCCCC1", "[*]C(C)(C)C"),
    ("c1ccc(cc1)C1CCCCC1", "[*]c1ccccc1"),
    ("COC1CCCCC1", "[*]OC"),
    ("FC(F)(F)C1CCCCC1", "[*]C(F)(F)F"),
    ("C[Si](C)(C)C1CCCCC1", "[*][Si](C)(C)C"),
])
def test_monosubstituted_cyclohexanes(smiles, fragment):
    p = one(smiles)
    assert p.ring_elements == ["C"] * 6
    assert len(p.substituents) == 1
    s = p.substituents[0]
    assert s.fragment == fragment
    assert s.ring_atom in p.ring
    mol = p.mol
    assert mol.GetBondBetweenAtoms(s.ring_atom, s.first_atom) is not None
    # the group's atoms are exactly the atoms not in the ring and not ring hydrogens
    ring_h = {nb.GetIdx() for i in p.ring for nb in mol.GetAtomWithIdx(i).GetNeighbors() if nb.GetAtomicNum() == 1}
    assert set(s.atoms) == set(range(mol.GetNumAtoms())) - set(p.ring) - ring_h


def test_same_group_same_fragment_wherever_it_occurs():
    a = one("CC1CCCCC1").substituents[0].fragment
    b = one("C1CCC(C)CC1").substituents[0].fragment
    c = one("C[C@H]1CC[C@@H](C)CC1").substituents
    assert a == b == c[0].fragment == c[1].fragment == "[*]C"
    assert canonical_fragment("*C(F)(F)F") == canonical_fragment("FC(F)(*)F") == "[*]C(F)(F)F"


def test_ring_is_ordered_around_the_ring():
    p = one("CC(C)(C)[C@H]1CC[C@@H](C)CC1")
    mol = p.mol
    for k in range(6):
        assert mol.GetBondBetweenAtoms(p.ring[k], p.ring[(k + 1) % 6]) is not None


def test_tetrahydropyran():
    p = one("C[C@@H]1CCCCO1")
    assert sorted(p.ring_elements) == ["C"] * 5 + ["O"]
    assert [s.fragment for s in p.substituents] == ["[*]C"]


def test_piperidine_nitrogen_substituents_are_listed():
    # N-H and N-alkyl orientation is part of a piperidine conformer (the ring N inverts)
    p = one("CN1CCCCC1")
    assert "N" in p.ring_elements
    (s,) = p.substituents
    assert s.fragment == "[*]C" and p.mol.GetAtomWithIdx(s.ring_atom).GetSymbol() == "N"
    (h,) = one("C1CCNCC1").substituents
    assert h.fragment == "[*][H]"


def test_dioxane():
    p = one("CC1OCCCO1")
    assert p.ring_elements.count("O") == 2
    assert [s.fragment for s in p.substituents] == ["[*]C"]


def _h_faces(p, seed):
    """For each substituted ring carbon, the side of the ring's mean plane its hydrogen lies on (from a 3D embedding)."""
    mol = Chem.Mol(p.mol)
    assert AllChem.EmbedMolecule(mol, randomSeed=seed) == 0
    x = mol.GetConformer().GetPositions()
    ring = p.ring
    c = x[ring].mean(axis=0)
    normal = np.linalg.svd(x[ring] - c)[2][2]
    faces = []
    for s in p.substituents:
        h = [nb.GetIdx() for nb in mol.GetAtomWithIdx(s.ring_atom).GetNeighbors()
             if nb.GetAtomicNum() == 1 and nb.GetIdx() not in ring]
        faces.append(np.sign((x[h[0]] - x[s.ring_atom]) @ normal))
    return faces


@pytest.mark.parametrize("smiles,relation", [
    # cis: both ring hydrogens on one face (common practice: definition of cis/trans on a ring)
    ("C[C@H]1CC[C@@H](C)CC1", "cis"),
    ("C[C@H]1CC[C@H](C)CC1", "trans"),
    ("C[C@H]1CCC[C@@H](C)C1", "cis"),
    ("C[C@H]1CCC[C@H](C)C1", "trans"),
    # 1,2: written so that the meso (R,S) isomer is cis — CIP labels checked independently below
    ("C[C@H]1CCCC[C@H]1C", "cis"),
    ("C[C@H]1CCCC[C@@H]1C", "trans"),
])
def test_cis_trans_kept_in_3d(smiles, relation):
    p = one(smiles)
    assert len(p.substituents) == 2
    for seed in (1, 7, 42):
        f = _h_faces(p, seed)
        assert (f[0] == f[1]) == (relation == "cis")


def test_roundtrip_keeps_order_and_stereo():
    p = one("CC(C)(C)[C@H]1CC[C@@H](C)CC1")
    q = Perceived.from_json(p.to_json())
    m1, m2 = p.mol, q.mol
    assert Chem.MolToSmiles(m1) == Chem.MolToSmiles(m2)
    assert [a.GetSymbol() for a in m1.GetAtoms()] == [a.GetSymbol() for a in m2.GetAtoms()]
    assert q.substituents == p.substituents


def _embedded(smiles, seed=11):
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    AllChem.EmbedMolecule(mol, randomSeed=seed)
    return mol


def test_sdf_input_takes_stereo_from_3d(tmp_path):
    ref = "C[C@H]1CC[C@H](C)CC1"           # trans-1,4-dimethylcyclohexane
    mol = _embedded(ref)
    path = tmp_path / "trans.sdf"
    w = Chem.SDWriter(str(path))
    Chem.RemoveStereochemistry(mol)          # the file carries geometry only; stereo must come from 3D
    w.write(mol)
    w.close()
    (p,) = perceive({"name": "t", "file": "trans.sdf"}, tmp_path)
    assert p.smiles == Chem.MolToSmiles(Chem.MolFromSmiles(ref))
    assert p.ring == sorted(p.ring)[:1] + p.ring[1:]


def test_xyz_input_needs_charge_and_perceives_bonds(tmp_path):
    mol = _embedded("C[C@H]1CC[C@@H](C)CC1")   # cis-1,4
    path = tmp_path / "cis.xyz"
    path.write_text(Chem.MolToXYZBlock(mol))
    (p,) = perceive({"name": "c", "file": "cis.xyz", "charge": 0}, tmp_path)
    assert p.smiles == Chem.MolToSmiles(Chem.MolFromSmiles("C[C@H]1CC[C@@H](C)CC1"))
    assert [s.fragment for s in p.substituents] == ["[*]C", "[*]C"]


def test_single_stereocentre_may_stay_unspecified():
    # one stereo element: the two choices are enantiomers with equal conformer energies
    p = one("COC1CCCCO1")
    assert p.stereo != "none"


def test_enumerate_stereo_expands_relative_configurations():
    out = perceive({"name": "dm", "smiles": "CC1CCC(C)CC1"}, ".", {"enumerate_stereo": True})
    assert len(out) == 2                     # cis and trans (each achiral)
    assert [p.name for p in out] == ["dm-iso1", "dm-iso2"]
    assert len({p.smiles for p in out}) == 2


def test_unspecified_ring_stereo_is_named():
    with pytest.raises(ChairqmError, match=r"ring atom 1 .*ring atom 4"):
        perceive({"name": "dm", "smiles": "CC1CCC(C)CC1"})


@pytest.mark.parametrize("smiles,meso", [
    ("C[C@H]1CCCC[C@H]1C", True), ("C[C@H]1CCCC[C@@H]1C", False),
    ("C[C@H]1CCC[C@@H](C)C1", True), ("C[C@H]1CCC[C@H](C)C1", False),
])
def test_cis_12_and_13_dimethyl_are_the_meso_isomers(smiles, meso):
    # cis-1,2- and cis-1,3-dimethylcyclohexane are meso (R,S); the trans isomers are chiral (R,R/S,S)
    # (Eliel and Wilen, Stereochemistry of Organic Compounds, 1994, ch. 11 — from memory)
    from rdkit.Chem import rdCIPLabeler
    m = Chem.MolFromSmiles(smiles)
    rdCIPLabeler.AssignCIPLabels(m)
    labels = sorted(a.GetProp("_CIPCode") for a in m.GetAtoms() if a.HasProp("_CIPCode"))
    assert (labels == ["R", "S"]) == meso


# ------------------------------------------------------------------ every ring chairqm can analyse
# Saturated six-membered rings with any of the ring atoms below are chair-forming rings (textbook
# conformational analysis; silacyclohexanes, thianes and their oxides, phosphinanes, cyclohexanones are
# all discussed as such, from memory); exocyclic double bonds do not make a ring unsaturated.
@pytest.mark.parametrize("smiles,elements,fragments", [
    ("C[SiH]1CCCCC1", ["Si", "C", "C", "C", "C", "C"], ["[*]C"]),                 # 1-methylsilacyclohexane
    ("O=S1CCCCC1", ["S", "C", "C", "C", "C", "C"], ["[*]=O"]),                     # thiane 1-oxide: S=O ax/eq
    ("O=S1(=O)CCCCC1", ["S", "C", "C", "C", "C", "C"], ["[*]=O", "[*]=O"]),       # thiane 1,1-dioxide
    ("O=C1CCCCC1", ["C"] * 6, []),                                                 # cyclohexanone: C=O in plane
    ("C=C1CCCCC1", ["C"] * 6, []),                                                 # methylenecyclohexane
    ("CP1(=O)CCCCC1", ["P", "C", "C", "C", "C", "C"], ["[*]C", "[*]=O"]),
    ("C[Ge]1(C)CCCCC1", ["Ge", "C", "C", "C", "C", "C"], ["[*]C", "[*]C"]),
    ("O=C1COC(C)OC1", ["C", "C", "O", "C", "O", "C"], ["[*]C"]),                 # a 1,3-dioxan-5-one
])
def test_ring_atoms_beyond_c_n_o_and_exocyclic_double_bonds(smiles, elements, fragments):
    p = one(smiles)
    assert sorted(p.ring_elements) == sorted(elements)
    assert sorted(s.fragment for s in p.substituents) == sorted(fragments)


@pytest.mark.parametrize("smiles,words", [
    ("CC1=CCCCC1", "endocyclic double bond"),
    ("Cc1ccccc1", "aromatic"),
    ("CCCCCC", "no six-membered ring"),
])
def test_refusals_name_the_real_reason(smiles, words):
    with pytest.raises(ChairqmError, match=words):
        one(smiles)


def test_the_analysed_ring_and_the_other_rings():
    # most groups wins; a tie goes to the ring with fewer heteroatoms (the cyclohexane of a piperidine
    # hanging on it), and the other ring is recorded with its link towards the analysed ring
    p = one("C1CCC(CC1)C1CCNCC1")
    assert p.ring_elements == ["C"] * 6 and [s.fragment for s in p.substituents] == ["[*]C1CCNCC1"]
    assert len(p.other_rings) == 1
    o = p.other_rings[0]
    assert o["label"] == "r2" and o["link_to"] in p.ring and o["link_atom"] in o["atoms"]
    q = one("C1CCC(CC1)C1CCNCC1", ring="C1CCNCC1")
    assert "N" in q.ring_elements and q.other_rings[0]["link_to"] in q.ring
    assert len(one("C[C@H]1C[C@@H](C)C[C@@H](C2CCCCC2)C1").substituents) == 3      # three groups beat one
