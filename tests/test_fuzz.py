"""Property-based fuzzing of configurations, YAML text, molecule names and SMILES: chairqm answers with
a valid result or a clear ChairqmError (exit code 2, one message, no traceback) — never anything else.

Complements the fixed corpus in test_bad_input.py. The examples are derandomised so CI is repeatable;
run `HYPOTHESIS_PROFILE=chairqm-deep pytest tests/test_fuzz.py` for a longer random search.
"""

from __future__ import annotations

import contextlib
import io
import json
import os
import tempfile
from pathlib import Path
from unittest import mock

import pytest
import yaml
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from chairqm import cli
from chairqm import config as cq_config
from chairqm import molecule as cq_molecule
from chairqm.errors import ChairqmError

settings.register_profile("chairqm-ci", max_examples=200, deadline=None, derandomize=True,
                          suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])
settings.register_profile("chairqm-deep", max_examples=2000, deadline=None,
                          suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "chairqm-ci"))

NAME_PATTERN = cq_config.load_schema()["properties"]["molecules"]["items"]["properties"]["name"]["pattern"]

VALID_SMILES = ["CC1CCCCC1", "C1CCCCC1", "OC1CCCCC1", "C[C@H]1CC[C@@H](C)CC1", "CO[C@@H]1CCCCO1",
                "FC1CCCCC1", "CC1CCOCC1", "CN1CCCCC1", "C1COCCO1", "ClC1CCCCC1", "CC(C)(C)C1CCCCC1",
                "C[C@H]1CC[C@H](C2CC2)CC1", "N#CC1CCCCC1", "C1CCSCC1", "[O-]C1CCCCC1", "C[NH+]1CCCCC1"]
SMILES_ALPHABET = "CNOSFPIBrcl()[]=#@+-123456789%./\\H*:"

json_scalars = st.one_of(st.none(), st.booleans(), st.integers(-10**6, 10**6),
                         st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=12))
json_values = st.recursive(json_scalars, lambda kids: st.one_of(
    st.lists(kids, max_size=4), st.dictionaries(st.text(max_size=10), kids, max_size=4)), max_leaves=12)


@st.composite
def mutated_smiles(draw):
    """A valid SMILES with a few characters inserted, deleted or replaced."""
    s = list(draw(st.sampled_from(VALID_SMILES)))
    for _ in range(draw(st.integers(1, 3))):
        op = draw(st.sampled_from(["insert", "delete", "replace"]))
        i = draw(st.integers(0, max(len(s) - 1, 0)))
        c = draw(st.sampled_from(SMILES_ALPHABET))
        if op == "insert":
            s.insert(i, c)
        elif op == "delete" and len(s) > 1:
            del s[i]
        else:
            s[i] = c
    return "".join(s)


smiles_strings = st.one_of(st.sampled_from(VALID_SMILES), mutated_smiles(),
                           st.text(alphabet=SMILES_ALPHABET, max_size=24), st.text(max_size=8))

names = st.one_of(st.from_regex(NAME_PATTERN, fullmatch=True),
                  st.sampled_from(["..", ".", "../x", "/etc", "a/b", "a\\b", "-x", "x\x00y", "", " ", "é",
                                   "a" * 65, "C:", "~", "$HOME", "a b"]),
                  st.text(max_size=16))

files = st.sampled_from(["nothere.sdf", "../../etc/passwd", "/etc/passwd", "/dev/null", "bad.sdf",
                         "good.sdf", "m.xyz", "bad.xyz", ".", "", " ", "dir.sdf", "../good.sdf"])


@st.composite
def molecule_entries(draw):
    entry = {"name": draw(names)}
    kind = draw(st.sampled_from(["smiles", "file", "both", "neither", "junk"]))
    if kind in ("smiles", "both"):
        entry["smiles"] = draw(smiles_strings)
    if kind in ("file", "both"):
        entry["file"] = draw(files)
    if kind == "junk":
        entry[draw(st.sampled_from(["smile", "charge", "multiplicity", "note", "reference", "x"]))] = draw(json_values)
    for key, strat in (("charge", st.one_of(st.integers(-3, 3), json_scalars)),
                       ("multiplicity", st.one_of(st.integers(0, 4), json_scalars)),
                       ("note", st.text(max_size=10))):
        if draw(st.booleans()) and draw(st.booleans()):
            entry[key] = draw(strat)
    return entry


