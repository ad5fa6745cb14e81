"""Snakemake script: QM model and environment cluster of one pigment."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.structures.library import load_library
from siteshift.study.stages import extract_stage, setup_logging

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
extract_stage(sm.input.structure, sm.wildcards.pigment, sm.output.xyz, sm.output.model,
              sm.output.cluster, library=load_library(extra=sm.params.pigments),
              altloc=sm.params.altloc, cutoff_A=sm.params.cutoff, overrides=sm.params.overrides,
              axial_ligands=sm.params.axial_ligands)
