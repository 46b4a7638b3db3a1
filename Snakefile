# chairqm workflow. Started by `chairqm run`, which passes the configuration path as
#   --config chairqm_config=/abs/path.yaml   and runs in the output folder (--directory OUT).
# This file only loads and validates the configuration and includes the rules.
import json
import sys

import snakemake.utils

import chairqm
from chairqm import config as cq_config
from chairqm import plan as cq_plan
from chairqm.errors import ChairqmError

if "chairqm_config" not in config:
    sys.exit("chairqm: start this workflow with `chairqm run CONFIG --out DIR`")

CONFIG_PATH = config["chairqm_config"]
try:
    CFG = cq_config.load(CONFIG_PATH)
except ChairqmError as exc:
    sys.exit(f"chairqm: {exc}")
_raw = {k: v for k, v in CFG.items() if not k.startswith("_")}
snakemake.utils.validate(_raw, str(cq_config.schema_path()), set_default=True)
PLAN = cq_plan.make_plan(CFG)
if PLAN.problems:
    sys.exit("chairqm: " + "\n".join(PLAN.problems))

MOLECULES = PLAN.names()
SETTINGS = CFG["settings"]
VERSION = chairqm.__version__
PY = sys.executable
STAGE = f"{PY} -m chairqm.stages"


def fingerprint(*keys, **extra):
    """Every result-relevant setting of a stage, plus the package version, as one params string:
    Snakemake reruns a job when it changes (edits inside the installed package are invisible to it)."""
    d = {k: SETTINGS.get(k) for k in keys}
    d.update(extra)
    d["chairqm_version"] = VERSION
    return json.dumps(d, sort_keys=True)


wildcard_constraints:
    mol="|".join(sorted(map(lambda n: n.replace(".", r"\."), MOLECULES))) or "NONE",


include: "workflows/rules/targets.smk"
include: "workflows/rules/intake.smk"
include: "workflows/rules/seeds.smk"
include: "workflows/rules/minima.smk"
include: "workflows/rules/thermo.smk"
include: "workflows/rules/refine.smk"
include: "workflows/rules/ensemble.smk"
include: "workflows/rules/report.smk"
