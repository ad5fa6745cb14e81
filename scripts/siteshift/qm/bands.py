"""Naming absorption bands from transition-dipole directions and oscillator strengths.

Tetrapyrroles (chlorophylls, bacteriochlorophylls, pheophytins): the Q bands are polarised in
the macrocycle plane, Qy along one N–N axis and Qx along the other (Gouterman four-orbital model,
J. Mol. Spectrosc. 6, 138 (1961)). With PDB/CCD atom names of (bacterio)chlorophylls, Qy lies close to
the NB–ND axis and Qx to NA–NC (common practice in structure-based exciton models). The axes are data
in the pigment library, so a user can change them without touching code. A named band is the
brightest state along its axis among the states within BAND_WINDOW_EV of the lowest one along it
(with f ≥ the threshold): a weakly allowed state just below the bright one (a charge-transfer or
n→π* state borrowing intensity) does not take the name, and the Soret (B) states along the same
axes, about 1 eV higher in chlorins (Chl a: Qy 662 nm = 1.87 eV, Soret 430 nm = 2.88 eV; from
memory), stay out of the window.

Hemes (scheme "heme"): the in-plane states carry two band systems (Gouterman): Q (the weak α band;
β is its vibronic 0–1 side band, not another electronic state) and the strong Soret (B). The
Soret is the brightest in-plane state with f ≥ SORET_MIN_F; Q is the lowest in-plane state below
it with f ≥ Q_MIN_F (TDDFT Q states of hemes carry f ~ 1e-3–5e-2 per state, the Soret ~0.5–1.5;
from memory). "In plane": the dipole within ~25° of the plane of the two N–N axes.

Other pigments: the "bright" state is the lowest state whose oscillator strength reaches both an
absolute threshold (0.01) and a tenth of the strongest computed state's, so that a dark state
borrowing a little intensity (an n→π* state mixed by a nearby charge: f 0.013 beside the
π→π* state's 0.93 in the demo's embedded calculation) does not take the name; the site-energy
tables report it.

:func:`assign_bands` returns warnings when the computed states may not reach a band (it is
missing, or taken by the highest computed state): each names `nstates`.
"""
from __future__ import annotations

import numpy as np

from ..base.defaults import BAND_SCHEMES


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
#: a named axis band is the brightest state along its axis within this window (eV) above the
#: lowest state along it
BAND_WINDOW_EV = 0.5
#: hemes: the Soret reaches this oscillator strength; Q at least Q_MIN_F
SORET_MIN_F = 0.2
Q_MIN_F = 1e-4
#: hemes: "in plane" when the dipole's in-plane fraction |d_plane|/|d| is at least this (25°)
IN_PLANE_MIN = 0.9
SCHEMES = BAND_SCHEMES


def _top_warning(name, s, ordered):
    if len(ordered) > 1 and s is ordered[-1]:
        return (f"{name} is the highest of the {len(ordered)} computed states: a brighter state "
                f"along its axis may lie above; raise nstates to check")
    return None


def assign_bands(states, coords, band_axes=None, bright_threshold=0.01, scheme=None):
    """Set state["band"] in place and return a list of warnings (first, when a state has a
    zero or negative excitation energy: the reference is then not the lowest state of its
    spin, and nothing computed from it is meaningful); see :func:`_assign_bands`."""
    warnings = _assign_bands(states, coords, band_axes, bright_threshold, scheme)
    low = [s for s in sorted(states, key=lambda s: s["energy_ev"]) if s["energy_ev"] <= 0.0]
    if low:
        which = ", ".join(str(s["index"]) for s in low)
        values = ", ".join(f"{s['energy_ev']:+.3f}" for s in low)
        warnings.insert(0, (
            f"reference: state(s) {which} have excitation energies {values} eV (<= 0): "
            "the ground state computed is not the lowest state of its spin (negative "
            "eigenvalues of the TDA matrix), so these energies, band names and shifts are not "
            "meaningful; check the pigment's charge and spin state (for a metal: its "
            "ligation, ligation_states or pigment_overrides)"))
    return warnings


