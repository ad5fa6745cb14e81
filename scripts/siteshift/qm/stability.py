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
from pyscf import lib

from .dfjk import CompactDF, all_blas_threads
from .fasttda import FastTDA
from .settings import ExciteSettings

#: Eigenvalue (Eh) below which a solution counts as unstable: PySCF's own threshold
#: (``pyscf.scf.stability``: ``stable = not (e < -1e-5)``).
UNSTABLE_BELOW = -1e-5
#: Guess vectors of the Davidson besides PySCF's: unit vectors on the lowest diagonal elements.
GUESS_VECTORS = 8
#: Davidson convergence on the eigenvalue (Eh): PySCF's default for stability (``STAB_TOL``).
STABILITY_TOL = 1e-4


def lowest_hessian_eigenvalue(mf, tol=STABILITY_TOL, log=None, continuum_response=None,
                              route="auto", info=None):
    """(λ, orbitals) for a converged RKS/UKS (or RHF/UHF) object: λ the lowest eigenvalue of
    the orbital Hessian (Eh), and the orbitals rotated along its eigenvector when λ is below
    UNSTABLE_BELOW (None otherwise). log: each Hessian–vector product's time.

    route: "mo" computes the products in the MO basis (:class:`MOHessian`: closed-shell GGA
    or hybrid KS with fitted tensors, the fast TDA's machinery), "pyscf" with PySCF's
    second-order solver; "auto" takes "mo" where it applies. info (a dict, optional) receives
    the route taken, the number of products and whether the continuum's response was in
    (None without a continuum).

    continuum_response: include the continuum's equilibrium response to the rotated density
    (None: on the "mo" route, where it costs one small matrix product, off on the "pyscf"
    route, as in PySCF's second-order solver: PySCF recomputes the surface integrals for every
    product, and the check of heme b in IEF-PCM (19HC, 6-31G) had not ended after 17 min with
    it). The term is negative semidefinite (the solvation energy −½ Vᵀ M V of any charge
    distribution is negative; with it, vᵀHv along a random v of formaldehyde in IEF-PCM ε 20
    equals the finite-difference second derivative of the PCM SCF energy, 22.00796, against
    22.03581 without), so λ without it is an upper bound: a negative λ is a true instability,
    a weak one made only by the continuum's response can be missed (formaldehyde: 0.6362
    without, 0.6294 Eh with the response, from the full matrices)."""
    import time

    from pyscf.scf.stability import _rotate_mo
    uhf = np.asarray(mf.mo_occ).ndim == 2
    if route not in ("auto", "mo", "pyscf"):
        raise ValueError(f"stability route {route!r}: use 'auto', 'mo' or 'pyscf'")
    mo_route = route == "mo" or (route == "auto" and MOHessian.applies(mf))
    response = mo_route if continuum_response is None else bool(continuum_response)
    has_continuum = getattr(mf, "with_solvent", None) is not None
    with _products(mf, mo_route, response, log) as (hop, hdiag, x0):
        def precond(dx, e, _x0):
            d = hdiag - e
            d[np.abs(d) < 1e-8] = 1e-8
            return dx / d

        x0[np.argmin(hdiag)] = 1.0    # no symmetry: let the guess break it
        # and unit vectors on the lowest diagonal elements: from the one vector above, the
        # Davidson missed the lowest root of formaldehyde in IEF-PCM with the continuum's
        # response (1.3356 Eh found, 0.6294 Eh the lowest of the full matrix)
        x0 = [x0] + [np.eye(1, len(hdiag), k).ravel()
                     for k in np.argsort(hdiag)[:GUESS_VECTORS]]
        count = [0]

        def hessian_x(x):
            t = time.perf_counter()
            out = hop(x)
            count[0] += 1
            if log:
                log(f"stability: Hessian product {count[0]}, {time.perf_counter() - t:.1f} s")
            return out

        e, v = lib.davidson(hessian_x, x0, precond, tol=tol, nroots=1, verbose=0)
    if info is not None:
        info.update(route="mo" if mo_route else "pyscf", products=count[0],
                    continuum_response=response if has_continuum else None)
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


