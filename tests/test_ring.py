"""Ring geometry: Cremer–Pople puckering, the inverse, ring-form classification and orientation labels."""

import math

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from rdkit import Chem
from rdkit.Chem import AllChem
from rdkit.Chem import rdMolTransforms
from rdkit.Geometry import Point3D

from chairqm import ring as R
from chairqm.ring import Pucker, classify, cremer_pople, measure, orientation, ring_from_pucker, ring_torsions


def _hexagon(z, radius=1.45):
    """Hand-made ring: a regular hexagon in the xy plane with the given out-of-plane offsets."""
    ang = np.radians(60.0 * np.arange(6))
    return np.column_stack([radius * np.cos(ang), radius * np.sin(ang), np.asarray(z, float)])


def _lsq_normal(x):
    """Least-squares plane normal by SVD (independent of the Cremer–Pople construction)."""
    c = x - x.mean(axis=0)
    return np.linalg.svd(c)[2][-1]


@pytest.fixture(scope="module")
def cyclohexane_conformers():
    """MMFF94-relaxed cyclohexane conformers from RDKit (an outside source of geometries)."""
    m = Chem.AddHs(Chem.MolFromSmiles("C1CCCCC1"))
    cids = list(AllChem.EmbedMultipleConfs(m, 30, randomSeed=3))
    AllChem.MMFFOptimizeMoleculeConfs(m, maxIters=5000)
    return m, cids


# ---- Cremer–Pople ---------------------------------------------------------------------------------
def test_ideal_chair_theta_and_torsions():
    x = ring_from_pucker(0.55, 0.0, 0.0, 1.53)
    p = cremer_pople(x)
    assert p.theta == pytest.approx(0.0, abs=1e-6)
    # an ideal chair's ring torsions alternate in sign near ±55 deg (common practice; cyclohexane
    # gas-phase electron diffraction 54.9 deg, from memory)
    tors = ring_torsions(x)
    assert np.all(np.abs(np.abs(tors) - 55.0) < 3.0)
    assert np.all(np.sign(tors) == -np.sign(np.roll(tors, 1)))
    # the other chair sits at the other pole
    assert cremer_pople(ring_from_pucker(0.55, 180.0, 0.0, 1.53)).theta == pytest.approx(180.0, abs=1e-6)


def test_mmff_cyclohexane_chair_is_at_a_pole(cyclohexane_conformers):
    m, cids = cyclohexane_conformers
    chairs = 0
    for cid in cids:
        x = m.GetConformer(cid).GetPositions()[:6]
        p = cremer_pople(x)
        if classify(p) == "chair":
            chairs += 1
            assert min(p.theta, 180.0 - p.theta) < 3.0
            # ring torsions of the chair near ±55 deg (common practice)
            assert np.all(np.abs(np.abs(ring_torsions(x)) - 55.0) < 4.0)
    assert chairs > 0


def test_ring_torsions_agree_with_rdkit(cyclohexane_conformers):
    m, cids = cyclohexane_conformers
    conf = m.GetConformer(cids[0])
    ours = ring_torsions(conf.GetPositions()[:6])
    ref = [rdMolTransforms.GetDihedralDeg(conf, j, (j + 1) % 6, (j + 2) % 6, (j + 3) % 6) for j in range(6)]
    assert np.allclose(ours, ref, atol=1e-6)


def test_puckering_is_invariant_under_rigid_motion_and_follows_renumbering():
    x = ring_from_pucker(0.62, 70.0, 100.0, [1.53, 1.43, 1.43, 1.53, 1.53, 1.53])
    p = cremer_pople(x)
    rot = np.linalg.qr(np.random.default_rng(1).normal(size=(3, 3)))[0]
    if np.linalg.det(rot) < 0:
        rot[:, 0] *= -1
    p2 = cremer_pople(x @ rot.T + np.array([3.0, -1.0, 2.0]))
    assert (p2.q, p2.theta, p2.phi) == pytest.approx((p.q, p.theta, p.phi), abs=1e-8)
    # from the definitions (Cremer & Pople, J. Am. Chem. Soc. 1975, 97, 1354): shifting the numbering by one atom
    # (z'_j = z_{j+1}) turns phi into phi + 120 deg and theta into 180 - theta
    p3 = cremer_pople(np.roll(x, -1, axis=0))
    assert p3.q == pytest.approx(p.q, abs=1e-10)
    assert p3.theta == pytest.approx(180.0 - p.theta, abs=1e-8)
    assert (p3.phi - p.phi) % 360.0 == pytest.approx(120.0, abs=1e-8)


