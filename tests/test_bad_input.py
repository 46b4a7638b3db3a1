"""`chairqm check` on a corpus of bad inputs: exit code 2, a message naming the problem, nothing written."""

import os

import pytest

from chairqm import cli

GOOD = {"name": "mch", "smiles": "CC1CCCCC1"}


def cfg(mols=None, settings=None, **top):
    d = {"molecules": mols if mols is not None else [GOOD]}
    if settings is not None:
        d["settings"] = settings
    d.update(top)
    return d


SDF_GARBAGE = "this is not\na molfile\n"
# (id, config (mapping or raw YAML text), extra files {name: text}, words the message must contain)
CASES = [
    ("broken-yaml", "molecules: [ {name: a, smiles: C1CCCCC1\n", {}, ["not valid YAML", "line"]),
    ("yaml-tab-indent", "molecules:\n\t- name: a\n", {}, ["not valid YAML"]),
    ("yaml-python-tag", "molecules: !!python/object/apply:os.system ['echo hi']\n", {}, ["not valid YAML"]),
    ("top-level-list", "- name: a\n  smiles: C1CCCCC1\n", {}, ["YAML mapping"]),
    ("empty-file", "", {}, ["YAML mapping"]),
    ("no-molecules", {"settings": {}}, {}, ["'molecules' is a required property"]),
    ("empty-molecules", cfg(mols=[]), {}, ["molecules", "should be non-empty"]),
    ("unknown-top-key", cfg(setings={}), {}, ["unknown key 'setings'", "did you mean 'settings'"]),
    ("unknown-molecule-key", cfg(mols=[{"name": "a", "smiles": "CC1CCCCC1", "smile": "C"}]), {},
     ["unknown key 'smile'", "did you mean 'smiles'"]),
    ("unknown-settings-key", cfg(settings={"temperature_k": [298]}), {},
     ["unknown key 'temperature_k'", "did you mean 'temperatures_k'"]),
    ("temperatures-not-list", cfg(settings={"temperatures_k": "298"}), {}, ["temperatures_k", "not of type 'array'"]),
    ("negative-temperature", cfg(settings={"temperatures_k": [-10]}), {}, ["temperatures_k", "-10"]),
    ("zero-temperature", cfg(settings={"temperatures_k": [0]}), {}, ["temperatures_k", "0"]),
    ("name-traversal", cfg(mols=[{"name": "../evil", "smiles": "CC1CCCCC1"}]), {}, ["unsafe molecule name", "../evil"]),
    ("name-slash", cfg(mols=[{"name": "a/b", "smiles": "CC1CCCCC1"}]), {}, ["unsafe molecule name"]),
    ("name-leading-dot", cfg(mols=[{"name": ".hidden", "smiles": "CC1CCCCC1"}]), {}, ["unsafe molecule name"]),
    ("name-absolute", cfg(mols=[{"name": "/tmp/x", "smiles": "CC1CCCCC1"}]), {}, ["unsafe molecule name"]),
    ("name-not-string", cfg(mols=[{"name": 12, "smiles": "CC1CCCCC1"}]), {}, ["name", "not of type 'string'"]),
    ("duplicate-names", cfg(mols=[GOOD, GOOD]), {}, ["'mch' is used twice"]),
    ("duplicate-names-case", cfg(mols=[GOOD, {"name": "MCH", "smiles": "CC1CCCCC1"}]), {}, ["used twice"]),
    ("smiles-and-file", cfg(mols=[{"name": "a", "smiles": "CC1CCCCC1", "file": "a.sdf"}]), {},
     ["exactly one of 'smiles' or 'file'"]),
    ("neither-smiles-nor-file", cfg(mols=[{"name": "a"}]), {}, ["exactly one of 'smiles' or 'file'"]),
    ("invalid-smiles-ring", cfg(mols=[{"name": "a", "smiles": "C1CCCCC"}]), {}, ["a: cannot parse SMILES"]),
    ("invalid-smiles-paren", cfg(mols=[{"name": "a", "smiles": "CC(C1CCCCC1"}]), {}, ["a: cannot parse SMILES"]),
    ("invalid-smiles-symbol", cfg(mols=[{"name": "a", "smiles": "CXC1CCCCC1"}]), {}, ["a: cannot parse SMILES"]),
    ("valence-error", cfg(mols=[{"name": "a", "smiles": "CC(C)(C)(C)(C)C1CCCCC1"}]), {}, ["a:", "not a valid molecule", "valence"]),
    ("unsupported-element", cfg(mols=[{"name": "a", "smiles": "[Pu]C1CCCCC1"}]), {}, ["Pu", "outside GFN2-xTB"]),
    ("no-ring", cfg(mols=[{"name": "a", "smiles": "CCCCCC"}]), {}, ["no six-membered ring chairqm can analyse", "it has no six-membered ring"]),
    ("five-ring", cfg(mols=[{"name": "a", "smiles": "CC1CCCC1"}]), {}, ["no six-membered ring chairqm can analyse"]),
    ("aromatic-only", cfg(mols=[{"name": "a", "smiles": "Cc1ccccc1"}]), {}, ["no six-membered ring chairqm can analyse", "aromatic"]),
    ("cyclohexene-only", cfg(mols=[{"name": "a", "smiles": "CC1=CCCCC1"}]), {}, ["no six-membered ring chairqm can analyse",
                                                                                   "endocyclic double bond", "half-chair"]),
    ("ring-not-found", cfg(mols=[{"name": "a", "smiles": "C1CCC(CC1)C1CCNCC1", "ring": "C1CCOCC1"}]), {},
     ["a: ring:", "matches 0 of the analysable six-membered rings"]),
    ("ring-ambiguous", cfg(mols=[{"name": "a", "smiles": "C1CCC(CC1)C1CCCCC1", "ring": "C1CCCCC1"}]), {},
     ["matches 2 of the analysable six-membered rings"]),
    ("ring-bad-smarts", cfg(mols=[{"name": "a", "smiles": "C1CCC(CC1)C1CCNCC1", "ring": "C1CC(("}]), {},
     ["not a valid SMARTS"]),
    ("unspecified-ring-stereo", cfg(mols=[{"name": "a", "smiles": "CC1CCC(C)CC1"}]), {},
     ["stereo not specified", "ring atom 1", "ring atom 4", "enumerate_stereo"]),
    ("unspecified-12-stereo", cfg(mols=[{"name": "a", "smiles": "CC1CCCCC1C"}]), {}, ["stereo not specified"]),
    ("disconnected", cfg(mols=[{"name": "a", "smiles": "C[NH+]1CCCCC1.[Cl-]"}]), {}, ["disconnected fragments"]),
    ("radical-without-multiplicity", cfg(mols=[{"name": "a", "smiles": "[CH2]C1CCCCC1"}]), {},
     ["unpaired electron", "multiplicity: 2"]),
    ("impossible-multiplicity", cfg(mols=[{"name": "a", "smiles": "CC1CCCCC1", "multiplicity": 2}]), {},
     ["multiplicity 2 is impossible"]),
    ("charge-mismatch", cfg(mols=[{"name": "a", "smiles": "CC1CCCCC1", "charge": 1}]), {}, ["disagrees", "formal charge 0"]),
    ("missing-file", cfg(mols=[{"name": "a", "file": "nothere.sdf"}]), {}, ["a: structure file not found"]),
    ("garbage-sdf", cfg(mols=[{"name": "a", "file": "bad.sdf"}]), {"bad.sdf": SDF_GARBAGE}, ["a:", "bad.sdf"]),
    ("xyz-without-charge", cfg(mols=[{"name": "a", "file": "m.xyz"}]), {"m.xyz": "1\n\nC 0 0 0\n"}, ["carries no charge"]),
    ("garbage-xyz", cfg(mols=[{"name": "a", "file": "m.xyz", "charge": 0}]), {"m.xyz": "two\nx\nC 0 0\n"}, ["a:", "m.xyz"]),
    ("unsupported-extension", cfg(mols=[{"name": "a", "file": "m.pdb"}]), {"m.pdb": "ATOM\n"}, ["unsupported structure file type"]),
    ("bridged-ring", cfg(mols=[{"name": "a", "smiles": "C1CC2CCC1CC2"}], settings={"enumerate_stereo": True}), {},
     ["part of a bridged ring system",
                                                                          "decalins", "does not analyse"]),
    ("spiro-ring", cfg(mols=[{"name": "a", "smiles": "C1CCC2(CC1)OCCO2"}]), {}, ["spiro-joined to another ring"]),
    ("bad-engine", cfg(settings={"engine": "gaussian"}), {}, ["engine", "'gaussian' is not one of"]),
    ("bad-method", cfg(settings={"method": "GFN0"}), {}, ["method", "is not one of"]),
    ("bad-solvent-model", cfg(settings={"solvent": {"model": "cosmo", "name": "water"}}), {}, ["solvent must be null or"]),
    ("solvent-string", cfg(settings={"solvent": "water"}), {}, ["solvent must be null or"]),
    ("bad-thermo-model", cfg(settings={"thermo": {"model": "harmonic"}}), {}, ["thermo.model", "is not one of"]),
    ("refine-not-mapping", cfg(settings={"refine": True}), {}, ["settings.refine", "mapping"]),
    ("refine-unknown-key", cfg(settings={"refine": {"functionl": "PBE0"}}), {},
     ["unknown key 'functionl' at settings.refine", "did you mean 'functional'"]),
    ("refine-negative-window", cfg(settings={"refine": {"window_kcal": -1}}), {}, ["settings.refine.window_kcal", "-1"]),
    ("refine-basis-lacks-element", cfg(mols=[{"name": "iodo", "smiles": "IC1CCCCC1"}],
                                       settings={"refine": {"basis": "6-31G*"}}), {},
     ["iodo: refine", "6-31G*", "no functions for element I"]),
    ("refine-unknown-functional", cfg(settings={"refine": {"functional": "B3LPY"}}), {},
     ["unknown functional 'B3LPY'"]),
]


