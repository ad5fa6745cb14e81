"""Unit conversions at the edges of the QM code (CODATA constants through pyscf.data.nist)."""
from __future__ import annotations

from pyscf.data import nist

HARTREE2EV = nist.HARTREE2EV
AU2DEBYE = nist.AU2DEBYE
#: λ[nm] = NM_EV / E[eV]  (h c / e in eV·nm, from CODATA constants through pyscf.data.nist)
NM_EV = nist.PLANCK * nist.LIGHT_SPEED_SI / nist.E_CHARGE * 1e9
EV2CM1 = 8065.543937  # cm⁻¹ per eV (CODATA 2018 through h c / e)

# Chiroptical units (cgs, as CD is reported): 1 D = 1e-18 esu·cm, μB = 9.274e-21 erg/G, so
# 1 D² = 1e-36 esu²·cm² and 1 D·μB = 9.274e-39 esu²·cm²: 1 D² = 107.8 D·μB.
BOHR_MAGNETON_CGS = nist.BOHR_MAGNETON * 1e3          # erg/G from J/T
DMUB_PER_D2 = 1e-18 / BOHR_MAGNETON_CGS               # ≈ 107.83
#: Dipole and rotational strength from an integrated band (Gaussian units, decadic molar
#: absorptivity ε in M⁻¹ cm⁻¹, ν̃ in cm⁻¹): D = 3000 ln10 h c/(8π³ N_A) ∫ε/ν̃ dν̃ and
#: R = 3000 ln10 h c/(32π³ N_A) ∫Δε/ν̃ dν̃ (common practice; e.g. Schellman, Chem. Rev. 75,
#: 323 (1975)). In debye² and D·μB: D = 9.186e-3 ∫ε/ν̃ dν̃, R = 0.2476 ∫Δε/ν̃ dν̃.
_BAND_CGS = (3000.0 * 2.302585092994046 * nist.PLANCK * 1e7 * nist.LIGHT_SPEED_SI * 1e2
             / (8.0 * 3.141592653589793 ** 3 * nist.AVOGADRO))
D2_PER_EPS_BAND = _BAND_CGS / 1e-36                   # D² per (M⁻¹ cm⁻¹) of ∫ε/ν̃ dν̃
DMUB_PER_DEPS_BAND = _BAND_CGS / 4.0 / (1e-18 * BOHR_MAGNETON_CGS)   # D·μB per ∫Δε/ν̃ dν̃
