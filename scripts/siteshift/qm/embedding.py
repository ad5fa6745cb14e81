"""Electrostatic embedding: the protein's charges in the one-electron Hamiltonian, and the
first-order shift of an excitation by each charge.

A set of charges q_J at R_J (point charges, or Gaussian distributions ρ_J(r) = q_J (ζ_J/π)^{3/2}
exp(−ζ_J |r − R_J|²) with ζ_J = 1/w_J² for a width w_J) adds to the core Hamiltonian

    V_μν = −Σ_J q_J (μ| g_J |ν),  (μ|g_J|ν) = ∫ φ_μ φ_ν erf(√ζ_J |r − R_J|)/|r − R_J| dr

and to the nuclear repulsion Σ_A Σ_J Z_A q_J erf(√ζ_J R_AJ)/R_AJ (the electrostatic embedding of
QM/MM, Warshel & Levitt, J. Mol. Biol. 103, 227 (1976); the Gaussian form as in PySCF's qmmm).
The integrals are three-centre Coulomb integrals against a one-function "molecule" per charge
(a point charge is the limit ζ → ∞, taken as ζ = 1e16 bohr⁻²). The response of an excitation
does not involve the core Hamiltonian, so the fast and the stock TDA both see the charges
through the ground-state orbitals.

First order: with ΔD the excited-minus-ground difference density (unrelaxed, from the TDA
amplitudes), the shift of the excitation energy by charge J is ΔE_J = −q_J Tr(ΔD A_J), A_J the
matrix above without the charge — the charge's energy in the potential of the density change.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from pyscf import df, gto, lib
from pyscf.data import nist
from scipy.special import erf

from ..base.io import stable_hash
from .settings import EngineError

#: exponent (bohr⁻²) standing for a point charge in the three-centre integrals
POINT_ZETA = 1e16
#: charges per integral block (memory: block × nao(nao+1)/2 × 8 bytes)
BLOCK = 200


@dataclass
class PointCharges:
    """Embedding charges: positions (Å), values (e), optional Gaussian widths (Å; 0 = point),
    and a scale that multiplies every charge (e.g. 1/ε to screen their field)."""

    coords_A: np.ndarray
    charges: np.ndarray
    widths_A: np.ndarray | None = None
    scale: float = 1.0
    labels: list = field(default_factory=list)   # e.g. residue keys, for attribution

    def __post_init__(self):
        self.coords_A = np.asarray(self.coords_A, dtype=float).reshape(-1, 3)
        self.charges = np.asarray(self.charges, dtype=float).ravel()
        if len(self.coords_A) != len(self.charges):
            raise EngineError(f"{len(self.charges)} charges but {len(self.coords_A)} positions")
        if not np.all(np.isfinite(self.coords_A)) or not np.all(np.isfinite(self.charges)):
            raise EngineError("point charges: a position or a charge is not a finite number")
        if self.widths_A is not None:
            self.widths_A = np.broadcast_to(np.asarray(self.widths_A, float),
                                            self.charges.shape).copy()
            if np.any(self.widths_A < 0):
                raise EngineError("point charges: Gaussian widths must be >= 0 Å")
        if not np.isfinite(self.scale) or self.scale < 0:
            raise EngineError(f"charge scale must be a finite number >= 0, got {self.scale}")

    def __len__(self):
        return len(self.charges)

    @property
    def scaled(self) -> np.ndarray:
        return self.charges * self.scale

    def zetas(self) -> np.ndarray:
        """Gaussian exponents in bohr⁻² (POINT_ZETA for point charges)."""
        z = np.full(len(self), POINT_ZETA)
        if self.widths_A is not None:
            w = self.widths_A / nist.BOHR
            z[w > 0] = 1.0 / w[w > 0] ** 2
        return z

    def key(self) -> str:
        """Hash of positions, values, widths and scale (part of the QM cache key)."""
        return stable_hash({"xyz": np.round(self.coords_A, 4), "q": np.round(self.charges, 6),
                            "w": None if self.widths_A is None else np.round(self.widths_A, 4),
                            "scale": round(float(self.scale), 8)})

    def summary(self) -> dict:
        return {"n_charges": len(self), "total_charge_e": float(self.charges.sum()),
                "scale": float(self.scale),
                "total_scaled_e": float(self.scaled.sum()),
                "gaussian_width_A": (None if self.widths_A is None or not np.any(self.widths_A)
                                     else float(np.max(self.widths_A))),
                "charges_hash": self.key()}


def read_point_charges(path, scale=1.0) -> PointCharges:
    """A charge file: whitespace columns x y z q (Å, e), optional fifth column the Gaussian
    width (Å); `#` starts a comment. Errors name the file and line."""
    rows = []
    with open(path) as fh:
        for k, line in enumerate(fh, start=1):
            text = line.split("#", 1)[0].strip()
            if not text:
                continue
            parts = text.split()
            if len(parts) not in (4, 5):
                raise EngineError(f"{path} line {k}: expected 'x y z q' (Å, e) and optionally a "
                                  f"Gaussian width (Å), got {line.strip()!r}")
            try:
                vals = [float(v) for v in parts]
            except ValueError:
                raise EngineError(f"{path} line {k}: not numbers: {line.strip()!r}") from None
            rows.append(vals + [0.0] * (5 - len(vals)))
    if not rows:
        raise EngineError(f"{path}: no charges found (lines 'x y z q', Å and e)")
    a = np.array(rows)
    if not np.all(np.isfinite(a)):
        raise EngineError(f"{path}: a value is not a finite number")
    return PointCharges(a[:, :3], a[:, 3], a[:, 4] if np.any(a[:, 4]) else None, scale=scale)


def _blocks(mol, pc: PointCharges):
    """(i0, i1, packed A-matrices (npair, n)) over blocks of charges, in bohr units."""
    coords = pc.coords_A / nist.BOHR
    zetas = pc.zetas()
    intor = mol._add_suffix("int3c2e")
    for i0, i1 in lib.prange(0, len(pc), BLOCK):
        fake = gto.fakemol_for_charges(coords[i0:i1], expnt=zetas[i0:i1])
        yield i0, i1, df.incore.aux_e2(mol, fake, intor=intor, aosym="s2ij")


def potential_matrix(mol, pc: PointCharges) -> np.ndarray:
    """V_μν (Hartree) of the scaled charges for the electrons (negative charge)."""
    q = pc.scaled
    v = np.zeros(mol.nao * (mol.nao + 1) // 2)
    for i0, i1, j3c in _blocks(mol, pc):
        v -= j3c @ q[i0:i1]
    return lib.unpack_tril(v)


def nuclear_energy(mol, pc: PointCharges) -> float:
    """Σ_A Σ_J Z_A q_J erf(√ζ_J R_AJ)/R_AJ (Hartree), scaled charges."""
    R = pc.coords_A / nist.BOHR
    d = np.linalg.norm(mol.atom_coords()[:, None, :] - R[None], axis=-1)
    if np.any(d < 1e-6):
        raise EngineError("a point charge sits on a QM nucleus; remove it or the atom")
    k = erf(np.sqrt(pc.zetas())[None, :] * d) / d
    return float(mol.atom_charges() @ k @ pc.scaled)


def attach_charges(mf, pc: PointCharges | None):
    """Put the charges into an SCF object's core Hamiltonian and nuclear energy (in place;
    instance attributes, PySCF's documented way of changing h1e). Returns mf."""
    if pc is None or len(pc) == 0:
        return mf
    mol = mf.mol
    v = potential_matrix(mol, pc)
    e_nq = nuclear_energy(mol, pc)
    h_core = type(mf).get_hcore
    e_nuc = type(mf).energy_nuc

    def get_hcore(mol_=None):
        return h_core(mf, mol_ or mol) + v

    def energy_nuc():
        return e_nuc(mf) + e_nq

    mf.get_hcore = get_hcore
    mf.energy_nuc = energy_nuc
    mf._siteshift_charges = (pc, v, e_nq)
    return mf


