# seeds: perceived molecule -> both chairs, twist-boats and rotamers, labelled by measurement


rule seeds:
    input:
        "{mol}/molecule.json",
    output:
        "{mol}/seeds.csv",
    params:
        fp=fingerprint("seeds"),
    log:
        "{mol}/logs/seeds.log",
    shell:
        "{STAGE} seeds --config {CONFIG_PATH:q} --molecule={wildcards.mol:q} 2> {log:q}"
