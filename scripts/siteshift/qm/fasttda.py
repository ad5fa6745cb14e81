"""Fast MO-basis TDA for closed-shell SRSH-PCM (singlet excitations).

Solves the same equations as PySCF's TDA (tests hold them within 1e-6 eV of each other) from
density-fitted three-index tensors in the MO basis, a precomputed PCM surface operator and the XC
kernel in the MO basis; see :class:`FastTDA`.
"""
from __future__ import annotations

import time

import numpy as np
import scipy.linalg
from pyscf import df, dft, gto, lib

from ..base.units import HARTREE2EV
from .analysis import dominant_pairs
from .dfjk import CompactDF, all_blas_threads, pack_sym, unpack_lower, unpack_sym
from .pcm import FactoredPCM, FittedPCM, response_solvent
from .settings import EngineError, ExciteSettings
from .xcgrid import MOKernel

class FastTDA:
    """MO-basis TDA for closed-shell SRSH-PCM (singlet excitations).

    A x = Δε x + 2 (ia|jb) x − [c_SR·(ij|ab) + c_LR·(ij|ab)_LR] x + f_xc x + 2 Vᵀ M V x

    Coulomb and exchange blocks come from density-fitted three-index tensors in the MO basis,
    (pq|rs) ≈ Σ_P B^P_pq B^P_rs; the long-range exchange uses the erf-attenuated tensor. The
    (ab) blocks are kept packed (a ≥ b) in the storage precision of the ground state's fitted
    tensors and unpacked one auxiliary block at a time. The XC kernel is applied in the MO basis
    (:class:`siteshift.qm.xcgrid.MOKernel`) on the SCF grid or a coarser response grid. The PCM
    term uses the surface potential integrals V_g,ia computed once, and
    M = ½(K⁻¹R + RᵀK⁻ᵀ) for ε_optical (or ε_static for equilibrium solvation), which is the same
    operator PySCF applies in the AO basis. An optional orbital window keeps occupied orbitals
    within ``occ_window_ev`` of the HOMO and virtuals within ``vir_window_ev`` of the LUMO.
    """

    def __init__(self, mf, settings: ExciteSettings, log=None):
        if mf.mol.spin != 0:
            raise EngineError("the fast response path is closed-shell only; use solver='stock' "
                              "for open-shell pigments")
        self.mf, self.settings, self.log = mf, settings, log or (lambda s: None)
        mol = mf.mol
        mo_occ = np.asarray(mf.mo_occ)
        C = np.asarray(mf.mo_coeff)
        e = np.asarray(mf.mo_energy)
        occ, vir = np.nonzero(mo_occ == 2)[0], np.nonzero(mo_occ == 0)[0]
        if settings.occ_window_ev:
            occ = occ[e[occ] >= e[occ].max() - settings.occ_window_ev / HARTREE2EV]
        if settings.vir_window_ev:
            vir = vir[e[vir] <= e[vir].min() + settings.vir_window_ev / HARTREE2EV]
        self.occ_index, self.vir_index = occ, vir
        self.nocc_all, self.nvir_all = int((mo_occ == 2).sum()), int((mo_occ == 0).sum())
        self.orbo, self.orbv = C[:, occ], C[:, vir]
        self.nocc, self.nvir = self.orbo.shape[1], self.orbv.shape[1]
        self.e_ia = (e[vir][None, :] - e[occ][:, None])
        ni = mf._numint
        self.omega, self.c_lr, self.c_sr = ni.rsh_and_hybrid_coeff(mf.xc, mol.spin)
        # exact exchange: hyb * K_full + (alpha - hyb) * K_LR  (PySCF's convention)
        t0 = time.perf_counter()
        self._build_df(mol)
        t1 = time.perf_counter()
        grids = mf.grids
        if settings.response_grid_level is not None and \
                settings.response_grid_level != settings.grid_level:
            grids = dft.gen_grid.Grids(mol)
            grids.level = settings.response_grid_level
            grids.build()
        self.response_grid_points = int(grids.weights.size)
        budget = max(500, settings.max_memory_mb // 2)
        self.kernel_xc = MOKernel(mf, grids, self.orbo, self.orbv, cache_mb=budget,
                                  max_memory_mb=max(500, settings.max_memory_mb // 8))
        t2 = time.perf_counter()
        self.pcm_eps = None
        self.V = self.W = None
        if hasattr(mf, "with_solvent"):
            with all_blas_threads():
                self._build_pcm(mf, settings)
        t3 = time.perf_counter()
        self.setup_s = t3 - t0
        self.n_products = self.n_vectors = 0
        self.product_s = 0.0
        kx = self.kernel_xc
        how = f"cached as {np.dtype(kx.cache_dtype).name}" if kx.cached else "recomputed"
        self.log(f"fast TDA set-up: DF tensors {t1 - t0:.1f} s, XC kernel {t2 - t1:.1f} s "
                 f"({self.response_grid_points} points, orbital values "
                 f"{how}, "
                 f"{self.kernel_xc.cache_mb:.0f} MB), PCM operator {t3 - t2:.1f} s "
                 f"(window: {self.nocc}/{self.nocc_all} occupied, {self.nvir}/{self.nvir_all} "
                 f"virtual)")

    def _ao_blocks(self, mol, omega):
        """(naux, iterator of packed float64 blocks) of the fitted AO tensor (the ground
        state's when it has one)."""
        with_df = getattr(self.mf, "with_df", None)
        if isinstance(with_df, CompactDF):  # released chunk by chunk: the response keeps MO blocks
            return with_df.naux(omega or 0.0), with_df.blocks(
                omega or 0.0, rows=max(1, int(3e8 / 8 / mol.nao ** 2)), consume=True)
        aux = self.settings.auxbasis
        if with_df is not None and getattr(with_df, "auxbasis", None):
            aux = with_df.auxbasis
        aux = aux or df.make_auxbasis(mol, mp2fit=False)
        with mol.with_range_coulomb(omega or 0.0):
            cderi = df.incore.cholesky_eri(mol, auxbasis=aux, aosym="s2")
        blk = max(1, int(2e8 // (mol.nao * mol.nao)))
        return cderi.shape[0], ((p0, p1, cderi[p0:p1])
                                for p0, p1 in lib.prange(0, cderi.shape[0], blk))

    def _mo_tensors(self, mol, omega=None, with_ov=True):
        """B_ov (float64), B_oo and packed B_vv (storage precision) for one operator.

        B_oo and B_vv enter only the exchange term, so with float32 storage the (vv)
        transformation is done in float32 arithmetic as well (2x faster; its rounding, relative
        1e-6, is below what the Davidson tolerance resolves). B_ov (Coulomb and PCM) stays
        float64.
        """
        store = np.dtype(np.float32 if self.settings.df_storage == "float32" else np.float64)
        o, v = self.orbo, self.orbv
        nao, no, nv = o.shape[0], o.shape[1], v.shape[1]
        v_s = v.astype(store)
        naux, blocks = self._ao_blocks(mol, omega)
        # filled in place: a list of pieces joined at the end would hold both for a moment
        Bov = np.empty((naux, no, nv)) if with_ov else None
        Boo = np.empty((naux, no, no), store)         # exchange only, like B_vv
        Bvv = np.empty((naux, nv * (nv + 1) // 2), store)
        buf = None
        for p0, p1, blk in blocks:
            nb = p1 - p0
            if buf is None:  # reused by every block: fresh arrays would cost page faults
                rows = len(blk)
                buf = {"ao": np.empty((rows, nao, nao)),
                       "aos": np.empty((rows, nao, nao), store) if store != np.float64 else None,
                       "hv": np.empty(rows * nao * nv, store),
                       "vv": np.empty((rows, nv, nv), store)}
            ao = unpack_sym(blk, nao, buf["ao"][:nb])
            half_o = (ao.reshape(-1, nao) @ o).reshape(nb, nao, no).transpose(0, 2, 1)
            if with_ov:
                np.matmul(half_o, v, out=Bov[p0:p1])
            Boo[p0:p1] = half_o @ o
            aos = ao
            if buf["aos"] is not None:
                aos = buf["aos"][:nb]
                np.copyto(aos, ao)
            hv = np.dot(aos.reshape(-1, nao), v_s, out=buf["hv"][:nb * nao * nv].reshape(-1, nv))
            vv = np.matmul(hv.reshape(nb, nao, nv).transpose(0, 2, 1), v_s, out=buf["vv"][:nb])
            pack_sym(vv, out=Bvv[p0:p1])
        return Bov, Boo, Bvv

    def _build_df(self, mol):
        with all_blas_threads():
            self.Bov, self.Boo, self.Bvv = self._mo_tensors(mol)
            if self.omega != 0 and abs(self.c_lr - self.c_sr) > 0:
                _, self.Loo, self.Lvv = self._mo_tensors(mol, omega=self.omega, with_ov=False)
            else:
                self.Loo = self.Lvv = None

    def _build_pcm(self, mf, settings):
        sol = response_solvent(mf, settings)
        self.pcm_eps = float(sol.eps)
        K = sol._intermediates["K"]
        R = sol._intermediates["R"]
        KinvR = np.linalg.solve(K, R)
        self.M = 0.5 * (KinvR + KinvR.T)
        if isinstance(sol, FittedPCM):
            # V_g,ia = Σ_P W_Pg B^P_ia: folded into the Coulomb term, nothing stored per point
            self.W = sol._fit_weights()
            return
        surf = sol.surface
        mol = mf.mol
        coords, expn = surf["grid_coords"], surf["charge_exp"]
        ng = coords.shape[0]
        nao = mol.nao
        self.V = np.empty((ng, self.nocc, self.nvir))
        intor = mol._add_suffix("int3c2e")
        blk = max(50, int(2e8 // (nao * nao)))
        # the SCF's (μν|g) table where it kept one (FactoredPCM; the response continuum is a
        # copy on the same surface): PCM set-up 12-15 s instead of 18-21 s on heme b (19HC)
        kept = isinstance(sol, FactoredPCM) and getattr(sol, "_t_key", None) is not None
        table = sol._table() if kept else None
        for p0, p1 in lib.prange(0, ng, blk):
            if table is not None:
                v = lib.unpack_tril(np.ascontiguousarray(table[:, p0:p1].T, dtype=np.float64))
                half = lib.einsum("Lmn,mi->Lin", v, self.orbo)
            else:
                fake = gto.fakemol_for_charges(coords[p0:p1], expnt=expn[p0:p1] ** 2)
                fake.cart = mol.cart
                v = df.incore.aux_e2(mol, fake, intor=intor, aosym="s1")  # (nao, nao, ng)
                half = lib.einsum("mnL,mi->Lin", v, self.orbo)
            self.V[p0:p1] = lib.einsum("Lin,na->Lia", half, self.orbv)

    def _buffer(self, key, size, dtype):
        """A flat work array kept between response products (fresh arrays of this size cost
        page faults on every product), grown when a product needs more."""
        bufs = self.__dict__.setdefault("_bufs", {})
        b = bufs.get(key)
        if b is None or b.dtype != dtype or b.size < size:
            bufs[key] = b = np.empty(size, dtype)
        return b[:size]

    def _exchange(self, xs, Boo, Bvv):
        """Σ_jb (ij|ab) x_jb for every trial vector, from B_oo and packed B_vv.

        For an auxiliary block, Y^P_(i,x),b = Σ_j B^P_ij x_jb is one matrix product; each B^P_ab
        is unpacked into its lower triangle only and applied with BLAS ?symm, which reads that
        triangle (a full unpack cost a third of the exchange time on the bacteriochlorophyll
        model). The products are summed over a block in the storage precision and over the
        blocks in float64."""
        nx, no, nv = xs.shape
        cdt = Bvv.dtype
        symm = scipy.linalg.blas.get_blas_funcs("symm", dtype=cdt)
        xt = np.ascontiguousarray(xs.transpose(1, 0, 2), dtype=cdt).reshape(no, nx * nv)
        rows = max(1, min(Boo.shape[0], int(4e8 // (cdt.itemsize * nv * nv))))
        vvb = self._buffer("vv", rows * nv * nv, cdt).reshape(rows, nv, nv)
        yb = self._buffer("y", rows * no * nx * nv, cdt).reshape(rows * no, nx * nv)
        acc = np.zeros((no * nx, nv))
        for p0, p1 in lib.prange(0, Boo.shape[0], rows):
            nb = p1 - p0
            vv = unpack_lower(Bvv[p0:p1], nv, vvb[:nb])
            y = np.dot(Boo[p0:p1].reshape(nb * no, no), xt, out=yb[:nb * no])
            y = y.reshape(nb, no * nx, nv)
            c = None
            for k in range(nb):
                # column-major views: vv[k]ᵀ holds B_ab in its upper triangle, y[k]ᵀ is
                # (v, (i,x))
                c = symm(1.0, vv[k].T, y[k].T, beta=0.0 if c is None else 1.0, c=c, side=0,
                         lower=0, overwrite_c=1)
            acc += c.T
        return acc.reshape(no, nx, nv).transpose(1, 0, 2)

    def _coulomb(self, xs, factor):
        """factor · [(ia|jb) + Vᵀ M V (PCM, fitted or from surface integrals)] x: two matrix
        products over B_ov viewed as (naux, o·v) (the A matrix has factor 2, A + B factor 4)."""
        bov = self.Bov.reshape(len(self.Bov), -1)
        t = xs.reshape(len(xs), -1) @ bov.T
        coef = factor * t
        if self.W is not None:  # fitted PCM: V = Wᵀ B
            coef += factor * (((t @ self.W) @ self.M.T) @ self.W.T)
        out = (coef @ bov).reshape(xs.shape)
        if self.V is not None:  # PCM from surface potential integrals V_g,ia
            vg = lib.einsum("gia,xia->xg", self.V, xs)
            out += factor * lib.einsum("gia,xg->xia", self.V, vg @ self.M.T)
        return out

    def matvec(self, xs):
        t0 = time.perf_counter()
        xs = np.asarray(xs).reshape(-1, self.nocc, self.nvir)
        out = xs * self.e_ia
        out += self._coulomb(xs, 2.0)
        # exact exchange: c (ij|ab) x_jb = Σ_P Σ_b (Σ_j B_ij x_jb) B_ab, in the precision of the
        # stored B_ab, which is unpacked one auxiliary block at a time into a reused buffer
        for c, Boo, Bvv in ((self.c_sr, self.Boo, self.Bvv),
                            (self.c_lr - self.c_sr, self.Loo, self.Lvv)):
            if c == 0 or Boo is None:
                continue
            out -= c * self._exchange(xs, Boo, Bvv)
        t1 = time.perf_counter()
        # XC kernel on the response grid, in the MO basis
        out += self.kernel_xc(xs)
        t2 = time.perf_counter()
        self.n_products += 1
        self.n_vectors += len(xs)
        self.product_s += t2 - t0
        self.log(f"response product {self.n_products}: {len(xs)} vectors, Coulomb+exchange+PCM "
                 f"{t1 - t0:.1f} s, XC kernel {t2 - t1:.1f} s")
        return out.reshape(len(xs), -1)

    #: Davidson preconditioner (Δε_ia − (e − shift))⁻¹. 0 as in PySCF: 4'-hydroxycinnamic acid,
    #: 6-31G, 4 states converged with 9 products (39 trial vectors) against 12 (45) at shift 0.1.
    precond_shift = 0.0

    def kernel(self, nstates, x0=None):
        """(energies, amplitudes) of the lowest states. x0: starting vectors (e.g. the
        amplitudes of the previous point of an ε sweep); unit vectors on the lowest Δε_ia when
        None or of the wrong size. (Adding the Coulomb and exchange diagonal 2(ia|ia) − c(ii|aa)
        to the preconditioner was tried: 13 products instead of 10 on 4'-hydroxycinnamic
        acid/def2-SVP.)"""
        hdiag = self.e_ia.ravel()
        nov = hdiag.size
        nroots = min(nstates, nov)
        if x0 is not None and np.asarray(x0).size and np.asarray(x0)[0].size == nov \
                and len(x0) >= nroots:
            x0 = np.asarray(x0, dtype=float).reshape(len(x0), nov)
        else:
            nguess = min(nov, max(nroots + 3, 2 * nroots))
            order = np.argsort(hdiag)[:nguess]
            x0 = np.zeros((nguess, nov))
            x0[np.arange(nguess), order] = 1.0

        def precond(r, e0, x0):
            d = hdiag - (e0 - self.precond_shift)
            d[abs(d) < 1e-8] = 1e-8
            return r / d

        tol = self.settings.response_tol
        conv, e, x = lib.davidson1(lambda xs: list(self.matvec(xs)), list(x0), precond,
                                   tol=max(tol ** 2, 1e-14), tol_residual=tol, nroots=nroots, max_cycle=100,
                                   max_space=max(40, 12 * nroots), verbose=0)
        if not all(conv):
            raise EngineError("fast TDA Davidson did not converge; try solver='stock'")
        xs = np.asarray(x).reshape(nroots, self.nocc, self.nvir)
        return np.asarray(e), xs

    def properties(self, e, xs):
        """Oscillator strengths and transition dipoles (a.u.) of normalised singlet amplitudes."""
        mol = self.mf.mol
        with mol.with_common_orig((0.0, 0.0, 0.0)):
            r_ao = mol.intor_symmetric("int1e_r", comp=3)
        r_ov = lib.einsum("xmn,mi,na->xia", r_ao, self.orbo, self.orbv)
        tdip = np.sqrt(2.0) * lib.einsum("xia,sia->sx", r_ov, xs)
        osc = 2.0 / 3.0 * e * np.einsum("sx,sx->s", tdip, tdip)
        return osc, tdip


def fast_response(mf, settings: ExciteSettings, log=None, stats=None, x0=None):
    """Fast MO-basis TDA; stats (a dict, optional) receives the amplitudes over all
    occupied/virtual pairs ('xs'), the number of response products and trial vectors and
    their time. x0: starting amplitudes over all pairs (e.g. stats['xs'] of a previous run)."""
    if not settings.tda:
        raise EngineError("the fast path solves TDA only; use solver='stock' for full TDDFT")
    solver = FastTDA(mf, settings, log=log)
    if x0 is not None:
        x0 = np.asarray(x0)
        if x0.ndim == 3 and x0.shape[1:] == (solver.nocc_all, solver.nvir_all):
            x0 = x0[:, solver.occ_index[:, None], solver.vir_index[None, :] - solver.nocc_all]
        else:
            x0 = None
    with all_blas_threads():
        e, xs = solver.kernel(settings.nstates, x0=x0)
    osc, tdip = solver.properties(e, xs)
    full = np.zeros((len(xs), solver.nocc_all, solver.nvir_all))
    o0 = solver.occ_index[:, None]
    v0 = solver.vir_index[None, :] - solver.nocc_all
    full[:, o0, v0] = xs
    pairs = [dominant_pairs(mf, x) for x in full]
    if stats is not None:
        stats.update(xs=full, products=solver.n_products, vectors=solver.n_vectors,
                     product_s=solver.product_s, setup_s=solver.setup_s,
                     warm_start=x0 is not None)
    return e, osc, tdip, pairs, solver.pcm_eps
