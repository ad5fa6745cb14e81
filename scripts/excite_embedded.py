"""Snakemake script: one site embedded in the protein's charges, and its shift by residue."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.qm.settings import configure_threads
from siteshift.study.electrostatics import embedded_stage
from siteshift.study.stages import job_qm, setup_logging

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
configure_threads(sm.threads)
embedded_stage(sm.input.model, sm.input.environment, sm.input.charges, sm.output.json,
               job_qm(sm), sm.params.electrostatics, tuning_json=sm.input.tuning or None,
               cache_dir=sm.params.cache, variant=sm.wildcards.variant)
