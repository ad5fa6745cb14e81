"""Snakemake script: one table of environment metrics and dielectrics for every site."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.study import environment_table, setup_logging

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
environment_table(list(sm.input.environments), sm.output[0])
