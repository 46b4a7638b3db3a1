"""Boltzmann populations, family free energies and the chair summary, against arithmetic done by hand."""

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from chairqm import ensemble as en
from chairqm.errors import ChairqmError

# CODATA 2018: R = 8.314462618 J/(mol K); 1 kcal = 4184 J  ->  R = 1.9872043e-3 kcal/(mol K)
R = 8.314462618 / 4184.0
# CODATA 2018: 1 hartree = 627.509474 kcal/mol
HARTREE_KCAL = 627.509474
T = 298.15
RT = R * T                       # 0.592485 kcal/mol


def h(kcal):
    """kcal/mol -> hartree, offset by a realistic absolute energy so precision is exercised."""
    return -250.0 + np.asarray(kcal, dtype=float) / HARTREE_KCAL


def test_three_level_example_by_hand():
    # levels 0, 0.5, 1.0 kcal/mol with degeneracies 1, 2, 1 at 298.15 K:
    #   RT = 1.9872043e-3 * 298.15 = 0.592485 kcal/mol
    #   0.5/RT = 0.843903, exp(-0.843903) = 0.430029;  1.0/RT = 1.687807, exp(-1.687807) = 0.184925
    #   Z = 1 + 2 * 0.430029 + 0.184925 = 2.044982
    #   p = 1/Z, 2*0.430029/Z, 0.184925/Z = 0.489002, 0.420570, 0.090429
    g_rel, p = en.boltzmann(h([0.0, 0.5, 1.0]), [1, 2, 1], T)
    assert g_rel == pytest.approx([0.0, 0.5, 1.0], abs=1e-6)
    assert p == pytest.approx([0.489002, 0.420570, 0.090429], abs=2e-6)


def test_exact_fractions():
    # levels at RT ln 2 and RT ln 4 with degeneracies 1, 2, 1: weights 1, 2 * 1/2, 1/4 -> Z = 9/4,
    # populations 4/9, 4/9, 1/9 (worked by hand)
    levels = [0.0, RT * math.log(2), RT * math.log(4)]
    _, p = en.boltzmann(h(levels), [1, 2, 1], T)
    assert p == pytest.approx([4 / 9, 4 / 9, 1 / 9], abs=1e-5)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(min_value=0.0, max_value=40.0), min_size=1, max_size=12),
       st.floats(min_value=50.0, max_value=1000.0), st.integers(min_value=1, max_value=4))
def test_populations_sum_to_one(levels, temperature, deg):
    g_rel, p = en.boltzmann(h(levels), deg, temperature)
    assert p.sum() == pytest.approx(1.0, abs=1e-12)
    assert np.all(p >= 0) and np.all(np.isfinite(p))
    assert g_rel.min() == pytest.approx(0.0, abs=1e-9)
    # with equal degeneracies a lower level is never less populated
    order = np.argsort(levels, kind="stable")
    assert np.all(np.diff(p[order]) <= 1e-15)


def test_numerically_stable_for_large_spreads():
    # absolute energies of hundreds of hartree and a 300 kcal/mol spread: no overflow, no 0/0
    g = np.array([-900.0, -900.0 + 0.5, -899.0])
    g_rel, p = en.boltzmann(g, 1, 10.0)
    assert np.all(np.isfinite(p)) and p[0] == pytest.approx(1.0)


def test_rt_ln2_at_room_temperature():
    # RT ln 2 = 0.592485 * 0.693147 = 0.410679 kcal/mol at 298.15 K (common practice: "0.41 kcal/mol")
    assert RT * math.log(2) == pytest.approx(0.41, abs=0.005)


def _frame(rows):
    return pd.DataFrame(rows, columns=["conformer", "ring_form", "orientation", "g_hartree", "degeneracy"])


def test_two_degenerate_rotamers_lower_the_family_by_rt_ln2():
    # family with two rotamers of equal G: G_F = G - RT ln 2 (worked by hand: -RT ln(2 exp(-G/RT)));
    # the axial family, one rotamer 1.0 kcal/mol higher, then sits 1.0 + 0.410679 kcal/mol above it
    df = _frame([("c1", "chair", "s1=equatorial", h(0.0), 1),
                 ("c2", "chair", "s1=equatorial", h(0.0), 1),
                 ("c3", "chair", "s1=axial", h(1.0), 1)])
    fam = en.families(df, T)
    assert list(fam.columns) == en.FAMILY_COLUMNS
    assert list(fam["orientation"]) == ["s1=equatorial", "s1=axial"]
    assert fam["g_rel_kcal"].tolist() == pytest.approx([0.0, 1.0 + 0.410679], abs=1e-5)
    assert fam["n_conformers"].tolist() == [2, 1]
    assert fam["axial"].tolist() == ["", "s1"]
    # a single conformer of degeneracy 2 counts exactly like two degenerate rotamers
    df2 = _frame([("c1", "chair", "s1=equatorial", h(0.0), 2), ("c3", "chair", "s1=axial", h(1.0), 1)])
    assert en.families(df2, T)["g_rel_kcal"].tolist() == pytest.approx(fam["g_rel_kcal"].tolist(), abs=1e-9)


