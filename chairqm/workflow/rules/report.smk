# report: run-level tables, provenance, the conformer database and the HTML page


rule report:
    input:
        report_inputs,
    output:
        **stage_outputs("report"),
    params:
        fp=fingerprint("report", project=CFG.get("project", ""), calibration=cq_calibration.file_fingerprint(),
                       **({"refused": CFG["refused"]} if CFG.get("refused") else {}),
                       **({"refine_auto": PLAN.refine_auto} if PLAN.refine_auto else {})),
    log:
        "logs/report.log",
    shell:
        stage_command("report", molecule=False)
