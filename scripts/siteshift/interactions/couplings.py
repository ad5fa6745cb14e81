"""Excitonic couplings between two sites' transitions, by three routes side by side, and the
screening of the couplings by the environment.

Routes (all in vacuum first; the screening factor multiplies each the same way):

- ``tdc``: the Coulomb interaction of the two transition densities, each fitted in its own
  auxiliary basis (:mod:`.transitions`), J = d_Aᵀ (P_A|Q_B) d_B (Krueger, Scholes, Fleming,
  J. Phys. Chem. B 102, 5378 (1998) for the transition-density method).
- ``charges``: Σ_ij q_i q_j / |R_i − R_j| over the two sets of transition charges (TrEsp;
  Madjet, Abdurahman, Renger, J. Phys. Chem. B 110, 17268 (2006)).
- ``dipole``: the point-dipole formula J = [μ_A·μ_B − 3(μ_A·n)(μ_B·n)] / R³ with the dipoles at
  the |q|-weighted centres of the transition charges; in the usual units
  J = 5.04 κ μ_A μ_B / R³ cm⁻¹ (μ in D, R in nm; the constant is 5.034, common practice).

Screening models (``screening.model``), recorded with every coupling:

- ``optical`` (default): J / n² with n² = ε_optical of the medium (the mean of the two sites'
  ε_optical, or ``screening.eps_optical`` when set): the flat factor of Förster theory.
- ``distance``: J · s(R), s(R) = A exp(−βR) + s₀ with A = 2.68, β = 0.27 Å⁻¹, s₀ = 0.54 (from
  memory: Scholes, Curutchet, Mennucci, Cammi, Tomasi, J. Phys. Chem. B 111, 6978 (2007), fitted
  to PCM-screened couplings of photosynthetic pigments; configurable).
- ``none``: vacuum couplings.
"""
from __future__ import annotations

import numpy as np
from pyscf import gto
from pyscf.data import nist

from ..base.units import EV2CM1, HARTREE2EV
from .transitions import SiteTransitions

HARTREE2CM1 = HARTREE2EV * EV2CM1
#: J (cm⁻¹) = DIPOLE_CM1 κ μ_A μ_B / R³ with μ in debye and R in nm
DIPOLE_CM1 = (1.0 / nist.AU2DEBYE) ** 2 / (10.0 / nist.BOHR) ** 3 * HARTREE2CM1
#: Distance-dependent screening s(R) = A exp(−βR) + s0 (β in Å⁻¹), see the module docstring.
SCHOLES_2007 = {"A": 2.68, "beta": 0.27, "s0": 0.54}


def screening_factor(model: str, distance_A: float, eps_optical: float,
                     params: dict | None = None) -> float:
    """The factor that multiplies a vacuum coupling under the named screening model."""
    if model == "none":
        return 1.0
    if model == "optical":
        if eps_optical < 1.0:
            raise ValueError(f"screening: eps_optical {eps_optical} below 1")
        return 1.0 / float(eps_optical)
    if model == "distance":
        p = {**SCHOLES_2007, **(params or {})}
        return float(p["A"] * np.exp(-p["beta"] * distance_A) + p["s0"])
    raise ValueError(f"screening model {model!r}: use optical, distance or none")


def orientation(mu_a, mu_b, r_a, r_b):
    """(κ, R in Å): κ = μ̂_A·μ̂_B − 3(μ̂_A·n)(μ̂_B·n) of dipoles at r_a and r_b (Å)."""
    d = np.asarray(r_b, float) - np.asarray(r_a, float)
    R = float(np.linalg.norm(d))
    n = d / R
    ua = np.asarray(mu_a, float) / np.linalg.norm(mu_a)
    ub = np.asarray(mu_b, float) / np.linalg.norm(mu_b)
    return float(ua @ ub - 3.0 * (ua @ n) * (ub @ n)), R


def dipole_coupling(mu_a_au, mu_b_au, r_a_A, r_b_A) -> float:
    """Point-dipole coupling (Hartree) of dipoles (a.u.) at positions in Å."""
    kappa, R = orientation(mu_a_au, mu_b_au, r_a_A, r_b_A)
    return kappa * float(np.linalg.norm(mu_a_au) * np.linalg.norm(mu_b_au)) \
        / (R / nist.BOHR) ** 3


