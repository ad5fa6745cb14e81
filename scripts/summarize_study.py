"""Snakemake script: the study summary (table, text printed at the end of the run, and the
report's landing page)."""
import sys

sys.path.insert(0, snakemake.scriptdir)  # noqa: F821 (this checkout's library first)
import pandas as pd  # noqa: E402

from siteshift.study.config import check_study_pigments  # noqa: E402
from siteshift.study.stages import setup_logging  # noqa: E402
from siteshift.study.summary import summary_stage  # noqa: E402

sm = snakemake  # noqa: F821
setup_logging(sm.log[0])
variants = sorted(sm.config["variants"])
inventories = dict(zip(variants, sm.input.inventories))
tables = {v: pd.read_csv(p, sep="\t", keep_default_na=False) for v, p in inventories.items()}
warnings = check_study_pigments(sm.config, tables)
# every variant's inventory in one table, the variant first (what was kept, rebuilt, linked)
from siteshift.base.io import write_tsv  # noqa: E402
write_tsv(sm.output.inventory, pd.concat([t.assign(variant=v)[["variant", *t.columns]]
                                          for v, t in tables.items()], ignore_index=True))
text = summary_stage(sm.params.study, sm.params.reference, inventories, list(sm.input.results),
                     "results/tables", sm.output.tsv, sm.output.txt, sm.output.rst,
                     codes=set(sm.params.codes or []), warnings=warnings)
print(text, file=sys.stderr)
