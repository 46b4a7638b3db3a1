"""The workflow's processes: how `chairqm run` turns scheduler signals into an orderly stop, stops
Snakemake and everything it started (and cancels the run's SLURM jobs), and starts and stops the warm
starter of local stage jobs (chairqm.stages.warm). Used by chairqm.api.run."""

from __future__ import annotations

import contextlib
import os
import signal
import subprocess
import sys
import time
from pathlib import Path


class Interrupted(BaseException):
    """The run was stopped by a signal (SIGTERM, SIGINT, SIGHUP): every process of the workflow has been
    stopped and the partial files of their interrupted writes removed; the same command resumes."""

    def __init__(self, signum: int, out: Path | None = None):
        self.signum = int(signum)
        self.out = out
        name = signal.Signals(self.signum).name
        super().__init__(f"stopped by {name}" + (f"; rerun the same command to resume in {out}" if out else ""))


#: Seconds the workflow's processes get to stop after SIGTERM before they are killed.
STOP_GRACE_S = 20.0
#: Seconds Snakemake gets to exit once every process it started has ended. It normally takes ~1 s; once
#: in a few dozen stops (seen in CI and reproduced here) it stayed asleep until the grace ran out. It is
#: started with --nolock, so killing it leaves no lock, and its incomplete-job markers make the rerun
#: (--rerun-incomplete) redo the interrupted job, exactly as after SIGKILL.
SNAKEMAKE_ALONE_S = 5.0


@contextlib.contextmanager
def _signals_as_interrupts():
    """SIGTERM (what a batch scheduler sends before SIGKILL at a time limit) and SIGHUP raise
    Interrupted in the main thread while the workflow runs, as SIGINT raises KeyboardInterrupt, so the
    workflow is stopped in an orderly way instead of this process vanishing and leaving Snakemake running."""
    import threading
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum, frame):
        raise Interrupted(signum)
    old = {}
    for sig in (signal.SIGTERM, signal.SIGHUP):
        try:
            old[sig] = signal.signal(sig, handler)
        except (OSError, ValueError):
            pass
    try:
        yield
    finally:
        for sig, h in old.items():
            signal.signal(sig, h)


@contextlib.contextmanager
def _no_file():
    yield None


def _executor(extra) -> str:
    """The Snakemake executor of a run: `--executor`/`-e` among the Snakemake arguments, else the
    `executor` of the profile they name (a folder with config.yaml), else local."""
    import yaml
    args = list(extra)
    for i, a in enumerate(args):
        if a in ("--executor", "-e") and i + 1 < len(args):
            return args[i + 1]
        if a.startswith("--executor="):
            return a.split("=", 1)[1]
    for i, a in enumerate(args):
        folder = args[i + 1] if a == "--profile" and i + 1 < len(args) else \
            a.split("=", 1)[1] if a.startswith("--profile=") else None
        if folder:
            try:
                return str((yaml.safe_load((Path(folder) / "config.yaml").read_text()) or {}).get("executor")
                           or "local")
            except (OSError, yaml.YAMLError, AttributeError):
                pass
    return "local"


def _cancel_slurm_jobs(out: Path, wait_s: float = 15.0) -> list[str]:
    """Cancel this user's SLURM jobs still queued or running with `out` as their working directory, and
    wait (up to `wait_s`) until SLURM has ended them. Stopping Snakemake does not: on SIGTERM it waits for
    its running jobs and is killed after STOP_GRACE_S, and they stay in the queue. One run at a time uses
    an output folder (the run lock), so these are the stopped run's jobs. Returns the job ids."""
    import getpass
    import shutil

    def ours() -> list[str]:
        try:
            q = subprocess.run(["squeue", "-h", "-u", getpass.getuser(), "-o", "%i|%Z"], capture_output=True,
                               text=True, timeout=30)
        except (OSError, subprocess.SubprocessError):
            return []
        ids = []
        for line in q.stdout.splitlines() if q.returncode == 0 else []:
            jid, _, workdir = line.partition("|")
            try:
                if workdir and Path(workdir).resolve() == out.resolve():
                    ids.append(jid.strip())
            except OSError:
                pass
        return ids

    if not (shutil.which("squeue") and shutil.which("scancel")):
        return []
    ids = ours()
    if ids:
        try:
            subprocess.run(["scancel", *ids], capture_output=True, timeout=30)
        except (OSError, subprocess.SubprocessError):
            return ids
        end = time.time() + wait_s
        while time.time() < end and set(ours()) & set(ids):
            time.sleep(0.5)
    return ids


def _start_warm_starter(out: Path, env: dict, executor: str):
    """For a local run: the process that forks the stage jobs with the libraries already loaded
    (chairqm.stages.warm), its socket announced to the jobs in `env`; (process, folder) or None when
    switched off (CHAIRQM_WARM=0), on another executor, or when it cannot start (jobs then start cold)."""
    import shutil
    import tempfile

    from .stages import warm
    if executor != "local" or not warm.enabled(env):
        env.pop(warm.SOCKET_ENV, None)
        return None
    folder = tempfile.mkdtemp(prefix="chairqm-warm-")      # short: a socket path has at most 107 bytes
    path = os.path.join(folder, "jobs.sock")
    try:
        (out / ".chairqm").mkdir(parents=True, exist_ok=True)
        with open(out / ".chairqm" / "warm-starter.log", "w") as log:
            proc = subprocess.Popen([sys.executable, "-m", "chairqm.stages.warm", path], env=env,
                                    stdin=subprocess.DEVNULL, stdout=log, stderr=subprocess.STDOUT)
    except OSError:
        shutil.rmtree(folder, ignore_errors=True)
        env.pop(warm.SOCKET_ENV, None)
        return None
    # the jobs wait for the socket to appear only briefly (bound first thing); a job that finds none runs cold
    deadline = time.time() + 5.0
    while not os.path.exists(path) and proc.poll() is None and time.time() < deadline:
        time.sleep(0.01)
    if proc.poll() is not None or not os.path.exists(path):
        _stop_warm_starter((proc, folder))
        env.pop(warm.SOCKET_ENV, None)
        return None
    env[warm.SOCKET_ENV] = path
    return proc, folder


