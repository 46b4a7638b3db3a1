# refine (optional, settings.refine): DFT single points with PySCF on the low-lying GFN2-xTB minima


rule refine:
    input:
        "{mol}/thermo.csv",
    output:
        "{mol}/refine.csv",
        "{mol}/refine.json",
    params:
        fp=fingerprint("refine", "solvent", "temperatures_k", "unique"),
    threads: 2
    log:
        "{mol}/logs/refine.log",
    shell:
        "{STAGE} refine --config {CONFIG_PATH:q} --molecule={wildcards.mol:q} --threads {threads} 2> {log:q}"
