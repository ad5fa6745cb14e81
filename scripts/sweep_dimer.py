"""Snakemake script: a dimer computed whole over the ε-sweep grid."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.qm.settings import configure_threads
from siteshift.study.couplings import dimer_sweep_stage
from siteshift.study.stages import job_qm, setup_logging

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
configure_threads(sm.threads)
dimer_sweep_stage(list(sm.input.models), sm.output.json, job_qm(sm), sm.params.grid,
                  sm.params.n2, sm.params.couplings, tuning_json=sm.input.tuning or None,
                  cache_dir=sm.params.cache, variant=sm.wildcards.variant,
                  name=sm.wildcards.dimer)
