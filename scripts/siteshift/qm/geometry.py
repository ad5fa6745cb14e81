"""Geometries of QM models that take coordinate noise out of site differences.

Crystal coordinates of chemically identical pigments differ by their refinement error (bond
lengths scatter by a few hundredths of an Å), and a π system's excitation energy follows its
bond-length alternation, so two identical sites can differ by tens of meV for no physical
reason. ``extract.geometry`` chooses what each site is computed on:

- ``crystal``: the coordinates as read, hydrogens and caps added (the model as extracted);
- ``type_reference``: one model per pigment type optimised in the gas phase (the reference
  variant's first copy of the type), superposed on each copy's core heavy atoms by least squares
  (Kabsch, Acta Cryst. A32, 922 (1976)): every copy then has the same internal geometry and its
  site energy differs from the others' by its environment alone (the RMSD to the crystal is
  reported per site);
- ``relaxed``: each copy optimised with its heavy atoms held to the crystal by harmonic
  restraints (force constant ``extract.restraint_kcal_mol_A2``), hydrogens free: the crystal's
  shape kept, its bond-length noise relaxed.

Levels (``extract.geometry_level``): ``gfn2`` (GFN2-xTB through the tblite package: Bannwarth,
Ehlert, Grimme, J. Chem. Theory Comput. 15, 1652 (2019); seconds for a pigment) or ``dft`` (the
QM preset's SRSH functional and basis in the gas phase through PySCF's analytic gradients;
minutes to hours). The minimiser is SciPy's L-BFGS-B on the energy and its gradient, stopped on
the largest gradient component (``gtol`` Eh/bohr; 4.5e-4, the usual "loose" optimisation
threshold, common practice).
"""
from __future__ import annotations

import logging
import time

import numpy as np
from pyscf.data import nist

from ..base.geometry import kabsch

log = logging.getLogger("siteshift")

GEOMETRY_MODES = ("crystal", "type_reference", "relaxed")
GEOMETRY_LEVELS = ("gfn2", "dft")
#: kcal/mol per Hartree (CODATA through pyscf.data.nist)
KCAL_PER_HARTREE = nist.HARTREE2J * nist.AVOGADRO / 4184.0


class GeometryError(RuntimeError):
    pass


def _gfn2(elements, charge, multiplicity):
    """Energy and gradient (Eh, Eh/bohr) at positions in bohr by GFN2-xTB (tblite)."""
    try:
        from tblite.interface import Calculator
    except ImportError as exc:      # pragma: no cover - a dependency of the project
        raise GeometryError("extract.geometry_level gfn2 needs the tblite package "
                            "(pip install tblite)") from exc
    from pyscf import gto
    numbers = np.array([gto.charge(e) for e in elements])
    state = {}

    def f(x_bohr):
        if "calc" not in state:
            calc = Calculator("GFN2-xTB", numbers, x_bohr, charge=float(charge),
                              uhf=int(multiplicity) - 1)
            calc.set("verbosity", 0)
            state["calc"] = calc
        else:
            state["calc"].update(x_bohr)
        res = state["calc"].singlepoint()
        return float(res.get("energy")), np.asarray(res.get("gradient"))
    return f


def _dft(elements, charge, multiplicity, settings):
    """Energy and gradient by the preset's functional and basis in the gas phase (PySCF);
    each SCF starts from the previous point's density."""
    from ..qm.scf import build_molecule
    from pyscf import dft
    state = {}

    def f(x_bohr):
        mol = build_molecule(elements, x_bohr * nist.BOHR, charge, multiplicity - 1,
                             settings.basis, settings.max_memory_mb)
        mf = (dft.RKS(mol) if multiplicity == 1 else dft.UKS(mol))
        if settings.density_fitting:
            mf = mf.density_fit()
        mf.xc = settings.functional.xc
        mf.grids.level = settings.grid_level
        mf.conv_tol = 1e-9
        mf.verbose = 0
        e = mf.kernel(dm0=state.get("dm"))
        if not mf.converged:
            raise GeometryError("gas-phase SCF did not converge during the optimisation")
        state["dm"] = mf.make_rdm1()
        return float(e), np.asarray(mf.nuc_grad_method().kernel())
    return f


