"""Failures stay local: a run in which every molecule fails still writes summary.csv and the report with
each failure and its reason; `chairqm run --skip-invalid` runs the valid molecules of a configuration and
lists the refused ones in summary.csv, while `chairqm check` still refuses (exit 2); a stopped workflow
names the log that holds the error."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path
from types import SimpleNamespace

import pandas as pd
import pytest
import yaml

from chairqm import api, cli
from chairqm.errors import ChairqmError

PY = sys.executable
MIXED = [
    {"name": "chx", "smiles": "C1CCCCC1"},
    {"name": "typo", "smiles": "C1CC(C"},                       # unbalanced parenthesis
    {"name": "CHX", "smiles": "C1CCCCC1"},                      # same folder as chx on a case-insensitive disk
    {"name": "keytypo", "smile": "CC1CCCCC1"},                  # misspelt key
    {"name": "benzene", "smiles": "c1ccccc1"},                  # no saturated ring
]
NO_TWIST_BOATS = {"seeds": {"twist_boats": False}}


def env(**extra):
    e = {k: v for k, v in os.environ.items() if k not in ("CHAIRQM_FAULTS", "CHAIRQM_VERBOSE", "CHAIRQM_CALIBRATION")}
    e["OMP_NUM_THREADS"] = "1"
    e.update(extra)
    return e


def write(path: Path, molecules, settings=None) -> Path:
    path.write_text(yaml.safe_dump({"molecules": molecules, "settings": settings or {}}, sort_keys=False))
    return path


# ------------------------------------------------------------------------------ fast: the parts

def test_screen_splits_valid_from_refused_in_configuration_order(tmp_path):
    cfg = write(tmp_path / "c.yaml", MIXED)
    valid, refused = api.screen(cfg)
    assert [m["name"] for m in valid] == ["chx"]
    assert [r["name"] for r in refused] == ["typo", "CHX", "keytypo", "benzene"]
    why = {r["name"]: r["reason"] for r in refused}
    assert "cannot parse SMILES" in why["typo"]
    assert "used twice" in why["CHX"]
    assert "unknown key 'smile' at molecules[3]" in why["keytypo"]
    assert "aromatic" in why["benzene"]
    # the reason does not repeat the molecule's name (summary.csv has a molecule column)
    assert not any(r["reason"].startswith(r["name"] + ":") for r in refused)


def test_check_still_refuses_what_skip_invalid_would_skip(tmp_path, capsys):
    cfg = write(tmp_path / "c.yaml", MIXED)
    assert cli.main(["check", str(cfg)]) == 2
    assert "Traceback" not in capsys.readouterr().err


def test_screen_with_nothing_valid_refuses_the_run(tmp_path):
    cfg = write(tmp_path / "c.yaml", MIXED[1:2] + MIXED[4:])
    with pytest.raises(ChairqmError) as e:
        api.screen(cfg)
    lines = str(e.value).splitlines()
    assert len(lines) == 2 and lines[0].startswith("typo: ") and lines[1].startswith("benzene: ")


def test_screen_keeps_whole_configuration_problems_fatal(tmp_path):
    cfg = write(tmp_path / "c.yaml", MIXED, settings={"temperatures_k": "warm"})
    with pytest.raises(ChairqmError, match="temperatures_k"):
        api.screen(cfg)


def test_valid_config_runs_only_valid_molecules_with_absolute_files(tmp_path):
    (tmp_path / "in").mkdir()
    (tmp_path / "in" / "m.xyz").write_text("1\n\nC 0 0 0\n")
    cfg = write(tmp_path / "in" / "c.yaml", [{"name": "f", "file": "m.xyz", "charge": 0}] + MIXED[:2])
    out = tmp_path / "out"
    path = api._valid_config(cfg, out, [{"name": "f", "file": "m.xyz", "charge": 0}, MIXED[0]],
                             [{"name": "typo", "reason": "cannot parse"}])
    d = yaml.safe_load(path.read_text())
    assert [m["name"] for m in d["molecules"]] == ["f", "chx"]
    assert d["molecules"][0]["file"] == str((tmp_path / "in" / "m.xyz").resolve())
    assert d["refused"] == [{"name": "typo", "reason": "cannot parse"}]
    from chairqm import config as cq_config
    assert cq_config.load(path)["refused"] == d["refused"]        # the schema accepts what chairqm adds


def test_report_lists_refused_molecules_as_failed_rows(tmp_path, monkeypatch):
    from chairqm.stages import report, tables
    monkeypatch.chdir(tmp_path)
    cfg = {"settings": {"temperatures_k": [250.0, 298.15]}, "refused": [{"name": "typo", "reason": "cannot parse"}]}
    rows = report.summary_rows(cfg, SimpleNamespace(molecules=[]))
    df = tables.frame(rows, tables.summary(cfg["settings"]))
    assert list(df["molecule"]) == ["typo", "typo"]
    assert list(df["status"]) == ["failed", "failed"]
    assert all("cannot parse" in r for r in df["reason"])


def test_empty_conformer_database_is_a_valid_database(tmp_path, monkeypatch):
    """No molecule yielded a conformer: conformers.db still exists and opens with no rows."""
    from ase.db import connect

    from chairqm.stages import report, tables
    monkeypatch.chdir(tmp_path)
    for name in ("a", "b"):
        (tmp_path / name).mkdir()
        tables.frame([], tables.conformers({})).to_csv(tmp_path / name / "conformers.csv", index=False)
    report.write_db(SimpleNamespace(molecules=[SimpleNamespace(name="a"), SimpleNamespace(name="b")]))
    assert (tmp_path / "conformers.db").is_file()
    assert not list(tmp_path.glob(".*.part"))
    assert connect(str(tmp_path / "conformers.db")).count() == 0


SNAKEMAKE_ERROR = """\
Error in rule report:
    message: None
    jobid: 1
    output: summary.csv, provenance.json, conformers.db, report.html
    log: logs/report.log (check log file(s) for error details)
    shell:
        python -m chairqm.stages report 2> logs/report.log
        (command exited with non-zero exit code)
