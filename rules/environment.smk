rule measure_environment:
    input:
        structure=structure_of,
        model=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/qm_model.json",
    output:
        json=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/environment.json",
    log:
        f"{LOGS}/measure_environment/{{variant}}/{{pigment}}.log",
    benchmark:
        f"{BENCH}/measure_environment/{{variant}}/{{pigment}}.tsv"
    params:
        altloc=config["altloc"],
        pigments=config["pigments"],
        environment=config["environment"],
        dielectric=config["dielectric"],
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/measure_environment.py"


rule tabulate_environment:
    input:
        inventories=expand(f"{RESULTS}/{{variant}}/inventory.tsv", variant=VARIANTS),
        environments=all_environments,
    output:
        report(
            f"{RESULTS}/tables/environment.tsv",
            caption="../config/report/environment.rst",
            category="Environment and dielectric",
        ),
    log:
        f"{LOGS}/tabulate_environment/all.log",
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/tabulate_environment.py"
