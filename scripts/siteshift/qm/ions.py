"""Ionisation potential and electron affinity of one site in its medium, two ways side by side.

- ΔSCF: IP = E(N−1) − E(N), EA = E(N) − E(N+1), each ion an open-shell (UKS) ground state with
  the same SRSH functional and an *equilibrium* continuum at ε_static (the ions live long enough
  for the medium's nuclear polarisation to follow), and the same embedding charges when given.
- Frontier orbitals of the neutral: IP ≈ −ε_HOMO, EA ≈ −ε_LUMO (the ionisation-potential
  theorem; exact for the exact functional, what optimal tuning of ω enforces in the gas phase,
  Stein, Kronik, Baer, JACS 131, 2818 (2009)). With a screened long range α + β = 1/ε the orbital
  gap shrinks in a polarisable medium as the ΔSCF gap does (Refaely-Abramson et al., PRB 88,
  081204 (2013)); with α + β = 1 it stays near its gas-phase value. The result keeps both and
  their difference, so how far the screened functional keeps them together is measured, not
  assumed.

The hole and the electron are represented by ESP-fitted charges of the ions minus those of the
neutral (:mod:`siteshift.qm.esp`; the fit is linear in the potential, so this is the fit of the
potential of the density change); they sum to +1 and −1 and enter the ion-pair Coulomb term
(:mod:`siteshift.interactions.ionpairs`).
"""
from __future__ import annotations

import time

import numpy as np

from ..base.units import HARTREE2EV
from .dfjk import CompactDF
from .esp import esp_charges
from .functional import SRSH
from .scf import build_molecule, make_scf, run_scf
from .settings import EngineError, ExciteSettings

#: the three ground states of an ion calculation: name → charge change
STATES = {"neutral": 0, "cation": +1, "anion": -1}


def ion_spin(spin: int) -> int:
    """2S of the ion made from a state with 2S = spin: one more unpaired electron from a closed
    shell, one fewer from an open shell (the high-spin ion of a doublet radical is not asked
    for). Same rule as :func:`siteshift.qm.tuning.tune_omega`."""
    return spin + 1 if spin == 0 else spin - 1


def unscreened(settings: ExciteSettings) -> SRSH:
    """The same range-separated hybrid without screening (α + β = 1), for comparison."""
    return SRSH(settings.alpha, settings.omega, 1.0)


def frontier_spin_orbitals_ev(mf):
    """(highest occupied, lowest unoccupied) orbital energy in eV over both spins: the orbital
    an electron leaves on ionisation and the one it enters on attachment (for a closed shell the
    HOMO and LUMO; for a radical the α SOMO and, usually, its empty β partner)."""
    e = np.asarray(mf.mo_energy).reshape(-1, np.shape(mf.mo_energy)[-1])
    occ = np.asarray(mf.mo_occ).reshape(e.shape)
    return e[occ > 0].max() * HARTREE2EV, e[occ == 0].min() * HARTREE2EV


def share_fitted_tensors(mf, fitted):
    """Let an ion's SCF use the neutral's in-core fitted tensors (:class:`CompactDF`): they
    depend on the basis and the fitting basis only, which the ions share; each ion would
    otherwise build both tensors (full and long range) again."""
    if isinstance(fitted, CompactDF) and isinstance(getattr(mf, "with_df", None), CompactDF):
        mf.with_df = fitted
        sol = getattr(mf, "with_solvent", None)
        if sol is not None and getattr(sol, "fit_df", None) is not None:
            sol.fit_df = fitted


