"""Exciton states of coupled sites: the Frenkel exciton Hamiltonian, its eigenstates with their
dipole and rotational strengths, and absorption and CD spectra with static disorder.

H = diag(E_i) + J_ij (one transition per site). Exciton state k = Σ_i c_ik |i⟩ has the
transition dipole μ_k = Σ_i c_ik μ_i (dipole strength |μ_k|², oscillator strength
f_k = 2/3 E_k |μ_k|² in a.u.) and, from the sites' positions alone (intrinsic magnetic moments
neglected: the Coulomb-only exciton model), the rotational strength

    R_k = (π / λ₀) Σ_{i<j} c_ik c_jk (r_i − r_j) · (μ_i × μ_j)

(the exciton-chirality formula, common practice; e.g. Somsen, van Grondelle, van Amerongen,
Biophys. J. 71, 1934 (1996), from memory), with λ₀ the wavelength of the mean site energy, so
that Σ_k R_k = 0 exactly (Σ_k c_ik c_jk = δ_ij). The formula is in Gaussian units: with μ in
debye and r, λ₀ in Å it gives R in D² (1e-36 esu² cm²), reported in debye · Bohr magneton
(1 D² = 107.8 D·μB, :data:`siteshift.base.units.DMUB_PER_D2`). Participation ratio
PR_k = 1/Σ_i c_ik⁴ (1: one site; N: spread evenly over N sites).

Spectra: sticks broadened by a Gaussian of the configured homogeneous FWHM, averaged over
Monte Carlo draws of Gaussian site-energy disorder (configured FWHM, seeded). The absorption is
the dipole-strength density (D² per eV) and the CD the rotational-strength density (D·μB per
eV), so the area of the absorption is the total dipole strength (conserved by the coupling:
Σ_k |μ_k|² = Σ_i |μ_i|²). Beside them, the decadic molar absorptivity ε and circular dichroism
Δε (M⁻¹ cm⁻¹) that a measured spectrum is given in: D = 9.186e-3 ∫ε/ν̃ dν̃ (D²) and
R = 0.2476 ∫Δε/ν̃ dν̃ (D·μB) (common practice; see :mod:`siteshift.base.units`), i.e.
ε(E) = E · A(E) / 9.186e-3 and Δε(E) = E · CD(E) / 0.2476 with A and CD the densities per eV.
No local-field or refractive-index factor of a medium is applied (the molecules in vacuum).
"""
from __future__ import annotations

import numpy as np
from pyscf.data import nist

from ..base.units import (
    D2_PER_EPS_BAND,
    DMUB_PER_D2,
    DMUB_PER_DEPS_BAND,
    EV2CM1,
    HARTREE2EV,
    NM_EV,
)

FWHM2SIGMA = 1.0 / (2.0 * np.sqrt(2.0 * np.log(2.0)))


def hamiltonian(energies_ev, couplings_cm1) -> np.ndarray:
    """H (eV): site energies on the diagonal, couplings (cm⁻¹, symmetric) off it."""
    E = np.asarray(energies_ev, float)
    J = np.asarray(couplings_cm1, float) / EV2CM1
    if J.shape != (len(E), len(E)):
        raise ValueError(f"couplings shape {J.shape} does not match {len(E)} sites")
    if not np.allclose(J, J.T, atol=1e-9):
        raise ValueError("couplings are not symmetric")
    H = J.copy()
    np.fill_diagonal(H, E)
    return H


def rotational_prefactor(energies_ev) -> float:
    """π/λ₀ (Å⁻¹) at the mean site energy."""
    return float(np.pi / (NM_EV / float(np.mean(energies_ev)) * 10.0))


def exciton_states(energies_ev, couplings_cm1, dipoles_debye, centres_A) -> dict:
    """Eigenstates of the exciton Hamiltonian: energies (eV), coefficients c[i, k], dipoles
    (D), dipole strengths (D²), oscillator strengths, rotational strengths (D·μB),
    participation ratios."""
    H = hamiltonian(energies_ev, couplings_cm1)
    e, c = np.linalg.eigh(H)
    # a sign convention for reproducible tables: the largest coefficient of each state positive
    big = c[np.abs(c).argmax(0), np.arange(c.shape[1])]
    c = c * np.sign(big)[None, :]
    mu = np.asarray(dipoles_debye, float)
    mu_k = c.T @ mu
    strength = (mu_k ** 2).sum(1)
    osc = 2.0 / 3.0 * (e / HARTREE2EV) * strength / nist.AU2DEBYE ** 2
    rot = rotational_strengths(c, mu, centres_A, energies_ev)
    return {"energies_ev": e, "coefficients": c, "dipoles_debye": mu_k,
            "dipole_strength_D2": strength, "oscillator_strength": osc,
            "rotational_strength_DmuB": rot,
            "participation_ratio": 1.0 / (c ** 4).sum(0)}


