"""Seeds: both chairs, the twist-boats and rotamers, built deterministically and labelled by measurement."""

import json
import math
import time
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem

from chairqm import rotamers
from chairqm import seeds as S
from chairqm import chem
from chairqm.stages import seeds as seed_stage
from chairqm.chem import dihedral
from chairqm.errors import ChairqmError
from chairqm.ring import classify, cremer_pople


def prepare(smiles):
    """Inputs as the intake hands them over, built here with RDKit alone: explicit-H mol, the ring in
    order, and the substituents (heavy groups on any ring atom, plus the H on a ring N)."""
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    Chem.AssignStereochemistry(mol, cleanIt=True, force=True)
    rings = [list(r) for r in mol.GetRingInfo().AtomRings()
             if len(r) == 6 and all(mol.GetAtomWithIdx(i).GetHybridization() == Chem.HybridizationType.SP3
                                    for i in r)]
    ring_atoms = sorted(rings, key=lambda r: -sum(1 for i in r for nb in mol.GetAtomWithIdx(i).GetNeighbors()
                                                 if nb.GetIdx() not in r and nb.GetAtomicNum() > 1))[0]
    start = min(ring_atoms)
    ring, prev = [start], None
    while len(ring) < 6:
        cur = ring[-1]
        nxt = sorted(nb.GetIdx() for nb in mol.GetAtomWithIdx(cur).GetNeighbors()
                     if nb.GetIdx() in ring_atoms and nb.GetIdx() != prev and nb.GetIdx() not in ring)[0]
        prev = cur
        ring.append(nxt)
    ring_set = set(ring)
    subs = []
    for ra in ring:
        atom = mol.GetAtomWithIdx(ra)
        for nb in sorted(atom.GetNeighbors(), key=lambda a: a.GetIdx()):
            j = nb.GetIdx()
            if j in ring_set or (nb.GetAtomicNum() == 1 and atom.GetSymbol() != "N"):
                continue
            seen, stack = {j}, [j]
            while stack:
                i = stack.pop()
                for n2 in mol.GetAtomWithIdx(i).GetNeighbors():
                    k = n2.GetIdx()
                    if k not in ring_set and k not in seen:
                        seen.add(k)
                        stack.append(k)
            subs.append(SimpleNamespace(id=f"s{len(subs) + 1}", ring_atom=ra, first_atom=j, atoms=sorted(seen),
                                        fragment="[*][H]" if nb.GetAtomicNum() == 1 else "?"))
    return mol, ring, subs


def run(smiles, **settings):
    mol, ring, subs = prepare(smiles)
    return mol, ring, subs, S.build_seeds(mol, ring, subs, settings)


def labels(seed):
    return dict(kv.split("=") for kv in seed.orientation.split(";")) if seed.orientation else {}


def chairs(seeds):
    return [s for s in seeds if s.template.startswith("chair") and s.status in ("ok", "merged")]


# ---- monosubstituted rings ------------------------------------------------------------------------
def test_methylcyclohexane_two_chairs_axial_and_equatorial():
    _, _, _, seeds = run("CC1CCCCC1", twist_boats=False)
    by_template = {}
    for s in chairs(seeds):
        assert s.ring_form == "chair"
        by_template.setdefault(s.template, set()).add(labels(s)["s1"])
    # both chair templates built; a ring flip moves a group between axial and equatorial (common practice)
    assert set(by_template) == {"chair-1", "chair-2"}
    kept = [labels(s)["s1"] for s in seeds if s.status == "ok"]
    assert sorted(kept) == ["axial", "equatorial"]
    # the chairs are at the poles of the Cremer–Pople sphere
    for s in seeds:
        if s.status == "ok":
            assert min(s.theta, 180 - s.theta) < 15


def test_axial_methyl_costs_energy_in_the_force_field():
    _, _, _, seeds = run("CC1CCCCC1", twist_boats=False)
    e = {labels(s)["s1"]: s.ff_energy_kcal for s in seeds if s.status == "ok"}
    # A-value of methyl 1.74 kcal/mol (Eliel, Stereochemistry of Organic Compounds, 1994; from memory);
    # a force field gets the sign and the size roughly right
    assert 0.8 < e["axial"] - e["equatorial"] < 2.8


