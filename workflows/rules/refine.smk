# refine (optional, settings.refine): DFT single points with PySCF on the low-lying GFN2-xTB minima
# Single points run in parallel worker processes, one per thread (one OpenMP thread each).

REFINE_MEMORY_MB = int((SETTINGS.get("refine") or {}).get("max_memory_mb", 2000))


rule refine:
    input:
        "{mol}/thermo.csv",
    output:
        "{mol}/refine.csv",
        "{mol}/refine.json",
    params:
        fp=fingerprint("refine", "solvent", "temperatures_k", "unique"),
    threads: 2
    resources:
        # one PySCF single point per worker process, each allowed settings.refine.max_memory_mb, plus
        # the interpreter and libraries (~500 MB measured per worker)
        mem_mb=lambda wildcards, threads: threads * (REFINE_MEMORY_MB + 500),
    log:
        "{mol}/logs/refine.log",
    shell:
        "{STAGE} refine --config {CONFIG_PATH:q} --molecule={wildcards.mol:q} --threads {threads} 2> {log:q}"
