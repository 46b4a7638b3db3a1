# minima: every kept seed optimised with the engine, verified, duplicates merged.
# One job per molecule; each seed's record is cached inside work/opt/ and reused on a rerun.


rule minima:
    input:
        "{mol}/molecule.json",
        "{mol}/seeds.csv",
        "{mol}/seeds",
    output:
        **stage_outputs("minima"),
    params:
        fp=fingerprint("minima"),
    threads: 2
    log:
        "{mol}/logs/minima.log",
    shell:
        stage_command("minima", threads=True)
