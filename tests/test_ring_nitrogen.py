"""Amides, carbamates and aryl groups on a ring nitrogen: seeded, labelled and ranked.

The ring N of an N-acyl or N-aryl piperidine is trigonal (or nearly so); its one exocyclic bond has no
axial or equatorial side, and a 2-substituent next to it goes axial to escape the strain with the planar
N-substituent (pseudo-allylic or A(1,3) strain, common practice; the issue's own check). Chemistry
checked against outside statements only, with the source named beside each.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from _runs import run_summary

from chairqm import seeds as S
from chairqm.molecule import perceive
from chairqm.ring import orientation


def _seeds(smiles):
    p = perceive({"name": "m", "smiles": smiles})[0]
    return p, S.build_seeds(p.mol, p.ring, p.substituents, {}, p.other_rings)


@pytest.mark.parametrize("smiles", [
    "CC(=O)N1CCCCC1",                 # N-acetylpiperidine
    "CC(C)(C)OC(=O)N1CCCCC1",         # N-Boc-piperidine
    "O=CN1CCCCC1",                    # N-formylpiperidine
    "c1ccccc1N1CCCCC1",               # N-phenylpiperidine
    "CNC(=O)N1CCCCC1",                # a urea on the ring N
    "O=NN1CCCCC1",                    # N-nitrosopiperidine
    "O=C1CCCCN1",                     # 2-piperidinone (lactam N-H)
    "CS(=O)(=O)N1CCCCC1",             # N-mesylpiperidine (a sulfonamide N: seeded as it embeds, both inversions)
])
def test_planar_ring_nitrogen_is_seeded_in_both_chairs_without_failures(smiles):
    p, seeds = _seeds(smiles)
    failed = [s for s in seeds if s.status == "failed"]
    assert not failed, [(s.name, s.reason) for s in failed]
    kept = [s for s in seeds if s.kept]
    assert any(s.ring_form == "chair" for s in kept)
    assert any(s.ring_form == "twist-boat" for s in kept)


def test_n_acyl_2_methyl_piperidine_gets_both_chairs_and_both_amide_rotamers():
    p, seeds = _seeds("C[C@@H]1CCCCN1C(C)=O")
    chairs = [s for s in seeds if s.kept and s.ring_form == "chair"]
    me = {s.orientation.split(";")[0] for s in chairs}
    assert me == {"s1=axial", "s1=equatorial"}
    # the C(=O)-N rotor starts on both sides (E and Z carbonyl relative to C2) in each chair
    for side in ("s1=axial", "s1=equatorial"):
        assert len([s for s in chairs if s.orientation.startswith(side)]) == 2, side
    mol = p.mol
    n = [a.GetIdx() for a in mol.GetAtoms() if a.GetSymbol() == "N"][0]
    o = [a.GetIdx() for a in mol.GetAtoms() if a.GetSymbol() == "O"][0]
    c2 = 1
    carbonyl = [nb.GetIdx() for nb in mol.GetAtomWithIdx(o).GetNeighbors()][0]
    from chairqm.chem import dihedral
    for side in ("s1=axial", "s1=equatorial"):
        tors = sorted(abs(dihedral(*(s.positions[i] for i in (c2, n, carbonyl, o))))
                      for s in chairs if s.orientation.startswith(side))
        assert tors[0] < 60 and tors[1] > 120, (side, tors)


def test_n_aryl_is_seeded_on_both_sides():
    _, seeds = _seeds("c1ccccc1N1CCCCC1")
    chairs = {s.orientation for s in seeds if s.kept and s.ring_form == "chair"}
    # two starts (shallow pyramid up and down); the force field may flatten one of them
    assert len([s for s in seeds if s.kept and s.ring_form == "chair"]) == 2, chairs


def test_orientation_is_planar_at_a_trigonal_ring_atom_only():
    # an idealised chair ring (RDKit-free): ring atom 0 trigonal with its exocyclic bond on the bisector
    from chairqm.ring import ring_from_pucker, exocyclic_slots
    X = ring_from_pucker(0.55, 0.0, 0.0, [1.53] * 6)
    b = (X[0] - X[5]) + (X[0] - X[1])          # in the plane of atoms 5, 0, 1: bond angles sum to 360
    flat = np.vstack([X, X[0] + 1.4 * b / np.linalg.norm(b)])
    assert orientation(flat, list(range(6)), 0, 6, "chair", trigonal=True) == "planar"
    assert orientation(flat, list(range(6)), 0, 6, "twist-boat", trigonal=True) == "planar"
    # a ring atom with four neighbours is never 'planar', however distorted
    assert orientation(flat, list(range(6)), 0, 6, "chair") in ("axial", "equatorial")
    d1, d2 = exocyclic_slots(X, list(range(6)), 0)
    for d in (d1, d2):
        tet = np.vstack([X, X[0] + 1.53 * d])
        assert orientation(tet, list(range(6)), 0, 6, "chair", trigonal=True) in ("axial", "equatorial")


# ---- end to end --------------------------------------------------------------------------------------
MOLECULES = [
    {"name": "boc-pip", "smiles": "CC(C)(C)OC(=O)N1CCCCC1"},
    {"name": "ac-2me-pip", "smiles": "C[C@@H]1CCCCN1C(C)=O"},
    {"name": "boc-2me-pip", "smiles": "C[C@@H]1CCCCN1C(=O)OC(C)(C)C"},
    {"name": "formyl-2me-pip", "smiles": "C[C@@H]1CCCCN1C=O"},
]


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    out = tmp_path_factory.mktemp("ring_n") / "out"
    return out, run_summary({"project": "ring-n", "molecules": MOLECULES,
                             "settings": {"analysis": {"reference_groups": False}}}, out)


@pytest.mark.slow
def test_n_boc_piperidine_runs_and_its_chairs_are_one_by_symmetry(run):
    out, summary = run
    row = summary[summary["molecule"] == "boc-pip"].iloc[0]
    assert row["status"] == "ok", row["reason"]
    # the ring flip of an unsubstituted ring is its mirror image: the chair gap is zero by symmetry
    assert float(row["chair_dg_kcal"]) == pytest.approx(0.0, abs=1e-6)
    seeds = pd.read_csv(out / "boc-pip" / "seeds.csv", keep_default_na=False)
    assert not (seeds["status"] == "failed").any()


@pytest.mark.slow
@pytest.mark.parametrize("name", ["ac-2me-pip", "boc-2me-pip", "formyl-2me-pip"])
def test_2_methyl_goes_axial_next_to_an_acylated_ring_nitrogen(run, name):
    # 2-methyl axial in N-acyl-2-methylpiperidines (pseudo-allylic strain; common practice)
    _, summary = run
    rows = summary[summary["molecule"] == name]
    assert len(rows) >= 1
    row = rows.iloc[0]
    assert row["status"] == "ok", row["reason"]
    assert row["preferred_family"].startswith("chair ") and "s1=axial" in row["preferred_family"], row.to_dict()
    assert float(row["chair_dg_kcal"]) > 0.5
