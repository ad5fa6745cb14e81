"""Snakemake script: one site's cation and anion (IP, EA, hole and electron charges)."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.qm.settings import configure_threads
from siteshift.study.ions import ions_stage
from siteshift.study.stages import job_qm, setup_logging

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
configure_threads(sm.threads)
ions_stage(sm.input.model, sm.input.environment, sm.output.json, job_qm(sm),
           tuning_json=sm.input.tuning or None, cache_dir=sm.params.cache,
           variant=sm.wildcards.variant, charges_tsv=sm.input.charges or None,
           el=sm.params.electrostatics)
