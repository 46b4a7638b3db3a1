# intake: configuration entry -> perceived molecule and substituents


rule intake:
    output:
        **stage_outputs("intake"),
    params:
        fp=lambda wc: fingerprint("intake", entry=PLAN.get(wc.mol).mapped_smiles),
    log:
        "{mol}/logs/intake.log",
    shell:
        stage_command("intake")
