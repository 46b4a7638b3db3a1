# chairqm workflow. Started by `chairqm run`, which passes the configuration path as
#   --config chairqm_config=/abs/path.yaml   and runs in the output folder (--directory OUT).
# The shared code is in workflows/rules/common.smk; each stage has its rule file, named like its module
# in chairqm/stages/.


include: "workflows/rules/common.smk"
include: "workflows/rules/targets.smk"
include: "workflows/rules/intake.smk"
include: "workflows/rules/seeds.smk"
include: "workflows/rules/minima.smk"
include: "workflows/rules/thermo.smk"
include: "workflows/rules/refine.smk"
include: "workflows/rules/ensemble.smk"
include: "workflows/rules/report.smk"
