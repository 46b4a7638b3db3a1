"""Reliability of `chairqm run`: interrupted runs resume without loss or recomputation, fresh runs are
identical, reruns happen exactly when a result-relevant setting changes, faults stay isolated and
reported, nothing escapes the output folder, and two runs share one machine.

What is compared is fixed by the output contract (DESIGN.md, "Contracts"), not by what the code prints:
the per-molecule tables and SDF, summary.csv, provenance.json, report.html and conformers.db. Only
fields that measure time are set aside (provenance `started`, `finished`, `wall_seconds`,
`engine_seconds`; the `engine_seconds` column of minima.csv; time stamps and durations on the HTML
page; the ASE database's row creation time and user). Everything else must match byte for byte:
GFN2-xTB single-threaded is deterministic and a resumed Hessian is assembled from the same cached
displacement forces, so an exact comparison is the honest one (its failure message shows the
first differing value).

Test molecules are the cheapest that exercise each path: methylcyclohexane without twist-boats
(two chairs), cyclohexane, fluorocyclohexane, 4-methyltetrahydropyran. Set CHAIRQM_RELIABILITY_LOG to a
file name to record what the tests observed (kill points, files checked, timings) for
docs/reliability.md.
"""

from __future__ import annotations

import contextlib
import copy
import glob
import hashlib
import json
import os
import re
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

from chairqm import cli

PY = sys.executable
MCH = {"name": "mch", "smiles": "CC1CCCCC1"}
NO_TWIST_BOATS = {"seeds": {"twist_boats": False}}
MOLECULE_FILES = ["substituents.csv", "seeds.csv", "minima.csv", "thermo.csv", "families.csv",
                  "conformers.csv", "conformers.sdf"]
RUN_FILES = ["summary.csv", "provenance.json", "report.html", "conformers.db"]
TIMING_PROVENANCE = {"started", "finished", "wall_seconds", "engine_seconds"}
STAGE_RULES = {"intake", "seeds", "minima", "thermo", "ensemble", "report"}


# ----------------------------------------------------------------------------------------- helpers

def observe(key, value):
    """Append an observation to $CHAIRQM_RELIABILITY_LOG (JSON lines), for docs/reliability.md."""
    log = os.environ.get("CHAIRQM_RELIABILITY_LOG")
    if log:
        with open(log, "a", encoding="utf-8") as fh:
            fh.write(json.dumps({"key": key, "value": value}, default=str) + "\n")


def clean_env(**extra):
    env = {k: v for k, v in os.environ.items()
           if k not in ("CHAIRQM_FAULTS", "CHAIRQM_VERBOSE", "CHAIRQM_CALIBRATION", "SNAKEMAKE_PROFILE", "PYTHONPATH")}
    env["OMP_NUM_THREADS"] = "1"
    env.update(extra)
    return env


def write_config(path, molecules, settings=None, project="reliability test"):
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    cfg = {"project": project, "molecules": molecules, "settings": copy.deepcopy(settings or {})}
    path.write_text(yaml.safe_dump(cfg, sort_keys=False))
    return path


def run_cmd(cfg, out, *args, cores=1, extra=()):
    cmd = [PY, "-m", "chairqm.cli", "run", str(cfg), "--out", str(out), "--cores", str(cores), *args]
    return cmd + (["--", *extra] if extra else [])


def chairqm_run(cfg, out, *args, cores=1, extra=(), env=None, timeout=900):
    t0 = time.time()
    proc = subprocess.run(run_cmd(cfg, out, *args, cores=cores, extra=extra), capture_output=True, text=True,
                          env=env or clean_env(), timeout=timeout)
    proc.seconds = time.time() - t0
    return proc


def tail(text, n=3000):
    return text[-n:]


def deep_merge(base, change):
    out = copy.deepcopy(base)
    for k, v in change.items():
        out[k] = deep_merge(out.get(k, {}), v) if isinstance(v, dict) and isinstance(out.get(k), dict) else v
    return out


# --------------------------------------------------------------------- comparing two output folders

_TOKENS = re.compile(r"([\s,;=<>\"'()\[\]{}|]+)")


def _first_difference(a: str, b: str, what: str) -> str:
    ta, tb = _TOKENS.split(a), _TOKENS.split(b)
    for i, (x, y) in enumerate(zip(ta, tb)):
        if x != y:
            try:
                rel = abs(float(x) - float(y)) / max(abs(float(x)), abs(float(y)), 1e-300)
                how = f" (relative difference {rel:.2e})"
            except ValueError:
                how = ""
            ctx = "".join(ta[max(0, i - 12):i])
            return f"{what}: first difference after ...{ctx!r}: {x!r} vs {y!r}{how}"
    return f"{what}: one text is a prefix of the other ({len(ta)} vs {len(tb)} tokens)"


def _same_text(a: str, b: str, what: str):
    assert a == b, _first_difference(a, b, what)


def _csv_text(path: Path) -> str:
    df = pd.read_csv(path, dtype=str, keep_default_na=False)
    df = df[[c for c in df.columns if "seconds" not in c]]          # timing columns (minima.csv)
    return df.to_csv(index=False)


