"""The `chairqm` command: check a configuration, run the workflow, answer A-value questions."""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
from pathlib import Path

from . import __version__
from . import config as cq_config
from .errors import ChairqmError

EXIT_INPUT = 2


def project_root() -> Path:
    """The source checkout this package sits in (its configs/ exist only there, not in a wheel install)."""
    return Path(__file__).resolve().parent.parent


def snakefile() -> Path:
    """The packaged workflow (chairqm/workflow/Snakefile, found through importlib.resources)."""
    from . import workflow
    return workflow.snakefile()


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


def available_stages() -> list[str]:
    """Stages a run can stop after (`--until`), from the one stage registry."""
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


def _prepare(config_path):
    """Validate configuration, molecules and engine settings; return (cfg, plan). Raises ChairqmError."""
    from .plan import make_plan
    cfg = cq_config.load(config_path)
    plan = make_plan(cfg)
    problems = list(plan.problems)
    try:
        from . import engine
    except ImportError:
        engine = None
    if engine is not None:
        s = cfg["settings"]
        try:
            engine.check_settings(s["engine"], s["method"], s.get("solvent"))
        except ChairqmError as exc:
            problems.append(str(exc))
    if not problems and cfg["settings"].get("refine") is not None:
        try:
            from . import refine
            rs = refine.resolve(cfg["settings"]["refine"])
            for m in plan.molecules:
                elements = [a.GetSymbol() for a in m.mol.GetAtoms()]
                try:
                    refine.check(rs, elements, m.charge, m.multiplicity, cfg["settings"].get("solvent"))
                except ChairqmError as exc:
                    problems.append(f"{m.name}: refine: {exc}")
        except ImportError as exc:
            problems.append(f"settings.refine needs PySCF and dftd3: pip install -e '.[dft]' ({exc})")
        except ChairqmError as exc:
            problems.append(f"settings.refine: {exc}")
    if problems:
        raise ChairqmError("\n".join(problems))
    return cfg, plan


def _table(plan) -> str:
    rows = [("molecule", "ring atoms", "substituents", "stereo")]
    for m in plan.molecules:
        ring = "-".join(f"{e}{i}" for e, i in zip(m.ring_elements, m.ring))
        subs = ", ".join(f"{s.id}@{s.ring_atom} {s.fragment}" for s in m.substituents) or "none"
        name = m.name + (" (reference)" if m.reference else "")
        rows.append((name, ring, subs, m.stereo))
    widths = [max(len(r[i]) for r in rows) for i in range(4)]
    lines = ["  ".join(c.ljust(w) for c, w in zip(r, widths)).rstrip() for r in rows]
    lines.insert(1, "  ".join("-" * w for w in widths))
    return "\n".join(lines)


def cmd_check(args) -> int:
    cfg, plan = _prepare(args.config)
    print(_table(plan))
    s = cfg["settings"]
    solvent = s.get("solvent") or {}
    print(f"\n{len(plan.molecules)} molecule(s); {s['method']} with {s['engine']}; solvent: "
          f"{(solvent.get('model', '') + ' ' + solvent.get('name', '')).strip() or 'none (gas phase)'}; "
          f"T = {', '.join(f'{t:g}' for t in s['temperatures_k'])} K")
    return 0


def default_out(config_path) -> Path:
    return Path("results") / Path(config_path).stem


