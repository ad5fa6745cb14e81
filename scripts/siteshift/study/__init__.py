"""A study over files: the stages the Snakemake scripts call (:mod:`.stages`, :mod:`.sweep`),
the tables (:mod:`.tables`), plots (:mod:`.plots`) and the study config's checks and translation
into settings objects (:mod:`.config`).

May import every lower layer (base, structures, environment, qm, interactions). Only the CLI
(:mod:`siteshift.cli`) and the Snakemake scripts import this layer.
"""
