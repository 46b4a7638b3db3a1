# thermo: Hessian, proof of minimum and the final conformer list (re-merged after mode following).
# Hessian displacements are cached per conformer in work/freq/ and reused after an interruption.


rule thermo:
    input:
        "{mol}/molecule.json",
        "{mol}/minima.json",
        "{mol}/minima",
    output:
        **stage_outputs("thermo"),
    params:
        fp=fingerprint("thermo"),
    threads: 2
    log:
        "{mol}/logs/thermo.log",
    shell:
        stage_command("thermo", threads=True)
