"""Snakemake script: site-energy, branch-shift and variant-shift tables."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.library import load_library
from siteshift.study import setup_logging, shift_tables

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
shift_tables(list(sm.input.excitations), sm.output.sites, sm.output.branches, sm.output.variants,
             reference=sm.params.reference, branches=sm.params.branches,
             out_pairs=sm.output.pairs, reference_structure=sm.params.reference_structure,
             altloc=sm.params.altloc, library=load_library(extra=sm.params.pigments))
