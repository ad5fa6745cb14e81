"""Structures and pigments: reading PDB/mmCIF (altlocs, residue classes, pigment ids), the
pigment library, QM models cut from the CCD (hydrogens, caps, axial ligands), the inventory,
in-silico mutations and branch pairing by chain superposition.

May import: :mod:`siteshift.base`. Never the QM, environment, interaction or study layers.
"""
