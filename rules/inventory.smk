checkpoint take_inventory:
    input:
        structure=structure_of,
    output:
        tsv=f"{RESULTS}/{{variant}}/inventory.tsv",
        json=f"{RESULTS}/{{variant}}/inventory.json",
    log:
        f"{LOGS}/take_inventory/{{variant}}.log",
    benchmark:
        f"{BENCH}/take_inventory/{{variant}}.tsv"
    params:
        altloc=config["altloc"],
        pigments=config["pigments"],
        overrides=config["pigment_overrides"],
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/take_inventory.py"
