# chairqm workflow. Started by `chairqm run`, which passes the configuration path as
#   --config chairqm_config=/abs/path.yaml   and runs in the output folder (--directory OUT).
# The shared code is in workflows/rules/common.smk; each stage of the registry (chairqm.stages.STAGES)
# has its rule file workflows/rules/STAGE.smk, named like its module chairqm/stages/STAGE.py.


include: "workflows/rules/common.smk"
include: "workflows/rules/targets.smk"


for _stage in cq_stages.names():

    include: f"workflows/rules/{_stage}.smk"