SETTING_VALUES = {
    "temperatures_k": st.one_of(st.lists(st.one_of(st.floats(-10, 3000), st.integers(-5, 2500)), max_size=3),
                                json_scalars),
    "solvent": st.one_of(st.none(), st.fixed_dictionaries(
        {"model": st.sampled_from(["alpb", "gbsa", "cosmo", "ALPB", ""]),
         "name": st.one_of(st.sampled_from(["water", "chloroform", "h2o", "waterr", "octanol", ""]),
                           st.text(alphabet="abcdefghijklmnopqrstuvwxyz0123456789-,", max_size=12))}),
        json_scalars),
    "engine": st.one_of(st.sampled_from(["tblite", "xtb-python", "orca", ""]), json_scalars),
    "method": st.one_of(st.sampled_from(["GFN2-xTB", "GFN1-xTB", "gfn2", "GFN0-xTB"]), json_scalars),
    "accuracy": st.one_of(st.floats(-1, 2000), json_scalars),
    "electronic_temperature_k": st.one_of(st.floats(-1, 60000), json_scalars),
    "enumerate_stereo": st.one_of(st.booleans(), json_scalars),
    "seeds": st.one_of(st.fixed_dictionaries({}, optional={
        "twist_boats": st.one_of(st.booleans(), json_scalars),
        "max_rotamers_per_form": st.one_of(st.integers(-2, 600), json_scalars)}), json_values),
    "optimize": st.one_of(st.fixed_dictionaries({}, optional={
        "fmax_ev_per_a": st.one_of(st.floats(-1, 1), json_scalars),
        "max_steps": st.one_of(st.integers(-5, 20000), json_scalars)}), json_values),
    "thermo": st.one_of(st.fixed_dictionaries({}, optional={
        "model": st.sampled_from(["qrrho", "rrho", "qrrho-s", "harmonic"]),
        "step_a": st.one_of(st.floats(-1, 1), json_scalars)}), json_values),
    "analysis": json_values,
    "bogus_key": json_values,
}


@st.composite
def configurations(draw):
    cfg = {}
    if draw(st.integers(0, 9)):
        cfg["molecules"] = draw(st.one_of(st.lists(molecule_entries(), min_size=0, max_size=3), json_values))
    if draw(st.booleans()):
        keys = draw(st.lists(st.sampled_from(sorted(SETTING_VALUES)), unique=True, max_size=4))
        cfg["settings"] = {k: draw(SETTING_VALUES[k]) for k in keys}
    if draw(st.booleans()):
        cfg[draw(st.sampled_from(["project", "schema_version", "setings", "molecule"]))] = draw(json_values)
    return cfg


PLAUSIBLE_SETTINGS = {
    "temperatures_k": st.one_of(st.lists(st.sampled_from([150.0, 298.15, 310, 1e-3, 2000]), min_size=1, max_size=3),
                                st.lists(st.sampled_from([0, -1, 2001, 298.15]), max_size=2)),
    "solvent": st.one_of(st.none(), st.fixed_dictionaries({"model": st.sampled_from(["alpb", "gbsa"]),
                                                          "name": st.sampled_from(["water", "chcl3", "waterr"])})),
    "engine": st.sampled_from(["tblite", "xtb-python"]),
    "method": st.sampled_from(["GFN2-xTB", "GFN1-xTB"]),
    "enumerate_stereo": st.booleans(),
    "seeds": st.fixed_dictionaries({}, optional={"twist_boats": st.booleans()}),
    "analysis": st.fixed_dictionaries({}, optional={"reference_groups": st.booleans()}),
}


@st.composite
def plausible_configurations(draw):
    """Mostly well-formed configurations, so that the fuzz also reaches perception and engine checks."""
    mols = []
    for i in range(draw(st.integers(1, 3))):
        entry = {"name": draw(st.one_of(st.from_regex(NAME_PATTERN, fullmatch=True), st.just(f"m{i}")))}
        if draw(st.integers(0, 4)):
            entry["smiles"] = draw(st.sampled_from(VALID_SMILES) if draw(st.integers(0, 2)) else mutated_smiles())
        else:
            entry["file"] = draw(files)
        mols.append(entry)
    keys = draw(st.lists(st.sampled_from(sorted(PLAUSIBLE_SETTINGS)), unique=True, max_size=4))
    return {"molecules": mols, "settings": {k: draw(PLAUSIBLE_SETTINGS[k]) for k in keys}}


def _support_files(folder: Path) -> None:
    from rdkit import Chem
    from rdkit.Chem import AllChem
    m = Chem.AddHs(Chem.MolFromSmiles("CC1CCCCC1"))
    AllChem.EmbedMolecule(m, randomSeed=3)
    (folder / "good.sdf").write_text(Chem.MolToMolBlock(m))
    (folder / "m.xyz").write_text(Chem.MolToXYZBlock(m))
    (folder / "bad.sdf").write_text("not\na molfile\n")
    (folder / "bad.xyz").write_text("3\n\nC 0 0\n")
    (folder / "dir.sdf").mkdir()


def _check(path: Path) -> tuple[int, str]:
    err, out = io.StringIO(), io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(out):
        code = cli.main(["check", str(path)])
    return code, err.getvalue()


