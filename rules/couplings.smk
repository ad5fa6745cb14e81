# Pigment–pigment couplings, exciton states, absorption and CD (optional stage:
# couplings.enabled).


def _site_file(variant, pigment):
    mode = COUPLINGS["site_energies"]
    embedded = mode == "embedded" or (mode == "auto" and ELECTRO["enabled"])
    name = "excited_embedded.json" if embedded else "excited_states.json"
    return f"{RESULTS}/{variant}/pigments/{pigment}/{name}"


def coupled_site_result(wildcards):
    """The site calculation whose transitions couple: the embedded one when electrostatics is
    on (couplings.site_energies: auto or embedded), else the continuum-only one."""
    return _site_file(wildcards.variant, wildcards.pigment)


def variant_site_files(kind):
    """Input function: one file per site of the variant (site result, transitions or
    environment)."""

    def files(wildcards):
        pids = pigments_of(wildcards.variant)
        if kind == "site":
            return [_site_file(wildcards.variant, p) for p in pids]
        name = {"transitions": "transitions.npz", "environment": "environment.json"}[kind]
        return [f"{RESULTS}/{wildcards.variant}/pigments/{p}/{name}" for p in pids]

    return files


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
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/couple_pigments.py"


rule tabulate_couplings:
    input:
        excitons=expand(f"{RESULTS}/{{variant}}/excitons.json", variant=VARIANTS),
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
