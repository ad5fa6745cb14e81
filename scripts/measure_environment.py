"""Snakemake script: environment metrics and effective dielectric of one pigment site."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.structures.library import load_library
from siteshift.study.config import dielectric_model, environment_settings
from siteshift.study.stages import environment_stage, setup_logging

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
environment_stage(sm.input.structure, sm.input.model, sm.output.json,
                  environment_settings(sm.params.environment), dielectric_model(sm.params.dielectric),
                  altloc=sm.params.altloc, library=load_library(extra=sm.params.pigments))
