"""Transition densities of one site's excited states, kept compactly for couplings.

From a closed-shell TDA solution (orbitals C, normalised singlet amplitudes X_ia) the transition
density of state k in the AO basis is T_μν = √2 Σ_ia C_μi X_ia C_νa (only its symmetric part
enters Coulomb integrals and dipoles). Its dipole Tr(T r) is the transition dipole the response
reports, so a coupling and a dipole built from T share one sign convention.

Two compact forms are kept per state:

- auxiliary coefficients: T fitted in an auxiliary basis centred on the site's atoms with the
  Coulomb metric, d = (P|Q)⁻¹ (Q|T) (the density-fitting approximation of Vahtras, Almlöf,
  Feyereisen, Chem. Phys. Lett. 213, 514 (1993); default basis def2-universal-jfit, Weigend,
  J. Comput. Chem. 29, 167 (2008)). Two sites' transition densities then interact through the
  cross two-centre Coulomb integrals of their auxiliary functions: the transition-density
  coupling of Krueger, Scholes, Fleming, J. Phys. Chem. B 102, 5378 (1998) without a cube grid.
- transition charges: atomic charges summing to zero fitted to the electrostatic potential of T
  on the Merz–Kollman–Singh shells (TrEsp; Madjet, Abdurahman, Renger, J. Phys. Chem. B 110,
  17268 (2006)).
"""
from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
from pyscf import df, gto, lib
from pyscf.data import nist

from ..qm.embedding import density_potential, transition_density
from ..qm.esp import esp_points, fit_charges

#: Auxiliary basis of the fitted transition densities (Coulomb fitting, covers H–Rn).
DEFAULT_AUXBASIS = "def2-universal-jfit"


def transition_densities(mo_coeff, mo_occ, xs, symmetric=True) -> np.ndarray:
    """AO transition densities (nstates, nao, nao) of closed-shell TDA amplitudes xs
    (nstates, nocc, nvir), normalised as Σ X² = 1 per state; symmetrised unless told (the
    occupied index first: hole rows, electron columns)."""
    T = np.array([transition_density(mo_coeff, mo_occ, x) for x in np.asarray(xs)])
    if not symmetric:
        return T
    return 0.5 * (T + T.transpose(0, 2, 1))


def transition_moments(mol, mo_coeff, mo_occ, xs, energies_ev) -> dict:
    """Electric and magnetic transition moments of closed-shell TDA states (atomic units, in
    ``pyscf.tdscf.rhf``'s conventions, which this reproduces from the transition densities):
    ``length`` ⟨0|r|k⟩, ``velocity`` ⟨0|∇|k⟩/ω_k (equal to the length form for exact states;
    origin-independent with the magnetic moment), ``magnetic`` Im⟨0|L|k⟩, all about the
    nuclear-charge centre. Amplitudes xs (nstates, nocc, nvir) normalised as Σ X² = 1."""
    from ..base.units import HARTREE2EV
    T = transition_densities(mo_coeff, mo_occ, xs, symmetric=False)
    charges = mol.atom_charges()
    centre = charges @ mol.atom_coords() / charges.sum()
    with mol.with_common_orig(centre):
        r = mol.intor_symmetric("int1e_r", comp=3)
        rxnabla = mol.intor("int1e_cg_irxp", comp=3, hermi=2)     # ⟨μ|r × ∇|ν⟩
    nabla_bra = mol.intor("int1e_ipovlp", comp=3)                   # ⟨∇μ|ν⟩ = −⟨μ|∇|ν⟩
    omega = np.asarray(energies_ev, float) / HARTREE2EV
    return {"length": np.einsum("xmn,smn->sx", r, T),
            "velocity": -np.einsum("xmn,smn->sx", nabla_bra, T) / omega[:, None],
            "magnetic": -np.einsum("xmn,smn->sx", rxnabla, T)}


def make_auxmol(mol, auxbasis=DEFAULT_AUXBASIS):
    return df.make_auxmol(mol, auxbasis)


def aux_molecule(elements, coords_A, auxbasis=DEFAULT_AUXBASIS):
    """An auxiliary basis on atoms without their orbital basis (coefficients saved with a site
    are read against it)."""
    mol = gto.Mole(atom=list(zip(elements, np.asarray(coords_A, float).tolist())),
                   unit="Angstrom", basis="sto-3g", verbose=0)
    mol.spin = sum(gto.charge(e) for e in elements) % 2
    mol.build()
    return make_auxmol(mol, auxbasis)


