# extract.geometry: crystal computes each site on its model as extracted (qm_model.*); the other
# modes keep the extracted model as crystal_model.* and write qm_model.* from it (below).
GEOMETRY = config["extract"]
EXTRACTED = "qm_model" if GEOMETRY["geometry"] == "crystal" else "crystal_model"


rule extract_pigment:
    input:
        structure=structure_of,
        inventory=f"{RESULTS}/{{variant}}/inventory.tsv",
    output:
        xyz=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/{EXTRACTED}.xyz",
        model=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/{EXTRACTED}.json",
        cluster=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/cluster.pdb",
    log:
        f"{LOGS}/extract_pigment/{{variant}}/{{pigment}}.log",
    benchmark:
        f"{BENCH}/extract_pigment/{{variant}}/{{pigment}}.tsv"
    params:
        altloc=config["altloc"],
        pigments=config["pigments"],
        overrides=config["pigment_overrides"],
        cutoff=config["extract"]["cluster_cutoff_A"],
        axial_ligands=config["extract"]["axial_ligands"],
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/extract_pigment.py"


if GEOMETRY["geometry"] != "crystal":
    # geometry settings that change the numbers (the job reruns when one changes)
    GEOMETRY_PARAMS = {k: GEOMETRY[k] for k in ("geometry", "geometry_level",
                                                "restraint_kcal_mol_A2", "geometry_steps")}

    def type_reference_model(wildcards):
        """The extracted model of the reference variant's first copy of a pigment type."""
        df = inventory_rows(REFERENCE)
        ids = list(df[df.ccd_code == wildcards.code].pigment_id)
        if not ids:
            raise ValueError(
                f"no pigment of type {wildcards.code} in the reference variant {REFERENCE}: "
                "extract.geometry type_reference optimises the reference's first copy; use "
                "relaxed or crystal, or add the pigment to the reference")
        return f"{RESULTS}/{REFERENCE}/pigments/{ids[0]}/crystal_model.json"

    def type_reference_of(wildcards):
        if GEOMETRY["geometry"] != "type_reference":
            return []
        return f"{RESULTS}/geometry/{code_of(wildcards.variant, wildcards.pigment)}.json"

    rule optimise_type_geometry:
        input:
            model=type_reference_model,
        output:
            json=f"{RESULTS}/geometry/{{code}}.json",
        log:
            f"{LOGS}/optimise_type_geometry/{{code}}.log",
        benchmark:
            f"{BENCH}/optimise_type_geometry/{{code}}.tsv"
        threads: QM["threads"]
        params:
            geometry=GEOMETRY_PARAMS,
            qm=QM_TUNING_PARAMS,
        conda:
            "../config/envs/siteshift.yaml"
        script:
            "../scripts/optimise_geometry.py"

    rule place_geometry:
        input:
            model=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/crystal_model.json",
            reference=type_reference_of,
        output:
            xyz=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/qm_model.xyz",
            model=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/qm_model.json",
        log:
            f"{LOGS}/place_geometry/{{variant}}/{{pigment}}.log",
        benchmark:
            f"{BENCH}/place_geometry/{{variant}}/{{pigment}}.tsv"
        threads: QM["threads"]
        params:
            geometry=GEOMETRY_PARAMS,
            qm=QM_TUNING_PARAMS,
            pigments=config["pigments"],
        conda:
            "../config/envs/siteshift.yaml"
        script:
            "../scripts/place_geometry.py"
