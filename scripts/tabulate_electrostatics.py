"""Snakemake script: electrostatics tables (sites, residues, branch residues, scan) and plot."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.study.residues import electrostatics_stage_tables
from siteshift.study.stages import setup_logging

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
electrostatics_stage_tables(list(sm.input.embedded), list(sm.input.scans),
                            list(sm.input.reports), sm.input.pairs, sm.output,
                            reference=sm.params.reference,
                            reference_structure=sm.params.reference_structure,
                            altloc=sm.params.altloc, top=sm.params.top)
