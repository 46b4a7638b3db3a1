"""Scheduler signals: SIGTERM (what SLURM sends to every process of a job before SIGKILL at its time limit,
and what `kill PID` sends) and SIGINT (Ctrl-C in a terminal, sent to the whole foreground process group)
stop `chairqm run` within seconds, leave no partial file and no lock behind, and the rerun of the same
command resumes to contract files identical to an uninterrupted run. Tested the way the SIGKILL test in
test_reliability.py is: the same configuration, kill points, readability checks and comparison.
"""

from __future__ import annotations

import fcntl
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from test_reliability import (KILL_POINTS, MCH, NO_TWIST_BOATS, PAUSE_REPORT, _alive, _check_readable,  # noqa: E402
                              _temporaries, chairqm_run, clean_env, observe, resume_and_compare, run_cmd,
                              running_until, same_records, tail, write_config)

#: A stop "within seconds": chairqm gives the workflow's processes chairqm.processes.STOP_GRACE_S (20 s)
#: after SIGTERM before it kills them; on this machine they stop in 1-3 s. Generous for a loaded 2-core
#: machine.
STOP_WITHIN_S = 15.0


# (kill point as in the SIGKILL test, the signal, sent to the whole process group or to chairqm alone)
INTERRUPTS = [
    (KILL_POINTS[0], signal.SIGTERM, "group"),       # SLURM at a time limit: every process of the job
    (KILL_POINTS[1], signal.SIGINT, "group"),        # Ctrl-C in a terminal: the foreground process group
    (KILL_POINTS[2], signal.SIGTERM, "chairqm"),     # `kill PID` or `scancel --signal=TERM` of the command
]


@pytest.fixture(scope="module")
def setup(tmp_path_factory):
    root = tmp_path_factory.mktemp("signals")
    cfg = write_config(root / "mch.yaml", [MCH], NO_TWIST_BOATS)
    ref = root / "reference"
    proc = chairqm_run(cfg, ref)
    assert proc.returncode == 0, tail(proc.stderr)
    return root, cfg, ref


def _interrupt_at(cmd, out: Path, pattern: str, signum, target: str, log: Path, timeout=600):
    """Start `cmd` in its own process group; when `pattern` exists send `signum` to the group or to the
    chairqm process alone; return (exit code, seconds from the signal to the end of the command)."""
    with running_until(cmd, out, pattern, log, timeout, env=clean_env(**PAUSE_REPORT)) as p:
        sent = time.time()
        if target == "group":
            os.killpg(p.pid, signum)
        else:
            os.kill(p.pid, signum)
        try:
            code = p.wait(timeout=120)
        except subprocess.TimeoutExpired:
            code = None
        return code, time.time() - sent


