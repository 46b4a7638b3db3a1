"""The additive chair estimate against textbook cases, its limits, the references and the disagreement flag."""

import math

import numpy as np
import pytest

from chairqm import additivity as ad
from chairqm import ensemble as en
from chairqm.errors import ChairqmError
from chairqm.molecule import perceive

S = ad.RingSubstituent
RING = [0, 1, 2, 3, 4, 5]
CARBON = ["C"] * 6
R = 8.314462618 / 4184.0          # CODATA 2018, kcal/(mol K)
T = 298.15
A_ME = 1.70                       # package table: Reich's A-value compilation, general references (Hirsch 1967; Eliel and Wilen)
A_TBU = 4.9                       # package table: Eliel and Wilen 1994, Table 11.7 (from memory; the compilation prints > 4.5)


def est(subs, a, b, elements=CARBON, qm=None):
    return ad.additive_estimate(RING, elements, subs, a, b, qm)


def test_trans_1_4_dimethyl():
    # e,e vs a,a: 2 x 1.70 = 3.40 kcal/mol (the package table's methyl value)
    e = est([S("s1", 0, "[*]C"), S("s2", 3, "[*]C")], "s1=axial;s2=axial", "s1=equatorial;s2=equatorial")
    assert e.source == "tabulated"
    assert e.dg_kcal == pytest.approx(2 * A_ME)
    assert e.preferred_axial == "" and e.preferred_orientation == "s1=equatorial;s2=equatorial"
    assert sum(v for _, v in e.terms) == pytest.approx(e.dg_kcal)
    assert e.tabulated_dg_kcal == pytest.approx(3.40) and e.qm_dg_kcal is None


def test_cis_1_tert_butyl_4_methyl():
    # A(tBu) - A(Me) = 4.9 - 1.70 = 3.20 kcal/mol with the table values (the textbook 4.9 - 1.7 = 3.2,
    # "about 99.5 % tBu equatorial", common practice). Population by hand for 3.2 kcal/mol:
    #   3.2 / (1.9872043e-3 * 298.15) = 5.400984, exp(-5.400984) = 0.0045122, 1 / 1.0045122 = 0.995508
    e = est([S("s1", 0, "[*]C(C)(C)C"), S("s2", 3, "[*]C")], "s1=axial;s2=equatorial", "s1=equatorial;s2=axial")
    assert e.dg_kcal == pytest.approx(A_TBU - A_ME)
    assert e.preferred_orientation == "s1=equatorial;s2=axial" and e.preferred_axial == "s2"
    _, p = en.boltzmann([0.0, e.dg_kcal / 627.509474], [1, 1], T)
    assert p[0] == pytest.approx(0.995508, abs=2e-6)
    assert p[0] >= 0.99
    assert 1 / (1 + math.exp(-3.2 / (R * T))) == pytest.approx(0.995508, abs=2e-6)


def test_cis_1_3_dimethyl_diaxial_gets_the_allinger_miller_term():
    # syn-1,3-diaxial Me/Me = 3.7 kcal/mol (Allinger and Miller, J. Am. Chem. Soc. 1961, 83, 2145); it replaces
    # the two Me/H syn-axial halves already inside the A-values (common practice):
    #   2 x 1.70 + 3.7 - 1.70 = 5.40 kcal/mol; Allinger and Miller give about 5.5 for this pair (from memory)
    e = est([S("s1", 0, "[*]C"), S("s2", 2, "[*]C")], "s1=equatorial;s2=equatorial", "s1=axial;s2=axial")
    assert any("syn-1,3-diaxial" in d and v == pytest.approx(3.7) for d, v in e.terms)
    assert e.dg_kcal == pytest.approx(2 * A_ME + 3.7 - A_ME)
    assert e.dg_kcal == pytest.approx(5.5, abs=0.2)
    assert e.preferred_axial == ""