@pytest.fixture(scope="module")
def workdir():
    with tempfile.TemporaryDirectory() as d:
        folder = Path(d) / "project"
        folder.mkdir()
        _support_files(folder)
        yield folder


def _listing(folder: Path) -> list[str]:
    return sorted(str(p.relative_to(folder)) for p in folder.rglob("*"))


@given(cfg=st.one_of(configurations(), plausible_configurations()))
def test_check_on_random_configurations(cfg, workdir):
    path = workdir / "fuzz.yaml"
    path.write_text(yaml.safe_dump(cfg, allow_unicode=True))
    before = _listing(workdir)
    code, err = _check(path)          # any exception other than ChairqmError escapes and fails the test
    event(f"exit {code}")
    assert code in (0, 2), err
    assert "Traceback" not in err
    if code == 2:
        assert err.startswith("chairqm: error: ") and err.strip()
    assert _listing(workdir) == before, "`chairqm check` wrote files"


YAML_ALPHABET = st.sampled_from(list("abcmolesuitngs:-_ []{},'\"!&*|>#%@`?\t\n ") +
                                ["molecules", "settings", "name", "smiles", "!!python/object/apply:os.system",
                                 "!!binary", "&a", "*a", "<<", "\n  - ", ": ", "CC1CCCCC1", "~", "null", "1e9"])


@given(text=st.one_of(st.lists(YAML_ALPHABET, max_size=30).map("".join), st.text(max_size=60)))
def test_check_on_random_yaml_text(text, workdir):
    path = workdir / "fuzz-text.yaml"
    path.write_bytes(text.encode("utf-8", errors="replace"))
    code, err = _check(path)
    event(f"exit {code}")
    assert code in (0, 2), err
    assert "Traceback" not in err


@given(obj=st.one_of(json_values, configurations()))
def test_validate_returns_a_config_or_raises_chairqm_error(obj):
    try:
        out = cq_config.validate(obj)
    except ChairqmError as exc:
        event("ChairqmError")
        assert str(exc).strip()
        return
    event("valid")
    assert isinstance(out, dict) and "settings" in out and "molecules" in out


@given(smiles=smiles_strings, enumerate_stereo=st.booleans())
def test_perceive_returns_molecules_or_raises_chairqm_error(smiles, enumerate_stereo):
    try:
        found = cq_molecule.perceive({"name": "fuzz", "smiles": smiles}, ".", {"enumerate_stereo": enumerate_stereo})
    except ChairqmError as exc:
        event("ChairqmError")
        assert "fuzz" in str(exc), f"the message does not name the molecule: {exc}"
        return
    event(f"perceived ({len(found)} isomer(s))")
    assert found
    for p in found:
        assert len(p.ring) == 6 and p.name.startswith("fuzz")
        json.loads(p.to_json())          # the record the intake stage writes round-trips


@given(name=names)
def test_an_accepted_name_is_one_safe_folder_and_a_valid_stage_argument(name):
    """Whatever name the schema accepts becomes exactly one folder inside the output folder, and the
    stage command line the rules build (`--molecule NAME`) reads it back unchanged."""
    from chairqm import stages
    from chairqm.stages import __main__ as runner
    try:
        cq_config.validate({"molecules": [{"name": name, "smiles": "CC1CCCCC1"}]})
    except ChairqmError:
        event("rejected")
        return
    event("accepted")
    out = Path("/nonexistent/out")
    assert Path(name).name == name and name not in (".", "..") and "/" not in name and "\\" not in name
    assert os.path.normpath(out / name) == str(out / name)
    assert (out / name).parent == out
    seen = {}

    def fake_stage(cfg, plan, molecule, threads=1):
        seen["molecule"] = molecule

    with mock.patch.object(runner, "context", return_value=({}, None)), \
            mock.patch.object(stages.get("intake").module, "run", fake_stage), \
            contextlib.redirect_stderr(io.StringIO()) as err:
        try:
            code = stages.main(["intake", "--config", "c.yaml", "--molecule", name])
        except SystemExit as exc:          # argparse refuses the argument
            code = exc.code
    assert code == 0 and seen.get("molecule") == name, (
        f"the schema accepts molecule name {name!r}, but the stage command line "
        f"`python -m chairqm.stages intake --molecule {name}` does not: {err.getvalue().strip()}")


def test_yaml_python_tag_is_never_constructed(tmp_path):
    marker = tmp_path / "ran"
    path = tmp_path / "evil.yaml"
    for text in (f"molecules: !!python/object/apply:os.system ['touch {marker}']\n",
                 f"!!python/object/new:os.system ['touch {marker}']\n",
                 "molecules: [{name: a, smiles: !!python/name:os.getcwd ''}]\n"):
        path.write_text(text)
        with pytest.raises(ChairqmError, match="not valid YAML"):
            cq_config.load(path)
        assert _check(path)[0] == 2
    assert not marker.exists()