def interaction_energy(mf) -> float | None:
    """E(QM–charges) = Tr(D V) + E(nuclei–charges) of a converged embedded SCF (Hartree)."""
    emb = getattr(mf, "_siteshift_charges", None)
    if emb is None:
        return None
    _pc, v, e_nq = emb
    dm = mf.make_rdm1()
    if np.ndim(dm) == 3:
        dm = dm[0] + dm[1]
    return float(np.einsum("ij,ji->", dm, v) + e_nq)


def difference_density(mo_coeff, mo_occ, x) -> np.ndarray:
    """Unrelaxed excited-minus-ground AO density of a closed-shell singlet TDA state.

    x: amplitudes over all occupied × virtual pairs, normalised Σ x² = 1 (the spin-adapted
    singlet, as :func:`siteshift.qm.fasttda.fast_response` returns them). ΔD = C_v xᵀx C_vᵀ −
    C_o x xᵀ C_oᵀ; its trace against the overlap is zero (no charge moves in or out)."""
    C = np.asarray(mo_coeff)
    occ = np.asarray(mo_occ)
    co, cv = C[:, occ > 0], C[:, occ == 0]
    x = np.asarray(x).reshape(co.shape[1], cv.shape[1])
    return cv @ (x.T @ x) @ cv.T - co @ (x @ x.T) @ co.T


def transition_density(mo_coeff, mo_occ, x) -> np.ndarray:
    """AO transition density of a closed-shell singlet TDA state, √2 C_o x C_vᵀ (its dipole
    is the transition dipole)."""
    C = np.asarray(mo_coeff)
    occ = np.asarray(mo_occ)
    co, cv = C[:, occ > 0], C[:, occ == 0]
    x = np.asarray(x).reshape(co.shape[1], cv.shape[1])
    return np.sqrt(2.0) * co @ x @ cv.T


def density_potential(mol, dm, coords_A, widths_A=None) -> np.ndarray:
    """Electrostatic potential (Hartree/e, a.u.) of an electron density dm (electrons carry
    −1) at the given points: φ(R) = −Tr(D A(R)). Nuclei are not included."""
    pc = PointCharges(coords_A, np.zeros(len(np.asarray(coords_A).reshape(-1, 3))), widths_A)
    tril = lib.pack_tril(np.asarray(dm) + np.asarray(dm).T - np.diag(np.diag(dm)))
    out = np.empty(len(pc))
    for i0, i1, j3c in _blocks(mol, pc):
        out[i0:i1] = -(tril @ j3c)
    return out


def first_order_shifts(mol, ddm, pc: PointCharges) -> np.ndarray:
    """ΔE_J (Hartree) of the excitation for every (scaled) charge: q_J φ_Δ(R_J)."""
    return pc.scaled * density_potential(mol, ddm, pc.coords_A, pc.widths_A)