def charge_coupling(q_a, x_a_A, q_b, x_b_A) -> float:
    """Coulomb energy (Hartree) of two sets of point charges (positions in Å)."""
    d = np.linalg.norm(np.asarray(x_a_A)[:, None, :] - np.asarray(x_b_A)[None], axis=-1)
    if d.min() < 0.5:
        raise ValueError(f"charges of two sites {d.min():.2f} Å apart: the two sites overlap "
                         "(the same pigment twice?)")
    return float(np.asarray(q_a) @ (nist.BOHR / d) @ np.asarray(q_b))


def cross_coulomb(a: SiteTransitions, b: SiteTransitions) -> np.ndarray:
    """(P_A|Q_B) two-centre Coulomb integrals between the two sites' auxiliary bases."""
    return gto.intor_cross("int2c2e", a.auxmol, b.auxmol)


def couple(a: SiteTransitions, b: SiteTransitions, states_a=None, states_b=None,
           screening="optical", eps_optical=2.0, screening_params=None,
           dipole_scale_a=1.0, dipole_scale_b=1.0) -> list[dict]:
    """Couplings between states of two sites by the three routes (cm⁻¹, screened), with the
    vacuum values, distance, κ and the dipoles used. states_*: 0-based indices (all states when
    None). dipole_scale_*: factors on a site's transition density (a measured dipole strength
    over the computed one, for every route)."""
    states_a = range(a.nstates) if states_a is None else states_a
    states_b = range(b.nstates) if states_b is None else states_b
    V = cross_coulomb(a, b)
    out = []
    for i in states_a:
        for j in states_b:
            sa, sb = float(dipole_scale_a), float(dipole_scale_b)
            ra, rb = a.centre_A(i), b.centre_A(j)
            kappa, R = orientation(a.dipoles_au[i], b.dipoles_au[j], ra, rb)
            f = screening_factor(screening, R, eps_optical, screening_params)
            j_tdc = sa * sb * float(a.aux_coeffs[i] @ V @ b.aux_coeffs[j])
            j_q = sa * sb * charge_coupling(a.charges[i], a.coords_A, b.charges[j], b.coords_A)
            j_d = sa * sb * dipole_coupling(a.dipoles_au[i], b.dipoles_au[j], ra, rb)
            mu_a = sa * np.linalg.norm(a.dipoles_au[i]) * nist.AU2DEBYE
            mu_b = sb * np.linalg.norm(b.dipoles_au[j]) * nist.AU2DEBYE
            out.append({
                "pigment_a": a.pigment_id, "pigment_b": b.pigment_id,
                "state_a": i + 1, "state_b": j + 1,
                "band_a": a.bands[i] or None, "band_b": b.bands[j] or None,
                "energy_a_ev": float(a.energies_ev[i]), "energy_b_ev": float(b.energies_ev[j]),
                "distance_A": R, "kappa": kappa, "mu_a_debye": float(mu_a),
                "mu_b_debye": float(mu_b),
                "mu_a_computed_debye": float(mu_a / sa), "mu_b_computed_debye": float(mu_b / sb),
                "screening_model": screening,
                "screening_factor": f,
                "j_tdc_cm1": f * j_tdc * HARTREE2CM1,
                "j_charges_cm1": f * j_q * HARTREE2CM1,
                "j_dipole_cm1": f * j_d * HARTREE2CM1,
                "j_tdc_vacuum_cm1": j_tdc * HARTREE2CM1,
                "j_charges_vacuum_cm1": j_q * HARTREE2CM1,
                "j_dipole_vacuum_cm1": j_d * HARTREE2CM1,
                # the computed transition densities' coupling, before any dipole rescaling
                "j_tdc_unscaled_cm1": f * j_tdc * HARTREE2CM1 / (sa * sb),
                "j_charges_unscaled_cm1": f * j_q * HARTREE2CM1 / (sa * sb),
                "j_dipole_unscaled_cm1": f * j_d * HARTREE2CM1 / (sa * sb),
                "dipole_scale_a": sa, "dipole_scale_b": sb,
            })
    return out