CIS_TRANS = [
    # (smiles, name, expected set of (s1, s2) patterns over the two chairs) — textbook (common practice)
    ("C[C@@H]1CCCC[C@@H]1C", "cis-1,2", {("a", "e"), ("e", "a")}),
    ("C[C@@H]1CCCC[C@H]1C", "trans-1,2", {("e", "e"), ("a", "a")}),
    ("C[C@@H]1CCC[C@H](C)C1", "cis-1,3", {("e", "e"), ("a", "a")}),
    ("C[C@@H]1CCC[C@@H](C)C1", "trans-1,3", {("a", "e"), ("e", "a")}),
    ("C[C@H]1CC[C@@H](C)CC1", "cis-1,4", {("a", "e"), ("e", "a")}),
    ("C[C@H]1CC[C@H](C)CC1", "trans-1,4", {("e", "e"), ("a", "a")}),
]


def _faces(smiles):
    """cis/trans from an ordinary RDKit embedding: are both methyls on the same face of the ring, i.e.
    is each C–CH3 bond above its geminal C–H bond on the same side (least-squares ring plane)?"""
    mol, ring, subs = prepare(smiles)
    AllChem.EmbedMolecule(mol, randomSeed=5)
    x = mol.GetConformer().GetPositions()
    c = x[ring] - x[ring].mean(axis=0)
    n = np.linalg.svd(c)[2][-1]
    side = []
    for s in subs:
        h = next(nb.GetIdx() for nb in mol.GetAtomWithIdx(s.ring_atom).GetNeighbors() if nb.GetAtomicNum() == 1)
        side.append(np.sign((x[s.first_atom] - x[h]) @ n))
    return "cis" if side[0] == side[1] else "trans"


@pytest.mark.parametrize("smiles,name,expected", CIS_TRANS)
def test_disubstituted_chairs_show_textbook_patterns(smiles, name, expected):
    assert _faces(smiles) == name.split("-")[0]          # the SMILES really is the named isomer
    _, _, subs, seeds = run(smiles, twist_boats=False)
    assert len(subs) == 2
    got = set()
    templates = set()
    for s in chairs(seeds):
        lab = labels(s)
        got.add((lab["s1"][0], lab["s2"][0]))
        templates.add(s.template)
    assert templates == {"chair-1", "chair-2"}
    assert got == expected
    assert all(s.status != "failed" for s in seeds)


@pytest.mark.parametrize("smiles", ["CC(C)C1CCCCC1", "CC(C)(C)C1CCCCC1"])
def test_bulky_groups_still_get_an_axial_chair(smiles):
    _, _, _, seeds = run(smiles, twist_boats=False)
    axial = [s for s in seeds if s.status == "ok" and s.ring_form == "chair" and labels(s)["s1"] == "axial"]
    assert axial
    eq = [s for s in seeds if s.status == "ok" and s.ring_form == "chair" and labels(s)["s1"] == "equatorial"]
    assert eq
    # the axial chair is higher in energy (A-values iPr 2.15, tBu ~4.9 kcal/mol, Eliel 1994; from memory)
    assert min(s.ff_energy_kcal for s in axial) > min(s.ff_energy_kcal for s in eq)


def test_cis_1_4_di_tert_butyl_chair_is_built():
    _, _, _, seeds = run("CC(C)(C)[C@H]1CC[C@@H](C(C)(C)C)CC1")
    ch = [s for s in seeds if s.status == "ok" and s.ring_form == "chair"]
    # in either chair of the cis-1,4 isomer one tert-butyl is axial (common practice)
    assert ch and all(sorted(labels(s).values()) == ["axial", "equatorial"] for s in ch)
    assert any(s.status == "ok" and s.ring_form == "twist-boat" for s in seeds)


