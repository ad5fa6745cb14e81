# The protein's charges in each site's QM, and which residues shift each site (optional stage:
# electrostatics.enabled).


rule fit_pigment_charges:
    input:
        model=charge_fit_model,
        tuning=charge_fit_tuning,
    output:
        json=f"{RESULTS}/charges/pigments/{{code}}.json",
    log:
        f"{LOGS}/fit_pigment_charges/{{code}}.log",
    benchmark:
        f"{BENCH}/fit_pigment_charges/{{code}}.tsv"
    threads: QM["threads"]
    resources:
        mem_mb=qm_mem_mb,
        runtime=qm_runtime,
    params:
        qm=QM_PARAMS,
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/fit_pigment_charges.py"


rule assign_charges:
    input:
        structure=structure_of,
        inventory=f"{RESULTS}/{{variant}}/inventory.tsv",
        fits=pigment_charge_fits,
    output:
        charges=f"{RESULTS}/{{variant}}/charges.tsv",
        report=f"{RESULTS}/{{variant}}/protonation.tsv",
    log:
        f"{LOGS}/assign_charges/{{variant}}.log",
    benchmark:
        f"{BENCH}/assign_charges/{{variant}}.tsv"
    params:
        altloc=config["altloc"],
        pigments=config["pigments"],
        overrides=config["pigment_overrides"],
        electrostatics=ELECTRO,
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/assign_charges.py"


rule excite_embedded:
    input:
        model=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/qm_model.json",
        environment=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/environment.json",
        charges=f"{RESULTS}/{{variant}}/charges.tsv",
        tuning=tuning_input,
        # the continuum-only site calculation (and its relaxed densities) comes from the cache
        site=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/excited_states.json",
    output:
        json=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/excited_embedded.json",
    log:
        f"{LOGS}/excite_embedded/{{variant}}/{{pigment}}.log",
    benchmark:
        f"{BENCH}/excite_embedded/{{variant}}/{{pigment}}.tsv"
    threads: QM["threads"]
    resources:
        mem_mb=qm_mem_mb,
        runtime=qm_runtime,
    params:
        qm=QM_PARAMS,
        electrostatics=ELECTRO,
        cache=f"{RESULTS}/qm_cache",
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/excite_embedded.py"


rule scan_mutations:
    input:
        structure=structure_of,
        charges=f"{RESULTS}/{{variant}}/charges.tsv",
        embedded=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/excited_embedded.json",
        model=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/qm_model.json",
        environment=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/environment.json",
        fits=pigment_charge_fits,
        variant_charges=lambda w: [f"{RESULTS}/{v}/charges.tsv" for v in VARIANTS
                                   if v != w.variant],
    output:
        json=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/mutation_scan.json",
    log:
        f"{LOGS}/scan_mutations/{{variant}}/{{pigment}}.log",
    benchmark:
        f"{BENCH}/scan_mutations/{{variant}}/{{pigment}}.tsv"
    params:
        altloc=config["altloc"],
        pigments=config["pigments"],
        electrostatics=ELECTRO,
        cache=f"{RESULTS}/qm_cache",
        others=lambda w: [v for v in VARIANTS if v != w.variant],
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/scan_mutations.py"


rule tabulate_electrostatics:
    input:
        embedded=all_embedded,
        scans=all_scans,
        reports=expand(f"{RESULTS}/{{variant}}/protonation.tsv", variant=VARIANTS),
        pairs=f"{RESULTS}/tables/branch_pairs.tsv",
    output:
        sites=report(
            f"{RESULTS}/tables/electrostatics.tsv",
            caption="../config/report/electrostatics.rst",
            category="Protein electrostatics",
        ),
        residues=report(
            f"{RESULTS}/tables/residue_contributions.tsv",
            caption="../config/report/residue_contributions.rst",
            category="Protein electrostatics",
        ),
        branches=report(
            f"{RESULTS}/tables/branch_residues.tsv",
            caption="../config/report/branch_residues.rst",
            category="Protein electrostatics",
        ),
        scan=report(
            f"{RESULTS}/tables/mutation_scan.tsv",
            caption="../config/report/mutation_scan.rst",
            category="Protein electrostatics",
        ),
        protonation=report(
            f"{RESULTS}/tables/protonation.tsv",
            caption="../config/report/protonation.rst",
            category="Protein electrostatics",
        ),
        plot=report(
            f"{RESULTS}/plots/residue_contributions.png",
            caption="../config/report/plot_residues.rst",
            category="Protein electrostatics",
        ),
        plot_svg=f"{RESULTS}/plots/residue_contributions.svg",
    log:
        f"{LOGS}/tabulate_electrostatics/all.log",
    params:
        reference=REFERENCE,
        reference_structure=config["variants"][REFERENCE].get("structure"),
        altloc=config["altloc"],
        top=ELECTRO["top_residues"],
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/tabulate_electrostatics.py"
