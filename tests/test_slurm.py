"""The SLURM profile on a real SLURM: a single-node cluster started on this machine from Debian's packages
by tests/cluster/local_slurm.sh (munged, slurmctld, slurmd; no accounting database), and Snakemake's
SLURM executor plugin as installed by the `slurm` extra.

1. Methylcyclohexane (no twist-boats, no reference rings) runs through `chairqm run --profile slurm`.
   Every stage job must have gone through the scheduler: each job Snakemake submitted is found COMPLETED
   in slurmctld's job-completion log with the run's folder as its working directory, and together they
   cover every stage rule. The contract files must equal those of a local run of the same configuration
   byte for byte (minima.csv without its timing column, as in test_reliability.py).
2. A run is cancelled half-way with `scancel` (the thermo job, once c001's record is written and c002's
   Hessian has started); the same command run again resumes: the records written before the cancel are
   neither rewritten nor recomputed, and the results equal the local run's.
3. SIGTERM to `chairqm run` while its job waits in the queue (the node drained) stops the command and
   cancels the job.

Skipped, with the reason, where the machine cannot start SLURM: not root, no apt-get, the packages cannot
be installed, or the daemons do not come up. Set CHAIRQM_RELIABILITY_LOG to record what was measured
(docs/cluster.md).
"""

from __future__ import annotations

import glob
import importlib.util
import os
import re
import shutil
import socket
import subprocess
import time
from pathlib import Path

import pandas as pd
import pytest

from test_reliability import (MCH, _records, assert_same_results, chairqm_run, clean_env, observe,  # noqa: E402
                              run_cmd, tail, write_config)

ROOT = Path(__file__).resolve().parent.parent
SCRIPT = ROOT / "tests" / "cluster" / "local_slurm.sh"
SETTINGS = {"seeds": {"twist_boats": False}, "analysis": {"reference_groups": False}}
#: Compared byte for byte with the local run.
BYTE_FILES = ["summary.csv", "mch/conformers.csv", "mch/families.csv", "mch/seeds.csv", "mch/thermo.csv",
              "mch/substituents.csv"]
#: The profile's job layout for one molecule: intake+seeds grouped ("prep"), minima, thermo, ensemble
#: grouped ("analysis"), report. Names as in the plugin's log folders.
EXPECTED_JOBS = {"group_prep_intake_seeds", "rule_minima", "rule_thermo", "group_analysis_ensemble", "rule_report"}
STAGE_RULES = {"intake", "seeds", "minima", "thermo", "ensemble", "report"}
#: Plugin options for this test cluster only: it has no accounting database, so job states come from
#: squeue (MinJobAge is an hour there); a short first status check keeps the test's wall time down.
PLUGIN_ARGS = ["--slurm-status-command", "squeue", "--slurm-init-seconds-before-status-checks", "2",
               "--slurm-no-account"]
SUBMITTED = re.compile(r"submitted with SLURM jobid (\d+) \(log: (\S+)/\d+\.log\)")


def _why_not() -> str | None:
    if os.name != "posix" or os.geteuid() != 0:
        return "starting slurmctld and slurmd needs root"
    if importlib.util.find_spec("snakemake_executor_plugin_slurm") is None:
        return "Snakemake's SLURM executor plugin is not installed (pip install -e .[slurm])"
    if not all(shutil.which(x) for x in ("slurmctld", "slurmd", "munged", "sbatch")) and not shutil.which("apt-get"):
        return "SLURM is not installed and there is no apt-get to install it"
    return None


def _free_port_pair() -> int:
    for base in range(16817, 17817, 2):
        ok = True
        for port in (base, base + 1):
            with socket.socket() as s:
                try:
                    s.bind(("0.0.0.0", port))
                except OSError:
                    ok = False
        if ok:
            return base
    raise RuntimeError("no free port pair for slurmctld/slurmd")