# ---- twist-boats ----------------------------------------------------------------------------------
def test_twist_boat_seeds_classify_as_twist_boats():
    _, _, _, seeds = run("CC1CCCCC1")
    tbs = [s for s in seeds if s.template.startswith("tb-")]
    assert {s.template for s in tbs} == {f"tb-{k}" for k in range(1, 7)}
    for s in tbs:
        assert s.status in ("ok", "merged")
        assert s.ring_form == "twist-boat"
        assert classify(cremer_pople(s.positions[[*prepare("CC1CCCCC1")[1]]])) == "twist-boat"
    kept = sorted(labels(s)["s1"] for s in tbs if s.status == "ok")
    # a D2 twist-boat offers three kinds of position: isoclinal, pseudo-axial, pseudo-equatorial
    # (common practice), so methylcyclohexane has three distinct twist-boats
    assert kept == ["isoclinal", "pseudo-axial", "pseudo-equatorial"]


def test_cyclohexane_twist_boats_are_all_one():
    _, _, _, seeds = run("C1CCCCC1")
    tbs = [s for s in seeds if s.template.startswith("tb-")]
    assert [s.status for s in tbs].count("ok") == 1
    kept = next(s.name for s in tbs if s.status == "ok")
    for s in tbs:
        if s.status == "merged":
            assert kept in s.reason and s.equivalent_to == kept
    # the two chairs of cyclohexane are one conformer
    ch = [s for s in seeds if s.template.startswith("chair")]
    assert sorted(s.status for s in ch) == ["merged", "ok"]


def test_twist_boats_can_be_switched_off_and_are_reported():
    _, _, _, seeds = run("CC1CCCCC1", twist_boats=False)
    tbs = [s for s in seeds if s.template.startswith("tb-")]
    assert len(tbs) == 6 and all(s.status == "screened" and "twist_boats" in s.reason for s in tbs)


# ---- heterocycles ---------------------------------------------------------------------------------
@pytest.mark.parametrize("smiles", ["C1CCOCC1", "CN1CCCCC1", "C1COCOC1"])
def test_heterocycles_get_both_chairs(smiles):
    _, _, _, seeds = run(smiles, twist_boats=False)
    ch = chairs(seeds)
    assert {s.template for s in ch} == {"chair-1", "chair-2"}
    assert all(s.ring_form == "chair" for s in ch)
    assert any(s.status == "ok" for s in ch)


def test_n_methylpiperidine_n_methyl_axial_and_equatorial():
    _, _, _, seeds = run("CN1CCCCC1", twist_boats=False)
    e = {labels(s)["s1"]: s.ff_energy_kcal for s in seeds if s.status == "ok" and s.ring_form == "chair"}
    assert set(e) == {"axial", "equatorial"}
    # N-methyl prefers equatorial by about 3 kcal/mol in the gas phase (from memory: Crowley, Morris,
    # Robinson, Tetrahedron Lett. 1976, ~2.7 kcal/mol; and later work ~3.2)
    assert e["axial"] - e["equatorial"] > 1.0


def test_piperidine_nh_inverts():
    _, _, subs, seeds = run("C1CCNCC1", twist_boats=False)
    assert [s.fragment for s in subs] == ["[*][H]"]
    kept = sorted(labels(s)["s1"] for s in seeds if s.status == "ok")
    assert kept == ["axial", "equatorial"]


# ---- rotamers -------------------------------------------------------------------------------------
def test_methoxycyclohexane_several_rotamers_per_chair():
    mol, ring, subs, seeds = run("COC1CCCCC1", twist_boats=False)
    s1 = subs[0]
    o = s1.first_atom
    me = next(nb.GetIdx() for nb in mol.GetAtomWithIdx(o).GetNeighbors() if nb.GetIdx() != s1.ring_atom)
    c2 = next(i for i in ring if mol.GetBondBetweenAtoms(i, s1.ring_atom) and i != s1.ring_atom)
    for tpl in ("chair-1", "chair-2"):
        distinct = [s for s in seeds if s.template == tpl and s.status in ("ok", "screened")]
        assert len(distinct) >= 2
        tors = sorted(dihedral(*s.positions[[c2, s1.ring_atom, o, me]]) for s in distinct)
        assert max(tors) - min(tors) > 60.0
        assert any(s.status == "ok" for s in distinct)
    # three starts per chair for the one rotatable C–O bond (O–CH3 is a symmetric top)
    assert len([s for s in seeds if s.name.startswith("chair-1-r")]) == 3


