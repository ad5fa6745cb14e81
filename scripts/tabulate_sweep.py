"""Snakemake script: ε-sweep table, ε matching measured targets, and sweep curves."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.study.plots import plot_sweep
from siteshift.study.stages import setup_logging
from siteshift.study.tables import sweep_tables

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
df, _tg = sweep_tables(list(sm.input.sweeps), sm.output.table, sm.output.targets,
                       pairs=sm.params.pairs, targets=sm.params.targets,
                       ion_pairs=sm.params.ion_pairs)
plot_sweep(df, sm.output.plot, sm.output.plot_svg)
