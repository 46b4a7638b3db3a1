"""Tests of chairqm.chem: torsion angles against RDKit and the IUPAC sign rule, Kabsch fits against
scipy's Rotation.align_vectors, coordinates and stereo on RDKit molecules."""

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem, rdMolTransforms
from scipy.spatial.transform import Rotation

from chairqm import chem


def _embedded(smiles, seed=7):
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    assert AllChem.EmbedMolecule(mol, randomSeed=seed) == 0
    return mol


def test_dihedral_sign_follows_the_iupac_rule():
    # looking along p1 -> p2 (+z), the front bond p1-p0 along +x turns clockwise by 90 deg onto +y:
    # +90 deg (IUPAC, Moss, Pure Appl. Chem. 1996, 68, 2193, from memory)
    p0, p1, p2 = [1.0, 0, 0], [0.0, 0, 0], [0.0, 0, 1.5]
    assert chem.dihedral(p0, p1, p2, [0.0, 1.0, 1.5]) == pytest.approx(90.0)
    assert chem.dihedral(p0, p1, p2, [0.0, -1.0, 1.5]) == pytest.approx(-90.0)
    assert abs(chem.dihedral(p0, p1, p2, [-1.0, 0.0, 1.5])) == pytest.approx(180.0)
    assert chem.dihedral(p0, p1, p2, [1.0, 0.0, 1.5]) == pytest.approx(0.0)


def test_dihedral_matches_rdkit_on_butane():
    mol = _embedded("CCCC")
    conf = mol.GetConformer()
    pos = conf.GetPositions()
    for quad in [(0, 1, 2, 3), (4, 0, 1, 2), (3, 2, 1, 7)]:
        ref = rdMolTransforms.GetDihedralDeg(conf, *quad)
        assert chem.dihedral(*pos[list(quad)]) == pytest.approx(ref, abs=1e-9)


def test_kabsch_recovers_a_rotation_like_scipy():
    rng = np.random.default_rng(3)
    q = rng.normal(size=(9, 3))
    rot = Rotation.from_euler("zyx", [40.0, -25.0, 110.0], degrees=True)
    p = rot.apply(q) + np.array([1.0, -2.0, 0.5])
    R, qc, pc = chem.kabsch(p, q)
    assert np.linalg.det(R) == pytest.approx(1.0)
    # scipy's Kabsch: the rotation that best maps the centred q onto the centred p
    ref, _ = Rotation.align_vectors(p - p.mean(0), q - q.mean(0))
    assert np.allclose(R, ref.as_matrix(), atol=1e-10)
    assert np.allclose(chem.fit(p, q)(q), p, atol=1e-10)
    assert chem.max_deviation(chem.fit(p, q)(q), p) < 1e-10


def test_kabsch_improper_fits_a_mirror_image_and_proper_cannot():
    rng = np.random.default_rng(5)
    q = rng.normal(size=(8, 3))
    p = q * np.array([1.0, 1.0, -1.0])                       # reflection through the xy plane
    R, _, _ = chem.kabsch(p, q, improper=True)
    assert np.linalg.det(R) == pytest.approx(-1.0)
    assert chem.max_deviation(chem.fit(p, q, improper=True)(q), p) < 1e-10
    assert chem.max_deviation(chem.fit(p, q)(q), p) > 0.1    # a chiral point set: no rotation does it


def test_kabsch_without_centring_keeps_the_origin_fixed():
    rng = np.random.default_rng(11)
    q = rng.normal(size=(6, 3)) + 3.0                        # centroid far from the origin
    rot = Rotation.from_euler("x", 72.0, degrees=True).as_matrix()
    p = q @ rot.T
    R, qc, pc = chem.kabsch(p, q, centre=False)
    assert np.allclose(qc, 0.0) and np.allclose(pc, 0.0)
    assert np.allclose(R, rot, atol=1e-10)


def test_with_positions_copies_and_checks_the_shape():
    mol = _embedded("CCO")
    before = mol.GetConformer().GetPositions().copy()
    new = before + 1.0
    m2 = chem.with_positions(mol, new)
    assert m2.GetNumConformers() == 1 and m2.GetConformer().Is3D()
    assert np.allclose(m2.GetConformer().GetPositions(), new)
    assert np.allclose(mol.GetConformer().GetPositions(), before)    # the input is untouched
    with pytest.raises(ValueError):
        chem.with_positions(mol, new[:-1])
    cid = chem.set_positions(mol, new)                                # in place
    assert mol.GetNumConformers() == 1 and np.allclose(mol.GetConformer(cid).GetPositions(), new)


def test_stereo_from_3d_gives_the_cip_label_of_the_embedded_enantiomer_and_its_mirror():
    # F[C@](Cl)(Br)[H]: from F, Cl-Br-H turn anticlockwise; moving H to the front is an odd permutation,
    # so from H F-Cl-Br turn clockwise, i.e. anticlockwise with H at the back: Br > Cl > F clockwise, R
    for smiles, label in [("F[C@](Cl)(Br)[H]", "R"), ("F[C@@](Cl)(Br)[H]", "S")]:
        ref = Chem.MolFromSmiles(smiles)
        Chem.AssignStereochemistry(ref, cleanIt=True, force=True)
        assert ref.GetAtomWithIdx(1).GetProp("_CIPCode") == label         # RDKit's CIP on the SMILES
        mol = _embedded(smiles)
        for a in mol.GetAtoms():
            a.SetChiralTag(Chem.ChiralType.CHI_UNSPECIFIED)                # forget the input stereo
        pos = mol.GetConformer().GetPositions()
        got = chem.stereo_from_3d(mol, pos)
        assert got.GetAtomWithIdx(1).GetProp("_CIPCode") == label
        mirror = chem.stereo_from_3d(mol, pos * np.array([-1.0, 1.0, 1.0]))
        assert mirror.GetAtomWithIdx(1).GetProp("_CIPCode") == {"R": "S", "S": "R"}[label]
        assert mol.GetAtomWithIdx(1).GetChiralTag() == Chem.ChiralType.CHI_UNSPECIFIED
