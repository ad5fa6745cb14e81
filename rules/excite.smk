rule tune_omega:
    input:
        model=tuning_model,
    output:
        json=f"{RESULTS}/tuning/{{code}}.json",
        # the neutral's orbitals at the tuned omega: every site of this type starts from them
        orbitals=f"{RESULTS}/tuning/{{code}}.orbitals.npz",
    log:
        f"{LOGS}/tune_omega/{{code}}.log",
    benchmark:
        f"{BENCH}/tune_omega/{{code}}.tsv"
    threads: max(QM["threads"], 2)  # every excitation waits on it; capped at --cores
    resources:
        mem_mb=qm_mem_mb,
        runtime=qm_runtime,
    params:
        qm=QM_TUNING_PARAMS,
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/tune_omega.py"


rule excite_pigment:
    input:
        model=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/qm_model.json",
        environment=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/environment.json",
        tuning=tuning_input,
        same_site=same_site_result,
    output:
        json=f"{RESULTS}/{{variant}}/pigments/{{pigment}}/excited_states.json",
    log:
        f"{LOGS}/excite_pigment/{{variant}}/{{pigment}}.log",
    benchmark:
        f"{BENCH}/excite_pigment/{{variant}}/{{pigment}}.tsv"
    threads: QM["threads"]
    resources:
        mem_mb=qm_mem_mb,
        runtime=qm_runtime,
    params:
        qm=QM_PARAMS,
        cache=f"{RESULTS}/qm_cache",
        # the electrostatics stage decomposes shifts with the relaxed difference densities
        relaxed=ELECTRO["enabled"],
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/excite_pigment.py"
