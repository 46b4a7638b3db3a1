"""The `chairqm` command: check a configuration, run the workflow, answer A-value questions."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from . import __version__, api, fileio
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


# the command line reads the same registry and resolves profiles the same way as the API
available_stages = api.available_stages
failed_stage_targets = api.failed_stage_targets
resolve_profiles = api.resolve_profiles


def cmd_check(args) -> int:
    result = api.check(args.config)
    print(result.table)
    auto = getattr(result.plan, "refine_auto", None)
    if auto:
        print("\nsettings.refine: auto, DFT single points only where GFN2-xTB is known to err:")
        for name, d in auto.items():
            print(f"  {name}: {'refined' if d['refine'] else 'not refined'}: {d['reason']}")
    if result.refine_estimate:
        print("\n" + result.refine_estimate)
    print("\n" + result.settings_line)
    return 0


def default_out(config_path) -> Path:
    return Path("results") / Path(config_path).stem


def _fmt(v, digits=2) -> str:
    """A number as the terminal shows it (2 decimals for kcal/mol); '' for missing."""
    if v is None or v == "" or (isinstance(v, float) and v != v):
        return ""
    return f"{float(v):.{digits}f}"


def answers_table(summary) -> str:
    """The run's answers as a text table: per molecule and temperature the preferred family, chair gap,
    A-value (calibrated value with its 95 % interval where a calibration applies), other ring forms, flag."""
    rows = [("molecule", "T/K", "preferred family", "chair dG", "A-value", "calibrated (95 % interval)",
             "other forms", "flag")]
    for r in summary.to_dict("records"):
        if r["status"] != "ok":
            rows.append((r["molecule"], f"{r['temperature_k']:g}", f"FAILED: {r.get('reason', '')}", "", "", "", "", ""))
            continue
        cal = r.get("calibrated_kcal")
        cal_text = ""
        if _fmt(cal):
            what = " (chair dG)" if r.get("calibrated_quantity") == "chair_dg_kcal" else ""
            cal_text = (f"{_fmt(cal)} ({_fmt(r.get('interval_low_kcal'))} to {_fmt(r.get('interval_high_kcal'))})"
                        + what)
            if str(r.get("calibration_domain") or "").startswith("outside"):
                cal_text += ", outside its domain: widened"
        elif str(r.get("calibration_domain") or "").startswith("outside"):
            cal_text = "outside its domain"
        elif str(r.get("calibration_domain") or "").startswith("no calibration"):
            cal_text = "uncalibrated (see below)"
        tb = r.get("twist_boat_population")
        flag = r.get("flag")
        flagged = flag is True or str(flag).lower() == "true"
        rows.append((r["molecule"], f"{r['temperature_k']:g}", r.get("preferred_family", ""),
                     _fmt(r.get("chair_dg_kcal")), _fmt(r.get("a_value_kcal")), cal_text,
                     f"{100 * float(tb):.1f} %" if _fmt(tb) else "", "FLAG" if flagged else "-"))
    text = api.format_rows(rows)
    reasons = []
    for r in summary.to_dict("records"):
        flag = r.get("flag")
        if r["status"] == "ok" and (flag is True or str(flag).lower() == "true") and r.get("flag_reason"):
            reasons.append(f"  {r['molecule']} ({r['temperature_k']:g} K): {r['flag_reason']}")
    if reasons:
        text += "\nflagged:\n" + "\n".join(dict.fromkeys(reasons))
    missing = [str(r.get("calibration_domain")) for r in summary.to_dict("records")
               if r["status"] == "ok" and str(r.get("calibration_domain") or "").startswith("no calibration")]
    if missing:
        text += "\nuncalibrated: " + "; ".join(dict.fromkeys(missing))
    return text + "\n(free energies in kcal/mol; chair dG = G(other chair) - G(preferred chair))"


def report_run(result, until) -> int:
    """Print what a finished run answers and where its files are; the exit code (1 if a molecule failed)."""
    out = result.out
    if until is not None:
        print(f"chairqm: stage '{until}' done; results in {out}")
        return 0
    if not (out / "summary.csv").is_file():
        print(f"chairqm: nothing was run to completion in {out} (dry run?)")
        return 0
    print()
    print(answers_table(result.summary))
    report = result.report
    print(f"\nchairqm: results in {out}" + (f"; report: {report}" if report else ""))
    code = 0
    for problem in result.report_problems:
        print(f"chairqm: {problem} (see {out / 'logs' / 'report.log'})", file=sys.stderr)
        code = 1
    failed = result.failed
    if failed:
        print(f"chairqm: {len(failed)} molecule(s) failed: {', '.join(failed)} (see summary.csv)", file=sys.stderr)
        code = 1
    return code


def _run_options(args, extra) -> dict:
    return {"profile": getattr(args, "profile", None), "snakemake_args": list(extra),
            "verbose": True if getattr(args, "verbose", False) else None}


def run_workflow(config_path, out, cores=2, until=None, snakemake_args=(), verbose=None, profile=None,
                 skip_invalid=False) -> int:
    """Run the workflow and print its answers; the exit code. Input errors raise ChairqmError."""
    try:
        result = api.run(config_path, out, cores=cores, until=until, profile=profile,
                         snakemake_args=snakemake_args, verbose=verbose, skip_invalid=skip_invalid)
    except api.WorkflowError as exc:
        for line in str(exc).splitlines():
            print(f"chairqm: {line}", file=sys.stderr)
        return exc.returncode
    return report_run(result, until)


def cmd_run(args, extra) -> int:
    out = args.out or default_out(args.config)
    return run_workflow(args.config, out, cores=args.cores, until=args.until, skip_invalid=args.skip_invalid,
                        **_run_options(args, extra))


def avalue_table(table) -> str:
    rows = [("group", "T/K", "A-value", "calibrated (95 % interval)", "tabulated", "eq. chair", "ax. chair",
             "other forms")]
    for r in table.to_dict("records"):
        if r["status"] != "ok" or _fmt(r["a_value_kcal"]) == "":
            rows.append((r["group"], f"{r['temperature_k']:g}", f"none: {r['reason']}", "", _fmt(r["tabulated_kcal"]),
                         "", "", ""))
            continue
        cal = (f"{_fmt(r['calibrated_kcal'])} ({_fmt(r['interval_low_kcal'])} to {_fmt(r['interval_high_kcal'])})"
               if _fmt(r["calibrated_kcal"]) else "")
        pct = (lambda v: f"{100 * v:.1f} %" if _fmt(v) else "")
        rows.append((r["group"], f"{r['temperature_k']:g}", _fmt(r["a_value_kcal"]), cal, _fmt(r["tabulated_kcal"]),
                     pct(r["equatorial_chair_population"]), pct(r["axial_chair_population"]),
                     pct(r["other_ring_forms_population"])))
    return api.format_rows(rows)


def cmd_avalue(args, extra) -> int:
    """Build each group's monosubstituted cyclohexane, run the whole workflow once on all of them, print
    one table of A-values (also written as OUT/avalues.csv)."""
    try:
        res = api.avalues(args.fragment, temperatures_k=args.temperature, solvent=args.solvent, out=args.out,
                          cores=args.cores, engine=args.engine, method=args.method, **_run_options(args, extra))
    except api.WorkflowError as exc:
        for line in str(exc).splitlines():
            print(f"chairqm: {line}", file=sys.stderr)
        return exc.returncode
    used = {**cq_config.settings_defaults(), **{k: v for k, v in (("engine", args.engine), ("method", args.method))
                                                   if v is not None}}
    print()
    print(avalue_table(res.table))
    how = f"{used['method']}, {used['engine']}, {args.solvent or 'gas phase'}"
    print(f"(kcal/mol; A = G(axial chair) - G(equatorial chair); {how}; tabulated values: "
          "chairqm/data/avalues.csv, with their sources)")
    summary = res.run.summary
    if "calibration_domain" in summary:
        missing = [str(v) for v in summary["calibration_domain"].dropna() if str(v).startswith("no calibration")]
        if missing:
            print("uncalibrated: " + "; ".join(dict.fromkeys(missing)))
    # the one-line answers earlier versions printed, kept for scripts that read them
    for r in res.table.to_dict("records"):
        if _fmt(r["a_value_kcal"]):
            print(f"A({r['group']}) = {_fmt(r['a_value_kcal'])} kcal/mol at {r['temperature_k']:g} K ({how})")
    print(f"\nchairqm: table {res.out / 'avalues.csv'}; report: {res.out / 'report.html'}")
    failed = res.run.failed
    if failed:
        print(f"chairqm: {len(failed)} molecule(s) failed: {', '.join(failed)} (see summary.csv)", file=sys.stderr)
        return 1
    return 0


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
    config = args.config or default_reference_config()
    solvent = _solvent_arg(args.solvent) if getattr(args, "solvent", None) else None
    base = str(default_out(config)) + (f"-{solvent['name'].lower()}" if solvent else "")
    out = Path(args.out or (base if args.refine is None else base + "-refined"))
    if args.refine is not None or solvent:
        config = _with_settings(config, out, refine=args.refine, solvent=solvent)
    code = run_workflow(config, out, cores=args.cores, until=None, **_run_options(args, extra))
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
    print("chairqm: it has no out-of-domain spread yet, so values outside its domain stay uncalibrated: measure "
          "one on configs/reference-outside.yaml (docs/accuracy.md, \"Outside the domain\")")
    if not args.save:
        print("chairqm: to use it for later runs with these settings, rerun with "
              f"--save {cq_cal.packaged_path()}")
    return code


def _solvent_arg(text: str) -> dict:
    """`chairqm calibrate --solvent` value → settings.solvent: NAME (ALPB) or MODEL:NAME, e.g. chloroform,
    alpb:water, gbsa:dmso."""
    model, sep, name = text.strip().partition(":")
    if not sep:
        model, name = "alpb", model
    model, name = model.strip().lower(), name.strip()
    if model not in ("alpb", "gbsa") or not name:
        raise ChairqmError(f"--solvent {text!r}: give a solvent name (ALPB) or MODEL:NAME with MODEL alpb or gbsa, "
                           "e.g. --solvent chloroform or --solvent alpb:water")
    return {"model": model, "name": name}


def _with_settings(config_path, out: Path, refine: str | None = None, solvent: dict | None = None) -> Path:
    """Write OUT/calibrate-config.yaml: the configuration with settings.refine set from `refine` (a YAML
    mapping such as '{basis: def2-TZVP}'; '{}' takes every default) and/or settings.solvent set to `solvent`
    ({model, name}); return its path."""
    import yaml
    from . import fileio
    raw = yaml.safe_load(Path(config_path).read_text())
    if not isinstance(raw, dict):
        raise ChairqmError(f"{config_path}: not a configuration mapping")
    raw["settings"] = dict(raw.get("settings") or {})
    what = []
    if refine is not None:
        raw["settings"]["refine"] = _refine_block(refine)
        what.append(f"settings.refine = {raw['settings']['refine']!r} (--refine)")
    if solvent:
        raw["settings"]["solvent"] = dict(solvent)
        what.append(f"settings.solvent = {solvent!r} (--solvent)")
    out.mkdir(parents=True, exist_ok=True)
    target = out / "calibrate-config.yaml"
    fileio.write_text(target, f"# {config_path} with {' and '.join(what)} (chairqm calibrate)\n"
                      + yaml.safe_dump(raw, sort_keys=False))
    return target


def _with_refinement(config_path, refine_text: str, out: Path) -> Path:
    """Write OUT/calibrate-config.yaml: the configuration with settings.refine set from `refine_text`."""
    return _with_settings(config_path, out, refine=refine_text)


def _refine_block(refine_text: str) -> dict:
    """`--refine` text → the settings.refine mapping (a YAML mapping such as '{basis: def2-TZVP}'; '' or
    '{}' takes every default)."""
    import yaml
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
    return block


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
    r.add_argument("--verbose", action="store_true",
                   help="show Snakemake's own output instead of one line per molecule and stage (or CHAIRQM_VERBOSE=1)")
    r.add_argument("--skip-invalid", action="store_true",
                   help="run the molecules that pass `chairqm check` and list the refused ones, with the reason, "
                        "as failed rows of summary.csv (exit code 1); without it one refused molecule stops the "
                        "run (exit 2). Problems of the configuration as a whole still stop it")
    a = sub.add_parser("avalue", help="compute the A-values of groups, e.g. chairqm avalue \"[*]C1CC1\" \"[*]C#N\"")
    a.add_argument("fragment", nargs="+", help="each group as SMILES with one attachment point [*]")
    a.add_argument("--out", help="output folder (default results/avalue-<group> for one group, results/avalues "
                                 "for several)")
    a.add_argument("--cores", type=int, default=2)
    defaults = cq_config.settings_defaults()
    a.add_argument("--temperature", type=float, action="append",
                   help=f"kelvin; repeat for several (default {', '.join(f'{t:g}' for t in defaults['temperatures_k'])})")
    a.add_argument("--solvent", help="MODEL:NAME, e.g. alpb:water (default gas phase)")
    a.add_argument("--engine", choices=["tblite", "xtb-python"], help=f"default {defaults['engine']}")
    a.add_argument("--method", choices=["GFN2-xTB", "GFN1-xTB"], help=f"default {defaults['method']}")
    a.add_argument("--profile", help="Snakemake profile: a packaged one by name (laptop, slurm) or a profile folder")
    a.add_argument("--verbose", action="store_true",
                   help="show Snakemake's own output instead of one line per molecule and stage (or CHAIRQM_VERBOSE=1)")
    k = sub.add_parser("calibrate", help="compute the reference set and fit computed against experimental A-values")
    k.add_argument("config", nargs="?", default=None,
                   help="reference configuration (default configs/reference.yaml of the source checkout)")
    k.add_argument("--out", help="output folder (default results/<config name>)")
    k.add_argument("--cores", type=int, default=2)
    k.add_argument("--profile", help="Snakemake profile: a packaged one by name (laptop, slurm) or a profile folder")
    k.add_argument("--verbose", action="store_true",
                   help="show Snakemake's own output instead of one line per molecule and stage (or CHAIRQM_VERBOSE=1)")
    k.add_argument("--save", help="calibration list file to add the result to (default OUT/calibration.json)")
    k.add_argument("--refine", nargs="?", const="{}", default=None, metavar="SETTINGS",
                   help="calibrate DFT-refined values: add settings.refine to the configuration (no value: the "
                        "defaults; or a YAML mapping such as '{basis: def2-TZVP}'); output default "
                        "results/<config name>-refined")
    k.add_argument("--solvent", metavar="NAME",
                   help="calibrate in an implicit solvent: add settings.solvent to the configuration (NAME for "
                        "ALPB, or MODEL:NAME, e.g. chloroform, alpb:water); output default "
                        "results/<config name>-<solvent name>")
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
    except fileio.DiskFull as exc:
        print(f"chairqm: error: {exc}: free space there or choose another --out", file=sys.stderr)
        return 1
    except api.Interrupted as exc:
        print(f"chairqm: {exc}", file=sys.stderr)
        return 128 + exc.signum
    except KeyboardInterrupt:
        return 130
    return 0


if __name__ == "__main__":
    sys.exit(main())