Error in rule minima:
    jobid: 4
    log: mch/logs/minima.log (check log file(s) for error details)
Exiting because a job execution failed. Look above for error messages
"""


def test_stopped_workflow_names_the_failed_jobs_logs(tmp_path):
    """Snakemake 9's error block (copied from a run) names each failed job's log; the message passes the
    report's own log on, not a molecule folder."""
    log = tmp_path / ".chairqm" / "snakemake.log"
    log.parent.mkdir()
    log.write_text(SNAKEMAKE_ERROR)
    (tmp_path / "logs").mkdir()
    (tmp_path / "logs" / "report.log").write_text("Traceback ...\nRuntimeError: boom\n")
    where = api._where_logs(tmp_path, log)
    assert str(tmp_path / "logs" / "report.log") in where and "RuntimeError: boom" in where
    assert str(tmp_path / "mch" / "logs" / "minima.log") in where


def test_output_folder_that_is_a_file_is_refused(tmp_path):
    f = tmp_path / "taken"
    f.write_text("x")
    with pytest.raises(ChairqmError, match="is a file"):
        api._output_folder(f)
    with pytest.raises(ChairqmError, match="which is a file"):
        api._output_folder(f / "sub")


# --------------------------------------------------------------------------- slow: whole runs

def run(cfg, out, *args, extra_env=None):
    return subprocess.run([PY, "-m", "chairqm.cli", "run", str(cfg), "--out", str(out), "--cores", "1", *args],
                          capture_output=True, text=True, env=env(**(extra_env or {})), timeout=900)


@pytest.mark.slow
def test_every_molecule_failing_still_gives_summary_and_report(tmp_path):
    cfg = write(tmp_path / "c.yaml", [{"name": "chx", "smiles": "C1CCCCC1"}, {"name": "mch", "smiles": "CC1CCCCC1"}],
                NO_TWIST_BOATS)
    out = tmp_path / "out"
    faults = {"crash": ["chx/minima"], "scf": ["mch/chair-1", "mch/chair-2"]}
    proc = run(cfg, out, extra_env={"CHAIRQM_FAULTS": json.dumps(faults)})
    assert proc.returncode == 1, proc.stderr[-3000:]
    assert "Traceback" not in proc.stderr
    summary = pd.read_csv(out / "summary.csv", keep_default_na=False)
    assert set(summary["molecule"]) == {"chx", "mch"} and set(summary["status"]) == {"failed"}
    reasons = dict(zip(summary["molecule"], summary["reason"]))
    assert "injected fault" in reasons["chx"]
    assert reasons["mch"]
    page = (out / "report.html").read_text()
    assert "injected fault" in page
    from ase.db import connect
    assert connect(str(out / "conformers.db")).count() == 0
    assert "chx, mch" in proc.stderr


@pytest.mark.slow
def test_a_broken_report_view_keeps_the_summary(tmp_path):
    cfg = write(tmp_path / "c.yaml", [{"name": "chx", "smiles": "C1CCCCC1"}], NO_TWIST_BOATS)
    out = tmp_path / "out"
    faults = {"crash": ["report/report.html", "report/conformers.db"]}
    proc = run(cfg, out, extra_env={"CHAIRQM_FAULTS": json.dumps(faults)})
    assert proc.returncode == 1, proc.stderr[-3000:]
    summary = pd.read_csv(out / "summary.csv", keep_default_na=False)
    assert list(summary["status"]) == ["ok"]
    page = (out / "report.html").read_text()
    assert "could not be built" in page and "<td>chx</td>" in page and page.rstrip().endswith("</html>")
    assert len(json.loads((out / "provenance.json").read_text())["report_problems"]) == 2
    assert "report.html could not be built" in proc.stderr and str(out / "logs" / "report.log") in proc.stderr


@pytest.mark.slow
def test_skip_invalid_runs_the_valid_molecules_and_lists_the_refused(tmp_path):
    cfg = write(tmp_path / "c.yaml", MIXED, NO_TWIST_BOATS)
    plain = run(cfg, tmp_path / "plain")
    assert plain.returncode == 2 and "Traceback" not in plain.stderr
    out = tmp_path / "out"
    proc = run(cfg, out, "--skip-invalid")
    assert proc.returncode == 1, proc.stderr[-3000:]
    summary = pd.read_csv(out / "summary.csv", keep_default_na=False)
    assert list(summary["molecule"]) == ["chx", "typo", "CHX", "keytypo", "benzene"]
    assert list(summary["status"]) == ["ok", "failed", "failed", "failed", "failed"]
    assert "cannot parse SMILES" in summary.loc[1, "reason"]
    for name in ("typo", "keytypo", "benzene"):
        assert f"chairqm: skipping {name}:" in proc.stderr
        assert not (out / name).exists()
    # the rerun of the same command computes nothing again
    again = run(cfg, out, "--skip-invalid")
    assert again.returncode == 1 and "nothing to redo" in again.stdout


@pytest.mark.slow
def test_api_run_skip_invalid(tmp_path):
    out = tmp_path / "out"
    cfg = {"molecules": MIXED[:2], "settings": NO_TWIST_BOATS}
    with pytest.raises(ChairqmError, match="cannot parse SMILES"):
        api.run(cfg, out, cores=1, progress=False)
    lines = []
    res = api.run(cfg, out, cores=1, progress=lines.append, skip_invalid=True)
    assert res.failed == ["typo"]
    assert any(line.startswith("chairqm: skipping typo:") for line in lines)
