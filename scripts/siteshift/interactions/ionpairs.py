"""Charge-separated (ion-pair) states between pigments from each site's ion calculation.

    E(D⁺A⁻) = IP_D − EA_A + (1/ε_c) Σ_ij q_i^hole q_j^electron / |r_i − r_j|

IP_D and EA_A come from ΔSCF with each ion in its own equilibrium continuum
(:mod:`siteshift.qm.ions`), so each ion's own polarisation energy (Born-like) is already in
them; what is added is the attraction of the hole on D and the electron on A, from the ESP
charges of each ion's density change, screened by ε_c (the Weller form of the ion-pair energy,
Weller, Z. Phys. Chem. 133, 93 (1982), with point ions replaced by fitted charge distributions).
ε_c is a modelling choice (see :func:`coulomb_eps`): by default the mean of the two sites'
static ε, the same equilibrium medium the ions were computed in.

The driving force of the charge separation from the donor's excited state is
ΔG = E(D⁺A⁻) − E(D*), with E(D*) the donor's lowest excitation (its site energy).
The same sum with −ε_HOMO and −ε_LUMO in place of the ΔSCF IP and EA is reported beside it.
"""
from __future__ import annotations

import numpy as np

from ..base.units import HARTREE2EV
from .couplings import charge_coupling

#: e²/(4πε₀ Å) in eV (CODATA 2018: Hartree × Bohr in Å)
COULOMB_EV_A = HARTREE2EV * 0.529177210903
#: how the ε that screens the hole–electron attraction is chosen
COULOMB_EPS = ("static", "optical")


def pair_distance(x1, x2) -> float:
    """Closest distance (Å) between two sets of positions."""
    x1, x2 = np.asarray(x1, float).reshape(-1, 3), np.asarray(x2, float).reshape(-1, 3)
    return float(np.min(np.linalg.norm(x1[:, None, :] - x2[None], axis=-1)))


def coulomb_ev(q1, x1, q2, x2) -> float:
    """Σ_ij q1_i q2_j / |x1_i − x2_j| in eV (charges in e, positions in Å)."""
    return charge_coupling(q1, np.asarray(x1, float).reshape(-1, 3), q2,
                           np.asarray(x2, float).reshape(-1, 3)) * HARTREE2EV


def coulomb_eps(choice, eps_donor: dict, eps_acceptor: dict) -> float:
    """ε_c of an ion pair: "static" (mean of the two sites' ε_static), "optical" (mean of their
    ε_optical) or a number (≥ 1). eps_*: the sites' dielectric records."""
    if isinstance(choice, (int, float)) and not isinstance(choice, bool):
        if choice < 1.0:
            raise ValueError(f"ions.coulomb_eps must be >= 1, got {choice}")
        return float(choice)
    if choice not in COULOMB_EPS:
        raise ValueError(f"ions.coulomb_eps must be one of {COULOMB_EPS} or a number, got "
                         f"{choice!r}")
    key = f"eps_{choice}"
    return 0.5 * (float(eps_donor[key]) + float(eps_acceptor[key]))


def ion_pair(donor: dict, acceptor: dict, coords_donor, coords_acceptor, eps_c: float,
             excitation_ev: float | None = None) -> dict:
    """E(D⁺A⁻) (eV) and its parts from the donor's and the acceptor's ion results
    (:func:`siteshift.qm.ions.ionize`, with their fitted charges) and their model coordinates
    (Å). excitation_ev: the donor's lowest excitation, for the driving force."""
    v = coulomb_ev(donor["hole_charges"], coords_donor, acceptor["electron_charges"],
                   coords_acceptor)
    cd = np.asarray(coords_donor, float).reshape(-1, 3).mean(0)
    ca = np.asarray(coords_acceptor, float).reshape(-1, 3).mean(0)
    e = donor["ip_deltascf_ev"] - acceptor["ea_deltascf_ev"] + v / eps_c
    e_orb = donor["ip_orbital_ev"] - acceptor["ea_orbital_ev"] + v / eps_c
    out = {"ip_donor_ev": donor["ip_deltascf_ev"], "ea_acceptor_ev": acceptor["ea_deltascf_ev"],
           "coulomb_vacuum_ev": v, "eps_coulomb": float(eps_c), "coulomb_ev": v / eps_c,
           "center_distance_A": float(np.linalg.norm(cd - ca)),
           "closest_distance_A": pair_distance(coords_donor, coords_acceptor),
           "energy_ev": e, "energy_orbital_ev": e_orb, "orbital_minus_deltascf_ev": e_orb - e,
           "donor_excitation_ev": excitation_ev,
           "driving_force_ev": None if excitation_ev is None else e - excitation_ev}
    return out


def same_branch_pairs(coords: dict, sides: dict, max_distance_A: float) -> list:
    """Automatic donor → acceptor pairs: every ordered pair of pigments on the same branch side
    whose closest atoms are within max_distance_A. coords: {pigment: (n, 3) Å}; sides:
    {pigment: "A" or "B"} (members a and b of the branch pairs). Both directions are listed,
    since which pigment gives the electron is what the energies decide."""
    out = []
    ids = sorted(p for p in coords if p in sides)
    for i, d in enumerate(ids):
        for a in ids:
            if a == d or sides[a] != sides[d]:
                continue
            if pair_distance(coords[d], coords[a]) <= max_distance_A:
                out.append((f"{d}>{a}", d, a))
    return out


def mirror(donor, acceptor, partner: dict):
    """The other branch's step of donor → acceptor (their branch partners), or None."""
    if donor in partner and acceptor in partner:
        return partner[donor], partner[acceptor]
    return None
