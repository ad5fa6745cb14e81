rule tabulate_shifts:
    input:
        inventories=expand(f"{RESULTS}/{{variant}}/inventory.tsv", variant=VARIANTS),
        excitations=all_site_results,
    output:
        sites=report(
            f"{RESULTS}/tables/site_energies.tsv",
            caption="../config/report/site_energies.rst",
            category="Tables",
        ),
        branches=report(
            f"{RESULTS}/tables/branch_shifts.tsv",
            caption="../config/report/branch_shifts.rst",
            category="Tables",
        ),
        variants=report(
            f"{RESULTS}/tables/variant_shifts.tsv",
            caption="../config/report/variant_shifts.rst",
            category="Tables",
        ),
        pairs=f"{RESULTS}/tables/branch_pairs.tsv",
    log:
        f"{LOGS}/tabulate_shifts/all.log",
    params:
        reference=REFERENCE,
        branches=config["branches"],
        reference_structure=config["variants"][REFERENCE]["structure"],
        altloc=config["altloc"],
        pigments=config["pigments"],
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/tabulate_shifts.py"


rule plot_study:
    input:
        sites=f"{RESULTS}/tables/site_energies.tsv",
        variants=f"{RESULTS}/tables/variant_shifts.tsv",
        excitations=all_excitations,
    output:
        sites=report(
            f"{RESULTS}/plots/site_energies.png",
            caption="../config/report/plot_sites.rst",
            category="Plots",
        ),
        sites_svg=f"{RESULTS}/plots/site_energies.svg",
        spectrum=report(
            f"{RESULTS}/plots/spectrum.png",
            caption="../config/report/plot_spectrum.rst",
            category="Plots",
        ),
        spectrum_svg=f"{RESULTS}/plots/spectrum.svg",
        shifts=report(
            f"{RESULTS}/plots/variant_shifts.png",
            caption="../config/report/plot_shifts.rst",
            category="Plots",
        ),
        shifts_svg=f"{RESULTS}/plots/variant_shifts.svg",
    log:
        f"{LOGS}/plot_study/all.log",
    params:
        fwhm=config["plots"]["spectrum_fwhm_ev"],
        reference=REFERENCE,
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/plot_study.py"


# the summary reads small files: it runs where Snakemake runs, never as a cluster submission
localrules:
    summarize_study,


rule summarize_study:
    input:
        inventories=expand(f"{RESULTS}/{{variant}}/inventory.tsv", variant=VARIANTS),
        results=summary_results,
        tables=[
            f"{RESULTS}/tables/site_energies.tsv",
            f"{RESULTS}/tables/branch_shifts.tsv",
            f"{RESULTS}/tables/variant_shifts.tsv",
        ],
    output:
        tsv=report(
            f"{RESULTS}/tables/study_summary.tsv",
            caption="../config/report/study_summary.rst",
            category="Tables",
        ),
        inventory=report(
            f"{RESULTS}/tables/inventory.tsv",
            caption="../config/report/inventory.rst",
            category="Tables",
        ),
        txt=f"{RESULTS}/summary.txt",
        rst=f"{RESULTS}/summary.rst",
    log:
        f"{LOGS}/summarize_study/all.log",
    params:
        study=config["study"],
        reference=REFERENCE,
        codes=config["pigment_codes"],
    conda:
        "../config/envs/siteshift.yaml"
    script:
        "../scripts/summarize_study.py"