def optimise(elements, coords_A, charge=0, multiplicity=1, level="gfn2", settings=None,
             restrain=None, restraint_kcal_mol_A2=10.0, gtol=4.5e-4, max_steps=500,
             label="") -> tuple[np.ndarray, dict]:
    """Minimise a model's energy (gas phase) from coords_A; restrain: indices of atoms held to
    their starting positions by ½k|x − x₀|² (k in kcal/mol/Å²). Returns (coords Å, record)."""
    from scipy.optimize import minimize
    if level not in GEOMETRY_LEVELS:
        raise GeometryError(f"geometry level {level!r}: use one of {GEOMETRY_LEVELS}")
    x0 = np.asarray(coords_A, float) / nist.BOHR
    engine = (_gfn2(elements, charge, multiplicity) if level == "gfn2"
              else _dft(elements, charge, multiplicity, settings))
    idx = np.asarray(restrain if restrain is not None else [], int)
    k = float(restraint_kcal_mol_A2) / KCAL_PER_HARTREE * nist.BOHR ** 2   # Eh/bohr²
    t0 = time.perf_counter()
    trace = {"n": 0, "e": None, "gmax": None}

    def fun(flat):
        x = flat.reshape(-1, 3)
        e, g = engine(x)
        if len(idx):
            d = x[idx] - x0[idx]
            e += 0.5 * k * float((d ** 2).sum())
            g = g.copy()
            g[idx] += k * d
        trace["n"] += 1
        trace.setdefault("e0", e)          # the start (no restraint energy at x0)
        trace["e"], trace["gmax"] = e, float(np.abs(g).max())
        if trace["n"] % 10 == 0:
            log.info("%s geometry (%s): step %d, E %.8f Eh, max |g| %.2e Eh/bohr", label,
                     level, trace["n"], e, trace["gmax"])
        return e, g.ravel()

    res = minimize(fun, x0.ravel(), jac=True, method="L-BFGS-B",
                   options={"maxiter": max_steps, "gtol": gtol, "ftol": 1e-14,
                            "maxcor": 30})
    x = res.x.reshape(-1, 3)
    e_start = trace["e0"]
    trace["gmax"] = float(np.abs(res.jac).max())      # at the accepted point
    converged = trace["gmax"] <= gtol
    heavy = [i for i, e in enumerate(elements) if e != "H"]
    rec = {"level": level, "energy_hartree": float(res.fun), "start_energy_hartree": e_start,
           "steps": int(trace["n"]), "max_gradient": trace["gmax"], "gtol": gtol,
           "converged": bool(converged), "restrained_atoms": int(len(idx)),
           "restraint_kcal_mol_A2": float(restraint_kcal_mol_A2) if len(idx) else None,
           "rmsd_heavy_A": float(np.sqrt((((x - x0)[heavy] * nist.BOHR) ** 2).sum(1).mean())),
           "time_s": round(time.perf_counter() - t0, 2)}
    log.info("%s geometry (%s): %d steps, E %.8f Eh (%+.2f kcal/mol from the start), max |g| "
             "%.1e, heavy-atom RMSD %.3f A, %.1f s%s", label, level, rec["steps"],
             rec["energy_hartree"], (rec["energy_hartree"] - e_start) * KCAL_PER_HARTREE,
             rec["max_gradient"], rec["rmsd_heavy_A"], rec["time_s"],
             "" if converged else " — NOT converged")
    if not converged:
        raise GeometryError(f"{label}: geometry optimisation ({level}) not converged in "
                            f"{max_steps} steps (max |g| {trace['gmax']:.1e} > {gtol}); "
                            "raise extract.geometry_steps or use extract.geometry: crystal")
    return x * nist.BOHR, rec


def generic_names(names) -> list[str]:
    """Atom names without the copy-specific residue tag of ligand and link atoms
    (``A:HIS52:NE2`` → ``HIS:NE2``), numbered in order where they repeat (two His ligands),
    so that two copies' models can be matched atom by atom."""
    out, seen = [], {}
    for n in names:
        parts = str(n).split(":")
        g = n if len(parts) < 3 else f"{parts[1].rstrip('0123456789-')}:{parts[-1]}"
        seen[g] = seen.get(g, 0) + 1
        out.append(g if seen[g] == 1 else f"{g}#{seen[g]}")
    return out


def superpose_reference(ref: dict, rec: dict, fit_names) -> tuple[np.ndarray, dict]:
    """The reference model's coordinates placed on one copy (its QM-model record): atoms matched
    by generic name, least-squares fit on the named core atoms. Returns (coords Å in the copy's
    atom order, {rmsd_core_A}: the fit's residual)."""
    rn, cn = generic_names(ref["names"]), generic_names(rec["names"])
    if sorted(rn) != sorted(cn) or [ref["elements"][rn.index(n)] for n in cn] \
            != list(rec["elements"]):
        only_ref = sorted(set(rn) - set(cn))[:6]
        only_copy = sorted(set(cn) - set(rn))[:6]
        raise GeometryError(
            f"{rec['pigment_id']}: its QM model's atoms differ from the type reference's "
            f"({ref['pigment_id']}): only in the reference {only_ref}, only in this copy "
            f"{only_copy} (other ligands or links); use extract.geometry: relaxed or crystal")
    order = [rn.index(n) for n in cn]
    X = np.asarray(ref["coords_A"], float)[order]
    Y = np.asarray(rec["coords_A"], float)
    fit = [i for i, n in enumerate(rec["names"]) if n in set(fit_names)]
    if len(fit) < 3:
        raise GeometryError(f"{rec['pigment_id']}: fewer than 3 core atoms to superpose on")
    R, t = kabsch(X[fit], Y[fit])
    Z = X @ R + t
    return Z, {"rmsd_core_A": float(np.sqrt(((Z[fit] - Y[fit]) ** 2).sum(1).mean()))}
