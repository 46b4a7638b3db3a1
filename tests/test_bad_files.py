"""The second bad-input corpus: structure files exported from other programs and configuration files as
editors and scripts write them. Each case is either refused by `chairqm check` (exit 2, one
`chairqm: error:` line per problem, no traceback, nothing written) with the expected words, or accepted
with the interpretation the README documents ("Structure files", "Configuration"), checked here.

The structure files are in tests/data/bad_files/ (written by make_files.py there; the hand-made defects
are spelt out in that script). Expected molecules of accepted files are written as independent SMILES,
canonicalised by RDKit.
"""

from __future__ import annotations

import codecs
import os
import shutil
import subprocess
from pathlib import Path

import pytest
import yaml
from rdkit import Chem

from chairqm import api, cli

DATA = Path(__file__).resolve().parent / "data" / "bad_files"
MCH = {"name": "mch", "smiles": "CC1CCCCC1"}


def mol(file, **extra):
    return {"molecules": [{"name": "m", "file": file, **extra}]}


def text(cfg) -> str:
    return yaml.safe_dump(cfg, sort_keys=False)


GOOD_TEXT = "molecules:\n  - {name: mch, smiles: CC1CCCCC1}\n"


def alias_bomb(levels=7, width=9) -> str:
    """Each level lists the previous one `width` times: width**levels leaves from a few hundred bytes."""
    lines = ['l0: &l0 [' + ", ".join(['"x"'] * width) + ']']
    for k in range(1, levels):
        lines.append(f"l{k}: &l{k} [" + ", ".join([f"*l{k - 1}"] * width) + "]")
    return "\n".join(lines) + f"\nmolecules: *l{levels - 1}\n"


