"""The Python API: check a configuration, run the workflow, compute A-values — the same behaviour as the
command line, which is a thin layer over these functions.

    from chairqm import api
    r = api.avalue("[*]C#N", temperatures_k=[298.15])
    r.a_value_kcal, r.families                      # float, pandas DataFrame
    run = api.run("configs/demo.yaml", "results/demo", cores=2)
    run.summary                                     # summary.csv as a DataFrame
    run.molecule("methylcyclohexane").families      # that molecule's families.csv

Every problem a user can fix raises :class:`chairqm.errors.ChairqmError` with the message the command
line prints after ``chairqm: error:``. A workflow that stops (Snakemake exits with an error) raises
:class:`WorkflowError`, a ChairqmError that carries the exit code; molecules that failed inside a
finished run are reported in the result (``RunResult.failed``), never silently dropped.
"""

from __future__ import annotations

import math
import os
import signal
import subprocess
import sys
import time
from pathlib import Path
from typing import Callable, Iterable

from .errors import ChairqmError

#: Seconds between two looks at the output folder for finished stages.
PROGRESS_POLL_S = 1.0
SNAKEMAKE_LOG = Path(".chairqm") / "snakemake.log"
DRY_RUN_FLAGS = ("-n", "--dry-run", "--dryrun", "--summary", "--detailed-summary", "--list-changes")


class WorkflowError(ChairqmError):
    """The workflow stopped with an error (Snakemake's exit code in `returncode`); the message says where
    the logs are."""

    def __init__(self, message: str, returncode: int, out: Path | None = None):
        super().__init__(message)
        self.returncode = returncode
        self.out = out


# ------------------------------------------------------------------------------------ results
# the result objects live in chairqm.results; these names stay importable from here
from .results import (TEXT_COLUMNS, AValueResult, AValueTable, MoleculeResult, RunResult,  # noqa: E402,F401
                      _read_csv)
# the processes of a run (chairqm.processes); Interrupted is public and stays importable from here
from .processes import (Interrupted, _executor, _no_file, _signals_as_interrupts,  # noqa: E402
                        _start_warm_starter, _stop_warm_starter, _stop_workflow)
# checking a configuration before a run (chairqm.configcheck); check, CheckResult, prepare, screen, format_rows
# and solvent_text are public and stay importable from here
from .configcheck import CheckResult, check, format_rows, prepare, screen, solvent_text  # noqa: E402,F401


def _as_config_path(config, out: Path | None) -> Path:
    """A configuration given as a mapping is written to OUT/run-config.yaml (relative structure-file paths
    made absolute against the current folder) so the workflow can read it; a path is used as it is."""
    if isinstance(config, (str, os.PathLike)):
        return Path(config)
    if not isinstance(config, dict):
        raise ChairqmError(f"the configuration must be a file path or a mapping, not {type(config).__name__}")
    if out is None:
        raise ChairqmError("a configuration given as a mapping needs an output folder (out=...)")
    import copy

    import yaml

    from . import fileio
    cfg = copy.deepcopy(config)
    for m in cfg.get("molecules") or []:
        if isinstance(m, dict) and isinstance(m.get("file"), str) and not Path(m["file"]).is_absolute():
            m["file"] = str(Path(m["file"]).resolve())
    Path(out).mkdir(parents=True, exist_ok=True)
    path = Path(out) / "run-config.yaml"
    fileio.write_text(path, yaml.safe_dump(cfg, sort_keys=False))
    return path


# ------------------------------------------------------------------------------------ running

def available_stages() -> list[str]:
    """Stages a run can stop after (`until`), from the one stage registry."""
    from . import stages
    return stages.until_names()


