"""Snakemake script: one table of environment metrics and dielectrics for every site."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.study.stages import setup_logging
from siteshift.study.tables import environment_table

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
environment_table(list(sm.input.environments), sm.output[0])