def test_trans_1_3_dimethyl_has_no_pair_term():
    # a,e <-> e,a: the two chairs are the same by symmetry, gap 0 (common practice)
    e = est([S("s1", 0, "[*]C"), S("s2", 2, "[*]C")], "s1=axial;s2=equatorial", "s1=equatorial;s2=axial")
    assert e.dg_kcal == pytest.approx(0.0) and not any("syn" in d for d, _ in e.terms)


def test_trans_1_2_dimethyl_gauche_term():
    # e,e carries one gauche Me/Me (0.9 kcal/mol, common practice); a,a has 2 x 1.70:
    #   3.40 - 0.9 = 2.50 kcal/mol; about 2.6 is the textbook value for trans-1,2-dimethylcyclohexane
    #   (Eliel and Wilen 1994, from memory)
    e = est([S("s1", 0, "[*]C"), S("s2", 1, "[*]C")], "s1=axial;s2=axial", "s1=equatorial;s2=equatorial")
    assert e.dg_kcal == pytest.approx(2 * A_ME - 0.9)
    assert "gauche" in e.reason


@pytest.mark.xfail(strict=True, reason="with the compilation's methyl 1.70 the estimate is 2.50, just outside "
                   "2.6 +/- 0.1 (textbook value, from memory); reported, not loosened (issue 16 item 3)")
def test_trans_1_2_dimethyl_against_the_textbook():
    # about 2.6 kcal/mol is the textbook value for trans-1,2-dimethylcyclohexane (Eliel and Wilen 1994, from memory)
    e = est([S("s1", 0, "[*]C"), S("s2", 1, "[*]C")], "s1=axial;s2=axial", "s1=equatorial;s2=equatorial")
    assert e.dg_kcal == pytest.approx(2.6, abs=0.1)


def test_cis_1_2_gauche_cancels():
    e = est([S("s1", 0, "[*]C"), S("s2", 1, "[*]C(C)(C)C")], "s1=axial;s2=equatorial", "s1=equatorial;s2=axial")
    assert e.dg_kcal == pytest.approx(A_TBU - A_ME) and e.preferred_axial == "s1"


def test_geminal_is_outside_the_model():
    e = est([S("s1", 0, "[*]C"), S("s2", 0, "[*]C")], "s1=axial;s2=equatorial", "s1=equatorial;s2=axial")
    assert e.source == "outside-model" and e.dg_kcal is None and "geminal" in e.reason


def test_2_methoxytetrahydropyran_is_outside_the_model():
    # ring O next to the substituted carbon (the anomeric position); from a real perception
    (p,) = perceive({"name": "m", "smiles": "COC1CCCCO1"})
    assert len(p.substituents) == 1
    e = ad.estimate_for(p, "s1=axial", "s1=equatorial")
    assert e.source == "outside-model" and "bonded to" in e.reason


def test_heteroatom_positions():
    # 3-methyltetrahydropyran: ring O in the syn-axial (1,3) position of the methyl carbon -> outside
    e = est([S("s1", 2, "[*]C")], "s1=axial", "s1=equatorial", elements=["O", "C", "C", "C", "C", "C"])
    assert e.source == "outside-model" and "1,3" in e.reason
    # 4-methyltetrahydropyran: O across the ring -> inside the model, with a note
    e = est([S("s1", 3, "[*]C")], "s1=axial", "s1=equatorial", elements=["O", "C", "C", "C", "C", "C"])
    assert e.source == "tabulated" and e.dg_kcal == pytest.approx(A_ME) and "O" in e.reason
    # N-methylpiperidine: the group sits on the ring N -> outside
    e = est([S("s1", 0, "[*]C")], "s1=axial", "s1=equatorial", elements=["N", "C", "C", "C", "C", "C"])
    assert e.source == "outside-model" and "ring N" in e.reason


def test_charged_group_is_outside_even_if_tabulated():
    e = est([S("s1", 0, "[*]C(=O)[O-]", -1)], "s1=axial", "s1=equatorial")
    assert e.source == "outside-model" and "charged" in e.reason
    # a charge given only by the fragment counts too
    e = est([S("s1", 0, "[*][NH3+]")], "s1=axial", "s1=equatorial")
    assert e.source == "outside-model"


