rule mutate_structure:
    input:
        parent=parent_structure,
    output:
        pdb=f"{RESULTS}/{{variant}}/structure.pdb",
        report=f"{RESULTS}/{{variant}}/mutations.json",
    log:
        f"{LOGS}/mutate_structure/{{variant}}.log",
    benchmark:
        f"{BENCH}/mutate_structure/{{variant}}.tsv"
    params:
        mutations=lambda wc: config["variants"][wc.variant]["mutations"],
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/mutate_structure.py"
