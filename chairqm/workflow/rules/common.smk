# Shared workflow code: configuration and plan loading, stage outputs from the one stage registry
# (chairqm.stages.STAGES), fingerprints from the one table of result-relevant settings
# (chairqm.provenance.RESULT_SETTINGS), input functions and wildcard constraints.
import os
import sys

import snakemake.utils

import chairqm
from chairqm import calibration as cq_calibration
from chairqm import config as cq_config
from chairqm import plan as cq_plan
from chairqm import provenance as cq_provenance
from chairqm import stages as cq_stages
from chairqm.errors import ChairqmError

if "chairqm_config" not in config:
    sys.exit("chairqm: start this workflow with `chairqm run CONFIG --out DIR`")

CONFIG_PATH = config["chairqm_config"]
try:
    CFG = cq_config.load(CONFIG_PATH)
except ChairqmError as exc:
    sys.exit(f"chairqm: {exc}")
snakemake.utils.validate({k: v for k, v in CFG.items() if not k.startswith("_")}, str(cq_config.schema_path()),
                         set_default=True)
PLAN = cq_plan.make_plan(CFG)
if PLAN.problems:
    sys.exit("chairqm: {}".format("\n".join(PLAN.problems)))

# The stage jobs find the configuration through the environment (inherited by every job, and set again
# when a cluster job parses this workflow with the same --config), so that its path is not a rule
# parameter: the same settings in another file must not rerun anything (the fingerprints carry the
# settings themselves).
os.environ.update(CHAIRQM_CONFIG=CONFIG_PATH)

MOLECULES = PLAN.names()
SETTINGS = CFG["settings"]
STAGE_COMMAND = f"{sys.executable} -m chairqm.stages"


wildcard_constraints:
    mol="|".join(sorted(n.replace(".", r"\.") for n in MOLECULES)) or "NONE",


def fingerprint(stage, **extra):
    """Every result-relevant setting of `stage` plus the package version and a digest of its sources, as
    one params string (chairqm.provenance.code_version)."""
    return cq_provenance.fingerprint(stage, SETTINGS, cq_provenance.code_version(), **extra)


def stage_outputs(stage):
    """{name: path} of a stage's outputs as the registry lists them (folders as directory())."""
    s = cq_stages.get(stage)
    out = {}
    for path, is_folder in s.paths():
        full = f"{{mol}}/{path}" if s.per_molecule else path
        out[path.replace(".", "_")] = directory(full) if is_folder else full
    return out


def stage_files(stage, mol="{mol}"):
    """The paths of a stage's outputs for molecule `mol` (folders without directory())."""
    return [f"{mol}/{path}" for path, _ in cq_stages.get(stage).paths()]


def enabled(stage):
    return cq_stages.get(stage).enabled(SETTINGS)


def reference_ensembles(wc):
    """The ensembles of the reference rings whose computed A-values this molecule's additive estimate uses."""
    return [f"{ref}/ensemble.json" for ref in PLAN.references_for(wc.mol).values()]


def refine_outputs(wc):
    """The refine outputs the ensemble stage reads: none when this molecule is not refined (no refinement,
    or refine: auto decided against it in the plan, chairqm.plan.Plan.refines)."""
    return stage_files("refine", wc.mol) if PLAN.refines(wc.mol) else []


def molecule_fingerprint(stage):
    """fingerprint(stage) per molecule: under refine: auto it also carries the molecule's decision, so a
    changed decision reruns the stage; without auto it is fingerprint(stage) itself."""

    def fp(wc):
        decision = PLAN.refine_decision(wc.mol)
        return fingerprint(stage, **({"refine_auto": decision} if decision is not None else {}))

    return fp


def until_files(stage):
    """What `--until STAGE` asks for: each molecule's first output of STAGE; under refine: auto a molecule
    not chosen for refinement gives its thermo output for `--until refine` instead."""
    if not enabled(stage):
        return []
    files = []
    for m in MOLECULES:
        s = stage if stage != "refine" or PLAN.refines(m) else "thermo"
        files.append(stage_files(s, m)[0])
    return files


def refine_memory_mb(wildcards, threads):
    """Memory of a refine job: per worker, settings.refine.max_memory_mb (its schema default when unset)
    for PySCF plus ~500 MB measured for the interpreter and libraries."""
    from chairqm import refine as cq_refine

    block = SETTINGS.get("refine")
    per_worker = cq_refine.resolve(block)["max_memory_mb"] if block is not None else 0
    return threads * (per_worker + 500)


def report_inputs(wc):
    """Every file the report stage reads, for every molecule."""
    files = []
    for m in MOLECULES:
        files.extend([f"{m}/molecule.json", f"{m}/minima.csv", f"{m}/minima.json", f"{m}/thermo.json", f"{m}/thermo"])
        files.extend(stage_files("ensemble", m))
        if PLAN.refines(m):
            files.extend(stage_files("refine", m))
    return files


def stage_command(stage, threads=False, molecule=True):
    """The shell command of a stage's rule (the configuration comes from $CHAIRQM_CONFIG)."""
    parts = [STAGE_COMMAND, stage]
    if molecule:
        parts.append("--molecule={wildcards.mol:q}")
    if threads:
        parts.append("--threads {threads}")
    return " ".join(parts + ["2> {log:q}"])
