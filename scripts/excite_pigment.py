"""Snakemake script: SRSH-PCM excited states of one pigment (cached by input hash)."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.qm.settings import configure_threads
from siteshift.study.stages import excite_stage, job_qm, setup_logging

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
configure_threads(sm.threads)
excite_stage(sm.input.model, sm.input.environment, sm.output.json, job_qm(sm),
             tuning_json=sm.input.tuning or None, cache_dir=sm.params.cache,
             variant=sm.wildcards.variant, relaxed=sm.params.relaxed,
             same_site=sm.input.get("same_site") or None)