# (id, configuration: mapping, str or bytes; files copied from DATA; words the message must contain)
REFUSED = [
    # --- SD files and molfiles
    ("sdf-two-records", mol("two_records.sdf"), ["two_records.sdf"], ["holds 2 records", "methylcyclohexane",
                                                                      "cyclohexane", "one molecule per file"]),
    ("sdf-empty", mol("empty.sdf"), ["empty.sdf"], ["empty.sdf is empty"]),
    ("sdf-binary", mol("binary.sdf"), ["binary.sdf"], ["NUL bytes"]),
    ("sdf-gzip", mol("mch.sdf.gz"), ["mch.sdf.gz"], ["gzip-compressed", "decompress"]),
    ("mol-is-smiles-text", mol("smiles_text.mol"), ["smiles_text.mol"], ["not a molfile record", "M  END"]),
    ("mol-truncated", mol("truncated.mol"), ["truncated.mol"], ["truncated.mol", "not a molfile record"]),
    ("mol-2d-without-wedges", mol("no_wedges_2d_14.mol"), ["no_wedges_2d_14.mol"],
     ["stereo not specified", "ring atom 1", "ring atom 4"]),
    ("mol-query-atom-A", mol("query_atom_A.mol"), ["query_atom_A.mol"], ["family of molecules", "query atom 'A'"]),
    ("mol-r-group", mol("rgroup.mol"), ["rgroup.mol"], ["family of molecules", "R-group R1"]),
    ("mol-atom-list", mol("atom_list.mol"), ["atom_list.mol"], ["family of molecules", "atom list", "query bond"]),
    ("mol-query-bond-any", mol("query_bond_any.mol"), ["query_bond_any.mol"], ["query bond 1-2"]),
    ("mol-radical-without-spin", mol("radical.mol"), ["radical.mol"], ["1 unpaired electron", "multiplicity: 2"]),
    ("mol-charge-disagrees", mol("piperidinium.mol", charge=-1), ["piperidinium.mol"],
     ["'charge: -1' disagrees with the formal charges", "sum +1"]),
    ("mol-charge-zero-for-cation", mol("piperidinium.mol", charge=0), ["piperidinium.mol"],
     ["impossible with 49 electrons"]),
    ("mol-isotope-labels", mol("isotope_cd3.mol"), ["isotope_cd3.mol"], ["isotope label", "2H", "standard atomic masses"]),
    ("mol-six-bonds-on-carbon", mol("carbon_with_six_bonds.mol"), ["carbon_with_six_bonds.mol"],
     ["not a valid molecule", "valence"]),
    # --- XYZ
    ("xyz-odd-electrons", mol("odd_electrons.xyz", charge=0), ["odd_electrons.xyz"],
     ["55 electrons with charge 0", "odd count", "hydrogen is missing"]),
    ("xyz-cation-given-charge-0", mol("piperidinium.xyz", charge=0), ["piperidinium.xyz"],
     ["49 electrons with charge 0"]),
    ("xyz-two-frames", mol("two_frames.xyz", charge=0), ["two_frames.xyz"], ["line 1 says 21 atoms but 44",
                                                                            "give one structure"]),
    ("xyz-count-too-large", mol("count_too_large.xyz", charge=0), ["count_too_large.xyz"], ["line 1 says 22 atoms but 21"]),
    ("xyz-unknown-element", mol("unknown_element.xyz", charge=0), ["unknown_element.xyz"], ["line 3", "unknown element 'Xx'"]),
    ("xyz-atom-written-twice", mol("duplicate_atom.xyz", charge=0), ["duplicate_atom.xyz"], ["atoms 1 and 22", "0.00 Å apart"]),
    # --- SMILES: spin, hydrogens, isotopes, sizes
    ("smiles-nitroxide-without-spin", {"molecules": [{"name": "m", "smiles": "CC1(C)CCCC(C)(C)N1[O]"}]}, [],
     ["1 unpaired electron", "multiplicity: 2"]),
    ("smiles-carbene-without-spin", {"molecules": [{"name": "m", "smiles": "[C]1CCCCC1"}]}, [],
     ["2 unpaired electron", "multiplicity: 3"]),
    ("smiles-explicit-h-over-valence", {"molecules": [{"name": "m", "smiles": "C[CH2]1CCCCC1"}]}, [],
     ["not a valid molecule", "valence"]),
    ("smiles-deuterium", {"molecules": [{"name": "m", "smiles": "[2H]C1CCCCC1"}]}, [], ["isotope label", "2H (atom 0)"]),
    ("smiles-carbon-13", {"molecules": [{"name": "m", "smiles": "[13CH3]C1CCCCC1"}]}, [], ["isotope label", "13C"]),
    ("too-many-heavy-atoms", {"molecules": [{"name": "m", "smiles": "C" * 40 + "C1CCCCC1"}],
                              "settings": {"limits": {"max_rotatable_bonds": 0}}}, [],
     ["46 heavy atoms", "limit of 40", "settings.limits.max_heavy_atoms"]),
    ("too-many-rotors", {"molecules": [{"name": "m", "smiles": "CCCCCCCCCCCC1CCCCC1"}]}, [],
     ["10 rotatable bonds", "limit of 8", "settings.limits.max_rotatable_bonds"]),
    ("limits-negative", {"molecules": [MCH], "settings": {"limits": {"max_heavy_atoms": -1}}}, [],
     ["settings.limits.max_heavy_atoms", "-1"]),
    ("names-collide-after-stereo-expansion",
     {"molecules": [{"name": "m", "smiles": "CC1CCC(C)CC1"}, {"name": "M-ISO1", "smiles": "C1CCCCC1"}],
      "settings": {"enumerate_stereo": True}}, [], ["'M-ISO1'", "'m-iso1'", "ignoring case"]),
    # --- configuration files as text
    ("config-latin-1", GOOD_TEXT.replace("mch", "m\u00e9thyl").encode("latin-1"), [], ["not UTF-8", "0xe9", "line 2"]),
    ("config-utf16-without-bom", GOOD_TEXT.encode("utf-16-le"), [], ["NUL", "UTF-16 without a byte-order mark"]),
    ("config-alias-bomb", alias_bomb(), [], ["anchors and aliases", "expand to", "more than 200000"]),
    ("config-duplicate-top-key", GOOD_TEXT + "molecules:\n  - {name: b, smiles: C1CCCCC1}\n", [],
     ["line 3", "duplicate key 'molecules' (first at line 1)"]),
    ("config-duplicate-molecule-key", "molecules:\n  - {name: a, smiles: CC1CCCCC1, smiles: C1CCCCC1}\n", [],
     ["duplicate key 'smiles'"]),
    ("config-duplicate-settings-key", GOOD_TEXT + "settings:\n  engine: tblite\n  engine: xtb-python\n", [],
     ["line 5", "duplicate key 'engine' (first at line 4)"]),
    ("config-two-documents", "---\n" + GOOD_TEXT + "---\n" + GOOD_TEXT, [], ["not valid YAML", "another document"]),
    ("config-list-of-configurations", "- " + GOOD_TEXT.replace("\n  ", "\n    "), [], ["YAML mapping"]),
]


