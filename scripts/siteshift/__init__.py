"""siteshift: site energies of protein-embedded pigments from structures (SRSH-PCM)."""
__version__ = "0.2.0"
