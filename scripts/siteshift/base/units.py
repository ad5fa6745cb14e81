"""Unit conversions at the edges of the QM code (CODATA constants through pyscf.data.nist)."""
from __future__ import annotations

from pyscf.data import nist

HARTREE2EV = nist.HARTREE2EV
AU2DEBYE = nist.AU2DEBYE
#: λ[nm] = NM_EV / E[eV]  (h c / e in eV·nm, from CODATA constants through pyscf.data.nist)
NM_EV = nist.PLANCK * nist.LIGHT_SPEED_SI / nist.E_CHARGE * 1e9
EV2CM1 = 8065.543937  # cm⁻¹ per eV (CODATA 2018 through h c / e)
