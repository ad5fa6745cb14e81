"""One SRSH-PCM excited-state calculation over plain data: element symbols and Å coordinates
in, a JSON-ready dictionary out.

- Vertical excitations: linear response (TDA by default, Hirata & Head-Gordon CPL 314, 291 (1999);
  full TDDFT as option) with *non-equilibrium* solvation: the continuum's fast part responds with
  ε_optical (Cammi & Mennucci, JCP 110, 9877 (1999)).
- Two response paths share the same ground state: ``stock`` (PySCF's TDA/TDDFT,
  :mod:`siteshift.qm.stock`) and ``fast`` (:mod:`siteshift.qm.fasttda`).
"""
from __future__ import annotations

import platform
import time
from dataclasses import asdict

import numpy as np
import pyscf

from .. import __version__
from ..base.units import AU2DEBYE, HARTREE2EV, NM_EV
from .bands import assign_bands
from .embedding import interaction_energy
from .fasttda import fast_response
from .relaxed import relaxed_difference_densities
from .scf import build_molecule, frontier_ev, make_scf, run_scf
from .settings import EngineError, ExciteSettings
from .stock import stock_response


def excite(elements, coords_ang, charge=0, spin=0, settings: ExciteSettings | None = None,
           log=None, dm0=None, band_axes=None, bright_threshold=0.01, keep_density=False,
           x0=None, keep_amplitudes=False, charges=None, keep_response=False,
           relaxed=False, start=None, band_scheme=None):
    """One SRSH-PCM excited-state calculation; returns the JSON-ready result dictionary.

    band_axes: optional {"Qy": (i, j), "Qx": (k, l)} atom-index pairs (0-based) whose directions
    name tetrapyrrole bands; without them the lowest state with f ≥ bright_threshold is flagged
    "bright"; band_scheme "heme" names Q and Soret instead (:mod:`siteshift.qm.bands`); the
    naming's warnings are kept as ``band_warnings``. charges: embedding charges (:class:`siteshift.qm.embedding.PointCharges`) in the
    core Hamiltonian. keep_response: return the orbitals and the TDA amplitudes (closed-shell
    fast path) as ``_response`` for difference and transition densities; with relaxed, also the
    relaxed difference density (:mod:`siteshift.qm.relaxed`) of every state with a band name and
    of the lowest state (the site tables' S1). start: how dm0 was chosen (a record kept in the
    result as ``scf_start``; :func:`siteshift.qm.warmstart.warm_density`).
    """
    settings = settings or ExciteSettings()
    settings.check()
    log = log or (lambda s: None)
    timings = {}
    functional = settings.functional
    log(f"settings: {asdict(settings)}")
    log(f"functional: {functional.as_dict()}")
    t0 = time.perf_counter()
    mol = build_molecule(elements, coords_ang, charge, spin, settings.basis,
                         settings.max_memory_mb)
    mf = make_scf(mol, settings, functional, charges=charges)
    mf, step, cycles = run_scf(mf, dm0=dm0, log=log)
    timings["scf"] = time.perf_counter() - t0
    log(f"SCF converged with step '{step}' in {timings['scf']:.1f} s")
    homo, lumo = frontier_ev(mf)

    t1 = time.perf_counter()
    solver = settings.solver if mol.spin == 0 and settings.tda else "stock"
    stats = {}
    if solver == "fast":
        e, osc, tdip, pairs, eps_used = fast_response(mf, settings, log=log, stats=stats, x0=x0)
    else:
        e, osc, tdip, pairs, eps_used = stock_response(mf, settings, stats=stats)
    timings["response"] = time.perf_counter() - t1
    log(f"response ({solver}) in {timings['response']:.1f} s; continuum ε used = {eps_used}")
    if settings.solvated:
        expected = settings.eps_static if settings.equilibrium else settings.eps_optical
        if eps_used is None or abs(eps_used - expected) > 1e-12:
            raise EngineError(f"the response continuum used ε={eps_used}, not the requested "
                              f"{expected}")

    coords = np.asarray(coords_ang, dtype=float).reshape(-1, 3)
    states = []
    for k in range(len(e)):
        e_ev = float(e[k] * HARTREE2EV)
        mu = np.asarray(tdip[k]) * AU2DEBYE
        states.append({
            "index": k + 1,
            "energy_ev": e_ev,
            "wavelength_nm": NM_EV / e_ev,
            "oscillator_strength": float(osc[k]),
            "transition_dipole_debye": [float(v) for v in mu],
            "transition_dipole_norm_debye": float(np.linalg.norm(mu)),
            "pairs": pairs[k],
            "band": None,
        })
    band_warnings = assign_bands(states, coords, band_axes, bright_threshold,
                                 scheme=band_scheme)
    for w in band_warnings:
        log(f"warning: band naming: {w}")
    result = {
        "scf_energy_hartree": float(mf.e_tot),
        "converged": bool(mf.converged),
        "scf_step": step,
        "scf_cycles": cycles,
        "scf_start": start or {"kind": "warm" if dm0 is not None else "cold"},
        # metal molecules: the orbital Hessian's lowest eigenvalue (siteshift.qm.stability)
        "scf_stability": mf.stability,
        "band_warnings": band_warnings,
        "homo_ev": float(homo),
        "lumo_ev": float(lumo),
        "functional": functional.as_dict(),
        "eps_static": settings.eps_static,
        "eps_optical": settings.eps_optical,
        "eps_screen": settings.eps_screen,
        "eps_response_used": eps_used,
        "solvation": ("none" if not settings.solvated else
                      ("equilibrium" if settings.equilibrium else "nonequilibrium")),
        "pcm_method": settings.pcm_method if settings.solvated else None,
        "basis": settings.basis,
        "nao": int(mol.nao),
        "charge": int(charge),
        "spin": int(spin),
        "density_fitting": settings.density_fitting,
        "auxbasis": (getattr(getattr(mf, "with_df", None), "auxbasis", None)
                     or settings.auxbasis or ("auto" if settings.density_fitting else None)),
        "grid_level": settings.grid_level,
        "response": {"method": "TDA" if settings.tda else "TDDFT", "solver": solver,
                     "nstates": settings.nstates, "products": stats.get("products"),
                     "trial_vectors": stats.get("vectors"),
                     "warm_start": bool(stats.get("warm_start", False))},
        "states": states,
        "timings_s": {k: round(v, 3) for k, v in timings.items()},
        "embedding": _embedding_record(mf, charges),
        "versions": {"python": platform.python_version(), "pyscf": pyscf.__version__,
                     "numpy": np.__version__, "siteshift": __version__},
    }
    if keep_density:
        result["_dm"] = mf.make_rdm1()
    if keep_amplitudes and "xs" in stats:
        result["_xs"] = stats["xs"]
    if keep_response and "xs" in stats:
        resp = {"mo_coeff": np.asarray(mf.mo_coeff), "mo_occ": np.asarray(mf.mo_occ),
                "xs": np.asarray(stats["xs"])}
        if relaxed:
            t2 = time.perf_counter()
            lowest = min(states, key=lambda s: s["energy_ev"])["index"]
            pick = [st["index"] for st in states if st["band"] or st["index"] == lowest]
            dens = relaxed_difference_densities(mf, [resp["xs"][i - 1] for i in pick], settings,
                                                log=log)
            resp.update({f"relaxed_{i}": P for i, P in zip(pick, dens)})
            result["timings_s"]["relaxed_density"] = round(time.perf_counter() - t2, 3)
            log(f"relaxed difference densities in {time.perf_counter() - t2:.1f} s")
        result["_response"] = resp
    return result


def _embedding_record(mf, charges) -> dict | None:
    """What the embedding charges were and their interaction with the QM density (eV)."""
    if charges is None or len(charges) == 0:
        return None
    rec = charges.summary()
    rec["interaction_energy_ev"] = interaction_energy(mf) * HARTREE2EV
    return rec
