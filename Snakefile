# siteshift: site energies of protein-embedded pigments (SRSH-PCM), as a Snakemake workflow.
from snakemake.utils import min_version, validate

min_version("8.0")


# The demo study's config, unless the user names their own with --configfile: Snakemake would
# otherwise merge the two and schedule the demo's variants inside the user's study.
if not workflow.overwrite_configfiles:

    configfile: "config/config.yaml"


validate(config, "config/schemas/config.schema.yaml")


# the report's landing page: the study's title, its summary and key tables (rule summarize_study)
report: "config/report/workflow.rst"


include: "rules/common.smk"
include: "rules/mutate.smk"
include: "rules/inventory.smk"
include: "rules/extract.smk"
include: "rules/environment.smk"
include: "rules/excite.smk"
include: "rules/aggregate.smk"
include: "rules/sweep.smk"
include: "rules/electrostatics.smk"
include: "rules/couplings.smk"
include: "rules/ions.smk"


rule all:
    default_target: True
    input:
        f"{RESULTS}/tables/site_energies.tsv",
        f"{RESULTS}/tables/branch_shifts.tsv",
        f"{RESULTS}/tables/variant_shifts.tsv",
        f"{RESULTS}/tables/environment.tsv",
        f"{RESULTS}/plots/site_energies.png",
        f"{RESULTS}/plots/spectrum.png",
        f"{RESULTS}/summary.txt",
        optional_targets(),
        expand(f"{RESULTS}/{{variant}}/inventory.tsv", variant=VARIANTS),


rule inventories:
    input:
        expand(f"{RESULTS}/{{variant}}/inventory.tsv", variant=VARIANTS),


onsuccess:
    # the study summary (what was computed, reused, skipped or failed, and why) ends every run
    if Path(f"{RESULTS}/summary.txt").exists():
        print("\n" + Path(f"{RESULTS}/summary.txt").read_text())