@settings(max_examples=60, deadline=None)
@given(q=st.floats(0.3, 0.8), theta=st.floats(0.0, 180.0), phi=st.floats(0.0, 359.9),
       bonds=st.sampled_from([1.53, [1.43, 1.53, 1.53, 1.53, 1.53, 1.43], [1.47, 1.52, 1.52, 1.47, 1.43, 1.43]]))
def test_forward_inverse_round_trip(q, theta, phi, bonds):
    x = ring_from_pucker(q, theta, phi, bonds)
    lengths = np.broadcast_to(np.asarray(bonds, float), (6,))
    assert np.allclose(np.linalg.norm(np.roll(x, -1, axis=0) - x, axis=1), lengths, atol=1e-7)
    p = cremer_pople(x)
    assert p.q == pytest.approx(q, abs=1e-7)
    assert p.theta == pytest.approx(theta, abs=1e-5)
    if q * math.sin(math.radians(theta)) > 0.02:        # phi is undefined at the poles
        d = (p.phi - phi) % 360.0
        assert min(d, 360.0 - d) < 1e-4


def test_too_large_amplitude_is_a_clear_error():
    from chairqm.errors import ChairqmError
    with pytest.raises(ChairqmError, match="too large"):
        ring_from_pucker(2.5, 0.0, 0.0, 1.53)


# ---- classification -------------------------------------------------------------------------------
@pytest.mark.parametrize("z,form", [
    # hand-made rings defined by which atoms leave the plane (textbook definitions, common practice)
    ([0.25, -0.25, 0.25, -0.25, 0.25, -0.25], "chair"),
    ([0.6, 0.0, 0.0, 0.6, 0.0, 0.0], "boat"),               # bow and stern on one side
    ([0.5, -0.5, 0.0, 0.5, -0.5, 0.0], "twist-boat"),       # C2 axis through atoms 2 and 5
    ([0.6, 0.0, 0.0, 0.0, 0.0, 0.0], "envelope"),           # one atom out of the plane of five
    ([0.35, -0.35, 0.0, 0.0, 0.0, 0.0], "half-chair"),      # two adjacent atoms on opposite sides
    ([0.01, -0.01, 0.01, -0.01, 0.01, -0.01], "other"),     # planar
])
def test_classify_hand_made_rings(z, form):
    assert classify(cremer_pople(_hexagon(z))) == form


@pytest.mark.parametrize("theta,phi,form", [
    # positions on the Cremer–Pople sphere (Boeyens, J. Cryst. Mol. Struct. 1978, 8, 317; from memory)
    (0.0, 0.0, "chair"), (180.0, 0.0, "chair"),
    (90.0, 0.0, "boat"), (90.0, 120.0, "boat"), (90.0, 300.0, "boat"),
    (90.0, 30.0, "twist-boat"), (90.0, 150.0, "twist-boat"), (90.0, 330.0, "twist-boat"),
    (54.7, 0.0, "envelope"), (125.3, 60.0, "envelope"),
    (50.8, 30.0, "half-chair"), (129.2, 90.0, "half-chair"),
])
def test_classify_ideal_forms(theta, phi, form):
    assert classify(cremer_pople(ring_from_pucker(0.6, theta, phi, 1.53))) == form


def test_classification_thresholds():
    c = R.CHAIR_THETA_MAX
    assert classify(Pucker(0.5, c - 0.5, 0.0)) == "chair"
    assert classify(Pucker(0.5, 180.0 - c + 0.5, 0.0)) == "chair"
    assert classify(Pucker(0.5, c + 0.5, 0.0)) != "chair"
    e = R.EQUATOR_THETA_MIN
    assert classify(Pucker(0.7, e + 0.5, 30.0)) == "twist-boat"
    assert classify(Pucker(0.7, e - 0.5, 30.0)) == "half-chair"
    assert classify(Pucker(0.7, 180.0 - e - 0.5, 0.0)) == "boat"
    t = R.PHI_TOL
    assert classify(Pucker(0.7, 90.0, 30.0 + t - 0.5)) == "twist-boat"
    assert classify(Pucker(0.7, 90.0, 60.0 - t + 0.5)) == "boat"
    assert classify(Pucker(0.7, 90.0, 30.0 + t + 0.5)) == "other"       # between boat and twist-boat
    assert classify(Pucker(0.5, 52.0, 15.0)) == "other"                 # between envelope and half-chair
    assert classify(Pucker(R.Q_PLANAR_MAX - 0.01, 0.0, 0.0)) == "other"
    assert classify(Pucker(R.Q_PLANAR_MAX + 0.01, 0.0, 0.0)) == "chair"