@contextlib.contextmanager
def _products(mf, mo_route, response, log):
    """(hop, hdiag, x0) in PySCF's layout (virtual-major over occupied-virtual pairs of each
    spin): hop(x) the Hessian–vector product, hdiag its diagonal approximation, x0 a first
    guess (1/hdiag on the nonzero gradient elements)."""
    if mo_route:
        h = MOHessian(mf, continuum_response=response, log=log)
        hdiag = 4.0 * h.e_ia.T.ravel()
        with all_blas_threads():
            yield h.hop, hdiag, 1.0 / hdiag
        return
    from pyscf.soscf import newton_ah
    uhf = np.asarray(mf.mo_occ).ndim == 2
    gen = newton_ah.gen_g_hop_uhf if uhf else newton_ah.gen_g_hop_rhf
    sol = getattr(mf, "with_solvent", None)
    equilibrium = (lib.temporary_env(sol, equilibrium_solvation=response)
                   if sol is not None and not getattr(sol, "frozen", False)
                   else contextlib.nullcontext())
    with equilibrium:
        g, hop, hdiag = gen(mf, mf.mo_coeff, mf.mo_occ, with_symmetry=False)
        hdiag = hdiag * 2
        x0 = np.zeros_like(g)
        x0[g != 0] = 1.0 / hdiag[g != 0]
        # the Hessian is x2 + x2ᵀ of the vir-occ block PySCF's hop returns (pyscf.scf.stability)
        yield (lambda x: hop(x).real * 2), hdiag, x0


class MOHessian(FastTDA):
    """The orbital Hessian of a closed-shell KS solution over real rotations, 4(A + B),
    applied in the MO basis with the fast TDA's fitted MO tensors, XC kernel and PCM operator
    (:class:`siteshift.qm.fasttda.FastTDA`, which applies A):

    (A + B) x = Δε x + 4 (ia|jb) x − c [(ij|ab) + (ib|ja)] x (full and long-range parts)
                + 2 f_xc x + 4 Vᵀ M V x

    with M for the SCF's own (static) ε: the continuum's equilibrium response, as the SCF
    energy's second derivative has it (continuum_response=False leaves it out). The
    (ib|ja) x term is Σ_P (B^P xᵀ B^P)_ia over the occupied-virtual tensors. The ground
    state's fitted AO tensors are kept (the fast TDA releases them): a restart's SCF and the
    excitations use them next. For heme b the products of PySCF's second-order solver spent
    most of their time building exchange in the AO basis from densities of rank 2·n_occ.
    """

    def __init__(self, mf, continuum_response=True, log=None, fock_mo=None):
        sol = getattr(mf, "with_solvent", None)
        self.fock_oo_vv = fock_mo   # (F_oo, F_vv) of non-canonical orbitals, else None
        with_df = mf.with_df
        storage = getattr(with_df, "storage", np.dtype(np.float64))
        settings = ExciteSettings(
            eps_static=float(sol.eps) if sol is not None else 1.0,
            grid_level=int(mf.grids.level), response_grid_level=None, occ_window_ev=None,
            vir_window_ev=None, equilibrium=True, max_memory_mb=int(mf.max_memory),
            df_storage="float32" if np.dtype(storage) == np.float32 else "float64",
            auxbasis=getattr(with_df, "auxbasis", None))
        # a frozen reaction field does not answer the density (as on PySCF's route)
        self.continuum_response = bool(continuum_response and sol is not None
                                       and not getattr(sol, "frozen", False))
        if not self.continuum_response and sol is not None:
            # no PCM operator: FastTDA builds it only for an object with a solvent
            mf = _without_solvent(mf)
        super().__init__(mf, settings, log=log)

    @staticmethod
    def applies(mf):
        """Closed-shell RKS with fitted tensors (CompactDF or PySCF's) and a GGA-type
        functional (hybrids and range-separated hybrids included; the XC kernel is GGA only)."""
        from pyscf.scf import hf, rohf
        # by class, not by mo_occ: a second-order solver is set up before it has orbitals
        if not isinstance(mf, hf.RHF) or isinstance(mf, rohf.ROHF) or mf.mol.spin != 0 or \
                getattr(mf, "with_df", None) is None or not hasattr(mf, "_numint"):
            return False
        return mf._numint._xc_type(mf.xc) == "GGA"

    def _ao_blocks(self, mol, omega):
        with_df = getattr(self.mf, "with_df", None)
        if isinstance(with_df, CompactDF):
            return with_df.naux(omega or 0.0), with_df.blocks(
                omega or 0.0, rows=max(1, int(3e8 / 8 / mol.nao ** 2)), consume=False)
        return super()._ao_blocks(mol, omega)

    def _build_df(self, mol):
        with all_blas_threads():
            self.Bov, self.Boo, self.Bvv = self._mo_tensors(mol)
            self.Lov = self.Loo = self.Lvv = None
            if self.omega != 0 and abs(self.c_lr - self.c_sr) > 0:
                self.Lov, self.Loo, self.Lvv = self._mo_tensors(mol, omega=self.omega)

    @staticmethod
    def _exchange_b(xs, Bov, rows=64):
        """Σ_jb (ib|ja) x_jb = Σ_P (B^P xᵀ B^P)_ia for every trial vector."""
        out = np.zeros_like(xs)
        for p0, p1 in ((p, min(p + rows, len(Bov))) for p in range(0, len(Bov), rows)):
            b = Bov[p0:p1]
            for k, x in enumerate(xs):
                out[k] += np.einsum("pij,pja->ia", b @ x.T, b, optimize=True)
        return out

    def apb(self, xs):
        """(A + B) x for trial vectors xs (n, n_occ, n_vir)."""
        xs = np.asarray(xs).reshape(-1, self.nocc, self.nvir)
        if self.fock_oo_vv is None:
            out = xs * self.e_ia
        else:   # x F_vv − F_oo x (F symmetric) in place of Δε x
            foo, fvv = self.fock_oo_vv
            out = xs @ fvv - np.matmul(foo, xs)
        out += self._coulomb(xs, 4.0)
        for c, Boo, Bvv, Bov in ((self.c_sr, self.Boo, self.Bvv, self.Bov),
                                 (self.c_lr - self.c_sr, self.Loo, self.Lvv, self.Lov)):
            if c == 0 or Boo is None:
                continue
            out -= c * (self._exchange(xs, Boo, Bvv) + self._exchange_b(xs, Bov))
        out += 2.0 * self.kernel_xc(xs)
        return out

    def hop(self, x):
        """4 (A + B) x in PySCF's layout: x over (virtual, occupied) pairs, flattened."""
        x = np.asarray(x).reshape(self.nvir, self.nocc).T
        return 4.0 * self.apb(x[None])[0].T.ravel()


