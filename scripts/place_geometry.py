"""Snakemake script: the coordinates a site is computed on (extract.geometry)."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.qm.settings import configure_threads
from siteshift.structures.library import load_library
from siteshift.study.geometry import place_geometry_stage
from siteshift.study.stages import setup_logging

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
configure_threads(sm.threads)
place_geometry_stage(sm.input.model, sm.output.xyz, sm.output.model, sm.params.geometry,
                     reference_json=sm.input.reference or None,
                     library=load_library(extra=sm.params.pigments), qm=sm.params.qm)
