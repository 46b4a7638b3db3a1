# ensemble: free energies -> populations, families, A-values, additive comparison and flag.
# A molecule waits for the reference rings of its untabulated groups (QM-derived A-values).


def reference_inputs(wc):
    return [f"{ref}/ensemble.json" for ref in PLAN.references_for(wc.mol).values()]


def refine_inputs(wc):
    return [f"{wc.mol}/refine.csv"] if SETTINGS.get("refine") is not None else []


rule ensemble:
    input:
        "{mol}/thermo.csv",
        reference_inputs,
        refine_inputs,
    output:
        "{mol}/ensemble.json",
        "{mol}/families.csv",
        "{mol}/conformers.csv",
        "{mol}/conformers.sdf",
    params:
        fp=fingerprint("temperatures_k", "analysis", "unique", "refine"),
    log:
        "{mol}/logs/ensemble.log",
    shell:
        "{STAGE} ensemble --config {CONFIG_PATH:q} --molecule={wildcards.mol:q} 2> {log:q}"