def ionize(elements, coords_ang, charge=0, spin=0, settings: ExciteSettings | None = None,
           functional: SRSH | None = None, charges=None, log=None, dm0=None,
           fit_charges=True, starts=None, start=None) -> dict:
    """Neutral, cation and anion SCFs of one molecule; a JSON-ready dictionary (energies in eV
    unless named otherwise).

    settings: basis, grids, PCM and ε_static (the continuum of all three states; 1 = gas phase)
    and the functional (its screening ε from settings.screen) unless ``functional`` is given.
    charges: embedding charges (:class:`siteshift.qm.embedding.PointCharges`) in every state.
    dm0: the neutral's starting density (e.g. a site calculation's), described by the record
    ``start`` (kept as ``scf.neutral.start``); each ion starts from the neutral's converged
    density unless ``starts`` gives it one ({"cation": dm, "anion": dm}, e.g. the same ion at
    a neighbouring ε). Every state's converged density is returned as ``_dms``.
    """
    settings = settings or ExciteSettings()
    settings.check()
    functional = functional or settings.functional
    log = log or (lambda s: None)
    coords = np.asarray(coords_ang, float).reshape(-1, 3)
    out = {"functional": functional.as_dict(), "eps_static": settings.eps_static,
           "solvation": "equilibrium" if settings.solvated else "none",
           "pcm_method": settings.pcm_method if settings.solvated else None,
           "basis": settings.basis, "grid_level": settings.grid_level, "charge": int(charge),
           "spin": int(spin), "ion_spin": ion_spin(spin),
           "embedding_charges": 0 if charges is None else len(charges), "scf": {}}
    energies, esp, dm_neutral, fitted = {}, {}, None, None
    starts = dict(starts or {})
    out["_dms"] = {}
    for name, dq in STATES.items():
        q = int(charge) + dq
        s = int(spin) if dq == 0 else ion_spin(spin)
        t0 = time.perf_counter()
        try:
            mol = build_molecule(elements, coords, q, s, settings.basis, settings.max_memory_mb)
        except EngineError as exc:
            raise EngineError(f"{name} (charge {q}, 2S {s}): {exc}") from None
        mf = make_scf(mol, settings, functional, charges=charges)
        if dq != 0:
            share_fitted_tensors(mf, fitted)
        if starts.get(name) is not None:
            begin, how = starts[name], {"kind": "warm", "source": "given"}
        elif dq == 0:
            begin = dm0
            how = start or {"kind": "warm" if dm0 is not None else "cold"}
        else:
            begin, how = dm_neutral, {"kind": "warm", "source": "the neutral's density"}
        if begin is not None and s == 0 and np.ndim(begin) == 3:   # open-shell → closed-shell
            begin = np.asarray(begin[0]) + np.asarray(begin[1])
        mf, step, cycles = run_scf(mf, dm0=begin, log=lambda m, n=name: log(f"{n}: {m}"))
        dt = time.perf_counter() - t0
        if dq == 0:
            fitted = getattr(mf, "with_df", None)
            dm_neutral = mf.make_rdm1()
            homo, lumo = frontier_spin_orbitals_ev(mf)
            out["_dm"] = dm_neutral
        energies[name] = float(mf.e_tot)
        out["_dms"][name] = mf.make_rdm1()
        s2 = None
        if s > 0:
            s2 = float(mf.spin_square()[0])
        out["scf"][name] = {"charge": q, "spin": s, "step": step, "cycles": int(cycles),
                            "time_s": round(dt, 3), "energy_hartree": float(mf.e_tot),
                            "s_squared": s2, "start": how}
        log(f"{name}: E = {mf.e_tot:.8f} Eh (charge {q}, 2S {s}, {cycles} cycles, "
            f"{dt:.1f} s{'' if s2 is None else f', <S^2> {s2:.3f}'})")
        if fit_charges:
            esp[name] = np.asarray(esp_charges(mf, elements, coords, q)["charges"])
    ip = (energies["cation"] - energies["neutral"]) * HARTREE2EV
    ea = (energies["neutral"] - energies["anion"]) * HARTREE2EV
    out.update({
        "ip_deltascf_ev": ip, "ea_deltascf_ev": ea,
        "homo_ev": float(homo), "lumo_ev": float(lumo),
        "ip_orbital_ev": float(-homo), "ea_orbital_ev": float(-lumo),
        "ip_orbital_minus_deltascf_ev": float(-homo - ip),
        "ea_orbital_minus_deltascf_ev": float(-lumo - ea),
        "gap_deltascf_ev": ip - ea, "gap_orbital_ev": float(lumo - homo),
        "gap_orbital_minus_deltascf_ev": float((lumo - homo) - (ip - ea)),
    })
    if fit_charges:
        out["hole_charges"] = (esp["cation"] - esp["neutral"]).tolist()
        out["electron_charges"] = (esp["anion"] - esp["neutral"]).tolist()
    times = {k: v["time_s"] for k, v in out["scf"].items()}
    out["ion_over_neutral_time"] = {k: round(times[k] / max(times["neutral"], 1e-9), 3)
                                    for k in ("cation", "anion")}
    log(f"IP {ip:.4f} eV (-HOMO {-homo:.4f}), EA {ea:.4f} eV (-LUMO {-lumo:.4f}); "
        f"gap dSCF {ip - ea:.4f} eV, orbital {lumo - homo:.4f} eV")
    return out
