"""The packaged A-value table: completeness, sources, canonical fragments, lookups that match intake."""

import csv
import importlib.util
import math
from pathlib import Path

import pandas as pd
import pytest

from chairqm import avalues
from chairqm.errors import ChairqmError
from chairqm.molecule import perceive

# The table is rebuilt from a published compilation of experimental A-values (H. J. Reich, "Conformational
# Energies (A-Values)", as transcribed in the project's shared data) by benchmarks/build_avalue_table.py.
REPO = Path(__file__).resolve().parents[1]
COMPILATION = REPO.parent / "shared" / "data" / "avalues-compilation.csv"   # absent in a clean clone

# The one value kept from outside the compilation (it prints only "> 4.5" for tert-butyl).
KEPT_FROM_ELSEWHERE = {"[*]C(C)(C)C": "Eliel and S. H. Wilen, Stereochemistry of Organic Compounds, Wiley, New York 1994"}

# Groups the table must hold (the groups of the standard textbook tables, e.g. Eliel and Wilen 1994 Table 11.7).
REQUIRED = ["[*]C", "[*]CC", "[*]C(C)C", "[*]C(C)(C)C", "[*]c1ccccc1", "[*]C=C", "[*]C#C", "[*]C#N",
            "[*]F", "[*]Cl", "[*]Br", "[*]I", "[*]O", "[*]OC", "[*]OC(C)=O", "[*]N", "[*]N(C)C",
            "[*]C(=O)O", "[*]C(=O)OC", "[*]C=O", "[*]C(C)=O", "[*]C(F)(F)F", "[*][Si](C)(C)C", "[*]SC",
            "[*][N+](=O)[O-]", "[*]C1CCCCC1"]


@pytest.fixture(scope="module")
def table():
    return avalues.load_table()


def test_table_size_and_columns(table):
    # the compilation has 81 rows; 4 cannot be tabulated (no fragment, no reference, lower bounds only)
    assert len(table) >= 70
    assert list(table.columns) == avalues.COLUMNS


def test_every_row_names_its_source(table):
    for _, row in table.iterrows():
        assert row["source"].strip(), row["group"]
        if row["fragment"] in KEPT_FROM_ELSEWHERE:
            # a value from elsewhere carries its own citation, is marked recalled and says why in the note
            assert KEPT_FROM_ELSEWHERE[row["fragment"]] in row["source"]
            assert row["from_memory"] is True or row["from_memory"] == True  # noqa: E712
            assert "outside the compilation" in row["note"]
        else:
            # the reference used is one the compilation prints for this group, and the value is printed there
            assert row["from_memory"] == False, row["group"]  # noqa: E712
            key, _, ref = row["source"].partition(": ")
            assert ref and ref in row["references"], row["group"]
            printed = f"{row['a_value_kcal']:g}"
            assert any(v.split(" [")[0].lstrip(">") in (printed, f"{row['a_value_kcal']:.2f}", f"{row['a_value_kcal']:.1f}")
                       for v in row["conditions"].split("; ")), (row["group"], printed)
            assert row["compilation"].strip(), row["group"]


def test_values_lie_in_their_ranges(table):
    for _, row in table.iterrows():
        assert row["range_low_kcal"] <= row["a_value_kcal"] <= row["range_high_kcal"], row["group"]
        # HgCl -0.3 kcal/mol (axial slightly preferred) is the lowest the compilation prints
        assert -1.0 <= row["range_low_kcal"] < 6.0
        assert math.isnan(row["temperature_k"]) or row["temperature_k"] > 0


def test_low_temperature_values_carry_their_temperature(table):
    # the compilation: direct low-temperature NMR values were measured at about 170-200 K
    for _, row in table.iterrows():
        low_t = row["method"].startswith("low-T")
        if low_t:
            assert (row["temperature_low_k"], row["temperature_high_k"]) == (170.0, 200.0), row["group"]
        else:
            assert math.isnan(row["temperature_low_k"]) and math.isnan(row["temperature_high_k"]), row["group"]
        if not math.isnan(row["temperature_k"]):
            assert low_t and 170.0 <= row["temperature_k"] <= 200.0, row["group"]


def test_stored_fragments_are_canonical_and_unique(table):
    for frag in table["fragment"]:
        assert avalues.canonical_fragment(frag) == frag
        assert frag.count("*") == 1 and frag.startswith("[*]")
    assert not table["fragment"].duplicated().any()
    assert not table["group"].duplicated().any()


def test_required_groups_present(table):
    have = set(table["fragment"])
    for frag in REQUIRED:
        assert avalues.canonical_fragment(frag) in have, frag


