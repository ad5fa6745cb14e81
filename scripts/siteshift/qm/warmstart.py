"""Warm starts: converged orbitals of one geometry start the SCF of another geometry of the
same molecule (a second copy in the structure, the same site in a mutant, another ε).

The occupied orbitals keep their AO coefficients (the AOs move with their atoms), turned with
the molecule when it is turned (PySCF's ``ao_rotation_matrix`` for the p, d, … shells after a
Kabsch superposition), and are Löwdin-orthonormalised in the new overlap metric. A start that
does not fit (other atoms, another basis, another conformation, another electron count) is a
cold start with the reason recorded.
"""
from __future__ import annotations

import numpy as np
from pyscf import gto

from ..base.geometry import kabsch
from .settings import EngineError

#: Largest RMS displacement (Å) between the geometry orbitals were converged on and the one they
#: start: beyond it the two are taken for different conformers and the SCF starts cold. Copies
#: of one pigment in a refined structure typically differ by tenths of an Å (common practice;
#: the demo's two HC4 sites are exact copies, 0.0 Å); a ring flip or a misnumbered atom moves
#: atoms by Å.
WARM_MAX_RMSD_A = 1.0


def carry_density(mol, mo_coeff, mo_occ, rotation=None):
    """The density of orbitals converged on another geometry of the same molecule, carried to
    ``mol`` (same atoms in the same order, same basis): the occupied orbitals keep their AO
    coefficients (the AOs move with their atoms) and are Löwdin-orthonormalised in the new
    overlap metric, C' = C (Cᵀ S C)^-1/2 (Löwdin, JCP 18, 365 (1950)), so the density has the
    right electron count and is idempotent in the new basis (D S D = D per spin).
    rotation: the 3×3 rotation taking the old geometry's orientation to the new one (new =
    R · old, :func:`superpose`): p, d, … coefficients are rotated with it first (PySCF's
    ``ao_rotation_matrix``), so a pigment turned by the protein keeps its orbitals' shapes.

    mo_coeff/mo_occ: restricted (nao × nmo, occupations 0–2) or unrestricted (2 × nao × nmo);
    the density returned has the layout the SCF of ``mol`` needs (a closed shell from an open
    one sums the spins; an open shell from a closed one halves it). Orbitals holding another
    electron count than ``mol`` (a charged state from a neutral's) are refused (EngineError).
    """
    S = mol.intor_symmetric("int1e_ovlp")
    C = np.asarray(mo_coeff, dtype=float)
    occ = np.asarray(mo_occ, dtype=float)
    if C.shape[-2] != S.shape[0]:
        raise EngineError(f"orbitals of {C.shape[-2]} AOs cannot start a molecule of "
                          f"{S.shape[0]}: not the same molecule and basis")
    Cs, occs = (C, occ) if C.ndim == 3 else (C[None], occ[None])
    if rotation is not None:
        # PySCF's u takes coefficients from the frame its argument rotates to back to the
        # original one, so the inverse (Rᵀ) turns them forward (checked against an SCF
        # converged on a turned molecule in tests/test_warm_start.py)
        u = gto.mole.ao_rotation_matrix(mol, np.asarray(rotation, dtype=float).T)
        Cs = np.asarray([u @ c for c in Cs])
    dms = []
    for c, n in zip(Cs, occs):
        co = c[:, n > 0]
        m = co.T @ S @ co
        w, v = np.linalg.eigh(m)
        if w.min() < 1e-8:
            raise EngineError("the carried occupied orbitals are linearly dependent in the new "
                              "geometry; start cold")
        co = co @ (v / np.sqrt(w)) @ v.T
        dms.append((co * n[n > 0]) @ co.T)
    dm = np.asarray(dms)
    nelec = float(occs.sum())
    if abs(nelec - mol.nelectron) > 1e-6:
        raise EngineError(f"{nelec:.0f} electrons there, {mol.nelectron} here")
    if mol.spin == 0:
        return dm.sum(axis=0)
    if len(dm) == 1:
        return np.asarray([dm[0] / 2.0, dm[0] / 2.0])
    return dm


def fragment_start(mol, parts, source):
    """(density or None, record) of an SCF start of a molecule made of fragments computed on
    their own — a dimer from its two monomers: each fragment's converged occupied orbitals,
    block-diagonal in the whole molecule's AOs (fragments' atoms in ``mol``'s order, same basis),
    Löwdin-orthonormalised together in the whole overlap (:func:`carry_density`), so the overlap
    of the fragments' orbitals is taken care of and the electron count is the sum of the
    fragments'. A superposition of fragment densities is the usual start of a cluster's SCF
    (common practice: the "fragment guess" of quantum chemistry codes).

    parts: [(mo_coeff, mo_occ), ...] restricted (nao × nmo) or unrestricted (2 × nao × nmo).
    A start that does not fit (AO counts, electron count) is cold with the reason recorded."""
    blocks = []
    for c, n in parts:
        c, n = np.asarray(c, dtype=float), np.asarray(n, dtype=float)
        if c.ndim == 2:       # closed shell: each spin holds half of every occupation
            c, n = np.asarray([c, c]), np.asarray([n / 2.0, n / 2.0])
        blocks.append((c, n))
    nao = sum(c.shape[1] for c, _ in blocks)
    if nao != mol.nao:
        return None, {"kind": "cold", "source": source,
                      "reason": f"fragments hold {nao} AOs, the whole {mol.nao}"}
    nmo = sum(c.shape[2] for c, _ in blocks)
    C = np.zeros((2, nao, nmo))
    occ = np.zeros((2, nmo))
    i = j = 0
    for c, n in blocks:
        C[:, i:i + c.shape[1], j:j + c.shape[2]] = c
        occ[:, j:j + c.shape[2]] = n
        i, j = i + c.shape[1], j + c.shape[2]
    try:
        dm = carry_density(mol, C, occ)
    except EngineError as exc:
        return None, {"kind": "cold", "source": source, "reason": str(exc)}
    return dm, {"kind": "warm", "source": source, "rmsd_A": 0.0}


