"""Snakemake script: one pigment type's gas-phase reference geometry (extract.geometry)."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.qm.settings import configure_threads
from siteshift.study.geometry import type_geometry_stage
from siteshift.study.stages import setup_logging

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
configure_threads(sm.threads)
type_geometry_stage(sm.input.model, sm.output.json, sm.params.geometry, sm.params.qm)
