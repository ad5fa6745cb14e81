# Pigment–pigment couplings, exciton states, absorption and CD (optional stage:
# couplings.enabled).


rule transition_densities:
    input:
        site=coupled_site_result,
        model=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/qm_model.json",
    output:
        npz=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/transitions.npz",
    log:
        f"{LOGS}/transition_densities/{{variant}}/{{pigment}}.log",
    benchmark:
        f"{BENCH}/transition_densities/{{variant}}/{{pigment}}.tsv"
    threads: QM["threads"]
    resources:
        mem_mb=qm_mem_mb,
    params:
        cache=f"{RESULTS}/qm_cache",
        auxbasis=COUPLINGS["auxbasis"],
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/transition_densities.py"


rule couple_pigments:
    input:
        transitions=variant_site_files("transitions"),
        sites=variant_site_files("site"),
        environments=variant_site_files("environment"),
    output:
        json=f"{RESULTS}/{{variant}}/excitons.json",
    log:
        f"{LOGS}/couple_pigments/{{variant}}.log",
    benchmark:
        f"{BENCH}/couple_pigments/{{variant}}.tsv"
    params:
        couplings=COUPLINGS,
        pigments=config["pigments"],
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/couple_pigments.py"


rule excite_dimer:
    input:
        models=lambda w: [f"{RESULTS}/{w.variant}/pigments/{p}/qm_model.json"
                          for p in DIMERS[w.dimer]],
        environments=lambda w: [f"{RESULTS}/{w.variant}/pigments/{p}/environment.json"
                                for p in DIMERS[w.dimer]],
        tuning=dimer_tuning,
    output:
        json=f"{RESULTS}/{{variant}}/dimers/{{dimer}}.json",
    log:
        f"{LOGS}/excite_dimer/{{variant}}/{{dimer}}.log",
    benchmark:
        f"{BENCH}/excite_dimer/{{variant}}/{{dimer}}.tsv"
    threads: QM["threads"]
    resources:
        mem_mb=qm_mem_mb,
        runtime=qm_runtime,
    params:
        qm=QM_PARAMS,
        couplings=COUPLINGS,
        cache=f"{RESULTS}/qm_cache",
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/excite_dimer.py"


rule tabulate_couplings:
    input:
        excitons=expand(f"{RESULTS}/{{variant}}/excitons.json", variant=VARIANTS),
        dimers=all_dimers,
    output:
        couplings=report(
            f"{RESULTS}/tables/couplings.tsv",
            caption="../config/report/couplings.rst",
            category="Couplings and excitons",
        ),
        states=report(
            f"{RESULTS}/tables/exciton_states.tsv",
            caption="../config/report/exciton_states.rst",
            category="Couplings and excitons",
        ),
        spectra=report(
            f"{RESULTS}/tables/exciton_spectra.tsv",
            caption="../config/report/exciton_spectra.rst",
            category="Couplings and excitons",
        ),
        plot_matrix=report(
            f"{RESULTS}/plots/couplings.png",
            caption="../config/report/plot_couplings.rst",
            category="Couplings and excitons",
        ),
        plot_states=report(
            f"{RESULTS}/plots/exciton_states.png",
            caption="../config/report/plot_exciton_states.rst",
            category="Couplings and excitons",
        ),
        dimers=report(
            f"{RESULTS}/tables/dimers.tsv",
            caption="../config/report/dimers.rst",
            category="Couplings and excitons",
        ),
        plot_spectra=report(
            f"{RESULTS}/plots/exciton_spectra.png",
            caption="../config/report/plot_exciton_spectra.rst",
            category="Couplings and excitons",
        ),
    log:
        f"{LOGS}/tabulate_couplings/all.log",
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/tabulate_couplings.py"