def run_workflow(config_path, out, cores=2, until=None, extra=()) -> int:
    cfg, plan = _prepare(config_path)
    extra = resolve_profiles(extra)
    stages = available_stages()
    if until is not None and until not in stages:
        raise ChairqmError(f"--until {until}: the stages are {', '.join(stages)}")
    target = "all" if until is None else f"until_{until}"
    out = Path(out).resolve()
    out.mkdir(parents=True, exist_ok=True)
    for m in plan.molecules:
        if (out / m.name).is_symlink():
            raise ChairqmError(f"{out / m.name} is a symbolic link: chairqm writes only inside the output folder; "
                               "remove the link or choose another --out")
    dry = any(a in ("-n", "--dry-run", "--dryrun", "--summary", "--detailed-summary", "--list-changes")
              for a in extra)
    lock = None if dry else _lock_output(out)      # a dry run writes nothing and needs no lock
    import time
    from . import fileio
    if not dry:
        fileio.write_json(out / ".chairqm" / "run-start.json",
                          {"epoch": time.time(), "iso": time.strftime("%Y-%m-%dT%H:%M:%S%z"), "target": target})
    retry = failed_stage_targets(out, plan, cfg["settings"])
    if retry and not dry:
        print(f"chairqm: retrying what failed before: {', '.join(retry)}", file=sys.stderr)
    cmd = [sys.executable, "-m", "snakemake", target, "--snakefile", str(snakefile()), "--directory", str(out),
           "--config", f"chairqm_config={Path(config_path).resolve()}", "--cores", str(cores),
           "--rerun-incomplete", "--keep-going", "--nolock", *(["--printshellcmds"] if os.environ.get("CHAIRQM_VERBOSE") else ["--quiet", "rules"]),
           *(["--forcerun", *retry] if retry else []), *extra]
    env = dict(os.environ)
    env.setdefault("OMP_NUM_THREADS", "1")
    env.setdefault("OPENBLAS_NUM_THREADS", "1")
    env.setdefault("MKL_NUM_THREADS", "1")
    try:
        proc = subprocess.run(cmd, env=env)
    finally:
        if lock is not None:
            lock.close()
    if proc.returncode != 0:
        print(f"chairqm: the workflow stopped with an error (exit {proc.returncode}); "
              f"logs are in {out}/<molecule>/logs/", file=sys.stderr)
        return proc.returncode
    return _finish(out, plan, until)


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


def _finish(out: Path, plan, until) -> int:
    summary = out / "summary.csv"
    if until is None and summary.is_file():
        import pandas as pd
        df = pd.read_csv(summary)
        failed = sorted(set(df.loc[df["status"] != "ok", "molecule"]))
        report = out / "report.html"
        print(f"chairqm: results in {out}" + (f"; report: {report}" if report.is_file() else ""))
        if failed:
            print(f"chairqm: {len(failed)} molecule(s) failed: {', '.join(failed)} (see summary.csv)", file=sys.stderr)
            return 1
        return 0
    if until is None:
        print(f"chairqm: nothing was run to completion in {out} (dry run?)")
        return 0
    print(f"chairqm: stage '{until}' done; results in {out}")
    return 0


def _with_profile(args, extra) -> list[str]:
    return (["--profile", args.profile] if getattr(args, "profile", None) else []) + list(extra)


def cmd_run(args, extra) -> int:
    extra = _with_profile(args, extra)
    out = args.out or default_out(args.config)
    return run_workflow(args.config, out, cores=args.cores, until=args.until, extra=extra)