@pytest.mark.parametrize("fragment,value,where", [
    # value, as the compilation prints it, and its original reference beside it
    ("[*]C", 1.70, "general refs"),                                      # methyl: general references only
    ("[*]c1ccccc1", 3.0, "general refs"),                                # phenyl
    ("[*]C(F)(F)F", 2.1, "general refs"),                                # trifluoromethyl
    ("[*]F", 0.28, "Jensen, F. R.; Bushweller, C. H.; Beck, B. H. J. Am. Chem. Soc. 1969, 91, 344"),
    ("[*]Cl", 0.53, "Jensen, F. R.; Bushweller, C. H.; Beck, B. H. J. Am. Chem. Soc. 1969, 91, 344"),
    ("[*]C#N", 0.24, "Jensen, F. R.; Bushweller, C. H.; Beck, B. H. J. Am. Chem. Soc. 1969, 91, 344"),
    ("[*]OC", 0.75, "Schneider, H.-J.; Hoppen, V. J. Org. Chem. 1978, 43, 3866"),   # toluene-d8
    ("[*]N", 1.23, "Schneider, H.-J.; Hoppen, V. J. Org. Chem. 1978, 43, 3866"),    # not the 1.2-1.7 range
    ("[*]SC", 1.07, "Jensen, F. R.; Bushweller, C. H.; Beck, B. H. J. Am. Chem. Soc. 1969, 91, 344"),
    ("[*]C=C", 1.68, "Eliel, E. L. J. Org. Chem. 1981, 46, 1959"),
    ("[*][Si](C)(C)C", 2.5, "Kitching, W.; Olszowy, H. A.; Drew, G. M.; Adcock, W. J. Org. Chem. 1982, 47, 5153"),
    ("[*]O[Si](C)(C)C(C)(C)C", 1.06, "Marzabadi"),                      # 200 K, CD2Cl2 (ref 10)
    ("[*][Hg]Cl", -0.3, "general refs"),                                 # axial slightly preferred
])
def test_values_from_the_compilation(fragment, value, where):
    row = avalues.lookup(fragment)
    assert row is not None, fragment
    assert row["a_value_kcal"] == pytest.approx(value, abs=1e-9)
    assert where in row["source"]
    assert row["from_memory"] == False  # noqa: E712


def test_conditions_of_the_low_temperature_silyl_ether():
    # tert-butyldimethylsilyloxy: 1.06 kcal/mol, 6.5 % axial at 200 K in CD2Cl2 (the compilation, ref 10b)
    row = avalues.lookup("[*]O[Si](C)(C)C(C)(C)C")
    assert row["temperature_k"] == 200.0 and row["solvent"] == "CD2Cl2"


def test_published_values():
    # tert-butyl: the compilation prints only > 4.5; 4.9 is kept from Eliel and Wilen 1994 (from memory)
    row = avalues.lookup("[*]C(C)(C)C")
    assert row["a_value_kcal"] == pytest.approx(4.9) and row["range_low_kcal"] == pytest.approx(4.5)
    assert row["from_memory"] == True  # noqa: E712
    # halogens are all small, 0.2-0.7 kcal/mol (Jensen, Bushweller and Beck 1969, as the compilation prints)
    for x in ("[*]F", "[*]Cl", "[*]Br", "[*]I"):
        assert 0.15 <= avalues.a_value(x) <= 0.7
    # order of the alkyl series Me < Et < iPr << tBu (common practice)
    a = [avalues.a_value(f) for f in ("[*]C", "[*]CC", "[*]C(C)C", "[*]C(C)(C)C")]
    assert a == sorted(a) and a[3] - a[2] > 2.0


def test_groups_the_compilation_lacks_are_not_tabulated():
    # carbodiimido (R not given), silyl (no reference), trimethylphosphonio (lower bound only), and
    # ethoxycarbonyl and cyclopropyl (not in the compilation)
    for frag in ("[*][SiH3]", "[*][P+](C)(C)C", "[*]C(=O)OCC", "[*]C1CC1"):
        assert avalues.lookup(frag) is None, frag


