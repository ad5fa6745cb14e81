"""Snakemake script: apply point mutations in silico to the parent structure (PDBFixer)."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
from siteshift.base.io import write_json
from siteshift.structures.mutate import mutate
from siteshift.study.stages import log, setup_logging

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
report = mutate(sm.input.parent, sm.params.mutations, sm.output.pdb)
for m, d in report["closest_A"].items():
    log.info("%s: side chain rebuilt (chi1/chi2 grid); closest heavy atom %.2f A", m, d)
write_json(sm.output.report, report)
