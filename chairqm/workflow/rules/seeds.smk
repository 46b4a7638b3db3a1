# seeds: perceived molecule -> both chairs, twist-boats and rotamers, labelled by measurement


rule seeds:
    input:
        "{mol}/molecule.json",
    output:
        **stage_outputs("seeds"),
    params:
        fp=fingerprint("seeds"),
    log:
        "{mol}/logs/seeds.log",
    shell:
        stage_command("seeds")