@pytest.mark.parametrize("case", CASES, ids=[c[0] for c in CASES])
def test_bad_input_exits_2_with_message_and_writes_nothing(case, tmp_path, write_config, capsys, monkeypatch):
    _, config, files, words = case
    for name, text in files.items():
        (tmp_path / name).write_text(text)
    path = write_config(config)
    before = sorted(os.listdir(tmp_path))
    monkeypatch.chdir(tmp_path)
    code = cli.main(["check", str(path)])
    err = capsys.readouterr().err
    assert code == 2, err
    assert "Traceback" not in err
    for w in words:
        assert w in err, f"expected {w!r} in: {err}"
    assert sorted(os.listdir(tmp_path)) == before


def test_corpus_is_large_enough():
    assert len(CASES) >= 30


def test_all_problems_reported_one_line_each(write_config, capsys):
    path = write_config(cfg(mols=[{"name": "a", "smiles": "C1CC"}, {"name": "b", "smiles": "CCCC"}]))
    assert cli.main(["check", str(path)]) == 2
    lines = [l for l in capsys.readouterr().err.splitlines() if l.strip()]
    assert len(lines) == 2 and lines[0].startswith("chairqm: error: a:") and lines[1].startswith("chairqm: error: b:")


def test_good_config_prints_table_and_writes_nothing(tmp_path, write_config, capsys, monkeypatch):
    path = write_config(cfg(mols=[GOOD, {"name": "cis-14", "smiles": "C[C@H]1CC[C@@H](C)CC1"}]))
    monkeypatch.chdir(tmp_path)
    assert cli.main(["check", str(path)]) == 0
    out = capsys.readouterr().out
    assert "molecule" in out and "mch" in out and "cis-14" in out and "[*]C" in out
    assert sorted(os.listdir(tmp_path)) == ["config.yaml"]


@pytest.mark.parametrize("name", ["demo.yaml", "demo-refine.yaml", "reference.yaml"])
def test_shipped_configs_check(name, capsys):
    from pathlib import Path
    path = Path(__file__).resolve().parent.parent / "configs" / name
    assert cli.main(["check", str(path)]) == 0