def test_rotamer_cap_and_window_are_applied_within_a_form():
    _, _, _, seeds = run("COC(=O)C1CCCCC1", twist_boats=False, max_rotamers_per_form=1)
    for tpl in ("chair-1", "chair-2"):
        group = [s for s in seeds if s.template == tpl and s.name.startswith(tpl + "-r")]
        ok = [s for s in group if s.status == "ok"]
        assert len(ok) == 1
        others = [s for s in group if s.status == "screened"]
        assert others and all(("cap" in s.reason) or ("window" in s.reason) for s in others)
        assert ok[0].ff_energy_kcal == min(s.ff_energy_kcal for s in group if s.status in ("ok", "screened"))
    _, _, _, seeds = run("COC(=O)C1CCCCC1", twist_boats=False, ff_window_kcal=0.5)
    win = [s for s in seeds if s.status == "screened" and "-r" in s.name]
    assert win and all("window" in s.reason for s in win)
    # the ring-level forms are never screened away: both chairs still have a kept rotamer
    assert {s.template for s in seeds if s.status == "ok"} == {"chair-1", "chair-2"}


def test_rotatable_bonds_found():
    for smiles, n in [("CC1CCCCC1", 0), ("CC(C)(C)C1CCCCC1", 0), ("COC1CCCCC1", 1), ("CCC1CCCCC1", 1),
                      ("CC(C)C1CCCCC1", 1), ("COC(=O)C1CCCCC1", 2), ("c1ccccc1C1CCCCC1", 1),
                      ("OC1CCCCC1", 1), ("N#CC1CCCCC1", 0)]:
        mol, ring, subs = prepare(smiles)
        assert len(rotamers.rotatable_bonds(mol, ring, subs)) == n, smiles


# ---- stereo, bookkeeping, determinism -------------------------------------------------------------
def test_stereo_is_kept_and_checked():
    smiles = "C[C@@H]1CCCC[C@H]1[C@@H](C)CC"
    mol, ring, subs, seeds = run(smiles, twist_boats=False)
    ref = Chem.FindMolChiralCenters(mol, includeUnassigned=True, useLegacyImplementation=False)
    ok = [s for s in seeds if s.status == "ok"]
    assert ok
    for s in ok:
        m = Chem.Mol(mol)
        m.RemoveAllConformers()
        conf = Chem.Conformer(m.GetNumAtoms())
        conf.SetPositions(s.positions)
        m.AddConformer(conf, assignId=True)
        Chem.AssignStereochemistryFrom3D(m)
        assert Chem.FindMolChiralCenters(m, includeUnassigned=True, useLegacyImplementation=False) == ref
        assert chem.stereo_mismatch(mol, s.positions) == []
    # the mirror image has every centre inverted, and the check says so
    assert len(chem.stereo_mismatch(mol, ok[0].positions * np.array([1.0, 1.0, -1.0]))) == 3


def test_no_seed_is_lost_silently():
    _, _, _, seeds = run("CC1CCNCC1")
    names = [s.name for s in seeds]
    assert len(names) == len(set(names))
    kept = {s.name for s in seeds if s.status == "ok"}
    for s in seeds:
        assert s.status in S.STATUSES
        if s.status != "ok":
            assert s.reason
        if s.status == "merged":
            assert s.equivalent_to in kept and s.equivalent_to in s.reason
        if s.status in ("ok", "merged"):
            assert s.positions.shape == (prepare("CC1CCNCC1")[0].GetNumAtoms(), 3)
    # 4-methylpiperidine: Me and N-H each axial or equatorial -> four chairs
    pats = {tuple(sorted(labels(s).items())) for s in seeds if s.status == "ok" and s.ring_form == "chair"}
    assert len(pats) == 4


def test_written_files_are_identical_across_runs(tmp_path):
    tables = []
    for k in (1, 2):
        mol, ring, subs = prepare("COC1CCCCC1")
        seeds = S.build_seeds(mol, ring, subs, {})
        tables.append(seed_stage.write_seeds(seeds, tmp_path / f"run{k}", mol))
    a = sorted(p.name for p in (tmp_path / "run1").iterdir())
    b = sorted(p.name for p in (tmp_path / "run2").iterdir())
    assert a == b and a
    for name in a:
        assert (tmp_path / "run1" / name).read_bytes() == (tmp_path / "run2" / name).read_bytes()
    assert tables[0].to_csv(index=False) == tables[1].to_csv(index=False)