# (id, configuration, files, check(result of api.check)) — accepted, with the documented interpretation
def same(smiles):
    want = Chem.MolToSmiles(Chem.MolFromSmiles(smiles))

    def check(res):
        assert [m.smiles for m in res.plan.molecules if not m.reference] == [want]
    return check


def charge(n):
    def check(res):
        assert [m.charge for m in res.plan.molecules] == [n]
    return check


def both(*checks):
    def check(res):
        for c in checks:
            c(res)
    return check


TRANS_14 = "C[C@H]1CC[C@H](C)CC1"          # trans-1,4-dimethylcyclohexane (methyls on opposite faces)
CIS_14 = "C[C@H]1CC[C@@H](C)CC1"
ACCEPTED = [
    ("sdf-one-record-and-blank-records", mol("one_record_trailing_blank.sdf"), ["one_record_trailing_blank.sdf"],
     same("CC1CCCCC1")),
    ("sdf-upper-case-extension", mol("UPPER_CASE.SDF"), ["UPPER_CASE.SDF"], same("CC1CCCCC1")),
    ("mol-v3000", mol("v3000.mol"), ["v3000.mol"], same("CC1CCCCC1")),
    ("sdf-v3000-3d-stereo-from-geometry", mol("v3000_cis14_3d.sdf"), ["v3000_cis14_3d.sdf"], same(CIS_14)),
    ("mol-2d-stereo-from-wedges", mol("wedges_2d_trans14.mol"), ["wedges_2d_trans14.mol"], same(TRANS_14)),
    ("mol-flat-3d-header-read-as-2d", mol("flat_3d_header_trans14.mol"), ["flat_3d_header_trans14.mol"], same(TRANS_14)),
    ("sdf-missing-hydrogens-added", mol("some_hydrogens_missing.sdf"), ["some_hydrogens_missing.sdf"],
     same("CC1CCCCC1")),
    ("mol-formal-charge-is-the-charge", mol("piperidinium.mol"), ["piperidinium.mol"],
     both(same("C1CC[NH2+]CC1"), charge(1))),
    ("xyz-cation-with-charge", mol("piperidinium.xyz", charge=1), ["piperidinium.xyz"],
     both(same("C1CC[NH2+]CC1"), charge(1))),
    ("xyz-atomic-numbers", mol("atomic_numbers.xyz", charge=0), ["atomic_numbers.xyz"], same("CC1CCCCC1")),
    ("limit-lifted-by-setting", {"molecules": [{"name": "m", "smiles": "CCCCCCCCCCCC1CCCCC1"}],
                                 "settings": {"limits": {"max_rotatable_bonds": 10}}}, [], same("CCCCCCCCCCCC1CCCCC1")),
    ("limits-off", {"molecules": [{"name": "m", "smiles": "C" * 40 + "C1CCCCC1"}],
                    "settings": {"limits": {"max_heavy_atoms": 0, "max_rotatable_bonds": 0}}}, [],
     same("C" * 40 + "C1CCCCC1")),
    ("config-utf8-bom", codecs.BOM_UTF8 + GOOD_TEXT.encode(), [], same("CC1CCCCC1")),
    ("config-utf16-with-bom", GOOD_TEXT.encode("utf-16"), [], same("CC1CCCCC1")),
    # a configuration that reuses a block through an alias (merge key) is ordinary YAML and stays accepted
    ("config-merge-key-alias", "molecules:\n  - &first {name: a, smiles: CC1CCCCC1}\n  - {<<: *first, name: b}\n",
     [], lambda res: names(res, ["a", "b"])),
]


def names(res, expected):
    assert [m.name for m in res.plan.molecules] == expected


def _tree(root: Path) -> list[str]:
    return sorted(str(p.relative_to(root)) for p in root.rglob("*"))


def _setup(tmp_path, config, files) -> Path:
    for f in files:
        shutil.copy(DATA / f, tmp_path / f)
    path = tmp_path / "config.yaml"
    if isinstance(config, bytes):
        path.write_bytes(config)
    else:
        path.write_text(config if isinstance(config, str) else text(config), encoding="utf-8")
    return path