@pytest.fixture(scope="module")
def cluster(tmp_path_factory):
    reason = _why_not()
    if reason:
        pytest.skip(reason)
    proc = subprocess.run(["bash", str(SCRIPT), "install"], capture_output=True, text=True, timeout=900)
    if proc.returncode != 0:
        pytest.skip(f"SLURM could not be installed: {tail(proc.stderr.strip(), 500)}")
    folder = tmp_path_factory.mktemp("slurm")
    env = dict(os.environ, SLURM_PORT_BASE=str(_free_port_pair()))
    proc = subprocess.run(["bash", str(SCRIPT), "start", str(folder)], capture_output=True, text=True, env=env,
                          timeout=180)
    try:
        if proc.returncode != 0:
            logs = {p.name: tail(p.read_text(errors="replace"), 400) for p in (folder / "log").glob("*.log")}
            pytest.skip(f"the SLURM daemons did not start: {proc.stderr.strip()} {logs}")
        yield {"folder": folder, "conf": folder / "slurm.conf", "jobcomp": folder / "log" / "jobcomp.log"}
    finally:
        subprocess.run(["bash", str(SCRIPT), "stop", str(folder)], capture_output=True, timeout=120)


def _env(cluster):
    return clean_env(SLURM_CONF=str(cluster["conf"]))


def _jobcomp(cluster) -> dict[str, dict]:
    """slurmctld's job-completion log: job id -> its fields."""
    jobs = {}
    path = cluster["jobcomp"]
    for line in (path.read_text().splitlines() if path.exists() else []):
        fields = dict(m.groups() for m in re.finditer(r"(\w+)=(\S*)", line))
        if "JobId" in fields:
            jobs[fields["JobId"]] = fields
    return jobs


def _submitted(out: Path) -> list[tuple[str, str]]:
    """(SLURM job id, the plugin's log folder name) of every job Snakemake submitted in this run."""
    text = (out / ".chairqm" / "snakemake.log").read_text()
    return [(jid, Path(folder).resolve().relative_to((out / ".snakemake" / "slurm_logs").resolve()).parts[0])
            for jid, folder in SUBMITTED.findall(text)]


def _run(cfg, out, cluster, *extra, cores=1, timeout=900):
    cmd = run_cmd(cfg, out, "--profile", "slurm", cores=cores, extra=[*PLUGIN_ARGS, *extra])
    t0 = time.time()
    proc = subprocess.run(cmd, capture_output=True, text=True, env=_env(cluster), timeout=timeout)
    proc.seconds = time.time() - t0
    return proc


def _minima_without_timing(path: Path) -> str:
    df = pd.read_csv(path, dtype=str, keep_default_na=False)
    return df[[c for c in df.columns if "seconds" not in c]].to_csv(index=False)


def _assert_same_as_local(local: Path, out: Path, resumed=False) -> int:
    for rel in BYTE_FILES:
        assert (local / rel).read_bytes() == (out / rel).read_bytes(), f"{rel} differs from the local run"
    assert _minima_without_timing(local / "mch/minima.csv") == _minima_without_timing(out / "mch/minima.csv")
    return assert_same_results(local, out, ["mch"], resumed=resumed)


@pytest.fixture(scope="module")
def local_run(tmp_path_factory):
    root = tmp_path_factory.mktemp("slurm-local")
    cfg = write_config(root / "mch.yaml", [MCH], SETTINGS, project="slurm test")
    proc = chairqm_run(cfg, root / "local")
    assert proc.returncode == 0, tail(proc.stderr)
    observe("slurm_local_run_seconds", round(proc.seconds, 1))
    return cfg, root / "local", proc.seconds


@pytest.mark.slow
def test_every_stage_runs_as_a_slurm_job_and_gives_the_local_result(cluster, local_run):
    cfg, local, local_s = local_run
    out = cfg.parent / "on-slurm"
    before = set(_jobcomp(cluster))
    proc = _run(cfg, out, cluster)
    assert proc.returncode == 0, tail(proc.stdout + proc.stderr)
    submitted = _submitted(out)
    assert {name for _, name in submitted} == EXPECTED_JOBS, submitted
    names = " ".join(name for _, name in submitted)
    assert all(rule in names for rule in STAGE_RULES), f"a stage did not go through SLURM: {submitted}"
    time.sleep(1)
    done = _jobcomp(cluster)
    for jid, name in submitted:
        assert jid not in before, f"job {jid} ({name}) is older than this run"
        assert jid in done, f"job {jid} ({name}) is not in slurmctld's completion log"
        assert done[jid]["JobState"] == "COMPLETED", (jid, name, done[jid])
        assert Path(done[jid]["WorkDir"]) == out.resolve(), done[jid]
    # no stage ran outside SLURM: Snakemake runs only `rule all` (no command) on the submit host
    log = (out / ".chairqm" / "snakemake.log").read_text()
    assert "localrule" not in log.replace("localrule all:", ""), "a rule ran on the submit host"
    n = _assert_same_as_local(local, out)
    cpus = {name: done[jid]["ProcCnt"] for jid, name in submitted}
    def seconds(f):
        return (pd.Timestamp(f["EndTime"]) - pd.Timestamp(f["StartTime"])).total_seconds()
    inside = {name: seconds(done[jid]) for jid, name in submitted}
    observe("slurm_run", {"seconds": round(proc.seconds, 1), "local_seconds": round(local_s, 1),
                          "jobs": len(submitted), "cpus_per_job": cpus, "job_seconds_in_slurm": inside,
                          "overhead_per_job_s": round((proc.seconds - local_s) / len(submitted), 1),
                          "files_compared": n})