_SUBPROCESS = r"""
import sys
from types import SimpleNamespace
from rdkit import Chem
from chairqm import seeds as S
if sys.argv[2] == "warm":       # other work first, as a workflow process may do: changes memory layout
    warm = Chem.AddHs(Chem.MolFromSmiles("COC(=O)C1CCCCC1"))
    S.build_seeds(warm, [4, 5, 6, 7, 8, 9], [SimpleNamespace(id="s1", ring_atom=4, first_atom=2,
                  atoms=[0, 1, 2, 3] + list(range(10, 13)), fragment="[*]C(=O)OC")], {"twist_boats": False})
mol = Chem.AddHs(Chem.MolFromSmiles("CC1CCNCC1"))
ring = [1, 2, 3, 4, 5, 6]
me = [0] + [n.GetIdx() for n in mol.GetAtomWithIdx(0).GetNeighbors() if n.GetAtomicNum() == 1]
nh = next(n.GetIdx() for n in mol.GetAtomWithIdx(4).GetNeighbors() if n.GetAtomicNum() == 1)
subs = [SimpleNamespace(id="s1", ring_atom=1, first_atom=0, atoms=sorted(me), fragment="[*]C"),
        SimpleNamespace(id="s2", ring_atom=4, first_atom=nh, atoms=[nh], fragment="[*][H]")]
from chairqm.stages.seeds import write_seeds
write_seeds(S.build_seeds(mol, ring, subs, {}), sys.argv[1], mol).to_csv(sys.argv[1] + "/table.csv", index=False)
"""


def test_written_files_are_identical_across_processes(tmp_path):
    # separate interpreters (different hash seeds, different memory layout) must write the same bytes
    import os
    import subprocess
    import sys
    script = tmp_path / "make.py"
    script.write_text(_SUBPROCESS)
    for k, hs, warm in ((1, "1", "cold"), (2, "12345", "warm")):
        env = dict(os.environ, PYTHONHASHSEED=hs, OMP_NUM_THREADS="1")
        subprocess.run([sys.executable, str(script), str(tmp_path / f"p{k}"), warm], check=True, env=env)
    a = sorted(p.name for p in (tmp_path / "p1").iterdir())
    assert a == sorted(p.name for p in (tmp_path / "p2").iterdir()) and len(a) > 4
    for name in a:
        assert (tmp_path / "p1" / name).read_bytes() == (tmp_path / "p2" / name).read_bytes(), name


def test_write_seeds_table_and_xyz(tmp_path):
    import ase.io
    mol, ring, subs, seeds = run("CC1CCCCC1")
    df = seed_stage.write_seeds(seeds, tmp_path, mol)
    assert list(df.columns) == ["seed", "ring_form", "q", "theta", "phi", "orientation", "ff_energy_kcal",
                                "status", "template", "reason", "other_rings"]
    assert len(df) == len(seeds)
    files = sorted(p.stem for p in tmp_path.glob("*.xyz"))
    assert files == sorted(s.name for s in seeds if s.status == "ok")
    s = next(s for s in seeds if s.status == "ok")
    atoms = ase.io.read(tmp_path / f"{s.name}.xyz")
    assert atoms.get_chemical_symbols() == [a.GetSymbol() for a in mol.GetAtoms()]
    assert np.allclose(atoms.positions, s.positions, atol=1e-7)
    assert atoms.info["seed"] == s.name and atoms.info["orientation"] == s.orientation


def test_settings_are_checked():
    mol, ring, subs = prepare("CC1CCCCC1")
    with pytest.raises(ChairqmError, match="unknown seeds setting"):
        S.build_seeds(mol, ring, subs, {"max_rotamers": 3})
    with pytest.raises(ChairqmError, match="ff_window_kcal"):
        S.build_seeds(mol, ring, subs, {"ff_window_kcal": -1})
    with pytest.raises(ChairqmError, match="explicit hydrogens"):
        S.build_seeds(Chem.MolFromSmiles("CC1CCCCC1"), [1, 2, 3, 4, 5, 6], [], {})


