# Charge-separated states: each site's IP and EA, ion-pair energies, their branch comparison and
# the gap check (optional stage: ions.enabled).


rule ionize_pigment:
    input:
        model=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/qm_model.json",
        environment=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/environment.json",
        tuning=tuning_input,
        charges=ion_charges,
        # the neutral is this site's ground state: its SCF starts from the site's density
        site=ion_site_start,
    output:
        json=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/ions.json",
    log:
        f"{LOGS}/ionize_pigment/{{variant}}/{{pigment}}.log",
    benchmark:
        f"{BENCH}/ionize_pigment/{{variant}}/{{pigment}}.tsv"
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
        "../scripts/ionize_pigment.py"


rule check_gaps:
    input:
        model=tuning_model,
        environment=gap_environment,
        tuning=gap_tuning,
    output:
        json=f"{RESULTS}/gaps/{{code}}.json",
    log:
        f"{LOGS}/check_gaps/{{code}}.log",
    benchmark:
        f"{BENCH}/check_gaps/{{code}}.tsv"
    threads: QM["threads"]
    resources:
        mem_mb=qm_mem_mb,
        runtime=qm_runtime,
    params:
        qm=QM_PARAMS,
        eps=IONS["gap_check"]["eps_static"],
        cache=f"{RESULTS}/qm_cache",
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/check_gaps.py"


rule tabulate_ions:
    input:
        ions=all_ions,
        sites=all_ion_site_results,
        gaps=all_gaps,
        dimers=all_dimers,
    output:
        sites=report(
            f"{RESULTS}/tables/ion_sites.tsv",
            caption="../config/report/ion_sites.rst",
            category="Charge-separated states",
        ),
        pairs=report(
            f"{RESULTS}/tables/ion_pairs.tsv",
            caption="../config/report/ion_pairs.rst",
            category="Charge-separated states",
        ),
        branches=report(
            f"{RESULTS}/tables/ion_branches.tsv",
            caption="../config/report/ion_branches.rst",
            category="Charge-separated states",
        ),
        gaps=report(
            f"{RESULTS}/tables/gaps.tsv",
            caption="../config/report/gaps.rst",
            category="Charge-separated states",
        ),
        plot_ladder=report(
            f"{RESULTS}/plots/ion_ladder.png",
            caption="../config/report/plot_ion_ladder.rst",
            category="Charge-separated states",
        ),
        plot_gaps=report(
            f"{RESULTS}/plots/gaps.png",
            caption="../config/report/plot_gaps.rst",
            category="Charge-separated states",
        ),
    log:
        f"{LOGS}/tabulate_ions/all.log",
    params:
        ions=IONS,
        pairs=config["branches"]["pairs"],
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/tabulate_ions.py"
