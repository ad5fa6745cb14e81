"""Two pigments computed whole: one supermolecular SRSH-PCM TDA, analysed by fragments and set
beside the coupling model's two states.

Fragment analysis of each dimer state's transition density T (hole rows, electron columns):
Ω_XY = ½ Σ_{μ∈X, ν∈Y} [(T S)_μν (S T)_μν + T_μν (S T S)_μν], normalised to Σ Ω = 1 (Mulliken
partition of the transition density; Plasser & Lischka, J. Chem. Theory Comput. 8, 2777
(2012)). Ω_AA and Ω_BB are the local shares, Ω_AB + Ω_BA the charge-transfer character.

Which dimer states are the exciton pair of the chosen monomer transitions: the projection of
each dimer state on monomer transition X, c_X = ⟨T_X | T_k⟩_S / 2 over the X block (the dimer's
AO basis is monomer A's followed by monomer B's, so the blocks are the monomers' bases; a
normalised TDA transition density has ⟨T|T⟩_S = 2). The two states with the largest
c_A² + c_B² form the pair; their splitting gives the supermolecular coupling
|J| = √((ΔE/2)² − ((E_A − E_B)/2)²), its sign from c_A c_B of the upper state.

Each dimer state also carries its rotational strength (D·μB) from the whole system's
transition moments (:func:`siteshift.interactions.transitions.transition_moments`), in the
length form (⟨0|r|k⟩ with the magnetic moment about the nuclear-charge centre) and the
origin-independent velocity form, to set beside the exciton model's couplet.
"""
from __future__ import annotations

import numpy as np

from ..base.units import EV2CM1
from .excitons import supermolecular_rotational_strengths
from .transitions import transition_densities, transition_moments


def fragment_omega(S, T, nao_a) -> np.ndarray:
    """Ω (2, 2) of a transition density T (nao, nao) for fragments [0, nao_a) and the rest."""
    TS, ST, STS = T @ S, S @ T, S @ T @ S
    w = 0.5 * (TS * ST + T * STS)
    sl = (slice(0, nao_a), slice(nao_a, None))
    om = np.array([[w[a, b].sum() for b in sl] for a in sl])
    return om / om.sum()


def projection(S_block, T_block, T_mono) -> float:
    """⟨T_mono | T_block⟩_S / 2 over one monomer's block."""
    return float(np.einsum("mn,mn->", T_mono, S_block @ T_block @ S_block)) / 2.0


def analyse_dimer(mol, response, energies_ev, osc, nao_a, mono_a, mono_b, e_a, e_b):
    """Per-state fragment analysis of a dimer TDA and the exciton pair of monomer transitions
    mono_a/mono_b (their unsymmetrised AO transition densities, energies e_a, e_b in eV)."""
    T = transition_densities(response["mo_coeff"], response["mo_occ"], response["xs"],
                             symmetric=False)
    S = mol.intor_symmetric("int1e_ovlp")
    A, B = slice(0, nao_a), slice(nao_a, None)
    tm = transition_moments(mol, response["mo_coeff"], response["mo_occ"], response["xs"],
                            energies_ev)
    rot_len = supermolecular_rotational_strengths(tm["length"], tm["magnetic"])
    rot_vel = supermolecular_rotational_strengths(tm["velocity"], tm["magnetic"])
    states = []
    for k, Tk in enumerate(T):
        om = fragment_omega(S, Tk, nao_a)
        ca = projection(S[A, A], Tk[A, A], mono_a)
        cb = projection(S[B, B], Tk[B, B], mono_b)
        states.append({"state": k + 1, "energy_ev": float(energies_ev[k]),
                       "oscillator_strength": float(osc[k]),
                       "share_a": float(om[0, 0]), "share_b": float(om[1, 1]),
                       "charge_transfer": float(om[0, 1] + om[1, 0]),
                       "ct_a_to_b": float(om[0, 1]), "ct_b_to_a": float(om[1, 0]),
                       "rotational_strength_DmuB": float(rot_len[k]),
                       "rotational_strength_velocity_DmuB": float(rot_vel[k]),
                       "c_a": ca, "c_b": cb})
    weight = [s["c_a"] ** 2 + s["c_b"] ** 2 for s in states]
    pair = sorted(np.argsort(weight)[::-1][:2])
    lo, up = states[pair[0]], states[pair[1]]
    split = up["energy_ev"] - lo["energy_ev"]
    half_gap = 0.5 * (e_a - e_b)
    j_abs = np.sqrt(max(0.0, (0.5 * split) ** 2 - half_gap ** 2))
    sign = 1.0 if up["c_a"] * up["c_b"] >= 0 else -1.0
    return {"states": states,
            "pair": [lo["state"], up["state"]],
            "pair_weights": [float(weight[pair[0]]), float(weight[pair[1]])],
            "splitting_ev": float(split), "splitting_cm1": float(split * EV2CM1),
            "j_supermolecular_cm1": float(sign * j_abs * EV2CM1),
            "intensity_ratio_upper_lower": (up["oscillator_strength"]
                                            / max(lo["oscillator_strength"], 1e-12)),
            "charge_transfer_pair": [lo["charge_transfer"], up["charge_transfer"]]}


