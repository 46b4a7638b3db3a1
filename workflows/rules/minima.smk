# minima: every kept seed optimised with the engine, verified, duplicates merged.
# One job per molecule; each seed's record is cached inside work/opt/ and reused on a rerun.


rule minima:
    input:
        "{mol}/seeds.csv",
    output:
        "{mol}/minima.csv",
        "{mol}/minima.json",
    params:
        fp=fingerprint("engine", "method", "solvent", "accuracy", "electronic_temperature_k", "optimize", "unique"),
    threads: 2
    log:
        "{mol}/logs/minima.log",
    shell:
        "{STAGE} minima --config {CONFIG_PATH:q} --molecule={wildcards.mol:q} --threads {threads} 2> {log:q}"
