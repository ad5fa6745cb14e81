"""Screened range-separated hybrid (SRSH) functionals built on ωPBE.

The SRSH partition of the Coulomb operator (Refaely-Abramson, Sharifzadeh, Jain, Baer, Neaton,
Kronik, PRB 88, 081204 (2013)):

    1/r = [α + β erf(ωr)]/r  (exact exchange)  +  [1 − α − β erf(ωr)]/r  (semilocal exchange)

with α the short-range exact-exchange fraction and α + β the long-range fraction, set to 1/ε in a
dielectric environment (1 in the gas phase). In PySCF's xc grammar this is

    α·SR_HF(ω) + (α+β)·LR_HF(ω) + β·HJS_PBE + (1−α−β)·PBE, PBE

where HJS_PBE is the short-range ωPBE exchange (Henderson, Janesko, Scuseria, JCP 128, 194105
(2008)). With α = 0.2, α+β = 1, ω = 0.2 it is LRC-ωPBEh; with α = 0, α+β = 1, ω = 0.3 LRC-ωPBE.
"""
from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class SRSH:
    """Parameters of one SRSH functional.

    alpha: short-range exact-exchange fraction (dimensionless).
    omega: range-separation parameter in bohr⁻¹.
    eps_screen: dielectric constant that sets the long-range fraction α + β = 1/ε (1 = gas phase).
    """

    alpha: float
    omega: float
    eps_screen: float = 1.0

    def __post_init__(self):
        for k in ("alpha", "omega", "eps_screen"):
            object.__setattr__(self, k, float(getattr(self, k)))
        if not 0.0 <= self.alpha <= 1.0:
            raise ValueError(f"SRSH alpha must lie in [0, 1], got {self.alpha}")
        if self.omega <= 0.0:
            raise ValueError(f"SRSH omega must be > 0 bohr^-1, got {self.omega}")
        if self.eps_screen < 1.0:
            raise ValueError(f"SRSH screening dielectric must be >= 1, got {self.eps_screen}")

    @property
    def long_range_fraction(self) -> float:
        return 1.0 / self.eps_screen

    @property
    def beta(self) -> float:
        return self.long_range_fraction - self.alpha

    @property
    def xc(self) -> str:
        """The PySCF/libxc xc string of this functional."""
        a, b, w = float(self.alpha), float(self.beta), float(self.omega)
        ab = a + b
        return (f"{a!r}*SR_HF({w!r}) + {ab!r}*LR_HF({w!r}) + {b!r}*HJS_PBE "
                f"+ {1.0 - a - b!r}*PBE, PBE")

    def as_dict(self) -> dict:
        return {"alpha": self.alpha, "beta": self.beta, "omega_bohr_inv": self.omega,
                "eps_screen": self.eps_screen, "xc": self.xc}
