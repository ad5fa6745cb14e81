"""Snakemake script: partial charges of every atom of one structure, and the choices made."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.structures.library import load_library
from siteshift.study.electrostatics import charges_stage
from siteshift.study.stages import setup_logging

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
charges_stage(sm.input.structure, sm.output.charges, sm.output.report, list(sm.input.fits),
              load_library(extra=sm.params.pigments), altloc=sm.params.altloc,
              el=sm.params.electrostatics, overrides=sm.params.overrides)