def test_family_population_is_sum_of_conformer_populations():
    df = _frame([("a", "chair", "s2=equatorial;s1=equatorial", h(0.0), 1),
                 ("b", "chair", "s1=equatorial;s2=equatorial", h(0.3), 2),
                 ("c", "chair", "s1=axial;s2=axial", h(1.2), 1),
                 ("d", "twist-boat", "s1=pseudo-axial;s2=isoclinal", h(4.0), 2)])
    conf = en.conformer_populations(df, T)
    fam = en.families(df, T)
    assert fam["population"].sum() == pytest.approx(1.0)
    # 'a' and 'b' name the same family (ids in a different order)
    assert len(fam) == 3
    for _, f in fam.iterrows():
        members = conf[(conf["ring_form"] == f["ring_form"]) & (conf["orientation"] == f["orientation"])]
        assert f["population"] == pytest.approx(members["population"].sum(), abs=1e-12)
    assert fam.iloc[-1]["ring_form"] == "twist-boat" and fam.iloc[-1]["axial"] == "s1"


def test_temperature_column_selects_rows_and_empty_orientation_is_allowed():
    df = _frame([("c1", "chair", float("nan"), h(0.0), 1), ("c2", "twist-boat", "", h(6.0), 2)])
    both = pd.concat([df.assign(temperature_k=298.15), df.assign(temperature_k=400.0,
                                                                 g_hartree=df["g_hartree"] + 1.0)])
    fam = en.families(both, 298.15)
    assert fam["orientation"].tolist() == ["", ""] and fam["temperature_k"].tolist() == [298.15, 298.15]
    with pytest.raises(ChairqmError):
        en.families(both, 350.0)


def test_orientation_helpers():
    assert en.family_key("chair", "s2=axial;s1=equatorial") == "chair s1=equatorial;s2=axial"
    assert en.family_key("chair", "") == "chair"
    assert en.axial_ids("s1=axial;s2=equatorial;s3=axial") == "s1;s3"
    assert en.axial_ids("s1=pseudo-axial;s2=pseudo-equatorial;s3=isoclinal") == "s1"
    assert en.axial_ids("s1=flagpole;s2=bowsprit") == ""
    assert en.axial_ids("s10=axial;s2=axial") == "s2;s10"
    with pytest.raises(ChairqmError):
        en.axial_ids("s1:axial")
    with pytest.raises(ChairqmError):
        en.axial_ids("s1=axial;s1=equatorial")


@pytest.mark.parametrize("g,d,t", [([0.0, float("nan")], 1, 298.15), ([0.0], 0, 298.15), ([0.0], 1, -5.0),
                                   ([], 1, 298.15), ([0.0], 1, "warm")])
def test_boltzmann_rejects_bad_input(g, d, t):
    with pytest.raises(ChairqmError):
        en.boltzmann(g, d, t)


def test_families_needs_its_columns():
    with pytest.raises(ChairqmError):
        en.families(pd.DataFrame({"conformer": ["a"], "g_hartree": [0.0]}), T)


def _families(rows, t=T):
    return pd.DataFrame([{"temperature_k": t, "ring_form": f, "orientation": o, "axial": en.axial_ids(o),
                          "g_rel_kcal": g, "population": p} for f, o, g, p in rows])


def test_chair_summary_monosubstituted():
    # methylcyclohexane-like families: chair eq 0, chair ax 1.74, twist-boat 5.5 kcal/mol at 298.15 K.
    # by hand: 1.74/RT = 2.936783, exp(-2.936783) = 0.053036; 5.5/RT = 9.282936, exp(-9.282936) = 9.2998e-5
    #   Z = 1.053129; twist-boat population = 9.2998e-5 / 1.053129 = 8.8306e-5
    pops = np.array([1.0, 0.053036, 9.2998e-5]) / 1.053129
    fams = _families([("chair", "s1=equatorial", 0.0, pops[0]), ("chair", "s1=axial", 1.74, pops[1]),
                      ("twist-boat", "s1=pseudo-equatorial", 5.5, pops[2])])
    s = en.chair_summary(fams, ["s1"])
    assert s["a_value_kcal"] == pytest.approx(1.74)
    assert s["chair_dg_kcal"] == pytest.approx(1.74)
    assert s["preferred_family"] == "chair s1=equatorial"
    assert s["preferred_chair_axial"] == "" and s["second_chair_axial"] == "s1"
    assert s["twist_boat_population"] == pytest.approx(8.8306e-5, rel=1e-3)