def cmd_avalue(args, extra) -> int:
    """Build the group's monosubstituted cyclohexane, run the whole workflow on it, print the A-value."""
    import yaml
    from . import additivity, avalues
    from .plan import _slug
    extra = _with_profile(args, extra)
    frag = avalues.canonical_fragment(args.fragment)
    smiles = additivity.reference_smiles(frag)
    name = _slug(frag).replace("ref-", "avalue-", 1)
    out = Path(args.out or Path("results") / name)
    # only what the user gave; every other setting takes the schema's default
    given = {"temperatures_k": args.temperature, "engine": args.engine, "method": args.method}
    settings = {k: v for k, v in given.items() if v is not None}
    settings["analysis"] = {"reference_groups": False}
    if args.solvent:
        model, _, sname = args.solvent.partition(":")
        if not sname:
            raise ChairqmError(f"--solvent {args.solvent!r}: write MODEL:NAME, e.g. alpb:water or gbsa:chloroform")
        settings["solvent"] = {"model": model.lower(), "name": sname}
    cfg = {"project": f"A-value of {frag}", "molecules": [{"name": name, "smiles": smiles,
                                                           "note": f"monosubstituted cyclohexane of {frag}"}],
           "settings": settings}
    out.mkdir(parents=True, exist_ok=True)
    cfg_path = out / "avalue-config.yaml"
    from . import fileio
    fileio.write_text(cfg_path, yaml.safe_dump(cfg, sort_keys=False))
    code = run_workflow(cfg_path, out, cores=args.cores, until=None, extra=extra)
    summary = out / "summary.csv"
    if not summary.is_file():
        return code or 1
    import pandas as pd
    df = pd.read_csv(summary, keep_default_na=False)
    used = {**cq_config.settings_defaults(), **settings}
    tab = avalues.lookup(frag)
    for r in df.itertuples():
        if r.status != "ok" or r.a_value_kcal == "":
            print(f"{frag}: no A-value at {r.temperature_k:g} K ({r.reason or r.flag_reason})")
            continue
        fam = pd.read_csv(out / name / "families.csv")
        fam = fam[fam["temperature_k"] == r.temperature_k]
        chairs = fam[fam["ring_form"] == "chair"]
        eq = chairs.loc[chairs["axial"].isna(), "population"].sum()
        ax = chairs.loc[chairs["axial"].notna(), "population"].sum()
        line = (f"A({frag}) = {float(r.a_value_kcal):.2f} kcal/mol at {r.temperature_k:g} K "
                f"({used['method']}, {used['engine']}, {args.solvent or 'gas phase'}); "
                f"equatorial chair {100 * eq:.1f} %, axial chair {100 * ax:.1f} %, "
                f"other ring forms {100 * float(r.twist_boat_population):.1f} %")
        cal = getattr(r, "calibrated_kcal", "")
        if cal not in ("", None):
            line += (f"; calibrated {float(cal):.2f} kcal/mol, 95 % interval "
                     f"{float(r.interval_low_kcal):.2f} to {float(r.interval_high_kcal):.2f}")
        print(line)
    if tab is not None:
        print(f"tabulated for comparison: {tab['a_value_kcal']:.2f} kcal/mol ({tab['source']})")
    print(f"report: {out / 'report.html'}")
    return code


def default_reference_config() -> Path:
    """configs/reference.yaml of the source checkout; a wheel install has no configs/ folder."""
    path = project_root() / "configs" / "reference.yaml"
    if not path.is_file():
        raise ChairqmError("no reference configuration given and no source checkout's configs/reference.yaml "
                           "next to this installation: run `chairqm calibrate PATH/TO/reference.yaml`")
    return path


def cmd_calibrate(args, extra) -> int:
    """Run the reference set, fit computed against experimental A-values, store the calibration."""
    from . import calibration as cq_cal
    extra = _with_profile(args, extra)
    config = args.config or default_reference_config()
    out = Path(args.out or (default_out(config) if args.refine is None
                            else Path(str(default_out(config)) + "-refined")))
    if args.refine is not None:
        config = _with_refinement(config, args.refine, out)
    code = run_workflow(config, out, cores=args.cores, until=None, extra=extra)
    if not (out / "summary.csv").is_file():
        return code or 1
    cal = cq_cal.calibrate_run(out, config)
    print(cal.table()[["molecule", "group", "experimental_kcal", "computed_kcal", "error_kcal", "used"]]
          .to_string(index=False))
    print(cq_cal.summary_text(cal))
    target = Path(args.save) if args.save else out / "calibration.json"
    cq_cal.save(cal, target)
    cq_cal.parity_plot(cal, out / "parity.png")
    print(f"chairqm: calibration stored in {target}; parity plot {out / 'parity.png'}")
    if not args.save:
        print("chairqm: to use it for later runs with these settings, rerun with "
              f"--save {cq_cal.packaged_path()}")
    return code


def _with_refinement(config_path, refine_text: str, out: Path) -> Path:
    """Write OUT/calibrate-config.yaml: the configuration with settings.refine set from `refine_text` (a YAML
    mapping such as '{basis: def2-TZVP}'; '{}' takes every default), and return its path."""
    import yaml
    from . import fileio
    try:
        block = yaml.safe_load(refine_text) if refine_text.strip() else {}
    except yaml.YAMLError as exc:
        raise ChairqmError(f"--refine {refine_text!r} is not a YAML mapping ({exc}): write e.g. "
                           "--refine '{basis: def2-TZVP}'") from None
    if block is None:
        block = {}
    if not isinstance(block, dict):
        raise ChairqmError(f"--refine {refine_text!r} must be a mapping of settings.refine keys, e.g. "
                           "--refine '{functional: r2SCAN}'")
    raw = yaml.safe_load(Path(config_path).read_text())
    if not isinstance(raw, dict):
        raise ChairqmError(f"{config_path}: not a configuration mapping")
    raw.setdefault("settings", {})
    raw["settings"] = dict(raw["settings"] or {}, refine=block)
    out.mkdir(parents=True, exist_ok=True)
    target = out / "calibrate-config.yaml"
    fileio.write_text(target, f"# {config_path} with settings.refine = {block!r} (chairqm calibrate --refine)\n"
                      + yaml.safe_dump(raw, sort_keys=False))
    return target


