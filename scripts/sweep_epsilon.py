"""Snakemake script: ε sweep of one pigment (warm-started SCF across the grid)."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.qm.settings import configure_threads
from siteshift.study.stages import job_qm, setup_logging
from siteshift.study.sweep import sweep_anchor, sweep_stage

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
configure_threads(sm.threads)
anchor = sweep_anchor(sm.input.site or None, sm.params.cache, job_qm(sm))
sweep_stage(sm.input.model, sm.output.json, job_qm(sm), sm.params.grid, n2=sm.params.n2,
            tuning_json=sm.input.tuning or None, variant=sm.wildcards.variant,
            measure_cold_start=sm.params.measure_cold_start, anchor=anchor)
