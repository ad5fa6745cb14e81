"""A pigment's surroundings: environment metrics (packing, hydropathy, polarity, waters,
burial) and the effective dielectric model that maps them to ε_static and ε_optical. The
protein's charges (force-field charges, point-charge files) belong here too.

May import: :mod:`siteshift.base`, :mod:`siteshift.structures`. Never :mod:`siteshift.qm` or
higher: what the QM needs from here it receives as plain arrays.
"""