def rotational_strengths(c, dipoles_debye, centres_A, energies_ev) -> np.ndarray:
    """R_k (D·μB) of the Coulomb-only exciton model (see the module docstring)."""
    mu = np.asarray(dipoles_debye, float)
    r = np.asarray(centres_A, float)
    n = len(mu)
    X = np.zeros((n, n))
    for i in range(n):
        for j in range(n):
            if i != j:
                X[i, j] = (r[i] - r[j]) @ np.cross(mu[i], mu[j])
    pref = rotational_prefactor(energies_ev)
    # Σ_{i<j} = half the full double sum (X is symmetric); Å⁻¹ · Å · D² = D²
    return 0.5 * pref * np.einsum("ik,ij,jk->k", c, X, c) * DMUB_PER_D2


def supermolecular_rotational_strengths(dipoles_au, magnetic_au) -> np.ndarray:
    """R_k (D·μB) of a whole-system response from its transition moments in PySCF's
    conventions (``pyscf.tdscf.rhf``): μ_k = ⟨0|r|k⟩ (bohr) and m_k = Im⟨0|L|k⟩ (ħ, about one
    origin). With the electron's μ̂ = −r and m̂ = −L/(2c) (Gaussian atomic units),
    R = Im(⟨0|μ̂|k⟩·⟨k|m̂|0⟩) = −μ_k·m_k/(2c) in (e a₀)², then D² (× AU2DEBYE²) and D·μB.
    For the origin-independent velocity form pass ⟨0|∇|k⟩/ω_k as ``dipoles_au``."""
    mu = np.asarray(dipoles_au, float)
    m = np.asarray(magnetic_au, float)
    r_au = -np.einsum("kx,kx->k", mu, m) / (2.0 * nist.LIGHT_SPEED)
    return r_au * nist.AU2DEBYE ** 2 * DMUB_PER_D2


def absorptivity(energy_ev, absorption_D2_per_ev) -> np.ndarray:
    """Decadic molar absorptivity ε (M⁻¹ cm⁻¹) of a dipole-strength density (D²/eV)."""
    return np.asarray(energy_ev) * np.asarray(absorption_D2_per_ev) / D2_PER_EPS_BAND


def circular_dichroism(energy_ev, cd_DmuB_per_ev) -> np.ndarray:
    """Δε (M⁻¹ cm⁻¹) of a rotational-strength density (D·μB/eV)."""
    return np.asarray(energy_ev) * np.asarray(cd_DmuB_per_ev) / DMUB_PER_DEPS_BAND


def energy_grid(energies_ev, margin_ev=0.6, points=1200) -> np.ndarray:
    E = np.asarray(energies_ev, float)
    return np.linspace(E.min() - margin_ev, E.max() + margin_ev, points)


def _broaden(grid, centres, weights, fwhm_ev):
    s = fwhm_ev * FWHM2SIGMA
    g = np.exp(-0.5 * ((grid[:, None] - centres[None, :]) / s) ** 2) / (s * np.sqrt(2 * np.pi))
    return g @ weights


def spectra(energies_ev, couplings_cm1, dipoles_debye, centres_A, homogeneous_fwhm_cm1=300.0,
            disorder_fwhm_cm1=0.0, samples=1, seed=1, grid=None) -> dict:
    """Absorption (D²/eV; ε in M⁻¹ cm⁻¹) and CD (D·μB/eV; Δε in M⁻¹ cm⁻¹) on an energy grid
    (eV), averaged over `samples` draws of Gaussian site-energy disorder (FWHM in cm⁻¹; none
    when 0), with the uncoupled sites' absorption for comparison."""
    E = np.asarray(energies_ev, float)
    grid = energy_grid(E) if grid is None else np.asarray(grid, float)
    fwhm = float(homogeneous_fwhm_cm1) / EV2CM1
    if fwhm <= 0:
        raise ValueError("homogeneous_fwhm_cm1 must be positive")
    sigma = float(disorder_fwhm_cm1) / EV2CM1 * FWHM2SIGMA
    n = max(1, int(samples)) if sigma > 0 else 1
    rng = np.random.default_rng(seed)
    mu = np.asarray(dipoles_debye, float)
    absorb, cd, mono = np.zeros_like(grid), np.zeros_like(grid), np.zeros_like(grid)
    for _ in range(n):
        Ek = E + (rng.normal(0.0, sigma, len(E)) if sigma > 0 else 0.0)
        st = exciton_states(Ek, couplings_cm1, mu, centres_A)
        absorb += _broaden(grid, st["energies_ev"], st["dipole_strength_D2"], fwhm)
        cd += _broaden(grid, st["energies_ev"], st["rotational_strength_DmuB"], fwhm)
        mono += _broaden(grid, Ek, (mu ** 2).sum(1), fwhm)
    absorb, cd, mono = absorb / n, cd / n, mono / n
    return {"energy_ev": grid, "wavelength_nm": NM_EV / grid, "wavenumber_cm1": grid * EV2CM1,
            "absorption_D2_per_ev": absorb, "cd_DmuB_per_ev": cd,
            "epsilon_M1cm1": absorptivity(grid, absorb),
            "delta_epsilon_M1cm1": circular_dichroism(grid, cd),
            "monomer_absorption_D2_per_ev": mono, "samples": n}
