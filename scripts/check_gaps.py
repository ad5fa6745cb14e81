"""Snakemake script: the gap check of one pigment type (screened and unscreened, over ε)."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.qm.settings import configure_threads
from siteshift.study.ions import gap_stage
from siteshift.study.stages import job_qm, setup_logging

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
configure_threads(sm.threads)
gap_stage(sm.input.model, sm.input.environment, sm.output.json, job_qm(sm),
          eps_points=sm.params.eps, tuning_json=sm.input.tuning or None,
          cache_dir=sm.params.cache)