def _builder():
    spec = importlib.util.spec_from_file_location("build_avalue_table", REPO / "benchmarks" / "build_avalue_table.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_builder_rules_on_a_small_compilation(tmp_path):
    # made-up rows in the compilation's layout: '#' inside SMILES, a general-reference value before an
    # attributed one, a lower bound, a row without reference
    text = (
        "group,fragment_smiles,a_value_kcal,range_low,range_high,conditions,reference,compilation\n"
        'ethynyl,[*]C#C,0.30,0.30,0.52,"0.30 [general refs]: method/solvent not stated (general-reference value); '
        '0.41 [2a]: low-T 1H NMR, direct observation of ax and eq signals; 0.52 [9]: low-T 13C NMR, direct observation, toluene-d8",'
        '"general refs (values printed without a superscript): Hirsch | ref 2a: Jensen 1969 | ref 9: Schneider 1978",X\n'
        'tert-butyl,[*]C(C)(C)C,,4.5,,">4.5 [general refs]: method/solvent not stated; NOTE: lower bound only",'
        '"general refs (values printed without a superscript): Hirsch",X\n'
        'odd,[*]P(C)(C)=S,,3.0,,">3.0 [4]: low-T NMR; NOTE: lower bound only","ref 4: Gordon 1976",X\n'
        'silyl,[*][SiH3],1.5,1.5,1.5,"1.5 [no reference]: method/solvent not stated",none given by the compilation,Y (z)\n')
    src = tmp_path / "c.csv"
    src.write_text(text, encoding="utf-8")
    out = tmp_path / "t.csv"
    assert _builder().main([str(src), "--out", str(out)]) == 0
    with out.open(encoding="utf-8", newline="") as fh:
        rows = {r["group"]: r for r in csv.DictReader(fh)}
    assert set(rows) == {"ethynyl", "tert-butyl"}
    e = rows["ethynyl"]
    assert e["fragment"] == "[*]C#C" and float(e["a_value_kcal"]) == 0.41 and e["source"] == "ref 2a: Jensen 1969"
    assert float(e["compilation_value_kcal"]) == 0.30 and e["temperature_low_k"] == "170"
    assert rows["tert-butyl"]["from_memory"] == "true" and float(rows["tert-butyl"]["a_value_kcal"]) == 4.9


@pytest.mark.skipif(not COMPILATION.is_file(), reason="the shared compilation is not beside this checkout")
def test_packaged_table_is_the_compilation_rebuilt(tmp_path):
    out = tmp_path / "avalues.csv"
    assert _builder().main([str(COMPILATION), "--out", str(out)]) == 0
    assert out.read_text(encoding="utf-8") == (REPO / "chairqm" / "data" / "avalues.csv").read_text(encoding="utf-8")


@pytest.mark.parametrize("spelling", ["[*]C", "C[*]", "*C", "[1*]C", "[*:3]C"])
def test_lookup_is_spelling_independent(spelling):
    row = avalues.lookup(spelling)
    assert row is not None and row["group"] == "methyl"


def test_lookup_of_other_spellings():
    assert avalues.lookup("FC(F)([*])F")["group"] == "trifluoromethyl"
    assert avalues.lookup("c1ccccc1[*]")["group"] == "phenyl"
    assert avalues.lookup("O=[N+]([O-])[*]")["group"] == "nitro"
    assert avalues.lookup("[*]C(C)(F)F") is None          # 1,1-difluoroethyl: not tabulated
    assert avalues.a_value("[*]C(C)(F)F") is None


@pytest.mark.parametrize("smiles,groupname", [("CC1CCCCC1", "methyl"), ("CC(C)(C)C1CCCCC1", "tert-butyl"),
                                              ("c1ccc(cc1)C1CCCCC1", "phenyl"), ("FC(F)(F)C1CCCCC1", "trifluoromethyl"),
                                              ("COC1CCCCC1", "methoxy"), ("CC(=O)OC1CCCCC1", "acetoxy"),
                                              ("C[Si](C)(C)C1CCCCC1", "trimethylsilyl"), ("[O-][N+](=O)C1CCCCC1", "nitro")])
def test_intake_fragments_find_their_rows(smiles, groupname):
    # the fragment the intake stage perceives must hit the table row (one canonical form for both)
    (p,) = perceive({"name": "m", "smiles": smiles})
    assert len(p.substituents) == 1
    row = avalues.lookup(p.substituents[0].fragment)
    assert row is not None and row["group"] == groupname


@pytest.mark.parametrize("bad", ["C(", "CC", "[*]CC[*]", "", None, 5])
def test_canonical_fragment_rejects_bad_fragments(bad):
    with pytest.raises(ChairqmError):
        avalues.canonical_fragment(bad)


def test_load_table_returns_a_copy():
    t = avalues.load_table()
    t.loc[0, "a_value_kcal"] = 99.0
    assert avalues.load_table().loc[0, "a_value_kcal"] != 99.0
    assert isinstance(t, pd.DataFrame)


@pytest.mark.parametrize("fragment,cited", [
    # authors and year as the compilation prints the original reference
    ("[*]F", "Jensen et al. 1969"),                       # Jensen, Bushweller, Beck, J. Am. Chem. Soc. 1969
    ("[*]OC", "Schneider and Hoppen 1978"),               # Schneider, Hoppen, J. Org. Chem. 1978
    ("[*]N[Si](C)(C)C", "Hardy and Cumming 1971"),        # Hardy, Cumming, J. Am. Chem. Soc. 1971
    ("[*]O[Si](C)(C)C(C)(C)C", "Eliel and Satici 1994 / Marzabadi et al. 2003"),   # key 10 holds both
    ("[*]C", "general references of the A-value compilation"),
    ("[*]C(C)(C)C", "E. L. Eliel and S. H. Wilen 1994, from memory"),
])
def test_short_citation_for_labels(fragment, cited):
    assert avalues.short_citation(avalues.lookup(fragment)) == cited


def test_additive_terms_cite_the_table_briefly():
    from chairqm import additivity as ad
    subs = [ad.RingSubstituent("s1", 0, "[*]F", 0)]
    e = ad.additive_estimate([0, 1, 2, 3, 4, 5], ["C"] * 6, subs, {"s1": "axial"}, {"s1": "equatorial"})
    text = " ".join(t for t, _ in e.terms)
    assert "Jensen et al. 1969" in text and "J. Am. Chem. Soc." not in text