def build_parser() -> argparse.ArgumentParser:
    ap = argparse.ArgumentParser(prog="chairqm", description="Chair, twist-boat and rotamer populations of "
                                 "saturated six-membered rings from GFN2-xTB free energies.")
    ap.add_argument("--version", action="version", version=f"chairqm {__version__}")
    sub = ap.add_subparsers(dest="command", required=True)
    c = sub.add_parser("check", help="validate a configuration and its molecules without computing")
    c.add_argument("config")
    r = sub.add_parser("run", help="run the workflow (arguments after `--` go to Snakemake)")
    r.add_argument("config")
    r.add_argument("--out", help="output folder (default results/<config name>)")
    r.add_argument("--cores", type=int, default=2)
    r.add_argument("--until", help="stop after this stage: " + ", ".join(available_stages()))
    r.add_argument("--profile", help="Snakemake profile: a packaged one by name (laptop, slurm) or a profile folder")
    a = sub.add_parser("avalue", help="compute the A-value of a group, e.g. chairqm avalue \"[*]C1CC1\"")
    a.add_argument("fragment", help="the group as SMILES with one attachment point [*]")
    a.add_argument("--out", help="output folder (default results/avalue-<group>)")
    a.add_argument("--cores", type=int, default=2)
    defaults = cq_config.settings_defaults()
    a.add_argument("--temperature", type=float, action="append",
                   help=f"kelvin; repeat for several (default {', '.join(f'{t:g}' for t in defaults['temperatures_k'])})")
    a.add_argument("--solvent", help="MODEL:NAME, e.g. alpb:water (default gas phase)")
    a.add_argument("--engine", choices=["tblite", "xtb-python"], help=f"default {defaults['engine']}")
    a.add_argument("--method", choices=["GFN2-xTB", "GFN1-xTB"], help=f"default {defaults['method']}")
    a.add_argument("--profile", help="Snakemake profile: a packaged one by name (laptop, slurm) or a profile folder")
    k = sub.add_parser("calibrate", help="compute the reference set and fit computed against experimental A-values")
    k.add_argument("config", nargs="?", default=None,
                   help="reference configuration (default configs/reference.yaml of the source checkout)")
    k.add_argument("--out", help="output folder (default results/<config name>)")
    k.add_argument("--cores", type=int, default=2)
    k.add_argument("--profile", help="Snakemake profile: a packaged one by name (laptop, slurm) or a profile folder")
    k.add_argument("--save", help="calibration list file to add the result to (default OUT/calibration.json)")
    k.add_argument("--refine", nargs="?", const="{}", default=None, metavar="SETTINGS",
                   help="calibrate DFT-refined values: add settings.refine to the configuration (no value: the "
                        "defaults; or a YAML mapping such as '{basis: def2-TZVP}'); output default "
                        "results/<config name>-refined")
    return ap


def main(argv=None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    extra = []
    if "--" in argv:
        k = argv.index("--")
        argv, extra = argv[:k], argv[k + 1:]
    args = build_parser().parse_args(argv)
    try:
        if args.command == "check":
            return cmd_check(args)
        if args.command == "run":
            return cmd_run(args, extra)
        if args.command == "avalue":
            return cmd_avalue(args, extra)
        if args.command == "calibrate":
            return cmd_calibrate(args, extra)
    except ChairqmError as exc:
        for line in str(exc).splitlines():
            print(f"chairqm: error: {line}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        return 130
    return 0


if __name__ == "__main__":
    sys.exit(main())
