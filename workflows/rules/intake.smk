# intake: configuration entry -> perceived ring and substituents


rule intake:
    output:
        table="{mol}/substituents.csv",
        record="{mol}/molecule.json",
    params:
        fp=lambda wc: fingerprint("enumerate_stereo", entry=PLAN.get(wc.mol).mapped_smiles),
    log:
        "{mol}/logs/intake.log",
    shell:
        "{STAGE} intake --config {CONFIG_PATH:q} --molecule={wildcards.mol:q} 2> {log:q}"
