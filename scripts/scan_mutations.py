"""Snakemake script: first-order mutation scan of one site (no new QM)."""
import sys
from pathlib import Path

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.structures.library import load_library
from siteshift.study.mutation_scan import scan_stage
from siteshift.study.stages import setup_logging

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
scan_stage(sm.input.structure, sm.input.charges, sm.input.embedded, sm.input.model,
           sm.input.environment, sm.output.json, load_library(extra=sm.params.pigments),
           list(sm.input.fits), sm.params.electrostatics, sm.params.cache,
           variant_charges=dict(zip(sm.params.others, sm.input.variant_charges)),
           altloc=sm.params.altloc, workdir=Path(sm.output.json).parent / "mutants")
