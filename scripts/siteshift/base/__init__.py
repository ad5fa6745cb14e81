"""The floor every layer stands on: atomic file writing and hashing (:mod:`.io`), unit
conversions (:mod:`.units`), superposition (:mod:`.geometry`) and the one source of defaults
(:mod:`.defaults`).

May import: the standard library, numpy, pyscf.data, yaml. Nothing else from siteshift.
"""
