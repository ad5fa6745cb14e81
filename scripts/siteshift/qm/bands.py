"""Naming absorption bands from transition-dipole directions.

Tetrapyrroles (chlorophylls, bacteriochlorophylls, pheophytins, hemes): the Q bands are polarised in
the macrocycle plane, Qy along one N–N axis and Qx along the other (Gouterman four-orbital model,
J. Mol. Spectrosc. 6, 138 (1961)). With PDB/CCD atom names of (bacterio)chlorophylls, Qy lies close to
the NB–ND axis and Qx to NA–NC (common practice in structure-based exciton models). The axes are data
in the pigment library, so a user can change them without touching code.

Other pigments: the "bright" state is the lowest state whose oscillator strength reaches both an
absolute threshold (0.01) and a tenth of the strongest computed state's, so that a dark state
borrowing a little intensity (an n→π* state mixed by a nearby charge: f 0.013 beside the
π→π* state's 0.93 in the demo's embedded calculation) does not take the name; the site-energy
tables report it.
"""
from __future__ import annotations

import numpy as np


def axis_cosines(dipole, coords, axis):
    """|cos| between a transition dipole and the axis from atom axis[0] to atom axis[1]."""
    d = np.asarray(dipole, dtype=float)
    v = np.asarray(coords[axis[1]], dtype=float) - np.asarray(coords[axis[0]], dtype=float)
    nd, nv = np.linalg.norm(d), np.linalg.norm(v)
    if nd == 0 or nv == 0:
        return 0.0
    return float(abs(d @ v) / (nd * nv))


#: a "bright" state has at least this fraction of the strongest computed oscillator strength
BRIGHT_RELATIVE = 0.1


def assign_bands(states, coords, band_axes=None, bright_threshold=0.01):
    """Set state["band"] in place. band_axes: {"Qy": (i, j), "Qx": (k, l)} 0-based atom indices.

    Qy is the lowest state with f ≥ threshold whose dipole is closer to the Qy axis than to the Qx
    axis; Qx likewise for the Qx axis. Without axes, the lowest state with f ≥ threshold and
    f ≥ BRIGHT_RELATIVE × the largest f is "bright".
    """
    for s in states:
        s["band"] = None
    ordered = sorted(states, key=lambda s: s["energy_ev"])
    if band_axes:
        for s in ordered:
            s["axis_cos"] = {name: round(axis_cosines(s["transition_dipole_debye"], coords, ax), 4)
                             for name, ax in band_axes.items()}
        taken = set()
        for name in band_axes:
            others = [n for n in band_axes if n != name]
            for s in ordered:
                if s["oscillator_strength"] < bright_threshold or id(s) in taken:
                    continue
                c = s["axis_cos"]
                if all(c[name] >= c[o] for o in others):
                    s["band"] = name
                    taken.add(id(s))
                    break
        return states
    f_max = max((s["oscillator_strength"] for s in ordered), default=0.0)
    for s in ordered:
        if s["oscillator_strength"] >= max(bright_threshold, BRIGHT_RELATIVE * f_max):
            s["band"] = "bright"
            break
    return states
