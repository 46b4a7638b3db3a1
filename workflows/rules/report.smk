# report: run-level tables, provenance, the conformer database and the HTML page


rule report:
    input:
        expand("{mol}/ensemble.json", mol=MOLECULES),
    output:
        "summary.csv",
        "provenance.json",
        "conformers.db",
        "report.html",
    params:
        fp=fingerprint("temperatures_k", "analysis", project=CFG.get("project", "")),
    log:
        "logs/report.log",
    shell:
        "{STAGE} report --config {CONFIG_PATH:q} 2> {log:q}"
