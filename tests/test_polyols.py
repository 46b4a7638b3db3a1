"""Sugars and polyols: hydrogen-bond chains seeded on purpose, rotor coverage stated, the medium warned about.

A glucopyranoside's hydroxy groups can form a cooperative O-H...O chain around the ring in either
direction (textbook carbohydrate conformational analysis); an evenly spaced subset of a 3^n torsion grid
almost never contains it, so chairqm seeds both chains first in every ring form.
"""

from __future__ import annotations

import pytest

from chairqm import chem, rotamers, seeds
from chairqm.molecule import perceive

ME_BETA_GLC = "CO[C@@H]1O[C@H](CO)[C@@H](O)[C@H](O)[C@H]1O"     # methyl beta-D-glucopyranoside


@pytest.fixture(scope="module")
def glc_seeds():
    p = perceive({"name": "glc", "smiles": ME_BETA_GLC})[0]
    found = seeds.build_seeds(p.mol, p.ring, p.substituents, {"twist_boats": False, "max_rotamer_starts": 4},
                              p.other_rings)
    return p, found


def test_the_glucoside_is_all_equatorial_in_one_chair_and_all_axial_in_the_other(glc_seeds):
    # beta-D-glucopyranoside: every substituent equatorial in the 4C1 chair (textbook)
    _, found = glc_seeds
    forms = {s.orientation for s in found if s.kept and s.ring_form == "chair"}
    assert "s1=equatorial;s2=equatorial;s3=equatorial;s4=equatorial;s5=equatorial" in forms
    assert "s1=axial;s2=axial;s3=axial;s4=axial;s5=axial" in forms


def test_both_hydrogen_bond_chains_are_seeded_first_in_each_chair(glc_seeds):
    _, found = glc_seeds
    for chair in ("chair-1", "chair-2"):
        mine = [s for s in found if s.template == chair and s.name.startswith(chair + "-r")]
        labels = [s.reason for s in mine[:2]]
        assert "ring order +1" in labels[0] and "ring order -1" in labels[1], labels


def test_a_chain_start_relaxes_into_a_chain_of_contacts(glc_seeds):
    p, found = glc_seeds
    chain = next(s for s in found if s.template == "chair-1" and "ring order +1" in s.reason)
    bonds = chem.intramolecular_hbonds(p.mol, chain.positions)
    # four hydroxy groups, each pointing at the next oxygen round the ring: at least three contacts
    assert len(bonds) >= 3, bonds
    donors = {d for d, _, _ in bonds}
    assert len(donors) == len(bonds)                      # one contact per hydroxy: a chain, not a fan


def test_one_hydroxy_group_makes_no_chain():
    p = perceive({"name": "chol", "smiles": "O[C@H]1CC[C@@H](C)CC1"})[0]
    found = seeds.build_seeds(p.mol, p.ring, p.substituents, {"twist_boats": False}, p.other_rings)
    assert not [s for s in found if "hydrogen-bond chain" in s.reason]


def test_coverage_is_read_from_the_seed_reasons():
    reasons = ["start 1 of 218 (evenly spaced subset of 729 grid points): torsions 60,60 (hydrogen-bond chain, "
               "ring order +1)", "start 2 of 218 (evenly spaced subset of 729 grid points): torsions 60,180",
               "symmetry-equivalent of chair-1"]
    assert rotamers.coverage(reasons) == {"starts": 218, "grid": 729, "chains": 2}
    assert rotamers.coverage(["start 1 of 3: torsions 60"]) == {"starts": 3, "grid": 3, "chains": 0}
    assert rotamers.coverage(["no rotors"]) is None


@pytest.mark.slow
def test_gas_phase_result_resting_on_hydrogen_bonds_is_flagged(tmp_path):
    # all-cis-cyclohexane-1,3,5-triol: in the gas phase the triaxial chair is held by a ring of three
    # O-H...O bonds (from memory: the classic case of intramolecular hydrogen bonding overriding
    # A-values in non-polar media); chairqm must say that the medium decides
    from _runs import run_summary
    row = run_summary({"molecules": [{"name": "triol", "smiles": "O[C@H]1C[C@@H](O)C[C@@H](O)C1"}],
                       "settings": {"analysis": {"reference_groups": False}}}, tmp_path / "triol", timeout=1800).iloc[0]
    assert row["status"] == "ok"
    assert row["preferred_family"] == "chair s1=axial;s2=axial;s3=axial"
    assert str(row["flag"]).lower() == "true" and "intramolecular hydrogen bonds" in row["flag_reason"]


BETA_GLC = "C([C@@H]1[C@H]([C@@H]([C@H]([C@@H](O1)O)O)O)O)O"     # beta-D-glucopyranose


@pytest.mark.slow
def test_beta_d_glucose_in_water_is_the_all_equatorial_4c1_chair(tmp_path):
    # beta-D-glucopyranose in water: the 4C1 chair with every substituent equatorial dominates (textbook);
    # checked as: that chair is the preferred family, the ring-flipped 1C4 chair lies above it, and the
    # non-chair forms hold less than half of the population (so the 4C1 chair holds most of it)
    _4c1_chair_in_water(tmp_path, BETA_GLC, ["equatorial"] * 5)


ME_ALPHA_GLC = "CO[C@H]1O[C@H](CO)[C@@H](O)[C@H](O)[C@H]1O"     # methyl alpha-D-glucopyranoside


@pytest.mark.slow
def test_methyl_alpha_d_glucoside_in_water_is_the_4c1_chair_with_its_methoxy_axial(tmp_path):
    # methyl alpha-D-glucopyranoside: the 4C1 chair with the anomeric methoxy axial and every other group
    # equatorial (the anomeric effect; textbook, from memory); s1 is the methoxy (intake numbers the groups
    # from the SMILES), so the preferred family is 's1=axial', the rest equatorial, the 1C4 chair above it
    _4c1_chair_in_water(tmp_path, ME_ALPHA_GLC, ["axial"] + ["equatorial"] * 4)


def _4c1_chair_in_water(tmp_path, smiles, sides):
    """One sugar in ALPB water: the chair with the groups s1, s2, ... on `sides` is the preferred family,
    the ring-flipped chair lies more than 1 kcal/mol above it, and the non-chair forms hold less than half
    of the population (so that chair holds most of it)."""
    from _runs import run_summary
    row = run_summary({"molecules": [{"name": "sugar", "smiles": smiles}],
                       "settings": {"solvent": {"model": "alpb", "name": "water"},
                                    "analysis": {"reference_groups": False}}},
                      tmp_path / "glc", timeout=2400).iloc[0]
    assert row["status"] == "ok", row["reason"]
    assert row["preferred_family"] == "chair " + ";".join(f"s{i}={side}" for i, side in enumerate(sides, 1))
    assert float(row["chair_dg_kcal"]) > 1.0
    assert float(row["twist_boat_population"]) < 0.5
