"""Orbital-pair analysis of response amplitudes (which occupied → virtual pairs dominate)."""
from __future__ import annotations

import numpy as np

def dominant_pairs(mf, x, threshold=0.05, top=4):
    """Dominant occupied→virtual pairs of a normalised closed-shell amplitude (weight = x²)."""
    occ = np.asarray(mf.mo_occ)
    nocc = int((occ > 0).sum())
    w = (np.asarray(x) ** 2).reshape(nocc, -1)
    w = w / w.sum()
    idx = np.argsort(w.ravel())[::-1][:top]
    out = []
    homo = nocc - 1
    for k in idx:
        i, a = divmod(int(k), w.shape[1])
        if w.ravel()[k] < threshold:
            break
        out.append({"from": orbital_label(i, homo), "to": orbital_label(nocc + a, homo),
                    "weight": round(float(w.ravel()[k]), 4)})
    return out


def dominant_pairs_uks(mf, x, threshold=0.05, top=4):
    out = []
    for spin, xs in zip("ab", x):
        occ = np.asarray(mf.mo_occ)[0 if spin == "a" else 1]
        nocc = int((occ > 0).sum())
        w = np.asarray(xs).reshape(nocc, -1) ** 2
        for k in np.argsort(w.ravel())[::-1][:top]:
            i, a = divmod(int(k), w.shape[1])
            out.append((float(w.ravel()[k]), spin, i, nocc + a, nocc - 1))
    total = sum(o[0] for o in out) or 1.0
    out.sort(reverse=True)
    return [{"from": orbital_label(i, h) + s, "to": orbital_label(a, h) + s,
             "weight": round(wt / total, 4)}
            for wt, s, i, a, h in out[:top] if wt / total >= threshold]


def orbital_label(k, homo):
    if k <= homo:
        return "HOMO" if k == homo else f"HOMO-{homo - k}"
    return "LUMO" if k == homo + 1 else f"LUMO+{k - homo - 1}"

