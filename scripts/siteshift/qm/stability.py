"""Internal stability of a converged SCF solution, and a restart along an instability.

A solution is a local minimum of the energy over orbital rotations when the lowest eigenvalue
of the orbital Hessian is not negative; a negative one marks a saddle point, and rotating the
orbitals along its eigenvector leads downhill to a lower solution (Seeger & Pople, JCP 66, 3045
(1977); Bauernschmitt & Ahlrichs, JCP 104, 9047 (1996)). The Hessian–vector products are PySCF's
second-order solver's (``pyscf.soscf.newton_ah.gen_g_hop_rhf``/``_uhf``), as in
``pyscf.scf.stability``; the continuum's equilibrium response can be included (PySCF's own
stability analysis switches it on), and is left out by default, which gives an upper
bound of the eigenvalue (see :func:`lowest_hessian_eigenvalue`). Metal molecules have several
SCF solutions (the heme and Fe–C–O figures in :mod:`siteshift.qm.scf`), so
:func:`siteshift.qm.scf.run_scf` checks theirs.
"""
from __future__ import annotations

import contextlib

import numpy as np

#: Eigenvalue (Eh) below which a solution counts as unstable: PySCF's own threshold
#: (``pyscf.scf.stability``: ``stable = not (e < -1e-5)``).
UNSTABLE_BELOW = -1e-5
#: Guess vectors of the Davidson besides PySCF's: unit vectors on the lowest diagonal elements.
GUESS_VECTORS = 8
#: Davidson convergence on the eigenvalue (Eh): PySCF's default for stability (``STAB_TOL``).
STABILITY_TOL = 1e-4


def lowest_hessian_eigenvalue(mf, tol=STABILITY_TOL, log=None, continuum_response=False):
    """(λ, orbitals) for a converged RKS/UKS (or RHF/UHF) object: λ the lowest eigenvalue of
    the orbital Hessian (Eh), and the orbitals rotated along its eigenvector when λ is below
    UNSTABLE_BELOW (None otherwise). log: each Hessian–vector product's time.

    continuum_response: include the continuum's equilibrium response to the rotated density
    in the Hessian (PySCF's ``gen_response`` with ``equilibrium_solvation``). Off by default,
    as in PySCF's second-order solver: PySCF recomputes the surface integrals for every
    product, and the check of heme b in IEF-PCM (19HC, 6-31G) had not ended after 17 min with
    it. The term is negative semidefinite (the solvation energy −½ Vᵀ M V of any charge
    distribution is negative; with it, vᵀHv along a random v of formaldehyde in IEF-PCM ε 20
    equals the finite-difference second derivative of the PCM SCF energy, 22.00796, against
    22.03581 without), so λ without it is an upper bound: a negative λ is a true instability,
    a weak one made only by the continuum's response can be missed (formaldehyde: 0.6362
    without, 0.6294 Eh with the response, from the full matrices)."""
    import time

    from pyscf import lib
    from pyscf.scf.stability import _rotate_mo
    from pyscf.soscf import newton_ah
    uhf = np.asarray(mf.mo_occ).ndim == 2
    gen = newton_ah.gen_g_hop_uhf if uhf else newton_ah.gen_g_hop_rhf
    sol = getattr(mf, "with_solvent", None)
    equilibrium = (lib.temporary_env(sol, equilibrium_solvation=bool(continuum_response))
                   if sol is not None and not getattr(sol, "frozen", False)
                   else contextlib.nullcontext())
    with equilibrium:
        g, hop, hdiag = gen(mf, mf.mo_coeff, mf.mo_occ, with_symmetry=False)
        hdiag = hdiag * 2

        def precond(dx, e, _x0):
            d = hdiag - e
            d[np.abs(d) < 1e-8] = 1e-8
            return dx / d

        x0 = np.zeros_like(g)
        x0[g != 0] = 1.0 / hdiag[g != 0]
        x0[np.argmin(hdiag)] = 1.0    # no symmetry: let the guess break it
        # and unit vectors on the lowest diagonal elements: from the one vector above, the
        # Davidson missed the lowest root of formaldehyde in IEF-PCM with the continuum's
        # response (1.3356 Eh found, 0.6294 Eh the lowest of the full matrix)
        x0 = [x0] + [np.eye(1, len(g), k).ravel() for k in np.argsort(hdiag)[:GUESS_VECTORS]]
        # the Hessian is x2 + x2ᵀ of the vir-occ block PySCF's hop returns (pyscf.scf.stability)
        count = [0]

        def hessian_x(x):
            t = time.perf_counter()
            out = hop(x).real * 2
            count[0] += 1
            if log:
                log(f"stability: Hessian product {count[0]}, {time.perf_counter() - t:.1f} s")
            return out

        e, v = lib.davidson(hessian_x, x0, precond, tol=tol, nroots=1, verbose=0)
    e = float(np.atleast_1d(e)[0])
    v = v[0] if isinstance(v, list) else v
    if e >= UNSTABLE_BELOW:
        return e, None
    v = np.asarray(v).reshape(-1)
    if not uhf:
        return e, _rotate_mo(mf.mo_coeff, mf.mo_occ, v)
    nov = int(np.count_nonzero(mf.mo_occ[0] > 0) * np.count_nonzero(mf.mo_occ[0] == 0))
    return e, (_rotate_mo(mf.mo_coeff[0], mf.mo_occ[0], v[:nov]),
               _rotate_mo(mf.mo_coeff[1], mf.mo_occ[1], v[nov:]))
