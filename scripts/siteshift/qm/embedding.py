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


#: JK-fitting basis of :class:`DensityPotential`: Weigend's universal JK fit, defined for
#: H–Rn (Weigend, JCC 29, 167 (2008))
POTENTIAL_AUXBASIS = "def2-universal-jkfit"


class DensityPotential:
    """φ(R) of one electron density at many points, for a whole structure's charges.

    Points within ``exact_within_A`` of a QM atom get the exact three-centre integrals
    (:func:`density_potential`); farther ones the potential of the density fitted in an
    auxiliary basis with the Coulomb metric, c = J⁻¹ (P|ρ), φ(R) = −Σ_P c_P (P|R) (Whitten,
    JCP 58, 4496 (1973); Dunlap, Connolly & Sabin, JCP 71, 3396 (1979)): two-centre integrals
    per point instead of n_AO² three-centre ones. The fit is constrained (Lagrange multipliers)
    to keep the density's Cartesian moments up to ``MOMENT_ORDER`` exactly, so its far field
    is the true one up to higher multipoles: measured on the relaxed n→π* difference density
    of formaldehyde/6-31G, the largest relative error over points at 12 / 20 Å from the
    centroid was 2e-3 / 7e-4 with the moments kept to order 2, 4.2e-4 / 1.4e-4 to order 3 and
    7e-5 / 4e-5 to order 4 (unconstrained, on the unrelaxed density: 4.5e-3 / 3.6e-3: the fit
    missed its dipole by ~0.5 %). exact_within_A None (or inf) keeps every point exact.
    shared: a dict kept between densities of the same molecule (auxiliary basis, metric and
    moments are computed once).

    Why: the survey of 19HC (18 hemes, 389 AOs, 12 379 charges per copy) spent its
    attribution in three-centre integrals, one n_AO² block per charge and copy."""

    #: Cartesian moments x^i y^j z^k (i + j + k ≤ MOMENT_ORDER) the fit keeps
    MOMENT_ORDER = 4

    def __init__(self, mol, dm, exact_within_A=None, auxbasis=POTENTIAL_AUXBASIS, shared=None):
        self.mol, self.dm = mol, np.asarray(dm)
        self.exact_within_A = (None if exact_within_A is None or not np.isfinite(exact_within_A)
                               else float(exact_within_A))
        self.auxbasis = auxbasis
        self.shared = {} if shared is None else shared
        self._coef = None
        self.n_exact = self.n_fitted = 0

    def _context(self):
        """(aux, metric eigenpairs kept, aux moments M, powers, origin), once per molecule."""
        sh = self.shared
        if "aux" not in sh:
            import scipy.linalg
            aux = df.addons.make_auxmol(self.mol, self.auxbasis)
            w, v = scipy.linalg.eigh(aux.intor("int2c2e"))
            keep = w > 1e-10 * w.max()      # drop the metric's near-null space
            sh.update(aux=aux, w=w[keep], v=v[:, keep])
            sh.update(zip(("M", "powers", "origin"), self._aux_moments(aux)))
        return sh

    def _fit(self):
        if self._coef is None:
            mol = self.mol
            sh = self._context()
            aux, w, v = sh["aux"], sh["w"], sh["v"]
            dm = self.dm
            tril = lib.pack_tril(dm + dm.T - np.diag(np.diag(dm)))
            rhs = np.empty(aux.nao)
            loc = aux.ao_loc_nr()
            step = max(1, int(2e8 / 8 / max(1, len(tril)) / 10))   # ~200 MB of (μν|P)
            for b0, b1 in lib.prange(0, aux.nbas, step):
                j3c = df.incore.aux_e2(mol, aux, aosym="s2ij", shls_slice=(
                    0, mol.nbas, 0, mol.nbas, b0, b1))
                rhs[loc[b0]:loc[b1]] = tril @ j3c

            def jinv(b):
                return v @ ((v.T @ b) / w[:, None])
            M = sh["M"]
            m = self._density_moments(sh["powers"], sh["origin"])
            jb, jm = jinv(rhs[:, None])[:, 0], jinv(M)
            lam = np.linalg.solve(M.T @ jm, M.T @ jb - m)
            self._coef = jb - jm @ lam
        return self.shared["aux"], self._coef

    def _aux_moments(self, aux):
        """(M, powers, origin): the Cartesian moments x^i y^j z^k, i + j + k ≤ MOMENT_ORDER,
        about the nuclear centroid, of each auxiliary function (rows of M; level-3 DFT grid)."""
        from itertools import product

        from pyscf import dft
        mol = self.mol
        powers = [p for n in range(self.MOMENT_ORDER + 1)
                  for p in product(range(n + 1), repeat=3) if sum(p) == n]
        origin = mol.atom_coords().mean(axis=0)
        grids = dft.gen_grid.Grids(mol)
        grids.level = 3
        grids.build(with_non0tab=False)
        M = np.zeros((aux.nao, len(powers)))
        for g0, g1 in lib.prange(0, len(grids.weights), 20000):
            r = grids.coords[g0:g1] - origin
            poly = np.stack([np.prod(r ** np.array(p), axis=1) for p in powers], axis=1)
            M += aux.eval_gto("GTOval_cart" if aux.cart else "GTOval_sph",
                              grids.coords[g0:g1]).T @ (poly * grids.weights[g0:g1, None])
        return M, powers, origin

    def _density_moments(self, powers, origin):
        """The same moments of the electron density (exact AO integrals)."""
        mol, dm = self.mol, self.dm
        ints = {0: mol.intor_symmetric("int1e_ovlp")[None]}
        names = {1: "int1e_r", 2: "int1e_rr", 3: "int1e_rrr", 4: "int1e_rrrr"}
        with mol.with_common_orig(origin):
            for n in range(1, self.MOMENT_ORDER + 1):
                ints[n] = mol.intor(names[n], comp=3 ** n)
        m = []
        for p in powers:
            axes = [a for a in range(3) for _ in range(p[a])]     # e.g. (2,0,1) -> x x z
            comp = sum(a * 3 ** (len(axes) - 1 - k) for k, a in enumerate(axes))
            m.append(np.einsum("ij,ji->", dm, ints[len(axes)][comp]))
        return np.array(m)

    def __call__(self, coords_A, widths_A=None) -> np.ndarray:
        """φ (Hartree/e) at the points (Å), optional Gaussian widths (Å) as in PointCharges."""
        coords_A = np.asarray(coords_A, float).reshape(-1, 3)
        pc = PointCharges(coords_A, np.zeros(len(coords_A)), widths_A)
        if self.exact_within_A is None:
            near = np.ones(len(pc), bool)
        else:
            atoms = self.mol.atom_coords() * nist.BOHR
            near = np.zeros(len(pc), bool)
            for i0, i1 in lib.prange(0, len(pc), 4096):
                d = np.linalg.norm(coords_A[i0:i1, None, :] - atoms[None], axis=-1)
                near[i0:i1] = d.min(axis=1) < self.exact_within_A
        out = np.empty(len(pc))
        if near.any():
            w = None if pc.widths_A is None else pc.widths_A[near]
            out[near] = density_potential(self.mol, self.dm, coords_A[near], w)
        far = ~near
        if far.any():
            aux, c = self._fit()
            zetas = pc.zetas()[far]
            pts = coords_A[far] / nist.BOHR
            idx = np.nonzero(far)[0]
            for i0, i1 in lib.prange(0, len(idx), 20000):
                fake = gto.fakemol_for_charges(pts[i0:i1], expnt=zetas[i0:i1])
                out[idx[i0:i1]] = -(c @ gto.mole.intor_cross("int2c2e", aux, fake))
        self.n_exact += int(near.sum())
        self.n_fitted += int(far.sum())
        return out


def first_order_shifts(mol, ddm, pc: PointCharges, potential=None) -> np.ndarray:
    """ΔE_J (Hartree) of the excitation for every (scaled) charge: q_J φ_Δ(R_J).
    potential: a :class:`DensityPotential` of ddm (fitted far field), else exact integrals."""
    if potential is not None:
        return pc.scaled * potential(pc.coords_A, pc.widths_A)
    return pc.scaled * density_potential(mol, ddm, pc.coords_A, pc.widths_A)
