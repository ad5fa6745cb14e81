"""Snakemake script: couplings, exciton states and spectra of one variant's sites."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.study.couplings import excitons_stage
from siteshift.study.stages import setup_logging
from siteshift.structures.library import load_library

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
excitons_stage(list(sm.input.transitions), list(sm.input.sites), list(sm.input.environments),
               sm.output.json, sm.params.couplings, variant=sm.wildcards.variant,
               library=load_library(extra=sm.params.pigments))
