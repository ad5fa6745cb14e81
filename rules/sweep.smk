rule sweep_epsilon:
    input:
        model=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/qm_model.json",
        tuning=tuning_input,
        # the site calculation's density starts the sweep (sweep.anchor_on_site)
        site=lambda w: (f"{RESULTS}/{w.variant}/pigments/{w.pigment}/excited_states.json"
                        if SWEEP["anchor_on_site"] else []),
    output:
        json=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/eps_sweep.json",
    log:
        f"{LOGS}/sweep_epsilon/{{variant}}/{{pigment}}.log",
    benchmark:
        f"{BENCH}/sweep_epsilon/{{variant}}/{{pigment}}.tsv"
    threads: QM["threads"]
    resources:
        mem_mb=qm_mem_mb,
        runtime=qm_runtime,
    params:
        qm=QM_PARAMS,
        grid=SWEEP["eps_static"],
        n2=SWEEP["n2"],
        measure_cold_start=SWEEP["measure_cold_start"],
        cache=f"{RESULTS}/qm_cache",
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/sweep_epsilon.py"


rule sweep_dimer:
    input:
        models=lambda w: [f"{RESULTS}/{w.variant}/pigments/{p}/qm_model.json"
                          for p in DIMERS[w.dimer]],
        tuning=dimer_tuning,
    output:
        json=f"{RESULTS}/{{variant}}/dimers/{{dimer}}.eps_sweep.json",
    log:
        f"{LOGS}/sweep_dimer/{{variant}}/{{dimer}}.log",
    benchmark:
        f"{BENCH}/sweep_dimer/{{variant}}/{{dimer}}.tsv"
    threads: QM["threads"]
    resources:
        mem_mb=qm_mem_mb,
        runtime=qm_runtime,
    params:
        qm=QM_PARAMS,
        grid=SWEEP["eps_static"],
        n2=SWEEP["n2"],
        couplings=COUPLINGS,
        cache=f"{RESULTS}/qm_cache",
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/sweep_dimer.py"


rule sweep_ions:
    input:
        model=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/qm_model.json",
        tuning=tuning_input,
    output:
        json=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/ion_sweep.json",
    log:
        f"{LOGS}/sweep_ions/{{variant}}/{{pigment}}.log",
    benchmark:
        f"{BENCH}/sweep_ions/{{variant}}/{{pigment}}.tsv"
    threads: QM["threads"]
    resources:
        mem_mb=qm_mem_mb,
        runtime=qm_runtime,
    params:
        qm=QM_PARAMS,
        grid=SWEEP["eps_static"],
        n2=SWEEP["n2"],
        cache=f"{RESULTS}/qm_cache",
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/sweep_ions.py"


rule tabulate_sweep:
    input:
        inventories=expand(f"{RESULTS}/{{variant}}/inventory.tsv", variant=VARIANTS),
        sweeps=all_sweeps,
    output:
        table=report(
            f"{RESULTS}/tables/eps_sweep.tsv",
            caption="../config/report/eps_sweep.rst",
            category="Dielectric sensitivity",
        ),
        targets=report(
            f"{RESULTS}/tables/eps_targets.tsv",
            caption="../config/report/eps_targets.rst",
            category="Dielectric sensitivity",
        ),
        plot=report(
            f"{RESULTS}/plots/eps_sweep.png",
            caption="../config/report/plot_sweep.rst",
            category="Dielectric sensitivity",
        ),
        plot_svg=f"{RESULTS}/plots/eps_sweep.svg",
    log:
        f"{LOGS}/tabulate_sweep/all.log",
    params:
        pairs=config["branches"]["pairs"],
        targets=SWEEP["targets"],
        ion_pairs=config["ions"]["pairs"],
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/tabulate_sweep.py"
