# refine (optional, settings.refine): DFT single points with PySCF on the low-lying GFN2-xTB minima.
# Single points run in parallel worker processes, one per thread (one OpenMP thread each); each is
# allowed settings.refine.max_memory_mb plus the interpreter and libraries (~500 MB measured per worker).


rule refine:
    input:
        "{mol}/molecule.json",
        "{mol}/thermo.csv",
        "{mol}/thermo.json",
        "{mol}/thermo",
    output:
        **stage_outputs("refine"),
    params:
        fp=fingerprint("refine"),
    threads: 2
    resources:
        mem_mb=refine_memory_mb,
    log:
        "{mol}/logs/refine.log",
    shell:
        stage_command("refine", threads=True)