def test_a_value_is_negative_when_the_axial_chair_wins():
    fams = _families([("chair", "s1=axial", 0.0, 0.6), ("chair", "s1=equatorial", 0.24, 0.4)])
    s = en.chair_summary(fams, ["s1"])
    assert s["a_value_kcal"] == pytest.approx(-0.24)
    assert s["chair_dg_kcal"] == pytest.approx(0.24)
    assert s["preferred_chair_axial"] == "s1"


def test_nitrogen_invertomers_merge_into_one_chair():
    # 4-methylpiperidine-like: s1 = N-H (ring N), s2 = 4-Me. Families (kcal/mol): (eq,eq) 0, (ax,eq) 0.4,
    # (eq,ax) 1.8, (ax,ax) 2.0. By hand, Me-equatorial chair G = -RT ln(1 + exp(-0.4/RT)):
    #   exp(-0.675124) = 0.509094, ln(1.509094) = 0.411509 -> -0.243813
    # Me-axial chair G = -RT ln(exp(-1.8/RT) + exp(-2.0/RT)) = -RT ln(0.047928 + 0.034197)
    #   ln(0.082125) = -2.499509 -> 1.480921;  A(Me) = 1.480921 + 0.243813 = 1.724735
    ring, elements = [0, 1, 2, 3, 4, 5], ["N", "C", "C", "C", "C", "C"]
    subs = [{"id": "s1", "ring_atom": 0}, {"id": "s2", "ring_atom": 3}]
    ids = en.chair_ids(ring, elements, subs)
    assert ids == ["s2"]
    fams = _families([("chair", "s1=equatorial;s2=equatorial", 0.0, 0.6), ("chair", "s1=axial;s2=equatorial", 0.4, 0.3),
                      ("chair", "s1=equatorial;s2=axial", 1.8, 0.05), ("chair", "s1=axial;s2=axial", 2.0, 0.05)])
    s = en.chair_summary(fams, ids)
    assert s["a_value_kcal"] == pytest.approx(1.724735, abs=2e-5)
    assert s["chair_dg_kcal"] == pytest.approx(1.724735, abs=2e-5)
    assert s["preferred_chair"] == "chair s1=equatorial;s2=equatorial"
    assert s["second_chair"] == "chair s1=equatorial;s2=axial"
    assert "merged" in s["note"]
    # with every id listed, the ring-flip partner of (eq,eq) is (ax,ax): 2.0 kcal/mol, no A-value
    s_all = en.chair_summary(fams, ["s1", "s2"])
    assert s_all["chair_dg_kcal"] == pytest.approx(2.0) and s_all["a_value_kcal"] is None


def test_missing_partner_and_no_chair():
    s = en.chair_summary(_families([("chair", "s1=equatorial", 0.0, 0.9), ("twist-boat", "s1=isoclinal", 1.3, 0.1)]),
                         ["s1"])
    assert s["chair_dg_kcal"] is None and s["a_value_kcal"] is None and "not" in s["note"]
    assert s["twist_boat_population"] == pytest.approx(0.1)
    s = en.chair_summary(_families([("twist-boat", "s1=isoclinal", 0.0, 1.0)]), ["s1"])
    assert s["preferred_chair"] is None and s["twist_boat_population"] == pytest.approx(1.0)


def test_chair_summary_rejects_mixed_temperatures():
    fams = pd.concat([_families([("chair", "s1=axial", 0.0, 1.0)], 298.15),
                      _families([("chair", "s1=axial", 0.0, 1.0)], 350.0)])
    with pytest.raises(ChairqmError):
        en.chair_summary(fams, ["s1"])


def test_unsubstituted_ring_has_zero_gap():
    s = en.chair_summary(_families([("chair", "", 0.0, 0.999), ("twist-boat", "", 5.9, 0.001)]), [])
    assert s["chair_dg_kcal"] == 0.0 and s["preferred_chair"] == "chair"


def test_end_to_end_from_conformers():
    # rotamers + degeneracy feed the chair summary: eq family has two rotamers at 0 and 0 (-> -RT ln 2),
    # ax family one at 1.0: A = 1.0 + 0.410679 kcal/mol (worked by hand above)
    df = _frame([("c1", "chair", "s1=equatorial", h(0.0), 1), ("c2", "chair", "s1=equatorial", h(0.0), 1),
                 ("c3", "chair", "s1=axial", h(1.0), 1), ("c4", "twist-boat", "s1=pseudo-axial", h(5.0), 2)])
    s = en.chair_summary(en.families(df, T), ["s1"])
    assert s["a_value_kcal"] == pytest.approx(1.410679, abs=1e-5)
