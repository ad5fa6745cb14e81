"""Snakemake script: the coupling and exciton tables and plots of the study."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.study.couplings import coupling_tables
from siteshift.study.plots import plot_couplings, plot_exciton_spectra, plot_exciton_states
from siteshift.study.stages import setup_logging

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
files = list(sm.input.excitons)
coupling_tables(files, sm.output.couplings, sm.output.states, sm.output.spectra,
                list(sm.input.dimers), sm.output.dimers)
plot_couplings(files, sm.output.plot_matrix)
plot_exciton_states(files, sm.output.plot_states)
plot_exciton_spectra(files, sm.output.plot_spectra)
