# Named end points: `all` (the full run) and until_STAGE for `chairqm run --until STAGE`, one per stage
# the registry offers (chairqm.stages.until_names()).


rule all:
    input:
        **stage_outputs("report"),
    default_target: True


for _stage in cq_stages.until_names():

    rule:
        name:
            f"until_{_stage}"
        input:
            until_files(_stage),
