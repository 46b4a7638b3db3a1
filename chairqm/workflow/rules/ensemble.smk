# ensemble: free energies -> populations, families, A-values, additive comparison and flag.
# A molecule waits for the reference rings of its untabulated groups (QM-derived A-values).


rule ensemble:
    input:
        "{mol}/molecule.json",
        "{mol}/seeds.csv",
        "{mol}/minima.csv",
        "{mol}/minima.json",
        "{mol}/thermo.json",
        "{mol}/thermo",
        reference_ensembles,
        refine_outputs,
    output:
        **stage_outputs("ensemble"),
    params:
        fp=molecule_fingerprint("ensemble"),
    log:
        "{mol}/logs/ensemble.log",
    shell:
        stage_command("ensemble")
