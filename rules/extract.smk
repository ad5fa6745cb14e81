rule extract_pigment:
    input:
        structure=structure_of,
        inventory=f"{RESULTS}/{{variant}}/inventory.tsv",
    output:
        xyz=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/qm_model.xyz",
        model=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/qm_model.json",
        cluster=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/cluster.pdb",
    log:
        f"{LOGS}/extract_pigment/{{variant}}/{{pigment}}.log",
    benchmark:
        "benchmarks/extract_pigment/{variant}/{pigment}.tsv"
    params:
        altloc=config.get("altloc", "occupancy"),
        pigments=config.get("pigments", {}),
        overrides=config.get("pigment_overrides", {}),
        cutoff=config.get("extract", {}).get("cluster_cutoff_A", 6.0),
        axial_ligands=config.get("extract", {}).get("axial_ligands", False),
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/extract_pigment.py"