def model_pair(e_a, e_b, j_cm1) -> tuple[float, float]:
    """The coupling model's two states (eV) of two sites at e_a, e_b coupled by J (cm⁻¹)."""
    j = j_cm1 / EV2CM1
    m, d = 0.5 * (e_a + e_b), 0.5 * (e_a - e_b)
    r = float(np.sqrt(d * d + j * j))
    return m - r, m + r


def excite_dimer(site_a, site_b, settings, response_a, response_b, state_a, state_b,
                 log=None, nstates=None, fragment_start_on=True):
    """Supermolecular TDA of two sites ((elements, coords Å, charge) each, singlets) with the
    monomers' own responses (dicts with mo_coeff, mo_occ, xs and their energies_ev) for the
    pair analysis; state_a/state_b: 0-based monomer states. Returns (analysis, dimer result).

    The dimer's SCF starts from the monomers' converged orbitals (computed with the same
    settings: :func:`siteshift.qm.warmstart.fragment_start`; ``fragment_start_on=False``: PySCF's
    default guess); the start is recorded in the result's ``scf_start``."""
    from dataclasses import replace

    from ..qm.excite import excite
    from ..qm.scf import build_molecule
    from ..qm.warmstart import fragment_start
    (el_a, xa, qa), (el_b, xb, qb) = site_a, site_b
    elements = list(el_a) + list(el_b)
    coords = np.vstack([np.asarray(xa, float), np.asarray(xb, float)])
    s = replace(settings, nstates=int(nstates or 2 * settings.nstates))
    mol = build_molecule(elements, coords, qa + qb, 0, s.basis, s.max_memory_mb)
    dm0, start = None, {"kind": "cold", "reason": "fragment start switched off"}
    if fragment_start_on:
        dm0, start = fragment_start(
            mol, [(r["mo_coeff"], r["mo_occ"]) for r in (response_a, response_b)],
            "the monomers' converged orbitals (block-diagonal, Löwdin-orthonormalised)")
    if log:
        log(f"dimer SCF start {start['kind']}: "
            + (start["source"] if start["kind"] == "warm" else start["reason"]))
    res = excite(elements, coords, qa + qb, 0, s, log=log, keep_response=True, dm0=dm0,
                 start=start)
    nao_a = int(mol.aoslice_by_atom()[len(el_a) - 1, 3])   # A's functions come first
    mono = [transition_densities(r["mo_coeff"], r["mo_occ"], r["xs"][[k]], symmetric=False)[0]
            for r, k in ((response_a, state_a), (response_b, state_b))]
    e = [st["energy_ev"] for st in res["states"]]
    f = [st["oscillator_strength"] for st in res["states"]]
    out = analyse_dimer(mol, res["_response"], e, f, nao_a, mono[0], mono[1],
                        float(response_a["energies_ev"][state_a]),
                        float(response_b["energies_ev"][state_b]))
    return out, res