def _running_job(comment: str, cluster) -> str | None:
    proc = subprocess.run(["squeue", "-h", "-t", "RUNNING", "-o", "%i %k"], capture_output=True, text=True,
                          env=_env(cluster), timeout=30)
    for line in proc.stdout.splitlines():
        jid, _, k = line.partition(" ")
        if k.strip() == comment:
            return jid
    return None


@pytest.mark.slow
def test_a_run_cancelled_with_scancel_resumes_without_recomputing(cluster, local_run):
    cfg, local, _ = local_run
    out = cfg.parent / "cancelled"
    # --retries 0: the cancelled job is not resubmitted by Snakemake (the profile's retries: 1 would do
    # that within the run); the run stops and the same command is started again, as a user would.
    cmd = run_cmd(cfg, out, "--profile", "slurm", cores=1, extra=[*PLUGIN_ARGS, "--retries", "0"])
    log = cfg.parent / "cancelled.log"
    started = time.time()
    with open(log, "w") as fh:
        p = subprocess.Popen(cmd, stdout=fh, stderr=subprocess.STDOUT, env=_env(cluster), start_new_session=True)
    point = "mch/work/freq/c002-*/round*/disp-*.npz"       # c001's record written, c002's Hessian started
    jid = None
    try:
        while not (glob.glob(str(out / point)) and (out / "mch/work/thermo/c001.json").exists()):
            assert p.poll() is None, f"the run ended (exit {p.returncode}) before {point}: {tail(log.read_text())}"
            assert time.time() - started < 600, f"{point} did not appear within 600 s"
            time.sleep(0.02)
        jid = _running_job("rule_thermo_wildcards_mch", cluster)
        assert jid, "no running thermo job to cancel"
        subprocess.run(["scancel", jid], check=True, env=_env(cluster), timeout=30)
        cancelled_at = time.time()
        code = p.wait(timeout=600)
        stopped_s = time.time() - cancelled_at
    finally:
        if p.poll() is None:
            os.killpg(p.pid, 9)
            p.wait()
    kept = _records(out)
    assert code != 0, "the cancelled run reported success"
    assert not (out / "mch/thermo.json").exists(), "the cancel came too late: thermo had finished"
    assert "CANCELLED" in log.read_text() or "CANCELLED" in (out / ".chairqm/snakemake.log").read_text()
    # the message names the stage's log and the SLURM job's own log
    assert "mch/logs/thermo.log" in log.read_text() and f"slurm_logs/rule_thermo/mch/{jid}.log" in log.read_text()
    time.sleep(1)
    assert _jobcomp(cluster)[jid]["JobState"] == "CANCELLED"
    assert any("work/thermo/c001" in p for p in kept) and any("/freq/c002-" in p for p in kept), kept
    shutil.copy(out / ".chairqm/snakemake.log", cfg.parent / "cancelled-snakemake.log")    # the rerun overwrites it
    rerun = _run(cfg, out, cluster)
    assert rerun.returncode == 0, tail(rerun.stdout + rerun.stderr)
    after = _records(out)
    rewritten = [p for p, stat in kept.items() if after.get(p) != stat]
    assert not rewritten, f"records finished before the scancel were recomputed: {rewritten}"
    resubmitted = {name for _, name in _submitted(out)}
    assert "rule_minima" not in resubmitted and "group_prep_intake_seeds" not in resubmitted, resubmitted
    assert "rule_thermo" in resubmitted
    n = _assert_same_as_local(local, out, resumed=True)
    observe("slurm_scancel", {"cancelled_job": jid, "run_stopped_after_cancel_s": round(stopped_s, 1),
                              "records_kept": len(kept), "rerun_seconds": round(rerun.seconds, 1),
                              "rerun_jobs": sorted(resubmitted), "files_compared": n})