def test_syn_diaxial_pair_without_a_published_term_is_outside():
    e = est([S("s1", 0, "[*]Cl"), S("s2", 2, "[*]Cl")], "s1=axial;s2=axial", "s1=equatorial;s2=equatorial")
    assert e.source == "outside-model" and "Me/Me" in e.reason


def test_untabulated_group_needs_a_qm_value():
    frag = "[*]C(C)(F)F"
    subs = [S("s1", 0, frag), S("s2", 3, "[*]C")]
    e = est(subs, "s1=axial;s2=axial", "s1=equatorial;s2=equatorial")
    assert e.source == "outside-model" and "neither" in e.reason
    e = est(subs, "s1=axial;s2=axial", "s1=equatorial;s2=equatorial", qm={"FC(F)(C)[*]": 2.0, "[*]C": 1.5})
    assert e.source == "qm-derived"
    assert e.dg_kcal == pytest.approx(2.0 + A_ME)          # tabulated Me, QM-derived for the new group
    assert e.tabulated_dg_kcal is None
    assert e.qm_dg_kcal == pytest.approx(2.0 + 1.5)         # QM wherever given
    assert "QM-derived" in e.reason


def test_side_by_side_on_one_axis():
    # tabulated A(Me) 1.70 prefers Me equatorial; a (hypothetical) QM value of -0.3 prefers it axial: on the
    # axis of dg_kcal the QM variant is negative
    e = est([S("s1", 0, "[*]C")], "s1=axial", "s1=equatorial", qm={"[*]C": -0.3})
    assert e.source == "tabulated" and e.dg_kcal == pytest.approx(A_ME)
    assert e.tabulated_dg_kcal == pytest.approx(A_ME) and e.qm_dg_kcal == pytest.approx(-0.3)


def test_bad_chairs_are_rejected():
    subs = [S("s1", 0, "[*]C"), S("s2", 3, "[*]C")]
    with pytest.raises(ChairqmError):
        est(subs, "s1=axial;s2=axial", "s1=equatorial;s2=axial")         # not ring-flip partners
    with pytest.raises(ChairqmError):
        est(subs, "s1=axial", "s1=equatorial")                          # s2 missing
    with pytest.raises(ChairqmError):
        est(subs, "s1=pseudo-axial;s2=axial", "s1=equatorial;s2=equatorial")
    with pytest.raises(ChairqmError):
        ad.additive_estimate([0, 1, 2], ["C"] * 3, subs, "s1=axial;s2=axial", "s1=equatorial;s2=equatorial")


def test_reference_smiles_and_needs_reference():
    assert ad.reference_smiles("[*]C(F)(F)F") == "FC(F)(F)C1CCCCC1"          # the brief's example
    assert ad.reference_smiles("FC(F)([*])C") == "CC(F)(F)C1CCCCC1"
    subs = [S("s1", 0, "[*]C"), S("s2", 1, "[*]C(C)(F)F"), S("s3", 2, "FC(F)([*])C"),
            S("s4", 3, "[*]C(=O)[O-]", -1), S("s5", 4, "[*]SC(F)(F)F")]
    assert ad.needs_reference(subs) == ["[*]C(C)(F)F", "[*]SC(F)(F)F"]
    assert ad.needs_reference(["[*]C", "[*][H]"]) == []
    # the reference ring, perceived by the intake stage, carries the same fragment once
    for frag in ad.needs_reference(subs):
        (p,) = perceive({"name": "r", "smiles": ad.reference_smiles(frag)})
        assert [s.fragment for s in p.substituents] == [frag] and p.ring_elements == ["C"] * 6


# ---------------------------------------------------------------------------------- disagreement flag

