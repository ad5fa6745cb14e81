"""Snakemake script: site-energy, branch-shift and variant-shift tables."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.structures.library import load_library
from siteshift.study.stages import setup_logging
from siteshift.study.tables import shift_tables

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
shift_tables(list(sm.input.excitations), sm.output.sites, sm.output.branches, sm.output.variants,
             reference=sm.params.reference, branches=sm.params.branches,
             out_pairs=sm.output.pairs, reference_structure=sm.params.reference_structure,
             altloc=sm.params.altloc, library=load_library(extra=sm.params.pigments),
             inventories=dict(zip(sorted(sm.config["variants"]), sm.input.inventories)))