def test_defaults_agree_with_the_config_schema():
    schema = json.loads((Path(S.__file__).parent / "schemas" / "config.schema.json").read_text())
    found = {}

    def walk(node):
        if isinstance(node, dict):
            if "seeds" in node.get("properties", {}):
                found.update(node["properties"]["seeds"].get("properties", {}))
            for v in node.values():
                walk(v)
        elif isinstance(node, list):
            for v in node:
                walk(v)

    walk(schema)
    assert found
    for key, spec in found.items():
        assert key in S.DEFAULTS
        assert spec.get("default") == S.DEFAULTS[key], key


@pytest.mark.parametrize("smiles", ["COC1CCCCC1", "CC(C)C1CCCCC1"])
def test_seeding_is_fast(smiles):
    mol, ring, subs = prepare(smiles)
    t0 = time.perf_counter()
    S.build_seeds(mol, ring, subs, {})
    # brief: a few seconds at most for such a molecule (common practice for an interactive preview)
    assert time.perf_counter() - t0 < 5.0


def test_uff_where_mmff_has_no_parameters():
    # MMFF94 has no selenium parameters (Halgren, J. Comput. Chem. 1996, 17, 490: H, C, N, O, F, Si, P,
    # S, Cl, Br, I only; from memory); UFF covers the periodic table (Rappé et al., JACS 1992, 114, 10024)
    assert not AllChem.MMFFHasAllMoleculeParams(prepare("C[Se]C1CCCCC1")[0])
    _, _, _, seeds = run("C[Se]C1CCCCC1", twist_boats=False)
    ok = [s for s in seeds if s.status == "ok"]
    assert ok and all(s.forcefield == "UFF" and s.ff_energy_kcal is not None for s in ok)
    assert {labels(s)["s1"] for s in ok} == {"axial", "equatorial"}


def test_a_template_that_cannot_be_built_is_reported(monkeypatch):
    monkeypatch.setattr(S, "_embed", lambda ctx, pos, seed: None)
    _, _, _, seeds = run("CC1CCCCC1", twist_boats=False)
    built = [s for s in seeds if s.template.startswith("chair")]
    assert {s.name for s in built} == {"chair-1", "chair-2", "chair-1-v2", "chair-2-v2"}
    failed = [s for s in built if s.status == "failed"]
    # nothing was built, so nothing can stand in for the others: every chair candidate is reported failed
    assert {s.name for s in failed} == {"chair-1", "chair-2", "chair-1-v2", "chair-2-v2"}
    assert all("embedding" in s.reason and s.positions is None for s in failed)
    # the table still lists every seed
    df = seed_stage.seeds_table(seeds)
    assert len(df) == len(seeds) and set(df["status"]) >= {"failed"}


def test_ring_ketone_and_rings_in_groups_are_seeded():
    """Cyclohexanone's C=O lies in its ring atom's plane (no up/down choice, textbook sp2 geometry), and a
    ring inside a group is seeded in both of its chairs (its link equatorial and axial on it)."""
    from chairqm.molecule import perceive
    p = perceive({"name": "k", "smiles": "Cl[C@@H]1CCCCC1=O"})[0]
    found = S.build_seeds(p.mol, p.ring, p.substituents, {"twist_boats": False}, p.other_rings)
    kept = [s for s in found if s.status == "ok"]
    assert sorted(s.orientation for s in kept) == ["s1=axial", "s1=equatorial"]
    p = perceive({"name": "b", "smiles": "C1CCC(CC1)C1CCCCC1"})[0]
    found = S.build_seeds(p.mol, p.ring, p.substituents, {"twist_boats": False}, p.other_rings)
    assert {s.other_rings for s in found if s.status == "ok"} == {"r2=chair:axial", "r2=chair:equatorial"}


def test_a_four_membered_ring_in_a_group_is_seeded_in_both_puckers():
    from chairqm.molecule import perceive
    p = perceive({"name": "cb", "smiles": "C1CCC(CC1)C1CCC1"})[0]
    found = S.build_seeds(p.mol, p.ring, p.substituents, {"twist_boats": False}, p.other_rings)
    assert {s.other_rings for s in found if s.status == "ok"} == {"r2=puckered:pseudo-axial",
                                                                  "r2=puckered:pseudo-equatorial"}


