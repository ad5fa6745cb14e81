"""Snakemake script: gas-phase optimal tuning of ω for one pigment type."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.study.config import qm_settings, tune_xatol
from siteshift.qm.settings import configure_threads
from siteshift.study.stages import job_qm, setup_logging, tune_stage

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
configure_threads(sm.threads)
qm = job_qm(sm)
tune_stage(sm.input.model, sm.output.json, qm_settings(qm), xatol=tune_xatol(qm),
           bounds=qm["tune"]["bounds"], include_anion=qm["tune"]["include_anion"],
           out_orbitals=sm.output.orbitals)