def _stop_warm_starter(starter) -> None:
    import shutil
    if not starter:
        return
    proc, folder = starter
    if proc.poll() is None:
        proc.terminate()
        try:
            proc.wait(timeout=5)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
    shutil.rmtree(folder, ignore_errors=True)


def _stop_workflow(proc, out: Path, executor: str = "local", others=()) -> None:
    """Stop Snakemake and everything it started (job shells, stage processes, their workers), and the
    processes in `others` with theirs (the warm starter and the jobs it forked): SIGTERM to each, SIGKILL
    to what is left after STOP_GRACE_S; on SLURM, cancel the run's jobs still in the queue
    (`_cancel_slurm_jobs`); then remove the temporary files of writes they were in the middle of
    (`.NAME.XXXX.part`; no process of the run is left to finish them). Further signals are ignored
    meanwhile, so a second Ctrl-C cannot leave the run half stopped."""
    import psutil
    ignored = {}
    for sig in (signal.SIGTERM, signal.SIGINT, signal.SIGHUP):
        try:
            ignored[sig] = signal.signal(sig, signal.SIG_IGN)
        except (OSError, ValueError):
            pass
    try:
        procs = []
        for pid in [proc.pid] + [o.pid for o in others]:
            try:
                procs += [psutil.Process(pid)] + psutil.Process(pid).children(recursive=True)
            except psutil.Error:
                pass
        for p in procs:
            try:
                p.send_signal(signal.SIGTERM)
            except psutil.Error:
                pass
        alive = _wait_gone(procs, proc, STOP_GRACE_S, terminate_new=True, alone_s=SNAKEMAKE_ALONE_S)
        if [p for p in alive if p.pid != proc.pid]:
            print(f"chairqm: {len(alive)} process(es) still running {STOP_GRACE_S:.0f} s after SIGTERM, killed: "
                  + "; ".join(_describe(p) for p in alive), file=sys.stderr, flush=True)
        # processes started meanwhile (a job launched just before the signal) and the stragglers
        try:
            alive += [c for c in psutil.Process(proc.pid).children(recursive=True) if c not in alive]
        except psutil.Error:
            pass
        for p in alive:
            try:
                p.kill()
            except psutil.Error:
                pass
        _wait_gone(alive, proc, 5)
        try:
            proc.wait(timeout=5)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
        if executor == "slurm":
            cancelled = _cancel_slurm_jobs(out)
            if cancelled:
                print(f"chairqm: cancelled SLURM job(s) {', '.join(cancelled)}", file=sys.stderr, flush=True)
        from .stages.__main__ import remove_partial_files
        for folder in [out] + [p for p in out.iterdir() if p.is_dir() and p.name != ".snakemake"]:
            remove_partial_files(folder, recursive=folder != out)
    finally:
        for sig, h in ignored.items():
            signal.signal(sig, h)


def _describe(p) -> str:
    try:
        return f"{p.pid} [{p.status()}] {' '.join(p.cmdline())[:160]}"
    except Exception:                   # noqa: BLE001 - a description must never stop the stop
        return str(getattr(p, "pid", p))


def _wait_gone(procs, child, timeout: float, terminate_new: bool = False, alone_s: float | None = None) -> list:
    """Wait until every process in `procs` has ended; the ones still running after `timeout` s. A zombie
    counts as ended: in a container whose first process does not reap orphans, a job whose parent died
    first stays a zombie for good. Our own child (`child`, Snakemake) is reaped here. With
    `terminate_new`, a process `child` starts meanwhile (a job launched in the instant of the signal, which
    Snakemake would otherwise wait for until the grace time ends) gets SIGTERM and is waited for too, and
    the ones still running get it again every second: a signal that arrives while a job is between fork
    and exec meets the parent's handler, which never runs in the child, and is lost. With `alone_s`, the
    wait also ends when `child` has been the only process left for that long."""
    import psutil
    procs = list(procs)
    deadline = time.time() + timeout
    alone_since = None
    resend = time.time() + 1.0
    while True:
        child.poll()
        if terminate_new and time.time() >= resend:
            resend = time.time() + 1.0
            for p in procs:
                try:
                    if p.is_running() and p.status() != psutil.STATUS_ZOMBIE:
                        p.send_signal(signal.SIGTERM)
                except psutil.Error:
                    pass
        if terminate_new:
            try:
                new = [c for c in psutil.Process(child.pid).children(recursive=True) if c not in procs]
            except psutil.Error:
                new = []
            for p in new:
                try:
                    p.send_signal(signal.SIGTERM)
                except psutil.Error:
                    pass
            procs += new
        alive = []
        for p in procs:
            try:
                if p.is_running() and p.status() != psutil.STATUS_ZOMBIE:
                    alive.append(p)
            except psutil.Error:
                pass
        if not alive or time.time() >= deadline:
            return alive
        if alone_s is not None and [p.pid for p in alive] == [child.pid]:
            alone_since = alone_since or time.time()
            if time.time() - alone_since >= alone_s:
                return alive
        else:
            alone_since = None
        time.sleep(0.05)
