"""Snakemake script: inventory of one structure (see siteshift.study.stages.inventory_stage)."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.structures.library import load_library
from siteshift.study.stages import inventory_stage, setup_logging

setup_logging(snakemake.log[0])  # noqa: F821
inventory_stage(snakemake.input.structure, snakemake.output.tsv, snakemake.output.json,  # noqa: F821
                library=load_library(extra=snakemake.params.pigments),  # noqa: F821
                altloc=snakemake.params.altloc, overrides=snakemake.params.overrides,  # noqa: F821
                checks=snakemake.params.checks,  # noqa: F821
                axial_ligands=snakemake.params.axial_ligands)  # noqa: F821
