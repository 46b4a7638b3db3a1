"""Runner of one stage: `python -m chairqm.stages STAGE --config C [--molecule M] [--threads N]`
(inside the workflow the configuration comes from $CHAIRQM_CONFIG).

What it guarantees around every stage (the stages themselves only compute and write):
- temporary files of an interrupted atomic write are removed before the stage runs again;
- a molecule's failure record of this or a later stage is cleared when the stage is recomputed;
- an unexpected error inside an isolated stage fails only that molecule: the traceback goes to the job's
  log, `failed.json` says which stage and why, and the stage's outputs are written empty with their
  usual headers, so the other molecules and the report go on and the failure is shown, never dropped;
- an input error (ChairqmError) ends the job with exit code 2 and one message line per problem.
"""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from .. import fileio
from ..errors import ChairqmError
from . import FAILURE_RECORD, get, index, names, warm
from .faults import fault


#: exit code of a stage job stopped by a full disk (the errno of ENOSPC)
DISK_FULL_EXIT = 28
#: seconds a stage waits before it computes when CHAIRQM_FAULTS asks for a "pause" there (tests only)
PAUSE_S = 3.0


def context(config_path):
    """(validated configuration, plan) of a run; raises ChairqmError when either has a problem."""
    from .. import config as cq_config
    from ..plan import make_plan
    cfg = cq_config.load(config_path)
    plan = make_plan(cfg)
    if plan.problems:
        raise ChairqmError("\n".join(plan.problems))
    return cfg, plan


def remove_partial_files(folder: Path, recursive: bool) -> None:
    """Temporary files of an interrupted atomic write (`.NAME.XXXX.part`) are never results: remove them
    before a stage of this molecule (or the report, at the top level) runs again."""
    if not folder.is_dir():
        return
    for f in (folder.rglob(".*.part") if recursive else folder.glob(".*.part")):
        if f.is_file() and not f.is_symlink():
            f.unlink()


def failure(name: str) -> dict | None:
    """The failure record of molecule `name` ({"stage", "reason"}), or None."""
    f = Path(name) / FAILURE_RECORD
    return fileio.read_json(f) if f.is_file() else None


def upstream_failure(name: str) -> str:
    d = failure(name)
    return f"{d['stage']} stage failed: {d['reason']}" if d else ""


def clear_stale_failure(stage: str, name: str) -> None:
    """This stage (or one before the failed one) is being recomputed: the old failure no longer holds."""
    d = failure(name)
    if d is not None and (d.get("stage") not in names() or index(d["stage"]) >= index(stage)):
        (Path(name) / FAILURE_RECORD).unlink()


def record_failure(stage: str, name: str, settings: dict, message: str) -> None:
    """Write the stage's empty outputs and the failure record; a failure of an earlier stage stays the
    recorded one (it is the cause; a later stage may break only because its input is empty)."""
    earlier = failure(name)
    if earlier is None or earlier.get("stage") not in names() or index(earlier["stage"]) >= index(stage):
        fileio.write_json(Path(name) / FAILURE_RECORD, {"stage": stage, "reason": message})
    get(stage).write_empty(name, settings, message)


def main(argv=None) -> int:
    if argv is None and os.environ.get(warm.SOCKET_ENV):
        # a local run's warm starter runs this job in a forked child that has the libraries loaded
        code = warm.delegate(os.environ[warm.SOCKET_ENV], sys.argv[1:])
        if code is not None:
            return code
    ap = argparse.ArgumentParser(prog="python -m chairqm.stages")
    ap.add_argument("stage", choices=names())
    ap.add_argument("--config", default=os.environ.get("CHAIRQM_CONFIG"),
                    help="the run's configuration (default: $CHAIRQM_CONFIG, which the workflow sets)")
    ap.add_argument("--molecule", default=None)
    ap.add_argument("--threads", type=int, default=1)
    args = ap.parse_args(argv)
    if not args.config:
        ap.error("give --config CONFIG (or set CHAIRQM_CONFIG)")
    stage = get(args.stage)
    if stage.per_molecule and not args.molecule:
        ap.error(f"stage {stage.name} needs --molecule")
    # Snakemake exports OMP_NUM_THREADS=<rule threads>; chairqm parallelises over conformers with worker
    # processes instead, so each engine runs single-threaded (two spinning OpenMP teams per core are
    # ~15x slower, measured). Must happen before tblite/xtb are imported; workers inherit it.
    from ..engine import set_threads
    set_threads(1)
    remove_partial_files(Path(args.molecule) if args.molecule else Path("."), recursive=True)
    try:
        cfg, plan = context(args.config)
        if stage.per_molecule and stage.name != "intake":
            clear_stale_failure(stage.name, args.molecule)
        try:
            if fault("pause", f"{args.molecule}/{stage.name}" if args.molecule else stage.name):
                import time
                time.sleep(PAUSE_S)      # a wider window for the interrupt tests to hit this stage
            if fault("crash", f"{args.molecule}/{stage.name}"):
                raise RuntimeError("injected fault: unexpected error inside the stage")
            stage.run(cfg, plan, args.molecule, threads=args.threads)
        except ChairqmError:
            raise
        except Exception as exc:
            if fileio.is_disk_full(exc):
                raise fileio.DiskFull(getattr(exc, "filename", None) or "?", exc.strerror or "") from exc
            if not (stage.per_molecule and stage.isolated):
                raise
            import traceback
            traceback.print_exc()        # into the job's log
            record_failure(stage.name, args.molecule, cfg["settings"], f"{type(exc).__name__}: {exc}")
    except ChairqmError as exc:
        print(f"chairqm: {exc}", file=sys.stderr)
        return 2
    except (fileio.DiskFull, OSError) as exc:
        if not fileio.is_disk_full(exc):
            raise
        # not a failure of this molecule: the job stops, Snakemake removes its outputs, nothing is recorded
        # as failed, and a rerun once space is freed computes it (the log may be on the full disk too)
        try:
            print(f"chairqm: {exc}", file=sys.stderr)
        except OSError:
            pass
        return DISK_FULL_EXIT
    return 0


if __name__ == "__main__":
    sys.exit(main())