def _without_solvent(mf):
    """The same SCF object's orbitals on an object without the continuum (for a Hessian
    without its response: the vacuum parts only)."""
    bare = mf.undo_solvent() if hasattr(mf, "undo_solvent") else mf
    for k in ("mo_coeff", "mo_occ", "mo_energy", "e_tot", "converged"):
        setattr(bare, k, getattr(mf, k))
    return bare


def use_mo_hessian(solver, log=None):
    """Make a PySCF second-order solver (``mf.newton()``) take its Hessian–vector products
    from :class:`MOHessian`, rebuilt on the orbitals of each of its key frames, with the
    continuum's equilibrium response (the exact Hessian of the PCM SCF energy; PySCF's own
    products leave that term out). Only where :meth:`MOHessian.applies` and the molecule has
    no point-group symmetry; otherwise the solver is left as it is. Returns whether it was
    changed.

    Why: each second-order iteration on heme b (19HC, 6-31G, 389 AOs, gas phase) took 225-330 s,
    most of it in AO-basis exchange from rank-2·n_occ trial densities (py-spy samples: 20 of
    30 in CompactDF.get_jk, 5 in PySCF's XC response).

    Conventions are PySCF's ``pyscf.soscf.newton_ah.gen_g_hop_rhf``: over (virtual,
    occupied) pairs, g = 2 F_vo, h_diag = 2 (F_aa − F_ii), h_op(x) = 2 (A + B) x with the
    Fock blocks of the current (non-canonical) orbitals in place of Δε."""
    import copy
    import time
    if not MOHessian.applies(solver) or solver.mol.symmetry:
        return False
    pyscf_g_hop = solver.gen_g_hop
    frames = [0]

    def gen_g_hop(mo_coeff, mo_occ, fock_ao=None, h1e=None, with_symmetry=True):
        if fock_ao is None or (getattr(solver, "_scf", None) is not None
                               and solver._scf.mol is not solver.mol):
            return pyscf_g_hop(mo_coeff, mo_occ, fock_ao, h1e, with_symmetry)
        t = time.perf_counter()
        fock = mo_coeff.T @ np.asarray(fock_ao) @ mo_coeff
        occ, vir = np.nonzero(mo_occ == 2)[0], np.nonzero(mo_occ == 0)[0]
        foo, fvv = fock[np.ix_(occ, occ)], fock[np.ix_(vir, vir)]
        view = copy.copy(solver)
        view.mo_coeff, view.mo_occ, view.mo_energy = mo_coeff, mo_occ, np.diag(fock).copy()
        with all_blas_threads():
            h = MOHessian(view, continuum_response=True, fock_mo=(foo, fvv))
        frames[0] += 1
        if log:
            log(f"second order: key frame {frames[0]}, MO-basis Hessian set up in "
                f"{time.perf_counter() - t:.1f} s")

        def h_op(x):
            with all_blas_threads():
                return h.hop(x) * 0.5

        g = fock[np.ix_(vir, occ)] * 2
        h_diag = (np.diag(fvv)[:, None] - np.diag(foo)[None, :]) * 2
        return g.ravel(), h_op, h_diag.ravel()

    solver.gen_g_hop = gen_g_hop
    return True