#: Snakemake's error block for a job the scheduler ended (from the scancel run above): the rule's log and
#: the SLURM job's own log, an absolute path, on one line.
SLURM_ERROR = """Error in rule thermo:
    message: SLURM-job '8' failed, SLURM status is: 'CANCELLED'.
    jobid: 5
    log: mch/logs/thermo.log, {out}/.snakemake/slurm_logs/rule_thermo/mch/8.log (check log file(s) for error details)
    external_jobid: 8
"""


def test_a_stopped_cluster_run_names_the_rule_log_and_the_slurm_job_log(tmp_path):
    from chairqm import api
    log = tmp_path / ".chairqm" / "snakemake.log"
    log.parent.mkdir()
    log.write_text(SLURM_ERROR.format(out=tmp_path) + "\n" + SLURM_ERROR.format(out=tmp_path))
    found = api._failed_job_logs(tmp_path, log)
    assert found == [tmp_path / "mch/logs/thermo.log", tmp_path / ".snakemake/slurm_logs/rule_thermo/mch/8.log"]
    assert ",," not in api._where_logs(tmp_path, log)


def test_the_executor_of_a_run_is_read_from_the_arguments_and_the_profile():
    from chairqm import api, processes
    assert processes._executor(api.resolve_profiles(["--profile", "slurm"])) == "slurm"
    assert processes._executor(api.resolve_profiles(["--profile", "laptop"])) == "local"
    assert processes._executor(api.resolve_profiles(["--profile", "slurm", "--executor", "local"])) == "local"
    assert processes._executor(["--executor=slurm"]) == "slurm" and processes._executor([]) == "local"


def _jobs_in(out: Path, cluster, states="PENDING,RUNNING,COMPLETING") -> list[str]:
    q = subprocess.run(["squeue", "-h", "-t", states, "-o", "%i|%Z"], capture_output=True, text=True,
                       env=_env(cluster), timeout=30)
    return [line.split("|")[0] for line in q.stdout.splitlines()
            if line.split("|")[-1] and Path(line.split("|")[-1]) == out.resolve()]


@pytest.mark.slow
def test_stopping_chairqm_run_cancels_its_slurm_jobs(cluster, local_run):
    """SIGTERM to `chairqm run` (a login-node session ending, or `kill`) while its job waits in a busy
    queue: the command stops and the job is cancelled. Snakemake alone waits for it on SIGTERM, is killed
    after 20 s and leaves it queued."""
    cfg, _, _ = local_run
    out = cfg.parent / "stopped"
    # a busy cluster: the node is drained, so the run's first job waits in the queue
    node = socket.gethostname().split(".")[0]
    scontrol = lambda *a: subprocess.run(["scontrol", "update", f"nodename={node}", *a], env=_env(cluster),
                                         timeout=30, check=True)
    scontrol("state=drain", "reason=chairqm-test")
    cmd = run_cmd(cfg, out, "--profile", "slurm", cores=1, extra=PLUGIN_ARGS)
    log = cfg.parent / "stopped.log"
    started = time.time()
    with open(log, "w") as fh:
        p = subprocess.Popen(cmd, stdout=fh, stderr=subprocess.STDOUT, env=_env(cluster), start_new_session=True)
    try:
        waiting = []
        while not waiting:
            assert p.poll() is None, f"the run ended (exit {p.returncode}): {tail(log.read_text())}"
            assert time.time() - started < 300, "no job of the run in the queue within 300 s"
            time.sleep(0.2)
            waiting = _jobs_in(out, cluster, "PENDING")
        os.kill(p.pid, 15)
        sent = time.time()
        code = p.wait(timeout=120)
        stop_s = time.time() - sent
    finally:
        if p.poll() is None:
            os.killpg(p.pid, 9)
            p.wait()
        scontrol("state=resume")
    assert code == 128 + 15, tail(log.read_text())
    assert f"cancelled SLURM job(s) {', '.join(waiting)}" in log.read_text(), tail(log.read_text())
    left = _jobs_in(out, cluster)
    assert not left, f"SLURM jobs of the stopped run left in the queue: {left}"
    time.sleep(1)
    assert all(_jobcomp(cluster)[j]["JobState"] == "CANCELLED" for j in waiting)
    observe("slurm_sigterm", {"jobs": waiting, "stopped_after_s": round(stop_s, 1)})
