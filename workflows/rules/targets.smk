# named end points for `chairqm run --until STAGE`; `all` is the full run


rule all:
    input:
        "summary.csv",
        "report.html",
    default_target: True


rule until_intake:
    input:
        expand("{mol}/substituents.csv", mol=MOLECULES),


rule until_seeds:
    input:
        expand("{mol}/seeds.csv", mol=MOLECULES),


rule until_minima:
    input:
        expand("{mol}/minima.csv", mol=MOLECULES),


rule until_thermo:
    input:
        expand("{mol}/thermo.csv", mol=MOLECULES),


rule until_refine:
    input:
        expand("{mol}/refine.csv", mol=MOLECULES) if SETTINGS.get("refine") is not None else [],