def failed_stage_targets(out: Path, plan, settings) -> list[str]:
    """The first output of every stage that failed for a molecule in an earlier run (its failed.json):
    Snakemake counts that stage's empty outputs as up to date, so a plain rerun would keep the molecule
    failed. Passing these to --forcerun recomputes the failed stage and everything after it."""
    from . import fileio, stages
    targets = []
    for m in plan.molecules:
        f = out / m.name / stages.FAILURE_RECORD
        if not f.is_file():
            continue
        try:
            stage = stages.get(fileio.read_json(f)["stage"])
        except (KeyError, ValueError, OSError):
            continue
        if stage.per_molecule and stage.enabled(settings):
            targets.append(f"{m.name}/{stage.paths()[0][0]}")
    return targets


def resolve_profiles(extra) -> list[str]:
    """Snakemake arguments with every `--profile X` that names a packaged profile (`laptop`, `slurm`,
    or the source tree's old path `workflows/profiles/NAME`) and is not an existing folder replaced by
    the packaged profile's folder; anything else is passed on unchanged."""
    from . import workflow
    out = list(extra)
    for i, arg in enumerate(out):
        value, prefix = None, ""
        if arg == "--profile" and i + 1 < len(out):
            value, idx = out[i + 1], i + 1
        elif arg.startswith("--profile="):
            value, idx, prefix = arg.split("=", 1)[1], i, "--profile="
        if value is None or Path(value).is_dir():
            continue
        name = Path(value).name
        if name in workflow.profile_names() and (Path(value).parent.as_posix() in ("", ".", "workflows/profiles")):
            out[idx] = prefix + str(workflow.profile(name))
    return out


def _output_folder(out) -> Path:
    """The output folder, absolute; ChairqmError when it is a file, lies under a file, or cannot be
    created or written (checked before anything is validated or written)."""
    out = Path(out).resolve()
    for p in [out, *out.parents]:
        if p.exists() and not p.is_dir():
            what = "is a file" if p == out else f"lies inside {p}, which is a file"
            raise ChairqmError(f"output folder {out} {what}: choose a folder with --out")
    existing = next(p for p in [out, *out.parents] if p.exists())
    if not os.access(existing, os.W_OK | os.X_OK):
        what = "is read-only" if existing == out else f"cannot be created: {existing} is read-only"
        raise ChairqmError(f"output folder {out} {what} for this user: choose a writable folder with --out")
    return out