def fit_auxiliary(mol, T, auxbasis=DEFAULT_AUXBASIS, block_mb=500) -> np.ndarray:
    """Coulomb-metric fit coefficients (nstates, naux) of AO densities T (nstates, nao, nao)."""
    T = np.asarray(T).reshape(-1, mol.nao, mol.nao)
    aux = make_auxmol(mol, auxbasis)
    # lower triangles with off-diagonal elements doubled, so (P|T) = j3c(tril) · tril(T)
    tril = lib.pack_tril(T + T.transpose(0, 2, 1) - np.einsum("sii->si", T)[:, :, None]
                         * np.eye(mol.nao)[None])
    npair = tril.shape[1]
    ao_loc = aux.ao_loc_nr()
    per_fn = max(1, int(block_mb * 1e6 / 8 / npair))
    rhs = np.empty((T.shape[0], aux.nao))
    s0 = 0
    while s0 < aux.nbas:
        s1 = s0 + 1
        while s1 < aux.nbas and ao_loc[s1 + 1] - ao_loc[s0] <= per_fn:
            s1 += 1
        j3 = df.incore.aux_e2(mol, aux, intor="int3c2e", aosym="s2ij",
                              shls_slice=(0, mol.nbas, 0, mol.nbas, s0, s1))
        rhs[:, ao_loc[s0]:ao_loc[s1]] = tril @ j3
        s0 = s1
    j2 = aux.intor("int2c2e")
    return np.linalg.solve(j2, rhs.T).T


def transition_charges(mol, elements, coords_A, T) -> tuple[np.ndarray, np.ndarray]:
    """(charges (nstates, natm) in e, RMS of each fit in Hartree/e): ESP fit of each transition
    density's potential with the charges summing to zero."""
    pts = esp_points(coords_A, elements)
    out, rms = [], []
    for Tk in np.asarray(T).reshape(-1, mol.nao, mol.nao):
        v = -density_potential(mol, Tk, pts)   # potential of T taken as a positive density
        q, r = fit_charges(coords_A, pts, v, 0.0)
        out.append(q)
        rms.append(r)
    return np.asarray(out), np.asarray(rms)


@dataclass
class SiteTransitions:
    """The compact transition densities of one site (atomic units unless named)."""
    pigment_id: str
    ccd_code: str
    elements: list
    coords_A: np.ndarray                  # (natm, 3)
    basis: str
    auxbasis: str
    energies_ev: np.ndarray               # (nstates,)
    bands: list                           # band name or "" per state
    dipoles_au: np.ndarray                # (nstates, 3), Tr(T r)
    aux_coeffs: np.ndarray                # (nstates, naux)
    charges: np.ndarray                   # (nstates, natm)
    charge_rms: np.ndarray                # (nstates,)
    qm_hash: str = ""
    meta: dict = field(default_factory=dict)

    @property
    def nstates(self):
        return len(self.energies_ev)

    def centre_A(self, k) -> np.ndarray:
        """Centre of state k's transition charges weighted by |q| (Å): where the point dipole
        of the dipole route sits."""
        w = np.abs(self.charges[k])
        return (w[:, None] * self.coords_A).sum(0) / w.sum()

    @cached_property
    def auxmol(self):
        """The auxiliary basis on the site's atoms (the basis its coefficients refer to), built
        once per site however many pairs it joins."""
        return aux_molecule(self.elements, self.coords_A, self.auxbasis)

    def dipole_debye(self, k) -> np.ndarray:
        return self.dipoles_au[k] * nist.AU2DEBYE

    def save(self, path):
        np.savez(path, pigment_id=self.pigment_id, ccd_code=self.ccd_code,
                 elements=np.array(self.elements), coords_A=self.coords_A, basis=self.basis,
                 auxbasis=self.auxbasis, energies_ev=self.energies_ev,
                 bands=np.array(self.bands), dipoles_au=self.dipoles_au,
                 aux_coeffs=self.aux_coeffs, charges=self.charges, charge_rms=self.charge_rms,
                 qm_hash=self.qm_hash)

    @classmethod
    def load(cls, path) -> SiteTransitions:
        with np.load(path) as z:
            return cls(pigment_id=str(z["pigment_id"]), ccd_code=str(z["ccd_code"]),
                       elements=[str(e) for e in z["elements"]], coords_A=z["coords_A"],
                       basis=str(z["basis"]), auxbasis=str(z["auxbasis"]),
                       energies_ev=z["energies_ev"], bands=[str(b) for b in z["bands"]],
                       dipoles_au=z["dipoles_au"], aux_coeffs=z["aux_coeffs"],
                       charges=z["charges"], charge_rms=z["charge_rms"],
                       qm_hash=str(z["qm_hash"]))


def site_transitions(mol, mo_coeff, mo_occ, xs, energies_ev, bands, pigment_id="",
                     ccd_code="", auxbasis=DEFAULT_AUXBASIS, qm_hash="") -> SiteTransitions:
    """Compact transition densities of every state of one closed-shell TDA solution."""
    T = transition_densities(mo_coeff, mo_occ, xs)
    with mol.with_common_orig((0.0, 0.0, 0.0)):
        r = mol.intor_symmetric("int1e_r", comp=3)
    dip = np.einsum("xmn,smn->sx", r, T)
    coords = mol.atom_coords() * nist.BOHR
    elements = [mol.atom_pure_symbol(i) for i in range(mol.natm)]
    d = fit_auxiliary(mol, T, auxbasis)
    q, rms = transition_charges(mol, elements, coords, T)
    return SiteTransitions(pigment_id=pigment_id, ccd_code=ccd_code, elements=elements,
                           coords_A=coords, basis=str(mol.basis), auxbasis=auxbasis,
                           energies_ev=np.asarray(energies_ev, float),
                           bands=[b or "" for b in bands], dipoles_au=dip, aux_coeffs=d,
                           charges=q, charge_rms=rms, qm_hash=qm_hash)
