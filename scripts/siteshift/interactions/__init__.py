"""Pigment–pigment interactions built on the per-site QM results: excitonic couplings and
exciton states, ion-pair (charge-separated) energies.

May import: :mod:`siteshift.base`, :mod:`siteshift.structures`, :mod:`siteshift.environment`,
:mod:`siteshift.qm`. Never :mod:`siteshift.study` or the CLI.
"""
