"""Snakemake script: ESP-fitted charges of one pigment type (gas phase, once per CCD code)."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.qm.settings import configure_threads
from siteshift.study.electrostatics import fit_pigment_charges_stage
from siteshift.study.stages import job_qm, setup_logging

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
configure_threads(sm.threads)
fit_pigment_charges_stage(sm.input.model, sm.output.json, job_qm(sm),
                          tuning_json=sm.input.tuning or None)