def test_mmff_cyclohexane_twist_boat_classifies(cyclohexane_conformers):
    m, cids = cyclohexane_conformers
    forms = [classify(cremer_pople(m.GetConformer(c).GetPositions()[:6])) for c in cids]
    assert set(forms) <= {"chair", "twist-boat"}
    assert "twist-boat" in forms        # ETKDG lands some twist-boats (design notes; seed fixed)


# ---- orientation ----------------------------------------------------------------------------------
def _h_labels(m, conf_id, form, x=None):
    x = m.GetConformer(conf_id).GetPositions() if x is None else x
    ring = list(range(6))
    out = {}
    for a in ring:
        for nb in m.GetAtomWithIdx(a).GetNeighbors():
            if nb.GetAtomicNum() == 1:
                out[nb.GetIdx()] = (a, orientation(x, ring, a, nb.GetIdx(), form))
    return x, out


def test_chair_hydrogens_six_axial_six_equatorial(cyclohexane_conformers):
    m, cids = cyclohexane_conformers
    cid = next(c for c in cids if classify(cremer_pople(m.GetConformer(c).GetPositions()[:6])) == "chair")
    x, labels = _h_labels(m, cid, "chair")
    n = _lsq_normal(x[:6])
    kinds = [lab for _, lab in labels.values()]
    assert kinds.count("axial") == 6 and kinds.count("equatorial") == 6
    for h, (a, lab) in labels.items():
        b = (x[h] - x[a]) / np.linalg.norm(x[h] - x[a])
        elev = math.degrees(math.asin(abs(b @ n)))
        # axial C–H parallel to the ring axis, equatorial close to the ring plane (common practice)
        if lab == "axial":
            assert elev > 70.0
        else:
            assert elev < 35.0
    # one axial and one equatorial H on every carbon
    for a in range(6):
        assert sorted(lab for (aa, lab) in labels.values() if aa == a) == ["axial", "equatorial"]


def test_twist_boat_hydrogens_four_of_each_kind(cyclohexane_conformers):
    m, cids = cyclohexane_conformers
    cid = next(c for c in cids if classify(cremer_pople(m.GetConformer(c).GetPositions()[:6])) == "twist-boat")
    _, labels = _h_labels(m, cid, "twist-boat")
    kinds = [lab for _, lab in labels.values()]
    # D2 twist-boat: 4 isoclinal, 4 pseudo-axial, 4 pseudo-equatorial H (common practice)
    assert kinds.count("isoclinal") == 4
    assert kinds.count("pseudo-axial") == 4
    assert kinds.count("pseudo-equatorial") == 4


def test_boat_flagpole_hydrogens_point_at_each_other():
    # boat ring (theta = 90, phi = 0: bow 0 and stern 3 on one side of the plane of 1, 2, 4, 5); RDKit
    # places the hydrogens and MMFF94 relaxes them with the ring atoms fixed
    ringx = ring_from_pucker(0.75, 90.0, 0.0, 1.53)
    z = ringx[:, 2]
    assert z[0] > 0.2 and z[3] > 0.2 and np.all(np.abs(z[[1, 2, 4, 5]] + 0.5 * z[0]) < 1e-6)
    m = Chem.AddHs(Chem.MolFromSmiles("C1CCCCC1"))
    cmap = {i: Point3D(*ringx[i]) for i in range(6)}
    assert AllChem.EmbedMolecule(m, coordMap=cmap, randomSeed=7, useRandomCoords=True) == 0
    ff = AllChem.MMFFGetMoleculeForceField(m, AllChem.MMFFGetMoleculeProperties(m))
    for i in range(6):
        ff.AddFixedPoint(i)
    ff.Minimize(maxIts=2000)
    x = m.GetConformer().GetPositions()
    assert np.allclose(x[:6], ringx, atol=1e-3)
    assert classify(cremer_pople(x[:6])) == "boat"
    _, labels = _h_labels(m, 0, "boat", x)
    flag = [h for h, (a, lab) in labels.items() if lab == "flagpole"]
    bow = [h for h, (a, lab) in labels.items() if lab == "bowsprit"]
    assert len(flag) == 2 and len(bow) == 2
    assert {labels[h][0] for h in flag} == {0, 3}
    # flagpole H's are the closest pair between bow and stern (textbook: about 1.8 Å; common practice)
    pairs = [(np.linalg.norm(x[a] - x[b]), {a, b}) for a in (flag + bow) for b in (flag + bow)
             if labels[a][0] == 0 and labels[b][0] == 3]
    assert min(pairs, key=lambda t: t[0])[1] == set(flag)
    others = [lab for h, (a, lab) in labels.items() if a not in (0, 3)]
    assert set(others) == {"pseudo-axial", "pseudo-equatorial"}