@pytest.mark.parametrize("case", REFUSED, ids=[c[0] for c in REFUSED])
def test_refused_with_one_line_per_problem_and_nothing_written(case, tmp_path, capsys, monkeypatch):
    _, config, files, words = case
    path = _setup(tmp_path, config, files)
    before = _tree(tmp_path)
    monkeypatch.chdir(tmp_path)
    code = cli.main(["check", str(path)])
    err = capsys.readouterr().err
    assert code == 2, err
    assert "Traceback" not in err
    lines = [l for l in err.splitlines() if l.strip()]
    assert lines and all(l.startswith("chairqm: error: ") for l in lines), err
    for w in words:
        assert w in err, f"expected {w!r} in: {err}"
    assert _tree(tmp_path) == before


def test_one_line_per_problem_when_several_files_are_bad(tmp_path, capsys):
    cfg = {"molecules": [{"name": "a", "file": "two_records.sdf"}, {"name": "b", "file": "rgroup.mol"},
                         {"name": "c", "file": "odd_electrons.xyz", "charge": 0}]}
    path = _setup(tmp_path, cfg, ["two_records.sdf", "rgroup.mol", "odd_electrons.xyz"])
    assert cli.main(["check", str(path)]) == 2
    lines = [l for l in capsys.readouterr().err.splitlines() if l.strip()]
    assert [l.split(":")[2].strip() for l in lines] == ["a", "b", "c"]


@pytest.mark.parametrize("case", ACCEPTED, ids=[c[0] for c in ACCEPTED])
def test_accepted_with_the_documented_interpretation(case, tmp_path, capsys, monkeypatch):
    _, config, files, check = case
    path = _setup(tmp_path, config, files)
    before = _tree(tmp_path)
    monkeypatch.chdir(tmp_path)
    assert cli.main(["check", str(path)]) == 0, capsys.readouterr().err
    check(api.check(path))
    assert _tree(tmp_path) == before


def test_corpus_is_large_enough():
    assert len(REFUSED) + len(ACCEPTED) >= 30


# ------------------------------------------------------------------------------ the output folder

def _config(tmp_path) -> Path:
    return _setup(tmp_path, {"molecules": [MCH]}, [])


def test_output_folder_that_is_a_file_is_refused_before_anything_runs(tmp_path, capsys):
    cfg = _config(tmp_path)
    (tmp_path / "out").write_text("a file, not a folder")
    before = _tree(tmp_path)
    code = cli.main(["run", str(cfg), "--out", str(tmp_path / "out"), "--until", "intake"])
    err = capsys.readouterr().err
    assert code == 2 and "Traceback" not in err
    assert "is a file" in err and "--out" in err
    assert len([l for l in err.splitlines() if l.strip()]) == 1
    assert _tree(tmp_path) == before
    code = cli.main(["run", str(cfg), "--out", str(tmp_path / "out" / "sub"), "--until", "intake"])
    assert code == 2 and "which is a file" in capsys.readouterr().err


@pytest.fixture
def read_only_folder(tmp_path):
    """A folder this process cannot write: chmod for an ordinary user; for root (which ignores
    permissions) a read-only tmpfs, where the machine allows mounting one."""
    ro = tmp_path / "ro"
    ro.mkdir()
    if os.geteuid() != 0:
        ro.chmod(0o555)
        yield ro
        ro.chmod(0o755)
        return
    mounted = subprocess.run(["mount", "-t", "tmpfs", "-o", "ro,size=1m", "tmpfs", str(ro)],
                             capture_output=True, text=True)
    if mounted.returncode != 0:
        pytest.skip(f"running as root and cannot mount a read-only tmpfs: {mounted.stderr.strip()}")
    try:
        yield ro
    finally:
        subprocess.run(["umount", str(ro)], check=False)


def test_read_only_output_folder_is_refused_before_anything_runs(tmp_path, read_only_folder, capsys):
    cfg = _config(tmp_path)
    for out in (read_only_folder, read_only_folder / "new"):
        code = cli.main(["run", str(cfg), "--out", str(out), "--until", "intake"])
        err = capsys.readouterr().err
        assert code == 2 and "Traceback" not in err, err
        assert "read-only" in err and "--out" in err
        assert len([l for l in err.splitlines() if l.strip()]) == 1
        assert list(read_only_folder.iterdir()) == []
