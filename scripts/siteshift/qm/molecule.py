"""Checks of a QM job's molecule before PySCF sees it (:func:`check_molecule`)."""
from __future__ import annotations

import numpy as np
from pyscf.data.elements import ELEMENTS_PROTON

from .settings import EngineError

#: Largest gap (Å) between the parts of one QM molecule: parts farther apart than this are
#: taken for a misplaced atom or fragment (a coordinate typo, a 9999.999 placeholder), not a
#: model. Supermolecular dimers and charge-transfer scans (≤ 15 Å apart) are far inside it.
MAX_FRAGMENT_GAP_A = 50.0


def check_molecule(elements, coords_ang, charge=0, spin=0, source="molecule"):
    """Refuse input a QM job cannot mean, naming the atom and what to do (EngineError):
    unknown elements, non-finite or placeholder coordinates, parts of the molecule more than
    MAX_FRAGMENT_GAP_A apart, and impossible electron counts (an unknown basis is named by
    :func:`build_molecule`, which loads it once)."""
    from scipy.sparse.csgraph import connected_components
    from scipy.spatial import cKDTree
    coords = np.asarray(coords_ang, dtype=float).reshape(-1, 3)
    if len(elements) != len(coords):
        raise EngineError(f"{source}: {len(elements)} elements but {len(coords)} coordinates")
    if len(elements) == 0:
        raise EngineError(f"{source}: empty molecule")
    z = []
    for k, e in enumerate(elements, start=1):
        sym = str(e).strip().capitalize()
        zk = ELEMENTS_PROTON.get(sym, 0)
        if zk <= 0:
            raise EngineError(f"{source}: atom {k}: unknown element {e!r}; use a symbol of the "
                              "periodic table (H, C, N, O, Fe, ...)")
        z.append(zk)
    bad = np.where(~np.isfinite(coords).all(axis=1))[0]
    if len(bad):
        raise EngineError(f"{source}: atom {bad[0] + 1} ({elements[bad[0]]}) has a non-finite "
                          "coordinate (nan/inf); fix or remove it")
    far = np.where((np.abs(coords) >= 9999.0).any(axis=1))[0]
    if len(far):
        raise EngineError(f"{source}: atom {far[0] + 1} ({elements[far[0]]}) sits at "
                          f"{coords[far[0]].round(3).tolist()} Å, a placeholder, not a position; "
                          "fix or remove it")
    if len(coords) > 1:
        n, labels = connected_components(
            cKDTree(coords).sparse_distance_matrix(cKDTree(coords), MAX_FRAGMENT_GAP_A),
            directed=False)
        if n > 1:
            main = np.bincount(labels).argmax()
            k = int(np.where(labels != main)[0][0])
            raise EngineError(f"{source}: atom {k + 1} ({elements[k]}) and its part of the "
                              f"molecule are more than {MAX_FRAGMENT_GAP_A:g} Å from the rest; a "
                              "misplaced fragment (check its coordinates) or two jobs")
    nelec = int(sum(z)) - int(charge)
    if nelec <= 0:
        raise EngineError(f"{source}: charge {int(charge):+d} leaves {nelec} electrons "
                          f"(nuclear charge {int(sum(z))}); check the charge")
    if spin < 0 or spin > nelec or (nelec - int(spin)) % 2:
        raise EngineError(f"{source}: {nelec} electrons (charge {int(charge):+d}) cannot have "
                          f"2S = {int(spin)} unpaired electrons (multiplicity {int(spin) + 1}); "
                          "an even electron count needs an odd multiplicity and vice versa")
    return coords