def test_planar_ring_gives_isoclinal():
    x = _hexagon([0.0] * 6, radius=1.39)
    # hydrogens above and below the plane, tilted outward
    hx = x[0] + 1.09 * np.array([math.cos(math.radians(54.7)), 0.0, math.sin(math.radians(54.7))])
    pos = np.vstack([x, hx])
    assert orientation(pos, list(range(6)), 0, 6, "other") == "isoclinal"


def test_measure_orders_substituents_numerically():
    from types import SimpleNamespace as NS
    m = Chem.AddHs(Chem.MolFromSmiles("C1CCCCC1"))
    AllChem.EmbedMolecule(m, randomSeed=11)
    AllChem.MMFFOptimizeMolecule(m)
    x = m.GetConformer().GetPositions()
    hs = [[nb.GetIdx() for nb in m.GetAtomWithIdx(a).GetNeighbors() if nb.GetAtomicNum() == 1] for a in range(6)]
    subs = [NS(id="s10", ring_atom=1, first_atom=hs[1][0]), NS(id="s2", ring_atom=0, first_atom=hs[0][0]),
            NS(id="s1", ring_atom=0, first_atom=hs[0][1])]
    out = measure(x, list(range(6)), subs)
    assert set(out) == {"ring_form", "q", "theta", "phi", "orientation"}
    assert [kv.split("=")[0] for kv in out["orientation"].split(";")] == ["s1", "s2", "s10"]
    if out["ring_form"] == "chair":
        a, b = (kv.split("=")[1] for kv in out["orientation"].split(";")[:2])
        assert {a, b} == {"axial", "equatorial"}


def test_four_membered_ring_pucker_and_link_position():
    """Cyclobutane is puckered (ring torsions about 20-27 deg by gas-phase electron diffraction, from
    memory; MMFF94 reproduces the pucker), so a substituent on it is pseudo-axial or pseudo-equatorial; a
    planar square ring has neither."""
    import numpy as np
    from rdkit import Chem
    from rdkit.Chem import AllChem

    from chairqm.ring import four_ring_state
    mol = Chem.AddHs(Chem.MolFromSmiles("CC1CCC1"))
    AllChem.EmbedMolecule(mol, randomSeed=7)
    AllChem.MMFFOptimizeMolecule(mol)
    x = mol.GetConformer().GetPositions()
    state = four_ring_state(x, [1, 2, 3, 4], 1, 0)
    assert state in ("puckered:pseudo-equatorial", "puckered:pseudo-axial")
    square = np.array([[0, 0, 0], [1.55, 0, 0], [1.55, 1.55, 0], [0, 1.55, 0], [-0.9, -0.9, 0.0]], dtype=float)
    assert four_ring_state(square, [0, 1, 2, 3], 0, 4) == "planar:isoclinal"


def test_a_ring_with_a_flat_atom_calls_its_flattened_chairs_chairs():
    """1,3-Dioxan-5-ones are chairs flattened at the carbonyl carbon (from memory); with GFN2-xTB their two
    chair-like minima sit at theta of about 35 and 51 deg, where an all-sp3 ring would be an envelope. A ring
    with a flat ring atom gets the wider polar cap (CHAIR_THETA_MAX_FLAT_ATOM), an all-sp3 ring does not."""
    from chairqm import ring as R
    from chairqm import seeds as S
    from chairqm.molecule import perceive
    p = perceive({"name": "d", "smiles": "CC1OCC(=O)CO1"})[0]
    tri = R.trigonal_ring_atoms(p.mol, p.ring)
    found = S.build_seeds(p.mol, p.ring, p.substituents, {"twist_boats": False}, p.other_rings)
    chairs = [s for s in found if s.status == "ok" and s.template.startswith("chair")]
    assert chairs
    for s in chairs:
        m = R.measure(s.positions, p.ring, p.substituents, p.other_rings, tri)
        assert m["ring_form"] == "chair", (s.name, m)
    pucker = R.Pucker(q=0.47, theta=50.8, phi=0.0, q2=0.36, q3=0.30)
    assert R.classify(pucker) == "envelope"
    assert R.classify(pucker, R.CHAIR_THETA_MAX_FLAT_ATOM) == "chair"
