"""Snakemake script: the ion-pair, branch and gap tables and plots of the study."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.study.ions import ion_tables
from siteshift.study.plots import plot_gaps, plot_ion_ladder
from siteshift.study.stages import setup_logging

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
sites, pairs, branches, gaps = ion_tables(
    list(sm.input.ions), sm.output.sites, sm.output.pairs, sm.output.branches, sm.output.gaps,
    gap_files=list(sm.input.gaps), site_files=list(sm.input.sites),
    dimer_files=list(sm.input.dimers), cfg=sm.params.ions, branch_pairs=sm.params.pairs)
plot_ion_ladder(pairs, branches, sm.output.plot_ladder)
plot_gaps(gaps, sm.output.plot_gaps)