def _run_lock_is_free(out: Path) -> bool:
    with open(out / ".chairqm" / "run.lock", "a") as fh:
        try:
            fcntl.flock(fh, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            return False
        fcntl.flock(fh, fcntl.LOCK_UN)
        return True


def _python_child(code: str) -> subprocess.Popen:
    """Start a Python child running `code` and return it once it has printed 'ready' (its signal handling
    is in place by then); a child that prints anything else is killed and the test fails."""
    child = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
    line = child.stdout.readline().strip()
    if line != "ready":
        child.kill()
        child.wait()
    assert line == "ready", f"the child printed {line!r} instead of 'ready'"
    return child


@pytest.mark.slow
def test_sigterm_and_sigint_stop_the_run_and_the_rerun_resumes(setup, tmp_path):
    root, cfg, reference = setup
    out = tmp_path / "signalled"
    cmd = run_cmd(cfg, out)
    log = tmp_path / "signalled.log"
    kept: dict[str, tuple] = {}
    seen = []
    for (what, pattern, not_yet), signum, target in INTERRUPTS:
        code, seconds = _interrupt_at(cmd, out, pattern, signum, target, log)
        name = signal.Signals(signum).name
        assert code is not None, f"{name} to the {target}: the command did not end within 120 s"
        assert code == 128 + signum, f"{name} to the {target}: exit {code}; log: {tail(log.read_text(), 1500)}"
        assert seconds < STOP_WITHIN_S, (f"{name} to the {target}: {seconds:.1f} s to stop; "
                                         f"log: {tail(log.read_text(), 1500)}")
        time.sleep(0.2)
        assert not _alive(str(cfg)), f"processes survived {name} to the {target}: {_alive(str(cfg))}"
        assert not (out / not_yet).exists(), f"interrupt point '{what}' missed: {not_yet} already written"
        assert not _temporaries(out), f"partial files left by {name}: {_temporaries(out)}"
        assert not list((out / ".snakemake" / "locks").glob("*")), "a Snakemake lock survived"
        assert _run_lock_is_free(out), "chairqm's run lock is still held"
        assert f"stopped by {name}" in log.read_text()
        n_files = _check_readable(out)
        recs = same_records(out, kept, f"finished record rewritten after {name}")
        kept.update(recs)
        seen.append({"point": what, "signal": name, "to": target, "stopped_after_s": round(seconds, 2),
                     "exit": code, "files_checked": n_files, "records_kept": len(recs)})
    n = resume_and_compare(cfg, out, reference, kept, "a signal")
    observe("signals", {"interrupts": seen, "records_never_rewritten": len(kept), "files_compared": n})


@pytest.mark.slow
def test_sigterm_during_a_verbose_run_stops_it_too(setup, tmp_path):
    """--verbose shows Snakemake's output in the terminal instead of a log; the stop is the same."""
    root, cfg, _ = setup
    out = tmp_path / "verbose"
    code, seconds = _interrupt_at(run_cmd(cfg, out, "--verbose"), out, "mch/work/opt/*.json", signal.SIGTERM,
                                  "chairqm", tmp_path / "verbose.log")
    assert code == 128 + signal.SIGTERM and seconds < STOP_WITHIN_S
    time.sleep(0.2)
    assert not _alive(str(cfg)) and not _temporaries(out) and _run_lock_is_free(out)


def test_a_lost_sigterm_is_sent_again():
    """A job that misses the first SIGTERM (it arrived between fork and exec, where the parent's handler
    swallows it) is stopped by the repeat within the grace time, not killed at its end (processes._wait_gone)."""
    import psutil

    from chairqm import processes
    code = ("import signal, time\n"
            "signal.signal(signal.SIGTERM, lambda *a: signal.signal(signal.SIGTERM, signal.SIG_DFL))\n"
            "print('ready', flush=True)\n"
            "time.sleep(60)\n")
    child = _python_child(code)
    try:
        child.send_signal(signal.SIGTERM)          # swallowed, as in the fork-exec window
        t0 = time.time()
        alive = processes._wait_gone([psutil.Process(child.pid)], child, 10.0, terminate_new=True)
        assert alive == [] and time.time() - t0 < 5.0
        assert child.wait(timeout=5) == -signal.SIGTERM
        # without the repeat the same process outlives a short grace time
        late = _python_child(code)
        late.send_signal(signal.SIGTERM)
        assert processes._wait_gone([psutil.Process(late.pid)], late, 2.0) != []
        late.kill()
        late.wait()
    finally:
        if child.poll() is None:
            child.kill()
            child.wait()


def test_snakemake_alone_after_its_jobs_is_not_waited_for_until_the_grace_ends():
    """Once every job has ended, a Snakemake that stays asleep is given SNAKEMAKE_ALONE_S, not the whole
    STOP_GRACE_S (seen once in a few dozen stops; it runs with --nolock, so killing it leaves no lock)."""
    import psutil

    from chairqm import processes
    code = ("import signal, time\n"
            "signal.signal(signal.SIGTERM, signal.SIG_IGN)\n"
            "print('ready', flush=True)\n"
            "time.sleep(60)\n")
    child = _python_child(code)
    try:
        t0 = time.time()
        alive = processes._wait_gone([psutil.Process(child.pid)], child, 30.0, terminate_new=True, alone_s=1.0)
        assert [p.pid for p in alive] == [child.pid]
        assert 0.9 < time.time() - t0 < 10.0
    finally:
        child.kill()
        child.wait()
