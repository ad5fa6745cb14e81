"""Atomic charges fitted to a molecule's electrostatic potential (ESP).

Merz–Kollman–Singh scheme (Singh & Kollman, J. Comput. Chem. 5, 129 (1984); Besler, Merz &
Kollman, J. Comput. Chem. 11, 431 (1990)): the QM potential is sampled on shells at 1.4, 1.6, 1.8
and 2.0 times the van der Waals radii (points inside any atom's shell dropped), and the charges
minimise Σ_k (V_QM(r_k) − Σ_A q_A/|r_k − R_A|)² with Σ_A q_A equal to the molecule's charge
(a Lagrange multiplier). The potential of the fitted charges outside the molecule is what an
embedded neighbour feels.
"""
from __future__ import annotations

import numpy as np
from pyscf.data import nist

from ..base.elements import radius
from .embedding import density_potential

SHELLS = (1.4, 1.6, 1.8, 2.0)
#: points per Å² on each shell (Besler, Merz, Kollman used 1–6; 1.5 keeps a pigment's fit small)
DENSITY = 1.5


def _sphere(n):
    k = np.arange(n) + 0.5
    phi = np.arccos(1 - 2 * k / n)
    theta = np.pi * (1 + 5 ** 0.5) * k
    return np.stack([np.cos(theta) * np.sin(phi), np.sin(theta) * np.sin(phi), np.cos(phi)], 1)


def esp_points(coords_A, elements, shells=SHELLS, density=DENSITY) -> np.ndarray:
    """Fit points (Å) on scaled van der Waals shells, none inside any atom's shell."""
    X = np.asarray(coords_A, float).reshape(-1, 3)
    R = np.array([radius(e) for e in elements])
    out = []
    for s in shells:
        for i, (x, r) in enumerate(zip(X, R)):
            n = max(8, int(np.ceil(4 * np.pi * (s * r) ** 2 * density)))
            p = x + s * r * _sphere(n)
            d = np.linalg.norm(p[:, None, :] - X[None], axis=-1)
            ok = np.all(d >= s * R[None, :] - 1e-9, axis=1)
            out.append(p[ok])
    return np.vstack(out)


def molecular_potential(mol, dm, points_A) -> np.ndarray:
    """V(r) (Hartree/e) of nuclei and electrons at points (Å)."""
    P = np.asarray(points_A, float) / nist.BOHR
    d = np.linalg.norm(P[:, None, :] - mol.atom_coords()[None], axis=-1)
    v_nuc = (mol.atom_charges()[None, :] / d).sum(1)
    if np.ndim(dm) == 3:
        dm = dm[0] + dm[1]
    return v_nuc + density_potential(mol, dm, points_A)


def fit_charges(coords_A, points_A, potential, total_charge) -> tuple[np.ndarray, float]:
    """(charges e, RMS error of the fitted potential in Hartree/e): least squares with the sum
    constrained to the total charge."""
    X = np.asarray(coords_A, float) / nist.BOHR
    P = np.asarray(points_A, float) / nist.BOHR
    A = 1.0 / np.linalg.norm(P[:, None, :] - X[None], axis=-1)
    n = X.shape[0]
    M = np.zeros((n + 1, n + 1))
    M[:n, :n] = A.T @ A
    M[:n, n] = M[n, :n] = 1.0
    rhs = np.concatenate([A.T @ potential, [float(total_charge)]])
    q = np.linalg.lstsq(M, rhs, rcond=None)[0][:n]
    rms = float(np.sqrt(np.mean((A @ q - potential) ** 2)))
    return q, rms


def esp_charges(mf, elements, coords_A, total_charge) -> dict:
    """ESP-fitted charges of a converged SCF: {"charges", "rms_hartree", "n_points",
    "dipole_fit_debye", "dipole_qm_debye"} (dipoles about the origin, for a neutral molecule
    the same from any origin)."""
    pts = esp_points(coords_A, elements)
    dm = mf.make_rdm1()
    v = molecular_potential(mf.mol, dm, pts)
    q, rms = fit_charges(coords_A, pts, v, total_charge)
    mu_fit = (q[:, None] * np.asarray(coords_A, float)).sum(0) / nist.BOHR * nist.AU2DEBYE
    mu_qm = mf.dip_moment(unit="Debye", verbose=0) if hasattr(mf, "dip_moment") else None
    return {"charges": q.tolist(), "rms_hartree": rms, "n_points": int(len(pts)),
            "dipole_fit_debye": mu_fit.tolist(),
            "dipole_qm_debye": None if mu_qm is None else np.asarray(mu_qm).tolist()}
