"""Optimal tuning of ω by the ionization-potential theorem (gas phase)."""
from __future__ import annotations

import platform
import time
from types import SimpleNamespace

import numpy as np
import pyscf

from ..base.defaults import default, preset
from ..base.units import HARTREE2EV
from .functional import SRSH
from .scf import build_molecule, frontier_ev, make_scf, run_scf
from .settings import ExciteSettings

def tune_omega(elements, coords_ang, charge=0, spin=0, settings: ExciteSettings | None = None,
               bounds=None, xatol=None, include_anion=None, log=None, keep_orbitals=False):
    """Gas-phase optimal tuning of ω: minimise J²(ω) = Σ_i (ε_HOMO(N+i) + IP(N+i))².

    Stein, Kronik, Baer, JACS 131, 2818 (2009) (i = 0); Stein et al., PRL 105, 266802 (2010)
    (i = 0, 1 with the anion). α is held fixed and α+β = 1 (gas phase). Returns a dictionary with
    the tuned ω (bohr⁻¹), J at the optimum (eV), and every evaluation of the curve. bounds, xatol
    and include_anion default to the study config's (`qm.tune`, the full preset's tolerance).
    keep_orbitals: also return the neutral's converged orbitals at the evaluation nearest the
    tuned ω as ``_neutral`` = (ω, an object with mo_coeff and mo_occ) (warm starts of the
    study's site calculations).
    """
    from scipy.optimize import minimize_scalar

    settings = settings or ExciteSettings()
    scf_log = log   # each SCF cycle reaches the log (progress), when there is one
    log = log or (lambda s: None)
    tune = default("qm.tune")
    bounds = tuple(tune["bounds"] if bounds is None else bounds)
    xatol = float(preset("full")["tune_xatol"] if xatol is None else xatol)
    include_anion = bool(tune["include_anion"] if include_anion is None else include_anion)
    mol0 = build_molecule(elements, coords_ang, charge, spin, settings.basis,
                          settings.max_memory_mb)
    mol_c = build_molecule(elements, coords_ang, charge + 1, (spin + 1) if spin == 0 else spin - 1,
                           settings.basis, settings.max_memory_mb)
    mol_a = (build_molecule(elements, coords_ang, charge - 1, spin + 1 if spin == 0 else spin - 1,
                            settings.basis, settings.max_memory_mb) if include_anion else None)
    dms = {}
    curve = []
    neutrals = {}

    def energy(mol, key, omega):
        mf = make_scf(mol, settings, SRSH(settings.alpha, omega, 1.0), solvated=False)
        mf, _, _ = run_scf(mf, dm0=dms.get(key), log=scf_log)
        dms[key] = mf.make_rdm1()
        return mf

    def j2(omega):
        t = time.perf_counter()
        n = energy(mol0, "n", omega)
        if keep_orbitals:
            # the orbitals only: an SCF object holds its fitted tensors (GBs for a large pigment)
            neutrals[float(omega)] = SimpleNamespace(mo_coeff=n.mo_coeff, mo_occ=n.mo_occ)
        c = energy(mol_c, "c", omega)
        ip = (c.e_tot - n.e_tot) * HARTREE2EV
        homo_n = frontier_ev(n)[0]
        j = (homo_n + ip) ** 2
        rec = {"omega_bohr_inv": float(omega), "ip_ev": float(ip), "homo_ev": float(homo_n)}
        if mol_a is not None:
            a = energy(mol_a, "a", omega)
            ea = (n.e_tot - a.e_tot) * HARTREE2EV
            homo_a = frontier_ev(a)[0]
            j += (homo_a + ea) ** 2
            rec.update({"ea_ev": float(ea), "homo_anion_ev": float(homo_a)})
        rec["j2_ev2"] = float(j)
        rec["time_s"] = round(time.perf_counter() - t, 2)
        curve.append(rec)
        log(f"tune: omega={omega:.4f} bohr^-1  IP={ip:.4f} eV  -HOMO={-homo_n:.4f} eV  "
            f"J^2={j:.5f} eV^2 ({rec['time_s']} s)")
        return j

    t0 = time.perf_counter()
    res = minimize_scalar(j2, bounds=bounds, method="bounded", options={"xatol": xatol})
    best = min(curve, key=lambda r: r["j2_ev2"])
    edge = min(abs(best["omega_bohr_inv"] - b) for b in bounds)
    out = {
        "omega_bohr_inv": float(res.x),
        "j_ev": float(np.sqrt(res.fun)),
        "alpha": settings.alpha,
        "include_anion": include_anion,
        "bounds_bohr_inv": list(bounds),
        "xatol_bohr_inv": xatol,
        "at_bound": bool(edge < 2 * xatol),
        "basis": settings.basis,
        "grid_level": settings.grid_level,
        "evaluations": sorted(curve, key=lambda r: r["omega_bohr_inv"]),
        "n_evaluations": len(curve),
        "time_s": round(time.perf_counter() - t0, 2),
        "versions": {"python": platform.python_version(), "pyscf": pyscf.__version__},
    }
    if keep_orbitals:
        w = min(neutrals, key=lambda w: abs(w - res.x))
        out["_neutral"] = (w, neutrals[w])
    return out
