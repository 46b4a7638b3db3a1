# thermo: finite-difference Hessian, proof of minimum and G(T) of every unique minimum.
# Hessian displacements are cached per conformer in work/freq/ and reused after an interruption.


rule thermo:
    input:
        "{mol}/minima.json",
    output:
        "{mol}/thermo.csv",
        "{mol}/thermo.json",
    params:
        fp=fingerprint("engine", "method", "solvent", "accuracy", "electronic_temperature_k", "optimize",
                       "thermo", "temperatures_k"),
    threads: 2
    log:
        "{mol}/logs/thermo.log",
    shell:
        "{STAGE} thermo --config {CONFIG_PATH:q} --molecule={wildcards.mol:q} --threads {threads} 2> {log:q}"