_MASKS = [
    (re.compile(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d(?:\.\d+)?(?:[+-]\d\d:?\d\d|Z)?"), "<time>"),
    (re.compile(r"\b\d+(?:\.\d+)?\s?s\b"), "<seconds>"),
    (re.compile(r"\b\d+(?:\.\d+)?\s?% of the wall time"), "<share> of the wall time"),
]


# Work accounting: a record finished by a resumed job counts the gradients that job computed, so a
# Hessian half cached before a kill counts fewer. Compared only between fresh runs.
WORK_PROVENANCE = {"gradient_calls"}
_WORK_MASK = (re.compile(r"(gradient_calls</th><td>)\d+"), r"\1<count>")


def _report_text(path: Path, resumed=False) -> str:
    text = path.read_text(encoding="utf-8")
    for rx, repl in _MASKS + ([_WORK_MASK] if resumed else []):
        text = rx.sub(repl, text)
    return text


def _provenance(path: Path, resumed=False) -> dict:
    d = json.loads(path.read_text())
    skip = TIMING_PROVENANCE | (WORK_PROVENANCE if resumed else set())
    return {k: v for k, v in d.items() if k not in skip}


def _db_rows(path: Path) -> list:
    from ase.db import connect
    db = connect(str(path), type="db")
    rows = [(json.dumps(r.key_value_pairs, sort_keys=True), r.numbers.tolist(), r.positions.tolist())
            for r in db.select()]
    return sorted(rows)


def contract_paths(out: Path, molecules) -> list[str]:
    return RUN_FILES + [f"{m}/{f}" for m in molecules for f in MOLECULE_FILES]


def assert_same_results(out_a: Path, out_b: Path, molecules, resumed=False):
    """The contract files of two output folders agree (timing fields aside; work accounting too when
    `out_b` was resumed after kills). Returns the number of files compared."""
    n = 0
    for rel in contract_paths(out_a, molecules):
        a, b = out_a / rel, out_b / rel
        assert a.is_file(), f"{a} missing"
        assert b.is_file(), f"{b} missing"
        if rel.endswith(".csv"):
            _same_text(_csv_text(a), _csv_text(b), rel)
        elif rel == "provenance.json":
            pa, pb = _provenance(a, resumed), _provenance(b, resumed)
            assert pa == pb, _first_difference(json.dumps(pa, sort_keys=True), json.dumps(pb, sort_keys=True), rel)
        elif rel == "report.html":
            _same_text(_report_text(a, resumed), _report_text(b, resumed), rel)
        elif rel == "conformers.db":
            ra, rb = _db_rows(a), _db_rows(b)
            assert ra == rb, _first_difference(repr(ra), repr(rb), rel)
        else:
            _same_text(a.read_text(), b.read_text(), rel)
        n += 1
    return n


# ------------------------------------------------------------------- the uninterrupted reference run

@pytest.fixture(scope="module")
def base(tmp_path_factory):
    """Configuration shared by the reference run and every run that is compared with it."""
    root = tmp_path_factory.mktemp("reliability")
    cfg = write_config(root / "mch.yaml", [MCH], NO_TWIST_BOATS)
    return root, cfg


@pytest.fixture(scope="module")
def reference(base):
    root, cfg = base
    out = root / "reference"
    proc = chairqm_run(cfg, out)
    assert proc.returncode == 0, tail(proc.stderr)
    observe("reference_run_seconds", round(proc.seconds, 1))
    return out


@pytest.fixture(scope="module")
def concurrent_runs(base, tmp_path_factory):
    """Two runs started at the same moment on this machine, different configurations and output
    folders: methylcyclohexane (same configuration file as the reference run) and cyclohexane."""
    root, cfg = base
    chx_cfg = write_config(root / "chx.yaml", [{"name": "chx", "smiles": "C1CCCCC1"}], NO_TWIST_BOATS)
    outs = {"mch": root / "concurrent-mch", "chx": root / "concurrent-chx"}
    cfgs = {"mch": cfg, "chx": chx_cfg}
    procs, logs = {}, {}
    t0 = time.time()
    try:
        for k in outs:
            logs[k] = open(root / f"concurrent-{k}.log", "w+")
            procs[k] = subprocess.Popen(run_cmd(cfgs[k], outs[k]), stdout=logs[k], stderr=subprocess.STDOUT,
                                        env=clean_env(), start_new_session=True)
        codes = {k: p.wait(timeout=900) for k, p in procs.items()}
    finally:
        for p in procs.values():
            if p.poll() is None:
                os.killpg(p.pid, signal.SIGKILL)
                p.wait()
    text = {}
    for k, fh in logs.items():
        fh.seek(0)
        text[k] = fh.read()
        fh.close()
    observe("concurrent_runs_seconds", round(time.time() - t0, 1))
    return outs, codes, text


# ------------------------------------------------------------------------------- 2. determinism

@pytest.mark.slow
def test_two_fresh_runs_give_identical_contract_files(reference, concurrent_runs):
    outs, codes, text = concurrent_runs
    assert codes["mch"] == 0, tail(text["mch"])
    n = assert_same_results(reference, outs["mch"], ["mch"])
    observe("determinism_files_compared", n)


# ------------------------------------------------------------------------- 6. two runs at once

@pytest.mark.slow
def test_two_runs_with_different_output_folders_at_once(concurrent_runs):
    outs, codes, text = concurrent_runs
    assert codes == {"mch": 0, "chx": 0}, {k: tail(v, 1500) for k, v in text.items()}
    for mol, out in outs.items():
        summary = pd.read_csv(out / "summary.csv", keep_default_na=False)
        assert list(summary["molecule"]) == [mol]
        assert list(summary["status"]) == ["ok"]
        other = "chx" if mol == "mch" else "mch"
        assert not (out / other).exists(), f"{out} holds the other run's molecule"
        assert json.loads((out / "provenance.json").read_text())["molecules"] == [mol]
    # cyclohexane without twist-boats: a single conformer, the chair (its two chairs are one structure;
    # common practice)
    conf = pd.read_csv(outs["chx"] / "chx" / "conformers.csv", keep_default_na=False)
    assert list(conf["status"]) == ["ok"] and float(conf["population"].iloc[0]) == pytest.approx(1.0)


# ------------------------------------------------------------------------ 1. kill and resume

# (what, a file that must have appeared before the kill, the output of the interrupted stage that must
# not exist yet — else the kill missed the stage)
# not exist yet — else the kill missed the stage). With --cores 1 a stage works through its conformers
# in order, so the second point falls after c001's thermo record and inside c002's Hessian.
KILL_POINTS = [
    ("minima: first seed optimised, second running", "mch/work/opt/*.json", "mch/minima.json"),
    ("thermo: c001 finished, c002's Hessian half done", "mch/work/freq/c002-*/round*/disp-*.npz",
     "mch/thermo.json"),
    ("report: job started", "logs/report.log", "report.html"),
]
RECORD_GLOBS = ["mch/work/opt/*.json", "mch/work/opt/*.xyz", "mch/work/thermo/*.json", "mch/work/thermo/*.xyz",
                "mch/work/freq/*/round*/disp-*.npz"]


def _records(out: Path) -> dict:
    files = sorted({p for g in RECORD_GLOBS for p in glob.glob(str(out / g))})
    return {p: (os.stat(p).st_ino, os.stat(p).st_mtime_ns) for p in files}


def same_records(out: Path, kept: dict, message: str) -> dict:
    """The records in `out` now (`_records`), after checking that every one in `kept` is still the very
    same file (inode and modification time); a rewritten one fails with `message: path`."""
    recs = _records(out)
    for path, stat in kept.items():
        assert recs.get(path) == stat, f"{message}: {path}"
    return recs


def _temporaries(out: Path) -> list[str]:
    return sorted(str(p.relative_to(out)) for p in out.rglob("*")
                  if p.is_file() and (p.name.endswith(".part") or p.name.endswith(".tmp")))


def _check_readable(out: Path) -> int:
    """Every result or record file present after a kill is complete: it parses. Returns the count."""
    from ase.io import read
    from rdkit import Chem
    n = 0
    for p in out.rglob("*"):
        if not p.is_file() or ".snakemake" in p.parts or "logs" in p.parts or p.name.endswith(".part"):
            continue
        try:
            if p.suffix == ".json":
                json.loads(p.read_text())
            elif p.suffix == ".csv":
                pd.read_csv(p)
            elif p.suffix == ".npz":
                with np.load(p) as z:
                    [z[k] for k in z.files]
            elif p.suffix == ".xyz":
                read(str(p), format="extxyz")
            elif p.suffix == ".sdf":
                assert all(m is not None for m in Chem.SDMolSupplier(str(p), removeHs=False))
            elif p.suffix == ".html":
                assert p.read_text().rstrip().endswith("</html>")
            elif p.suffix == ".db":
                _db_rows(p)
            else:
                continue
        except Exception as exc:                 # pragma: no cover - the failure is the finding
            raise AssertionError(f"half-written file after a kill: {p} ({type(exc).__name__}: {exc})")
        n += 1
    return n


def _alive(marker: str) -> list[str]:
    """Processes whose command line mentions `marker` (this test's own configuration path)."""
    found = []
    for d in os.listdir("/proc"):
        if d.isdigit() and int(d) != os.getpid():
            try:
                cl = Path("/proc", d, "cmdline").read_bytes().replace(b"\0", b" ").decode(errors="replace")
            except OSError:
                continue
            if marker in cl:
                found.append(f"{d}: {cl[:120]}")
    return found


STALE_LOCK = ("after a kill or a signal the same `chairqm run` command refuses to resume: Snakemake's lock in "
              "{out}/.snakemake/locks survives the interruption and `chairqm run` does not clear it")


def _sigint_as_in_a_terminal():
    """In the child before exec: SIGINT back to its default. A command run in a terminal gets Ctrl-C; a
    test suite started in the background inherits SIGINT ignored (POSIX shells ignore it for background
    jobs), and Python then installs no KeyboardInterrupt handler, so the command under test would not
    see the SIGINT the signal test sends."""
    signal.signal(signal.SIGINT, signal.SIG_DFL)


@contextlib.contextmanager
def running_until(cmd, out: Path, pattern: str, log: Path, timeout=600, env=None):
    """Start `cmd` in its own process group (its output appended to `log`; environment `env`, by default
    `clean_env()`) and yield the process as soon as `pattern` exists under `out`. A run that ends first
    (a stale lock named as such) or a pattern that does not appear within `timeout` s fails the test; on
    leaving, a group still running is SIGKILLed and the process is reaped."""
    with open(log, "a") as fh:
        p = subprocess.Popen(cmd, stdout=fh, stderr=subprocess.STDOUT, env=env or clean_env(),
                             start_new_session=True, preexec_fn=_sigint_as_in_a_terminal)
    t0 = time.time()
    try:
        while not glob.glob(str(out / pattern)):
            if p.poll() is not None:
                assert "LockException" not in log.read_text(), STALE_LOCK.format(out=out)
                raise AssertionError(f"the run ended (exit {p.returncode}) before '{pattern}' appeared; "
                                     f"log: {tail(log.read_text(), 1500)}")
            if time.time() - t0 > timeout:
                raise AssertionError(f"'{pattern}' did not appear within {timeout} s")
            time.sleep(0.005)
        yield p
    finally:
        if p.poll() is None:
            os.killpg(p.pid, signal.SIGKILL)
        p.wait()


#: The report job waits 3 s before it computes (chairqm.stages.faults "pause"), so that the kill point
#: "report: job started" is hit however slowly a loaded machine polls: with warm starts the report of one
#: small molecule takes under a second.
PAUSE_REPORT = {"CHAIRQM_FAULTS": '{"pause": ["report"]}'}


def _run_until(cmd, out: Path, pattern: str, log: Path, timeout=600):
    """Start `cmd` in its own process group; SIGKILL the whole group as soon as `pattern` exists; return
    the seconds from the start to the kill."""
    t0 = time.time()
    with running_until(cmd, out, pattern, log, timeout, env=clean_env(**PAUSE_REPORT)):
        pass
    return time.time() - t0


def resume_and_compare(cfg, out: Path, reference: Path, kept: dict, interruption: str) -> int:
    """Rerun the interrupted command to its end: no stale lock, exit 0, no temporary file left, every
    record in `kept` (finished before `interruption`) the very same file, and contract files identical to
    the uninterrupted `reference` run. Returns the number of files compared."""
    final = chairqm_run(cfg, out)
    assert "LockException" not in final.stderr, STALE_LOCK.format(out=out)
    assert final.returncode == 0, tail(final.stderr)
    left = _temporaries(out)
    assert not left, f"temporary files survive the resumed run: {left}"
    same_records(out, kept, f"a record finished before {interruption} was recomputed")
    return assert_same_results(reference, out, ["mch"], resumed=True)


@pytest.mark.slow
def test_kill_and_resume_gives_the_uninterrupted_result(base, reference, tmp_path):
    root, cfg = base
    out = tmp_path / "killed"
    cmd = run_cmd(cfg, out)
    log = tmp_path / "killed.log"
    kept: dict[str, tuple] = {}
    seen = {"kills": [], "temporaries_left_by_kills": [], "planted": []}
    for what, pattern, not_yet in KILL_POINTS:
        seconds = _run_until(cmd, out, pattern, log)
        time.sleep(0.2)
        assert not _alive(str(cfg)), f"processes survived SIGKILL of the group: {_alive(str(cfg))}"
        assert not (out / not_yet).exists(), f"kill point '{what}' missed: {not_yet} already written"
        n_files = _check_readable(out)
        temps = _temporaries(out)
        # records that existed at an earlier kill must still be the very same files
        recs = same_records(out, kept, "finished record rewritten after kill")
        kept.update(recs)
        seen["kills"].append({"point": what, "after_s": round(seconds, 1), "files_checked": n_files,
                              "records_kept": len(recs)})
        seen["temporaries_left_by_kills"] += [t for t in temps if t not in seen["planted"]]
        if what.startswith("minima"):
            # what a kill between the temporary write and the rename leaves behind (fileio's names)
            for rel in ("mch/.minima.csv.k1ll3d.part", "mch/work/opt/.chair-2.json.k1ll3d.part"):
                (out / rel).write_text("half a record")
                seen["planted"].append(rel)
        # the next iteration reruns the same command and kills it again at the next point
    n = resume_and_compare(cfg, out, reference, kept, "a kill")
    # and the work: gradients computed by the jobs that finished the records, summed, are fewer than in
    # the uninterrupted run (displacements cached before a kill were not computed again)
    calls = [json.loads((o / "provenance.json").read_text())["gradient_calls"] for o in (reference, out)]
    assert calls[1] < calls[0], f"gradient calls: uninterrupted {calls[0]}, resumed {calls[1]}"
    seen.update(records_never_rewritten=len(kept), files_compared=n, gradient_calls=calls)
    observe("kill_and_resume", seen)


# ----------------------------------------------------------------------------- 3. rerun triggers

def _jobs_planned(proc) -> set[str]:
    """Rules in the dry run's job table (Snakemake prints 'Nothing to be done' when there are none)."""
    text = proc.stdout + proc.stderr
    assert proc.returncode == 0, tail(text)
    if "Nothing to be done" in text:
        return set()
    block = text.split("Job stats:", 1)[1]
    jobs = set(re.findall(r"^(\w+)\s+\d+\s*$", block.split("total", 1)[0], re.M))
    assert jobs, tail(text)
    return jobs & STAGE_RULES


@pytest.fixture(scope="module")
def finished_copy(reference, tmp_path_factory):
    """A copy of the reference folder (times kept) that the rerun tests may disturb."""
    dst = tmp_path_factory.mktemp("triggers") / "out"
    shutil.copytree(reference, dst, symlinks=True, copy_function=shutil.copy2)
    return dst


AFTER_MINIMA = {"minima", "thermo", "ensemble", "report"}
TRIGGERS = [
    # (case, settings change, rules that must rerun); expectations follow DESIGN.md's stage table:
    # a setting reruns the first stage that uses it and everything downstream of it.
    ("nothing changed", None, set()),
    ("same settings, defaults written out, another file",
     {"temperatures_k": [298.15], "engine": "tblite", "method": "GFN2-xTB", "solvent": None,
      "optimize": {"fmax_ev_per_a": 0.005}}, set()),
    ("temperature", {"temperatures_k": [250.0]}, {"thermo", "ensemble", "report"}),
    ("solvent", {"solvent": {"model": "alpb", "name": "water"}}, AFTER_MINIMA),
    ("engine", {"engine": "xtb-python"}, AFTER_MINIMA),
    ("method", {"method": "GFN1-xTB"}, AFTER_MINIMA),
    ("convergence", {"optimize": {"fmax_ev_per_a": 0.003}}, AFTER_MINIMA),
    ("analysis threshold", {"analysis": {"flag_threshold_kcal": 0.5}}, {"ensemble", "report"}),
]


NEW_VERSION = "new chairqm version"


@pytest.fixture(scope="module")
def planned_reruns(base, finished_copy, tmp_path_factory):
    """Dry runs (`chairqm run ... -- --dry-run`) of every case against the finished folder, two at a
    time; a dry run changes no result file."""
    from concurrent.futures import ThreadPoolExecutor
    root, cfg = base
    tmp = tmp_path_factory.mktemp("changed")
    jobs = {}
    for i, (case, change, _) in enumerate(TRIGGERS):
        c = cfg if change is None else write_config(tmp / f"changed-{i}.yaml", [MCH],
                                                    deep_merge(NO_TWIST_BOATS, change))
        jobs[case] = (c, clean_env())
    # A new installed version is simulated honestly for every Python process of the run (the command,
    # Snakemake and each job): a sitecustomize module on PYTHONPATH sets chairqm.__version__ before
    # anything else reads it, exactly as an upgraded package would present itself.
    site = tmp / "site"
    site.mkdir()
    (site / "sitecustomize.py").write_text("import chairqm\nchairqm.__version__ = '99.0.0+reliability-test'\n")
    jobs[NEW_VERSION] = (cfg, clean_env(PYTHONPATH=str(site)))
    with ThreadPoolExecutor(max_workers=2) as pool:
        futures = {case: pool.submit(chairqm_run, c, finished_copy, extra=["--dry-run"], env=env)
                   for case, (c, env) in jobs.items()}
        return {case: f.result() for case, f in futures.items()}


@pytest.mark.slow
@pytest.mark.parametrize("case,change,expected", TRIGGERS, ids=[t[0] for t in TRIGGERS])
def test_rerun_triggers(case, change, expected, planned_reruns):
    planned = _jobs_planned(planned_reruns[case])
    assert planned == expected, f"{case}: would rerun {sorted(planned)}, expected {sorted(expected)}"
    observe("trigger", {"case": case, "reruns": sorted(planned)})


@pytest.mark.slow
def test_new_chairqm_version_reruns_everything(planned_reruns):
    planned = _jobs_planned(planned_reruns[NEW_VERSION])
    assert planned == STAGE_RULES, f"would rerun {sorted(planned)}"
    observe("trigger", {"case": NEW_VERSION, "reruns": sorted(planned)})


@pytest.mark.slow
def test_a_new_calibration_reruns_only_the_report(base, finished_copy, tmp_path):
    """The report applies the calibration, so a changed calibration file must remake it (and nothing
    else); the same content in another file changes nothing."""
    from chairqm import calibration as cq_cal
    root, cfg = base
    cal = tmp_path / "calibration.json"
    cal.write_text(cq_cal.packaged_path().read_text())
    same = chairqm_run(cfg, finished_copy, extra=["--dry-run"], env=clean_env(CHAIRQM_CALIBRATION=str(cal)))
    assert _jobs_planned(same) == set()
    cal.write_text("[]\n")
    changed = chairqm_run(cfg, finished_copy, extra=["--dry-run"], env=clean_env(CHAIRQM_CALIBRATION=str(cal)))
    assert _jobs_planned(changed) == {"report"}


@pytest.mark.slow
def test_temperature_change_reuses_optimisations_and_hessians(base, finished_copy, tmp_path):
    """A real rerun after a temperature change: thermochemistry is redone, but no optimisation record
    and no Hessian displacement is recomputed (their cache keys do not contain the temperature)."""
    cfg = write_config(tmp_path / "t.yaml", [MCH], deep_merge(NO_TWIST_BOATS, {"temperatures_k": [250.0, 298.15]}))
    frozen = {p: s for p, s in _records(finished_copy).items() if "/work/opt/" in p or "/work/freq/" in p}
    assert frozen
    proc = chairqm_run(cfg, finished_copy)
    assert proc.returncode == 0, tail(proc.stderr)
    after = _records(finished_copy)
    changed = [p for p, s in frozen.items() if after.get(p) != s]
    assert not changed, f"recomputed although only the temperature changed: {changed[:5]}"
    thermo = pd.read_csv(finished_copy / "mch" / "thermo.csv")
    assert sorted(set(thermo["temperature_k"])) == [250.0, 298.15]
    observe("temperature_rerun", {"records_reused": len(frozen), "seconds": round(proc.seconds, 1)})


@pytest.mark.slow
def test_per_conformer_cache_keys_follow_the_version(base, reference, tmp_path, monkeypatch):
    """Inside a stage: with the same version every optimisation record is reused (files untouched);
    with another version none is."""
    import chairqm
    from chairqm import config as cq_config
    from chairqm.plan import make_plan
    from chairqm.stages import minima
    root, cfg_path = base
    work = tmp_path / "out"
    shutil.copytree(reference, work, symlinks=True, copy_function=shutil.copy2)
    monkeypatch.chdir(work)
    cfg = cq_config.load(cfg_path)
    plan = make_plan(cfg)
    before = {p.name: p.stat().st_mtime_ns for p in (work / "mch" / "work" / "opt").glob("*.json")}
    assert len(before) == 2
    minima.run(cfg, plan, "mch", threads=1)
    same = {p.name: p.stat().st_mtime_ns for p in (work / "mch" / "work" / "opt").glob("*.json")}
    assert same == before, "records were rewritten although nothing changed"
    monkeypatch.setattr(chairqm, "__version__", "99.0.0+reliability-test")
    minima.run(cfg, plan, "mch", threads=1)
    for p in (work / "mch" / "work" / "opt").glob("*.json"):
        assert p.stat().st_mtime_ns != before[p.name], f"{p.name} reused across versions"
        assert json.loads(p.read_text())["key"] != json.loads((reference / "mch" / "work" / "opt" / p.name)
                                                              .read_text())["key"]


# ------------------------------------------------------------------------------------- 4. faults

FAULT_MOLECULES = [
    {"name": "mch-scf", "smiles": "CC1CCCCC1"},          # SCF failure of one seed
    {"name": "fch-bond", "smiles": "FC1CCCCC1"},          # one optimised seed loses a bond
    {"name": "mthp-imag", "smiles": "CC1CCOCC1"},         # one minimum's Hessian keeps an imaginary mode
    {"name": "chx-crash", "smiles": "C1CCCCC1"},          # an unexpected error inside a stage
]
FAULTS = {"scf": ["mch-scf/chair-1"], "bond": ["fch-bond/chair-2"], "imaginary": ["mthp-imag/c001"],
          "crash": ["chx-crash/minima"]}


@pytest.fixture(scope="module")
def faulty_run(tmp_path_factory):
    root = tmp_path_factory.mktemp("faults")
    cfg = write_config(root / "faults.yaml", FAULT_MOLECULES, NO_TWIST_BOATS)
    out = root / "out"
    proc = chairqm_run(cfg, out, cores=2, env=clean_env(CHAIRQM_FAULTS=json.dumps(FAULTS)))
    observe("fault_run_seconds", round(proc.seconds, 1))
    return out, proc


def _table(out, mol, name):
    return pd.read_csv(out / mol / name, keep_default_na=False)


def _summary(out, mol):
    s = pd.read_csv(out / "summary.csv", keep_default_na=False)
    return s[s["molecule"] == mol].iloc[0]


@pytest.mark.slow
def test_fault_run_completes_and_exit_code_says_something_failed(faulty_run):
    out, proc = faulty_run
    assert proc.returncode not in (0, 2), tail(proc.stderr)
    assert "chx-crash" in proc.stderr
    summary = pd.read_csv(out / "summary.csv", keep_default_na=False)
    assert dict(zip(summary["molecule"], summary["status"])) == {
        "mch-scf": "ok", "fch-bond": "ok", "mthp-imag": "ok", "chx-crash": "failed"}
    for m in FAULT_MOLECULES:
        for f in MOLECULE_FILES:
            assert (out / m["name"] / f).is_file(), f"{m['name']}/{f} missing"
    for f in RUN_FILES:
        assert (out / f).is_file()


@pytest.mark.slow
def test_scf_failure_is_isolated_and_reported(faulty_run):
    out, _ = faulty_run
    mins = _table(out, "mch-scf", "minima.csv").set_index("seed")
    assert mins.loc["chair-1", "status"] == "failed"
    assert "SCF" in mins.loc["chair-1", "reason"] and mins.loc["chair-1", "conformer"] == ""
    assert mins.loc["chair-2", "status"] == "ok"
    conf = _table(out, "mch-scf", "conformers.csv")
    assert list(conf["status"]) == ["ok"] and list(conf["seed"]) == ["chair-2"]
    assert float(conf["population"].iloc[0]) == pytest.approx(1.0)
    assert _summary(out, "mch-scf")["status"] == "ok"


@pytest.mark.slow
def test_broken_bond_is_caught_isolated_and_reported(faulty_run):
    out, _ = faulty_run
    mins = _table(out, "fch-bond", "minima.csv").set_index("seed")
    assert mins.loc["chair-2", "status"] == "failed"
    assert "bond" in mins.loc["chair-2", "reason"]
    assert mins.loc["chair-1", "status"] == "ok"
    thermo = _table(out, "fch-bond", "thermo.csv")
    assert len(thermo) == 1 and thermo["status"].iloc[0] == "ok"
    assert _summary(out, "fch-bond")["status"] == "ok"


@pytest.mark.slow
def test_kept_imaginary_mode_is_excluded_and_reported(faulty_run):
    out, _ = faulty_run
    thermo = _table(out, "mthp-imag", "thermo.csv").set_index("conformer")
    assert thermo.loc["c001", "status"] == "saddle"
    assert int(thermo.loc["c001", "n_imaginary"]) >= 1 and float(thermo.loc["c001", "lowest_frequency_cm1"]) < 0
    assert thermo.loc["c002", "status"] == "ok"
    conf = _table(out, "mthp-imag", "conformers.csv").set_index("conformer")
    assert conf.loc["c001", "status"] == "saddle" and float(conf.loc["c001", "population"]) == 0.0
    assert float(conf.loc["c002", "population"]) == pytest.approx(1.0)
    assert _summary(out, "mthp-imag")["status"] == "ok"


@pytest.mark.slow
def test_crashing_stage_fails_only_its_molecule(faulty_run):
    out, _ = faulty_run
    failed = json.loads((out / "chx-crash" / "failed.json").read_text())
    assert failed["stage"] == "minima"
    for f in ("minima.csv", "thermo.csv", "conformers.csv", "families.csv"):
        assert len(_table(out, "chx-crash", f)) == 0, f
    row = _summary(out, "chx-crash")
    assert row["status"] == "failed" and "minima" in row["reason"]


def _page_text(path: Path) -> str:
    import html
    text = path.read_text(encoding="utf-8")
    text = re.sub(r"<(style|script)\b.*?</\1>", " ", text, flags=re.S)
    return re.sub(r"\s+", " ", html.unescape(re.sub(r"<[^>]+>", " ", text)))


@pytest.mark.slow
def test_report_names_every_fault(faulty_run):
    out, _ = faulty_run
    page = _page_text(out / "report.html")
    assert "This molecule failed" in page and "injected fault" in page       # the crashed molecule
    assert "saddle" in page                                                   # the kept imaginary mode
    missing = [w for w in ("SCF did not converge", "bonds changed") if w not in page]
    assert not missing, (f"report.html does not mention the failed seeds ({missing}); they are listed only "
                         "in minima.csv")


def test_run_refuses_an_unparseable_molecule_before_computing(tmp_path, capsys):
    cfg = write_config(tmp_path / "mixed.yaml", [MCH, {"name": "broken", "smiles": "C1CC(C"},
                                                 {"name": "chx", "smiles": "C1CCCCC1"}])
    out = tmp_path / "out"
    assert cli.main(["run", str(cfg), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert "broken" in err and "Traceback" not in err
    assert not out.exists(), "an input error must stop the run before anything is written"
    out.mkdir()
    assert cli.main(["run", str(cfg), "--out", str(out)]) == 2
    assert list(out.iterdir()) == []


def test_molecules_sharing_a_group_do_not_wait_for_each_other():
    """The ensemble job of a molecule waits for the reference rings of its groups
    (chairqm/workflow/rules/ensemble.smk, Plan.references_for). Two monosubstituted cyclohexanes with the same
    group (e.g. methylcyclohexane under two names) must not become each other's reference: the cycle
    makes Snakemake refuse the whole run (CyclicGraphException) before any molecule is computed."""
    from chairqm import config as cq_config
    from chairqm.plan import make_plan
    plan = make_plan(cq_config.validate({"molecules": [{"name": "mch-a", "smiles": "CC1CCCCC1"},
                                                       {"name": "mch-b", "smiles": "CC1CCCCC1"},
                                                       {"name": "fch", "smiles": "FC1CCCCC1"}]}))
    waits = {m: set(plan.references_for(m).values()) for m in plan.names()}

    def reaches(start, goal, seen=()):
        return any(n == goal or (n not in seen and reaches(n, goal, (*seen, n))) for n in waits[start])

    cycles = sorted(m for m in waits if reaches(m, m))
    assert not cycles, f"ensemble jobs wait for each other in a cycle: {waits}"


# ------------------------------------------------------------------- 5. paths stay inside the output

@pytest.mark.parametrize("name", ["../escaped", "/tmp/chairqm-absolute", "a/../../b", "sub/dir", ".hidden", ".."])
def test_run_rejects_names_that_are_not_one_safe_folder(name, tmp_path, capsys):
    cfg = write_config(tmp_path / "cfg" / "c.yaml", [{"name": name, "smiles": "CC1CCCCC1"}])
    out = tmp_path / "cfg" / "out"
    before = sorted(str(p) for p in tmp_path.rglob("*"))
    assert cli.main(["run", str(cfg), "--out", str(out)]) == 2
    assert "unsafe molecule name" in capsys.readouterr().err
    assert sorted(str(p) for p in tmp_path.rglob("*")) == before
    assert not Path("/tmp/chairqm-absolute").exists()


def test_python_yaml_tags_are_refused_by_run_and_by_the_workflow(tmp_path, capsys):
    marker = tmp_path / "executed"
    cfg = tmp_path / "evil.yaml"
    cfg.write_text(f"molecules: !!python/object/apply:os.system ['touch {marker}']\n")
    assert cli.main(["run", str(cfg), "--out", str(tmp_path / "out")]) == 2
    assert "not valid YAML" in capsys.readouterr().err
    # and Snakemake started directly on the same file (bypassing the command line)
    proc = subprocess.run([PY, "-m", "snakemake", "--snakefile", str(cli.snakefile()), "--directory",
                           str(tmp_path / "direct"), "--config", f"chairqm_config={cfg}", "--cores", "1",
                           "--dry-run"], capture_output=True, text=True, env=clean_env())
    assert proc.returncode != 0 and "not valid YAML" in proc.stdout + proc.stderr
    assert not marker.exists(), "a YAML tag was executed"


def _snapshot(folder: Path) -> dict:
    return {str(p.relative_to(folder)): (p.is_symlink(), p.stat().st_mtime_ns if p.exists() else None,
                                         hashlib.sha256(p.read_bytes()).hexdigest() if p.is_file() else None)
            for p in sorted(folder.rglob("*"))}


def _sdf(smiles: str) -> str:
    from rdkit import Chem
    from rdkit.Chem import AllChem
    m = Chem.AddHs(Chem.MolFromSmiles(smiles))
    AllChem.EmbedMolecule(m, randomSeed=7)
    return Chem.MolToMolBlock(m)


@pytest.fixture(scope="module")
def outside_paths_run(tmp_path_factory):
    """One `--until intake` run whose molecules come from structure files outside the project folder
    (relative path climbing out, absolute path), with chx's output files pre-planted as symbolic links
    to files outside the output folder."""
    root = tmp_path_factory.mktemp("paths")
    elsewhere = root / "elsewhere"
    elsewhere.mkdir()
    (elsewhere / "mch.sdf").write_text(_sdf("CC1CCCCC1"))
    (elsewhere / "chx.sdf").write_text(_sdf("C1CCCCC1"))
    victims = root / "victims"
    victims.mkdir()
    for n in ("victim-record.json", "victim-log.txt"):
        (victims / n).write_text("not chairqm's\n")
    cfg = write_config(root / "project" / "c.yaml", [
        {"name": "mch", "file": "../elsewhere/mch.sdf"},
        {"name": "chx", "file": str(elsewhere / "chx.sdf")}])
    out = root / "project" / "out"
    (out / "chx" / "logs").mkdir(parents=True)
    (out / "chx" / "molecule.json").symlink_to(victims / "victim-record.json")
    (out / "chx" / "logs" / "intake.log").symlink_to(victims / "victim-log.txt")
    before = {"elsewhere": _snapshot(elsewhere), "victims": _snapshot(victims)}
    proc = chairqm_run(cfg, out, "--until", "intake")
    after = {"elsewhere": _snapshot(elsewhere), "victims": _snapshot(victims)}
    return out, proc, before, after


@pytest.mark.slow
def test_structure_files_elsewhere_are_only_read(outside_paths_run):
    out, proc, before, after = outside_paths_run
    assert proc.returncode == 0, tail(proc.stderr)
    assert after["elsewhere"] == before["elsewhere"], "a structure file's folder was written to"
    for m in ("mch", "chx"):
        assert (out / m / "substituents.csv").is_file()


@pytest.mark.slow
def test_symlinked_output_files_are_replaced_not_written_through(outside_paths_run):
    out, proc, before, after = outside_paths_run
    assert proc.returncode == 0, tail(proc.stderr)
    assert after["victims"] == before["victims"], "a file outside the output folder was written through a link"
    for rel in ("chx/molecule.json", "chx/logs/intake.log"):
        assert not (out / rel).is_symlink(), rel
    assert json.loads((out / "chx" / "molecule.json").read_text())["name"] == "chx"


@pytest.mark.slow
def test_symlinked_molecule_folder_cannot_lead_writes_outside(tmp_path):
    # A molecule folder that already exists as a symbolic link to a place outside the output folder.
    # Following it would write results (and, later, logs and caches) outside the run's folder. Either
    # the run refuses with an input error naming the link, or it writes into a real folder inside.
    outside = tmp_path / "outside"
    outside.mkdir()
    (outside / "keep.txt").write_text("not chairqm's\n")
    out = tmp_path / "out"
    out.mkdir()
    (out / "mch").symlink_to(outside, target_is_directory=True)
    cfg = write_config(tmp_path / "c.yaml", [MCH], NO_TWIST_BOATS)
    before = _snapshot(outside)
    proc = chairqm_run(cfg, out, "--until", "intake")
    assert _snapshot(outside) == before, (f"files written outside the output folder through the link "
                                          f"{out / 'mch'} -> {outside}: {sorted(set(_snapshot(outside)) - set(before))}")
    if proc.returncode == 2:
        assert "mch" in proc.stderr and "link" in proc.stderr
    else:
        assert proc.returncode == 0, tail(proc.stderr)
        assert not (out / "mch").is_symlink() and (out / "mch" / "substituents.csv").is_file()


# ----------------------------------------------------------------------- 5. DFT refinement stage
# Hartree-Fock/STO-3G keeps the single points to a second each: the stage's bookkeeping is under test
# here, not the level (tests/test_end_to_end.py checks the default level against CCSD(T)/CBS).
CHEAP_REFINE = {**NO_TWIST_BOATS, "refine": {"functional": "HF", "basis": "STO-3G", "dispersion": "none",
                                             "density_fitting": False, "window_kcal": 0.0}}


@pytest.mark.slow
def test_refine_failure_is_isolated_then_retried_and_finished_records_are_kept(tmp_path):
    pytest.importorskip("pyscf")
    cfg = write_config(tmp_path / "refine.yaml", [{"name": "mch", "smiles": "CC1CCCCC1"}], CHEAP_REFINE)
    out = tmp_path / "out"
    # 1. one single point's SCF cannot converge: reported in refine.csv, the molecule still finishes
    proc = chairqm_run(cfg, out, cores=2, env=clean_env(CHAIRQM_FAULTS=json.dumps({"dft_scf": ["mch/c001"]})))
    assert proc.returncode == 0, tail(proc.stderr)
    rc = _table(out, "mch", "refine.csv").set_index("conformer")
    assert rc.loc["c001", "status"] == "failed" and "not converged" in rc.loc["c001", "reason"]
    ok = [c for c in rc.index if rc.loc[c, "status"] == "ok"]
    assert len(ok) == 1                      # window 0: the two chair families' lowest, one of them failed
    assert _summary(out, "mch")["status"] == "ok" and str(_summary(out, "mch")["refined"]) == "True"
    conf = _table(out, "mch", "conformers.csv").set_index("conformer")
    assert str(conf.loc["c001", "refined_single_point"]) == "False"   # carries the mean shift instead
    assert "failed" in (out / "report.html").read_text()
    kept = out / "mch" / "work" / "refine" / f"{ok[0]}.json"
    stamp = kept.stat().st_mtime_ns
    # 2. a forced rerun of the stage without the fault retries the failed single point only
    proc = chairqm_run(cfg, out, cores=2, extra=["--forcerun", "refine"])
    assert proc.returncode == 0, tail(proc.stderr)
    rc = _table(out, "mch", "refine.csv").set_index("conformer")
    assert set(rc["status"]) == {"ok"}
    assert kept.stat().st_mtime_ns == stamp
    assert str(_table(out, "mch", "conformers.csv").set_index("conformer").loc["c001", "refined_single_point"]) == "True"
    # 3. a wider selection window reruns the stage but reuses every finished single point: the window
    #    does not change a single point, so it is not part of the record's key
    stamps = {f.name: f.stat().st_mtime_ns for f in (out / "mch" / "work" / "refine").glob("*.json")}
    wider = write_config(tmp_path / "refine.yaml", [{"name": "mch", "smiles": "CC1CCCCC1"}],
                         deep_merge(CHEAP_REFINE, {"refine": {"window_kcal": 0.5}}))
    proc = chairqm_run(wider, out, cores=2)
    assert proc.returncode == 0, tail(proc.stderr)
    assert json.loads((out / "mch" / "refine.json").read_text())["settings"]["window_kcal"] == 0.5  # it did rerun
    for name, stamp in stamps.items():
        assert (out / "mch" / "work" / "refine" / name).stat().st_mtime_ns == stamp, name


# ------------------------------------------------------------- 6. late-stage crashes and their retry

@pytest.mark.slow
@pytest.mark.parametrize("stage", ["refine", "ensemble"])
def test_late_stage_crash_is_isolated_and_a_plain_rerun_retries_it(tmp_path, stage):
    """An unexpected error inside refine or ensemble fails only its molecule, with the same report and
    headers as a crash in minima; once the cause is gone, the same command again recomputes the failed
    stage (its empty outputs must not count as up to date) and the molecule finishes."""
    pytest.importorskip("pyscf")
    cfg = write_config(tmp_path / "late.yaml", [{"name": "mch", "smiles": "CC1CCCCC1"},
                                                {"name": "chx", "smiles": "C1CCCCC1"}], CHEAP_REFINE)
    out = tmp_path / "out"
    proc = chairqm_run(cfg, out, cores=2, env=clean_env(CHAIRQM_FAULTS=json.dumps({"crash": [f"mch/{stage}"]})))
    assert proc.returncode == 1, tail(proc.stderr)          # a molecule failed; the run itself finished
    failed = json.loads((out / "mch" / "failed.json").read_text())
    assert failed["stage"] == stage and "injected fault" in failed["reason"]
    assert _summary(out, "mch")["status"] == "failed" and stage in _summary(out, "mch")["reason"]
    assert _summary(out, "chx")["status"] == "ok"
    assert "injected fault" in (out / "report.html").read_text()
    # one header per contract file: the failed molecule's tables carry the successful one's columns
    for f in ("refine.csv", "families.csv", "conformers.csv", "thermo.csv", "minima.csv", "seeds.csv"):
        assert list(_table(out, "mch", f).columns) == list(_table(out, "chx", f).columns), f
    proc = chairqm_run(cfg, out, cores=2)
    assert proc.returncode == 0, tail(proc.stderr)
    assert not (out / "mch" / "failed.json").exists()
    assert _summary(out, "mch")["status"] == "ok"
    assert float(_summary(out, "mch")["a_value_kcal"]) > 0     # methyl prefers equatorial (any handbook)


@pytest.mark.slow
def test_minima_crash_headers_match_a_successful_molecule(faulty_run):
    """The failure path writes every table with the success path's columns."""
    out, _ = faulty_run
    for f in ("minima.csv", "thermo.csv", "families.csv", "conformers.csv"):
        assert list(_table(out, "chx-crash", f).columns) == list(_table(out, "mch-scf", f).columns), f