@pytest.fixture
def trans14():
    return est([S("s1", 0, "[*]C"), S("s2", 3, "[*]C")], "s1=axial;s2=axial", "s1=equatorial;s2=equatorial")


def test_agreeing_case_is_not_flagged(trans14):
    flag, reason = ad.disagreement("", 3.2, trans14, 0.001)
    assert flag is False and reason == ""


def test_reversed_preferred_chair_is_flagged(trans14):
    flag, reason = ad.disagreement("s1;s2", 0.5, trans14, 0.001)
    assert flag and "prefers" in reason and "s1 axial, s2 axial" in reason
    # an orientation string works as well
    flag2, _ = ad.disagreement("s1=axial;s2=axial", 0.5, trans14, 0.001)
    assert flag2


def test_gap_difference_and_threshold(trans14):
    flag, reason = ad.disagreement("", 2.2, trans14, 0.0)
    # |2.2 - 3.40| = 1.20 > 1.0
    assert flag and "difference 1.2 > 1.0" in reason
    assert reason.startswith("additive estimate prefers s1 equatorial, s2 equatorial by 3.4 kcal/mol")
    flag, _ = ad.disagreement("", 2.2, trans14, 0.0, threshold_kcal=1.5)
    assert not flag


def test_non_chair_population_is_flagged(trans14):
    flag, reason = ad.disagreement("", 3.4, trans14, 0.08)
    assert flag and "8.0 %" in reason
    assert not ad.disagreement("", 3.4, trans14, 0.08, non_chair_threshold=0.10)[0]


def test_outside_model_is_flagged():
    e = est([S("s1", 0, "[*]C"), S("s2", 0, "[*]C")], "s1=axial;s2=equatorial", "s1=equatorial;s2=axial")
    flag, reason = ad.disagreement("s1", 0.1, e, 0.0)
    assert flag and reason.startswith("outside the additive model")


def test_degenerate_chairs_are_not_a_reversal():
    # cis-1,4-dimethyl: a,e and e,a are the same chair by symmetry (additive gap 0, common practice)
    e = est([S("s1", 0, "[*]C"), S("s2", 3, "[*]C")], "s1=axial;s2=equatorial", "s1=equatorial;s2=axial")
    assert e.dg_kcal == pytest.approx(0.0)
    assert ad.disagreement("s2", 0.02, e, 0.0) == (False, "")


def test_unknown_computed_gap_is_flagged(trans14):
    flag, reason = ad.disagreement("", None, trans14, 0.0)
    assert flag and "unknown" in reason
    flag, _ = ad.disagreement("", float("nan"), trans14, 0.0)
    assert flag


@pytest.mark.parametrize("kw", [{"threshold_kcal": 0}, {"threshold_kcal": -1}, {"non_chair_threshold": 1.5}])
def test_bad_thresholds(trans14, kw):
    with pytest.raises(ChairqmError):
        ad.disagreement("", 3.0, trans14, 0.0, **kw)


def test_computed_chair_summary_feeds_the_flag():
    # computed families of trans-1,4-dimethylcyclohexane whose gap (3.3) is near the additive 3.40
    # -> not flagged; the lowest chair identity comes from chair_summary
    rt = R * T
    g = np.array([0.0, 3.3, 5.9])
    w = np.exp(-g / rt)
    import pandas as pd
    fams = pd.DataFrame({"temperature_k": T, "ring_form": ["chair", "chair", "twist-boat"],
                         "orientation": ["s1=equatorial;s2=equatorial", "s1=axial;s2=axial",
                                         "s1=pseudo-equatorial;s2=pseudo-equatorial"],
                         "g_rel_kcal": g, "population": w / w.sum()})
    s = en.chair_summary(fams, ["s1", "s2"])
    e = est([S("s1", 0, "[*]C"), S("s2", 3, "[*]C")], s["preferred_chair_orientation"], s["second_chair_orientation"])
    assert ad.disagreement(s["preferred_chair_axial"], s["chair_dg_kcal"], e, s["twist_boat_population"]) == (False, "")