def superpose(old, new):
    """(R, RMSD in Å) of the least-squares superposition of two conformations of the same atoms
    (Kabsch, Acta Cryst. A32, 922 (1976)): new − c_new ≈ R (old − c_old)."""
    old = np.asarray(old, dtype=float).reshape(-1, 3)
    new = np.asarray(new, dtype=float).reshape(-1, 3)
    R, t = kabsch(old, new)      # rows: old R + t ≈ new
    rmsd = float(np.sqrt(((old @ R + t - new) ** 2).sum(axis=1).mean()))
    return R.T, rmsd


def describe_start(rec: dict | None) -> str:
    """'warm: <source>' or 'cold: <reason>' of an SCF start record (tables)."""
    rec = rec or {}
    return (f"warm: {rec.get('source', '')}" if rec.get("kind") == "warm" else
            f"cold: {rec.get('reason', 'no start recorded')}")


def save_orbitals(path, mf, elements, coords_ang, basis, source):
    """Keep converged orbitals for warm starts of other SCFs of the same molecule (.npz:
    orbitals, occupations, the atoms and Å coordinates they were converged on, the basis and a
    one-line description of where they came from)."""
    from ..base import io
    with io.atomic_target(path, suffix=".npz") as tmp:
        np.savez(tmp, mo_coeff=np.asarray(mf.mo_coeff), mo_occ=np.asarray(mf.mo_occ),
                 elements=np.asarray([str(e) for e in elements]),
                 coords_A=np.asarray(coords_ang, dtype=float).reshape(-1, 3),
                 basis=np.asarray(str(basis)), source=np.asarray(str(source)))


def warm_density(mol, orbitals_path, elements, coords_ang, basis):
    """(density or None, record) of a warm start from saved orbitals (:func:`save_orbitals`);
    see :func:`carried_start`. A missing file is a cold start with that reason."""
    from pathlib import Path
    if orbitals_path is None or not Path(orbitals_path).exists():
        return None, {"kind": "cold", "reason": "no saved orbitals"
                      if orbitals_path is None else f"{orbitals_path} absent"}
    with np.load(orbitals_path) as z:
        saved = {k: z[k] for k in z.files}
    return carried_start(mol, saved, elements, coords_ang, basis)


def carried_start(mol, saved: dict, elements, coords_ang, basis):
    """(density or None, record) of a warm start of ``mol`` from orbitals converged on another
    geometry: ``saved`` holds mo_coeff, mo_occ, and the elements, Å coordinates (coords_A) and
    basis they were converged with, and a ``source`` line.

    Starts cold (None, with the reason in the record) when the atoms or the basis differ, the
    geometry differs by more than ``WARM_MAX_RMSD_A`` RMS after superposition
    (:func:`superpose`: a copy elsewhere in the structure, turned, is the same conformation),
    or the electron count does not match; the record says what was used:
    {"kind": "warm" | "cold", "source", "rmsd_A", "reason"}.
    """
    label = str(saved["source"])
    if [str(e).capitalize() for e in saved["elements"]] != [str(e).strip().capitalize()
                                                            for e in elements]:
        return None, {"kind": "cold", "source": label,
                      "reason": "different atoms or atom order"}
    if str(saved["basis"]).lower() != str(basis).lower():
        return None, {"kind": "cold", "source": label,
                      "reason": f"basis {saved['basis']} there, {basis} here"}
    R, rmsd = superpose(saved["coords_A"], coords_ang)
    if rmsd > WARM_MAX_RMSD_A:
        return None, {"kind": "cold", "source": label, "rmsd_A": rmsd,
                      "reason": f"geometry {rmsd:.2f} Å RMS from the saved one "
                                f"(> {WARM_MAX_RMSD_A} Å)"}
    try:   # refuses another electron count (a charged state from a neutral's orbitals)
        dm = carry_density(mol, saved["mo_coeff"], saved["mo_occ"], rotation=R)
    except EngineError as exc:
        return None, {"kind": "cold", "source": label, "rmsd_A": rmsd, "reason": str(exc)}
    return dm, {"kind": "warm", "source": label, "rmsd_A": round(rmsd, 4)}