def test_a_cut_in_the_other_rings_combinations_is_said_in_every_seed(monkeypatch):
    """Bicyclohexyl's other ring has four seeded states (two chairs, link equatorial or axial); with room
    for two, the seeds say that 2 of 4 were tried instead of dropping the rest silently."""
    from chairqm import other_rings
    from chairqm.molecule import perceive
    p = perceive({"name": "b", "smiles": "C1CCC(CC1)C1CCCCC1"})[0]
    chairs = [(t.q, t.theta, t.phi) for t in S.TEMPLATES if t.form == "chair"]
    sets, total = other_rings.restraint_sets(p.mol, p.other_rings, chairs, 16)
    assert (len(sets), total) == (4, 4)
    assert len(other_rings.restraint_sets(p.mol, p.other_rings, chairs, 2)[0]) == 2
    full = S.build_seeds(p.mol, p.ring, p.substituents, {"twist_boats": False}, p.other_rings)
    assert not any("combinations of their states" in s.reason for s in full)
    monkeypatch.setattr(S, "MAX_OTHER_RING_SETS", 2)
    cut = S.build_seeds(p.mol, p.ring, p.substituents, {"twist_boats": False}, p.other_rings)
    kept = [s for s in cut if s.status == "ok"]
    assert kept and all("other rings: 2 of 4 combinations of their states seeded" in s.reason for s in kept)


def test_an_inverting_ring_nitrogen_in_a_group_is_seeded_on_both_sides():
    """4-Cyclohexylpiperidine: the piperidine N-H inverts (N inversion is part of the conformer), so each
    of the 2 x 2 x 2 states (cyclohexane link equatorial/axial, piperidine link equatorial/axial, N-H
    equatorial/axial) is a conformer and must have a seed that is not strained (force-field energy within
    15 kcal/mol of the best; a strained start relaxes elsewhere)."""
    from chairqm.molecule import perceive
    p = perceive({"name": "cp", "smiles": "C1CCC(CC1)C1CCNCC1"})[0]
    assert p.other_rings[0]["nitrogens"] == [[9, 28, "H"]]
    found = S.build_seeds(p.mol, p.ring, p.substituents, {"twist_boats": False}, p.other_rings)
    kept = [s for s in found if s.status == "ok"]
    best = min(s.ff_energy_kcal for s in kept)
    good = {(s.orientation, s.other_rings) for s in kept if s.ff_energy_kcal < best + 15.0}
    want = {(f"s1={a}", f"r2=chair:{b};r2.N9-H={c}")
            for a in ("equatorial", "axial") for b in ("equatorial", "axial") for c in ("equatorial", "axial")}
    assert want <= good, sorted(want - good)
    assert any(s.name.endswith("-n9") and "ring N 9 of" in s.reason for s in kept)


def test_a_five_membered_ring_in_a_group_is_seeded_with_its_link_on_both_sides():
    """Cyclopentylcyclohexane: the cyclopentane is seeded as the two envelopes with the link atom as the
    flap, so in each chair of the analysed ring its link is pseudo-equatorial in some seeds and
    pseudo-axial in others (the two positions at a puckered five-membered ring's flap, common practice)."""
    from chairqm.molecule import perceive
    p = perceive({"name": "cp", "smiles": "C1CCC(CC1)C1CCCC1"})[0]
    assert [len(o["atoms"]) for o in p.other_rings] == [5]
    found = S.build_seeds(p.mol, p.ring, p.substituents, {"twist_boats": False}, p.other_rings)
    kept = [s for s in found if s.status == "ok"]
    for chair in ("s1=equatorial", "s1=axial"):
        sides = {s.other_rings.split(":")[-1] for s in kept if s.orientation == chair}
        assert sides == {"pseudo-axial", "pseudo-equatorial"}, (chair, sides)
        assert all(s.other_rings.split("=")[1].split(":")[0] in ("envelope", "twist") for s in kept)
