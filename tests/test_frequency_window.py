"""Which minima get a Hessian (chairqm.frequency_window): the window, the selection and the borrowed
thermal correction."""

import math

import pytest

from chairqm import frequency_window as fw
from chairqm.errors import ChairqmError
from chairqm.units import KCAL_PER_HARTREE

#: Gas constant 1.987204 cal/(mol K) (CODATA 2018, from memory).
R_CAL = 1.987204


def conf(cid, kcal, form="chair", orientation="s1=equatorial"):
    return {"conformer": cid, "energy_hartree": -10.0 + kcal / KCAL_PER_HARTREE, "ring_form": form,
            "orientation": orientation}


def test_auto_window_is_the_boltzmann_factor_of_the_population_floor():
    # RT ln(1000) at 298.15 K = 1.987204e-3 × 298.15 × 6.907755 = 4.0927 kcal/mol (hand calculation)
    assert fw.auto_window_kcal([298.15], margin_kcal=0.0) == pytest.approx(4.0927, abs=5e-4)
    assert fw.auto_window_kcal([298.15]) == pytest.approx(4.0927 + fw.MARGIN_KCAL, abs=5e-4)
    # the highest requested temperature decides
    assert fw.auto_window_kcal([200.0, 400.0]) == fw.auto_window_kcal([400.0]) > fw.auto_window_kcal([298.15])


def test_a_conformer_at_the_bare_window_has_at_most_the_floor_population():
    """Two non-degenerate conformers ΔG apart: p = e^(−ΔG/RT) / (1 + e^(−ΔG/RT)) (Boltzmann)."""
    for t in (150.0, 298.15, 450.0):
        dg = fw.auto_window_kcal([t], margin_kcal=0.0)
        x = math.exp(-dg * 1000.0 / (R_CAL * t))
        assert x / (1.0 + x) <= fw.POPULATION_FLOOR * (1 + 1e-6)


def test_window_setting_values():
    assert fw.window_kcal("auto", [298.15]) == fw.auto_window_kcal([298.15])
    assert fw.window_kcal("all", [298.15]) == math.inf
    assert fw.window_kcal(2.5, [298.15]) == 2.5
    assert fw.window_kcal(0, [298.15]) == 0.0
    for bad in ("wide", -1.0, None):
        with pytest.raises(ChairqmError):
            fw.window_kcal(bad, [298.15])


def test_selection_takes_the_window_and_the_lowest_of_each_chair_family():
    confs = [conf("c001", 0.0), conf("c002", 0.8),                       # equatorial chair rotamers
             conf("c003", 5.5, orientation="s1=axial"),                  # axial chair, outside the window
             conf("c004", 6.0, orientation="s1=axial"),                  # its rotamer: not the lowest
             conf("c005", 2.0, form="twist-boat", orientation="s1=pseudo-equatorial"),
             conf("c006", 4.9, form="twist-boat", orientation="s1=pseudo-axial")]
    assert fw.select(confs, 3.0) == ["c001", "c002", "c003", "c005"]
    assert fw.select(confs, 4.9) == ["c001", "c002", "c003", "c005", "c006"]   # inclusive edge
    assert fw.select(confs, 0.0) == ["c001", "c003"]
    assert fw.select(confs, math.inf) == [c["conformer"] for c in confs]


def test_a_conformer_without_an_energy_is_never_skipped():
    confs = [conf("c001", 0.0), {**conf("c002", 9.0, form="twist-boat"), "energy_hartree": None}]
    assert fw.select(confs, 1.0) == ["c001", "c002"]


def test_donor_prefers_own_family_then_own_ring_form_then_nearest_energy():
    checked = [conf("c001", 0.0), conf("c002", 1.0, orientation="s1=axial"),
               conf("c003", 3.0, form="twist-boat", orientation="s1=pseudo-axial")]
    assert fw.donor(conf("c010", 1.9, orientation="s1=axial"), checked) == "c002"          # own family
    assert fw.donor(conf("c011", 9.0, form="twist-boat", orientation="s1=pseudo-equatorial"),
                    checked) == "c003"                                                      # own ring form
    assert fw.donor(conf("c012", 0.9, form="boat", orientation="s1=axial"), checked) == "c002"   # nearest E
    assert fw.donor(conf("c013", 0.4, orientation="s1=equatorial"), checked) == "c001"
    assert fw.donor(conf("c014", 1.0), []) is None


def test_partition_ratio_is_the_boltzmann_sum_over_the_known_conformers():
    t = 298.15
    rt_hartree = R_CAL * 1e-3 * t / KCAL_PER_HARTREE          # RT in hartree
    g = {"c001": -10.0, "c002": -10.0 + rt_hartree, "c003": -10.0 + rt_hartree}   # c003: same G as c002
    d = {"c001": 1, "c002": 2, "c003": 2}
    # 1 + (2/1)·e^(−1) = 1.73576 (hand calculation); c003 is not counted a second time
    assert fw.partition_ratio(g, d, "c001", t) == pytest.approx(1.73576, abs=1e-4)


def test_known_population_narrows_the_window_by_rt_ln_of_it():
    t = 298.15
    wide = fw.auto_window_kcal([t])
    assert fw.auto_window_kcal([t], z_ratios={t: math.e}) == pytest.approx(wide - R_CAL * 1e-3 * t, abs=1e-6)
    assert fw.auto_window_kcal([t], z_ratios={t: 0.5}) == wide      # Z_S ≥ w_0 always: never widened


def test_no_minimum_at_all_keeps_the_default_window():
    # every seed failed: the thermo stage's window step has nothing to weigh and must not stop on it
    from chairqm import frequency_window as fw
    from chairqm.stages.thermo import _phase_window
    temps = [298.15]
    assert _phase_window({}, temps, {}, None, {"conformers": []}, {}, set(), {}) == fw.auto_window_kcal(temps)