def _lock_output(out: Path):
    """One chairqm run per output folder: an exclusive advisory lock on OUT/.chairqm/run.lock, released
    by the kernel when the process dies, so a killed run never blocks the rerun (Snakemake's own lock
    files would, so chairqm runs Snakemake with --nolock under this lock)."""
    import fcntl
    path = out / ".chairqm" / "run.lock"
    path.parent.mkdir(parents=True, exist_ok=True)
    fh = open(path, "w")
    try:
        fcntl.flock(fh, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        fh.close()
        raise ChairqmError(f"another chairqm run is using {out}: wait for it to finish or choose another --out")
    return fh


def verbose_default() -> bool:
    """CHAIRQM_VERBOSE set to anything but '', 0, no, false: show Snakemake's own output."""
    return os.environ.get("CHAIRQM_VERBOSE", "").strip().lower() not in ("", "0", "no", "false")


class Progress:
    """Short progress lines while Snakemake runs: one per molecule and stage when all its output files are
    new since the watcher was made (absent then, or written again since: Snakemake removes a job's outputs
    before running it) or its failure record appears; read from the output folder, so it works the same
    for local and cluster jobs. The files' state is taken when the watcher is made rather than compared
    with the start time, so outputs a run just before wrote are never mistaken for this run's."""

    def __init__(self, out: Path, plan, settings, until: str | None, start: float,
                 emit: Callable[[str], None]):
        from . import stages
        self.out, self.start, self.emit = out, start, emit
        last = stages.index(until) if until else len(stages.names()) - 1
        self.watch = []          # (stage, molecule or None, the paths of its output files)
        for s in stages.STAGES[:last + 1]:
            if not s.enabled(settings):
                continue
            files = [p for p, is_folder in s.paths() if not is_folder]
            if s.per_molecule:
                self.watch.extend((s.name, m.name, [out / m.name / f for f in files]) for m in plan.molecules)
            else:
                self.watch.append((s.name, None, [out / f for f in files]))
        self.molecules = [m.name for m in plan.molecules]
        self.width = max([len(n) for n in self.molecules] + [len("all molecules")])
        self.seen: set = set()
        self.failed_seen: set = set()
        self.before = {p: self._stamp(p) for _, _, paths in self.watch for p in paths}
        self.before.update({p: self._stamp(p) for p in (out / m / stages.FAILURE_RECORD for m in self.molecules)})

    @staticmethod
    def _stamp(path: Path):
        try:
            st = path.stat()
        except OSError:
            return None
        return st.st_mtime_ns, st.st_ino, st.st_size

    def _fresh(self, path: Path) -> bool:
        now = self._stamp(path)
        return now is not None and now != self.before.get(path)

    def poll(self):
        from . import fileio, stages
        for m in self.molecules:
            f = self.out / m / stages.FAILURE_RECORD
            if m not in self.failed_seen and self._fresh(f):
                try:
                    rec = fileio.read_json(f)
                except (ValueError, OSError):
                    continue
                self.failed_seen.add(m)
                self._line(rec.get("stage", "?"), m, f"FAILED: {rec.get('reason', '')}".strip())
        for stage, mol, paths in self.watch:
            if (stage, mol) in self.seen or not all(self._fresh(p) for p in paths):
                continue
            self.seen.add((stage, mol))
            if mol in self.failed_seen:
                continue
            self._line(stage, mol, "done")

    def _line(self, stage, mol, what):
        t = int(time.time() - self.start)
        self.emit(f"  {t // 60:3d}:{t % 60:02d}  {stage:<9} {(mol or 'all molecules'):<{self.width}}  {what}")


VALID_CONFIG = Path(".chairqm") / "valid-config.yaml"


def _valid_config(config_path: Path, out: Path, valid: list[dict], refused: list[dict]) -> Path:
    """OUT/.chairqm/valid-config.yaml: the configuration with only the runnable molecules (structure-file
    paths made absolute) and the refused ones under `refused`, which the report lists."""
    import yaml

    from . import config as cq_config
    from . import fileio
    raw = dict(cq_config.read(config_path))
    base = Path(config_path).resolve().parent
    mols = []
    for m in valid:
        m = dict(m)
        if isinstance(m.get("file"), str) and not Path(m["file"]).is_absolute():
            m["file"] = str(base / m["file"])
        mols.append(m)
    raw["molecules"] = mols
    raw["refused"] = refused
    path = out / VALID_CONFIG
    fileio.write_text(path, f"# {Path(config_path).resolve()} without the molecules it refuses "
                            "(chairqm run --skip-invalid)\n" + yaml.safe_dump(raw, sort_keys=False))
    return path


def run(config, out=None, cores: int = 2, until: str | None = None, profile: str | None = None,
        snakemake_args: Iterable[str] = (), verbose: bool | None = None,
        progress: bool | Callable[[str], None] = True, skip_invalid: bool = False) -> RunResult:
    """Run the workflow on a configuration (a YAML path or a mapping) into `out` (default
    results/<config name>); returns the finished run. `until` stops after a stage; `profile` is a
    packaged Snakemake profile name (laptop, slurm) or a profile folder; `snakemake_args` go to Snakemake
    unchanged. By default Snakemake's own output goes to OUT/.chairqm/snakemake.log and a line per
    molecule and stage is printed (`progress=False` for none, or a callable that takes each line);
    `verbose=True` (or CHAIRQM_VERBOSE=1) shows Snakemake's output instead. `skip_invalid=True` runs the
    molecules that pass `check` and lists the refused ones, with their reasons, as failed rows of
    summary.csv (a problem of the configuration as a whole still raises).

    Raises ChairqmError for input problems and WorkflowError when the workflow stops with an error."""
    if out is None:
        if not isinstance(config, (str, os.PathLike)):
            raise ChairqmError("a configuration given as a mapping needs an output folder (out=...)")
        out = Path("results") / Path(config).stem
    out = _output_folder(out)
    config_path = _as_config_path(config, out)
    refused = []
    if skip_invalid:
        valid, refused = screen(config_path)
        if refused:
            config_path = _valid_config(config_path, out, valid, refused)
            say = progress if callable(progress) else (lambda line: print(line, file=sys.stderr, flush=True))
            for r in refused:
                say(f"chairqm: skipping {r['name']}: {r['reason']}")
    cfg, plan = prepare(config_path)
    stages = available_stages()
    if until is not None and until not in stages:
        raise ChairqmError(f"--until {until}: the stages are {', '.join(stages)}")
    extra = resolve_profiles((["--profile", str(profile)] if profile else []) + list(snakemake_args))
    target = "all" if until is None else f"until_{until}"
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ChairqmError(f"cannot create output folder {out}: {exc.strerror or exc}") from None
    for m in plan.molecules:
        if (out / m.name).is_symlink():
            raise ChairqmError(f"{out / m.name} is a symbolic link: chairqm writes only inside the output folder; "
                               "remove the link or choose another --out")
    dry = any(a in DRY_RUN_FLAGS for a in extra)
    verbose = verbose_default() if verbose is None else bool(verbose)
    emit = progress if callable(progress) else (lambda line: print(line, flush=True)) if progress else None
    lock = None if dry else _lock_output(out)      # a dry run writes nothing and needs no lock
    from . import fileio, workflow
    start = time.time()
    if not dry:
        fileio.write_json(out / ".chairqm" / "run-start.json",
                          {"epoch": start, "iso": time.strftime("%Y-%m-%dT%H:%M:%S%z"), "target": target})
    retry = failed_stage_targets(out, plan, cfg["settings"])
    if retry and not dry:
        print(f"chairqm: retrying what failed before: {', '.join(retry)}", file=sys.stderr)
    show = verbose or dry           # a dry run's plan is what the user asked to see
    # Snakemake's own command line, through chairqm.workflow.launch: on the local executor it leaves out the
    # job-rate limiter's one-second exit delay (that module says why)
    from .workflow import launch
    local = [launch.LOCAL_FLAG] if _executor(extra) == "local" else []
    cmd = [sys.executable, "-m", "chairqm.workflow.launch", *local, target, "--snakefile", str(workflow.snakefile()),
           "--directory", str(out), "--config", f"chairqm_config={config_path.resolve()}", "--cores", str(cores),
           "--rerun-incomplete", "--keep-going", "--nolock", "--printshellcmds",
           *(["--forcerun", *retry] if retry else []), *extra]
    env = dict(os.environ)
    env.setdefault("OMP_NUM_THREADS", "1")
    env.setdefault("OPENBLAS_NUM_THREADS", "1")
    env.setdefault("MKL_NUM_THREADS", "1")
    log_path = out / SNAKEMAKE_LOG
    watcher = None
    starter = None if dry else _start_warm_starter(out, env, _executor(extra))
    try:
        with _signals_as_interrupts():
            if not show:
                log_path.parent.mkdir(parents=True, exist_ok=True)
                watcher = Progress(out, plan, cfg["settings"], until, start, emit) if emit else None
                if emit:
                    emit(f"chairqm: {len(plan.molecules)} molecule(s) into {out} on {cores} core(s); "
                         f"Snakemake's log: {log_path} (--verbose shows it here)")
            with (open(log_path, "w") if not show else _no_file()) as log:
                proc = subprocess.Popen(cmd, env=env, stdout=log, stderr=subprocess.STDOUT if log else None)
                try:
                    while True:
                        try:
                            returncode = proc.wait(timeout=PROGRESS_POLL_S)
                            break
                        except subprocess.TimeoutExpired:
                            if watcher:
                                watcher.poll()
                except BaseException as exc:
                    signum = exc.signum if isinstance(exc, Interrupted) else signal.SIGINT
                    _stop_workflow(proc, out, executor=_executor(extra),
                                   others=[starter[0]] if starter else [])
                    if isinstance(exc, (Interrupted, KeyboardInterrupt)):
                        raise Interrupted(signum, out) from None
                    raise
        if watcher:
            watcher.poll()
            if not watcher.seen and not watcher.failed_seen and returncode == 0:
                emit("  nothing to redo: every stage is up to date")
    finally:
        _stop_warm_starter(starter)
        if lock is not None:
            lock.close()
    if returncode != 0:
        full = _disk_full_note(out, plan, log_path if not show else None)
        if full:
            raise WorkflowError(full, returncode, out)
        msg = f"the workflow stopped with an error (exit {returncode}); " + _where_logs(out, log_path if not show else None)
        if not show:
            msg += ":\n" + _log_tail(log_path)
        raise WorkflowError(msg, returncode, out)
    return RunResult(out, until=until, returncode=0, molecules=plan.names())


#: Disk space a run takes, estimated per molecule of N atoms: the cached Hessian displacements (at most 6N+1 files,
#: one 4 KiB block each) of HESSIANS_PER_MOLECULE conformers, their records and geometries, and the
#: molecule's tables; plus the run's own files. Measured on methylcyclohexane (21 atoms, 2 chairs): 1.9 MB
#: on disk in all, of which 1.0 MB Hessian displacements; the estimate gives 3.7 MB.
HESSIANS_PER_MOLECULE = 4
DISK_PER_CONFORMER = 64 * 1024
DISK_PER_MOLECULE = 256 * 1024
DISK_PER_RUN = 1024 * 1024


def disk_estimate(plan) -> int:
    """Bytes a run of `plan` takes in its output folder, roughly (see HESSIANS_PER_MOLECULE)."""
    total = DISK_PER_RUN
    for m in plan.molecules:
        n = m.mol.GetNumAtoms()
        total += DISK_PER_MOLECULE + HESSIANS_PER_MOLECULE * (4096 * (6 * n + 1) + DISK_PER_CONFORMER)
    return total


def _size_on_disk(folder: Path) -> int:
    total = 0
    for p in folder.rglob("*"):
        try:
            total += p.lstat().st_blocks * 512
        except OSError:
            pass
    return total


def _mb(n: float) -> str:
    return f"{n / 1e6:.1f} MB"


def _disk_full_note(out: Path, plan, log_path: Path | None) -> str:
    """The message for a run stopped by a full disk ('' when the disk is not the cause): the folder, the
    space free, written so far and needed in all."""
    import shutil
    try:
        free = shutil.disk_usage(out).free
    except OSError:
        return ""
    texts = []
    for p in ([log_path] if log_path is not None else []) + _failed_job_logs(out, log_path):
        try:
            texts.append(p.read_text(errors="replace").lower())
        except OSError:
            pass
    said = any(w in t for t in texts for w in ("no space left on", "disk quota exceeded"))
    if not said and free >= 1024 * 1024:
        return ""
    need, used = disk_estimate(plan), _size_on_disk(out)
    return (f"no space left in {out}: {_mb(free)} free on its disk, {_mb(used)} written so far; this run needs "
            f"about {_mb(need)} in all (an estimate), so free at least {_mb(max(need - used, 0))} more there, or "
            f"choose another --out; then rerun the same command: it resumes from the records already written")


def _failed_job_logs(out: Path, log_path: Path | None) -> list[Path]:
    """The log files Snakemake names for its failed jobs ("log: PATH[, PATH] (check log file(s) ...)"
    after "Error in rule"; on a cluster the second is the scheduler's log of the job, an absolute path),
    as paths inside the output folder or absolute."""
    import re
    try:
        text = log_path.read_text(errors="replace") if log_path is not None else ""
    except OSError:
        return []
    found = []
    for block in text.split("Error in rule")[1:]:
        m = re.search(r"^\s*log:\s*(.+?)(?:\s+\(check log file|\s*$)", block[:4000], re.M)
        for name in (m.group(1).split(", ") if m else []):
            p = out / name.strip()          # an absolute name stays absolute
            if name.strip() and p not in found:
                found.append(p)
    return found


def _where_logs(out: Path, log_path: Path | None) -> str:
    """Where to read about a stopped workflow: the failed jobs' own logs when Snakemake's log names
    them, else the two log folders (per molecule, and the run's for the report stage), then Snakemake's log."""
    jobs = _failed_job_logs(out, log_path)
    where = ("see " + ", ".join(str(p) + _last_line(p) for p in jobs) if jobs else
             f"logs are in {out}/<molecule>/logs/ (molecule stages) and {out}/logs/ (the report stage)")
    return where + (f" and Snakemake's log {log_path}" if log_path is not None else "")


def _last_line(path: Path) -> str:
    """' (last line: ...)' of a job's log, usually the exception that stopped it; '' when empty."""
    try:
        lines = [l.strip() for l in path.read_text(errors="replace").splitlines() if l.strip()]
    except OSError:
        return ""
    return f" (last line: {lines[-1][:300]})" if lines else ""


def _log_tail(path: Path, n: int = 15) -> str:
    """The last lines of Snakemake's log that say what went wrong (its error block, or the end)."""
    try:
        lines = path.read_text(errors="replace").splitlines()
    except OSError:
        return ""
    for i, line in enumerate(lines):
        if line.startswith(("Error", "WorkflowError", "MissingInputException", "SyntaxError")):
            return "\n".join("  " + l for l in lines[i:i + n])
    return "\n".join("  " + l for l in lines[-n:])


# ------------------------------------------------------------------------------------ A-values

def _solvent_block(solvent):
    """None, 'MODEL:NAME' (e.g. 'alpb:water') or {model, name} -> the configuration's solvent block."""
    if solvent in (None, "", "none", "gas"):
        return None
    if isinstance(solvent, dict):
        return dict(solvent)
    model, _, name = str(solvent).partition(":")
    if not name:
        raise ChairqmError(f"--solvent {solvent!r}: write MODEL:NAME, e.g. alpb:water or gbsa:chloroform")
    return {"model": model.lower(), "name": name}


def avalue_molecule_name(fragment: str) -> str:
    from .plan import _slug
    return _slug(fragment).replace("ref-", "avalue-", 1)


def avalues(groups: Iterable[str], temperatures_k=None, solvent=None, out=None, cores: int = 2,
            engine: str | None = None, method: str | None = None, **run_options) -> AValueTable:
    """A-values of several groups (SMILES with one attachment point [*]) in one run: each group's
    monosubstituted cyclohexane goes through the whole workflow. Returns the table (also written to
    OUT/avalues.csv) and one AValueResult per group. Settings not given take the schema's defaults."""
    import pandas as pd

    from . import additivity
    from . import avalues as tab
    from . import config as cq_config
    from . import fileio
    frags = []
    for g in groups:
        f = tab.canonical_fragment(g)
        if f not in frags:
            frags.append(f)
    if not frags:
        raise ChairqmError("give at least one group, e.g. \"[*]C1CC1\"")
    names = [avalue_molecule_name(f) for f in frags]
    if out is None:
        out = Path("results") / (names[0] if len(frags) == 1 else "avalues")
    out = Path(out)
    given = {"temperatures_k": list(temperatures_k) if temperatures_k else None, "engine": engine, "method": method}
    settings = {k: v for k, v in given.items() if v is not None}
    settings["analysis"] = {"reference_groups": False}
    block = _solvent_block(solvent)
    if block is not None:
        settings["solvent"] = block
    title = f"A-value of {frags[0]}" if len(frags) == 1 else f"A-values of {len(frags)} groups"
    cfg = {"project": title,
           "molecules": [{"name": n, "smiles": additivity.reference_smiles(f),
                          "note": f"monosubstituted cyclohexane of {f}"} for n, f in zip(names, frags)],
           "settings": settings}
    out.mkdir(parents=True, exist_ok=True)
    import yaml
    cfg_path = out / "avalue-config.yaml"
    fileio.write_text(cfg_path, yaml.safe_dump(cfg, sort_keys=False))
    result = run(cfg_path, out, cores=cores, **run_options)
    summary = result.summary
    used = {**cq_config.settings_defaults(), **settings}
    temps = [float(t) for t in used["temperatures_k"]]
    rows, results = [], []
    for name, frag in zip(names, frags):
        mine = summary[summary["molecule"] == name]
        tabrow = tab.lookup(frag)
        tab_kcal = float(tabrow["a_value_kcal"]) if tabrow is not None else None
        tab_src = str(tabrow["source"]) if tabrow is not None else ""
        fam_path = out / name / "families.csv"
        fam = _read_csv(fam_path) if fam_path.is_file() else None
        values, reason = {}, ""
        for r in mine.itertuples():
            t = float(r.temperature_k)
            ok = r.status == "ok" and _num(r.a_value_kcal) is not None
            a = _num(r.a_value_kcal) if ok else None
            if a is not None:
                values[t] = a
            else:
                reason = r.reason or r.flag_reason or "no A-value"
            eq = ax = None
            if fam is not None and ok:
                f_t = fam[(fam["temperature_k"] - t).abs() < 1e-6]
                chairs = f_t[f_t["ring_form"] == "chair"]
                is_ax = chairs["axial"] != ""
                eq, ax = float(chairs.loc[~is_ax, "population"].sum()), float(chairs.loc[is_ax, "population"].sum())
            rows.append({"group": frag, "molecule": name, "temperature_k": t, "status": r.status,
                         "a_value_kcal": a, "calibrated_kcal": _num(getattr(r, "calibrated_kcal", None)),
                         "interval_low_kcal": _num(getattr(r, "interval_low_kcal", None)),
                         "interval_high_kcal": _num(getattr(r, "interval_high_kcal", None)),
                         "tabulated_kcal": tab_kcal, "tabulated_source": tab_src,
                         "equatorial_chair_population": eq, "axial_chair_population": ax,
                         "other_ring_forms_population": _num(r.twist_boat_population) if ok else None,
                         "reason": "" if ok else reason})
        results.append(AValueResult(group=frag, molecule=name, out=out, temperatures_k=temps,
                                    a_values_kcal=values, rows=None, tabulated_kcal=tab_kcal,
                                    tabulated_source=tab_src, reason=reason))
    table = pd.DataFrame(rows, columns=AVALUE_COLUMNS)
    for r in results:
        r.rows = table[table["group"] == r.group].reset_index(drop=True)
    fileio.write_csv(out / "avalues.csv", table, significant_digits=fileio.SUMMARY_SIGNIFICANT_DIGITS)
    return AValueTable(out=out, table=table, results=results, run=result)


AVALUE_COLUMNS = ["group", "molecule", "temperature_k", "status", "a_value_kcal", "calibrated_kcal",
                  "interval_low_kcal", "interval_high_kcal", "tabulated_kcal", "tabulated_source",
                  "equatorial_chair_population", "axial_chair_population", "other_ring_forms_population", "reason"]


def _num(v) -> float | None:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return None if math.isnan(f) else f


def avalue(group: str, temperatures_k=None, solvent=None, out=None, cores: int = 2, **options) -> AValueResult:
    """The A-value of one group (SMILES with one attachment point, e.g. "[*]C#N"), computed on its
    monosubstituted cyclohexane with the whole workflow. `solvent`: None (gas phase), 'MODEL:NAME' or
    {model, name}; `out` defaults to results/avalue-<group>. Returns an AValueResult."""
    return avalues([group], temperatures_k=temperatures_k, solvent=solvent, out=out, cores=cores,
                   **options).results[0]