def _assign_bands(states, coords, band_axes=None, bright_threshold=0.01, scheme=None):
    """Set state["band"] in place and return a list of warnings. band_axes: {"Qy": (i, j),
    "Qx": (k, l)} 0-based atom indices; scheme: "axes" (default with axes) or "heme" (Q and
    Soret in the plane of the two axes).

    Axes: each band is the brightest state with f ≥ threshold whose dipole is closer to its axis
    than to the others', among those within BAND_WINDOW_EV of the lowest such state. Without
    axes, the lowest state with f ≥ threshold and f ≥ BRIGHT_RELATIVE × the largest f is
    "bright".
    """
    for s in states:
        s["band"] = None
    ordered = sorted(states, key=lambda s: s["energy_ev"])
    warnings = []
    n = len(ordered)
    if band_axes and (scheme or "axes") == "heme":
        return _heme_bands(ordered, coords, band_axes)
    if band_axes:
        for s in ordered:
            s["axis_cos"] = {name: round(axis_cosines(s["transition_dipole_debye"], coords, ax), 4)
                             for name, ax in band_axes.items()}
        taken = set()
        for name in band_axes:
            others = [o for o in band_axes if o != name]
            along = [s for s in ordered if s["oscillator_strength"] >= bright_threshold
                     and id(s) not in taken
                     and all(s["axis_cos"][name] >= s["axis_cos"][o] for o in others)]
            if not along:
                warnings.append(f"{name}: no state along its axis with f >= {bright_threshold} "
                                f"among the {n} computed; raise nstates")
                continue
            window = [s for s in along if s["energy_ev"] <= along[0]["energy_ev"] + BAND_WINDOW_EV]
            best = max(window, key=lambda s: s["oscillator_strength"])
            best["band"] = name
            taken.add(id(best))
            w = _top_warning(name, best, ordered)
            if w:
                warnings.append(w)
        return warnings
    f_max = max((s["oscillator_strength"] for s in ordered), default=0.0)
    for s in ordered:
        if s["oscillator_strength"] >= max(bright_threshold, BRIGHT_RELATIVE * f_max):
            s["band"] = "bright"
            return warnings
    if ordered:
        warnings.append(f"bright: no state with f >= {bright_threshold} among the {n} computed; "
                        "raise nstates")
    return warnings


def _heme_bands(ordered, coords, band_axes):
    axes = list(band_axes.values())[:2]
    x = np.asarray(coords, dtype=float)
    a = x[axes[0][1]] - x[axes[0][0]]
    b = x[axes[1][1]] - x[axes[1][0]] if len(axes) > 1 else None
    warnings = []
    if b is None or np.linalg.norm(np.cross(a, b)) < 1e-6:
        return [f"heme band naming needs two non-parallel axes, got {sorted(band_axes)}"]
    normal = np.cross(a, b) / np.linalg.norm(np.cross(a, b))
    for s in ordered:
        d = np.asarray(s["transition_dipole_debye"], dtype=float)
        nd = np.linalg.norm(d)
        s["in_plane"] = round(float(np.sqrt(max(0.0, 1 - (d @ normal / nd) ** 2))) if nd else
                              0.0, 4)
    plane = [s for s in ordered if s["in_plane"] >= IN_PLANE_MIN]
    strong = [s for s in plane if s["oscillator_strength"] >= SORET_MIN_F]
    soret = max(strong, key=lambda s: s["oscillator_strength"]) if strong else None
    n = len(ordered)
    if soret is None:
        warnings.append(f"Soret: no in-plane state with f >= {SORET_MIN_F} among the {n} "
                        "computed; raise nstates")
    else:
        soret["band"] = "Soret"
        w = _top_warning("Soret", soret, ordered)
        if w:
            warnings.append(w)
    below = [s for s in plane if s["oscillator_strength"] >= Q_MIN_F and s is not soret
             and (soret is None or s["energy_ev"] < soret["energy_ev"])
             and s["oscillator_strength"] < SORET_MIN_F]
    if below:
        below[0]["band"] = "Q"
    else:
        warnings.append(f"Q: no in-plane state with f >= {Q_MIN_F} below the Soret among the "
                        f"{n} computed; raise nstates")
    return warnings
