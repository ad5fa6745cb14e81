"""Snakemake script: one site's transition densities, fitted and as transition charges."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.qm.settings import configure_threads
from siteshift.study.couplings import transitions_stage
from siteshift.study.stages import setup_logging

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
configure_threads(sm.threads)
transitions_stage(sm.input.site, sm.input.model, sm.output.npz, sm.params.cache,
                  sm.params.auxbasis)
