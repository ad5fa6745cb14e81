"""Exchange–correlation integration on the grid with dense BLAS.

PySCF evaluates AO values with shell screening and then contracts them in its own sparse C
kernels. On a bacteriochlorophyll model (852 basis functions, 75 k grid points) one closed-shell GGA
potential took 19–21 s on 2 cores, 17 s of it in those kernels (measured with cProfile), although
the same arithmetic as dense matrix products is under 1 s at this machine's 150 GFLOP/s. Here
each grid block keeps PySCF's AO values and screening, drops the shells screened out of the whole
block, and does the rest as dense matrix products:

    ρ = Σ_r s_r ψ_r²,  ∇ρ = 2 Σ_r s_r ψ_r ∇ψ_r,  ψ = φ C    (D = C diag(s) Cᵀ)
    V_μν = Σ_g w_g [v_ρ φ_μ φ_ν + v_∇ρ · ∇(φ_μ φ_ν)]

with C the occupied orbitals (scaled by √n) when the SCF tags the density with them, otherwise
from an eigendecomposition of D. Closed- and open-shell GGA energies and potentials take this path
(open shells: the same per spin density, the functional evaluated on both); everything else
(LDA, kernels of open shells, meta-GGA) is PySCF's own code.
"""
from __future__ import annotations

import numpy as np
from pyscf.dft import numint

from .dfjk import all_blas_threads


def density_factor(dm, mo_coeff=None, mo_occ=None):
    """(C, s) with dm = C diag(s) Cᵀ, s = ±1."""
    if mo_coeff is not None and mo_occ is not None:
        occ = np.asarray(mo_occ)
        sel = occ > 0
        c = np.asarray(mo_coeff)[:, sel] * np.sqrt(occ[sel])
        return c, np.ones(c.shape[1])
    w, u = np.linalg.eigh((dm + dm.T) * 0.5)
    keep = np.abs(w) > 1e-12 * max(np.abs(w).max(), 1e-300)
    return u[:, keep] * np.sqrt(np.abs(w[keep])), np.sign(w[keep])


#: Grid quantities below this are set to zero. Subnormal numbers (|x| < 2.2e-308), which Gaussian
#: tails and their products produce far from the molecule, make BLAS 6x slower (measured: one
#: 16 k-point block of the bacteriochlorophyll model, φᵀφ in 0.64 s before and 0.10 s after
#: flushing). 1e-50 keeps every product of up to six flushed factors in the normal range.
TINY = 1e-50
#: The float32 counterpart (normal range down to 1.2e-38): values below 1e-15 are dropped, so a
#: product of two kept values stays normal. Relative to the O(1) orbital values, far below float32
#: resolution (6e-8).
TINY32 = 1e-15
_FLUSH = {}
for _dt, _ut, _mask, _tiny in ((np.float64, np.uint64, 0x7FF0000000000000, TINY),
                               (np.float32, np.uint32, 0x7F800000, TINY32)):
    _m = _ut(_mask)
    _FLUSH[np.dtype(_dt)] = (_ut, _m, np.array(_tiny, dtype=_dt).view(_ut) & _m)


def flush_tiny(a):
    """Zero the entries of a with |a| < TINY (float64) or TINY32 (float32) in place.

    Compares the IEEE exponent bits as integers: a floating-point comparison on subnormal
    inputs is itself slow (5.8 s for two blocks of that model against 0.3 s here).
    """
    flat = a.ravel(order="K")
    if not np.shares_memory(flat, a):
        raise ValueError("flush_tiny needs an array contiguous in some axis order")
    ut, mask, tiny_bits = _FLUSH[flat.dtype]
    bits = flat.view(ut)
    step = 1 << 18
    for i in range(0, flat.size, step):
        b = bits[i:i + step]
        flat[i:i + step][(b & mask) < tiny_bits] = 0.0
    return a


def gga_density(ao, c, sign):
    """(ρ, ∇ρ) on a block from AO values (4, ng, nao) and D = C diag(sign) Cᵀ."""
    psi = ao[0] @ c
    rho = np.empty((4, psi.shape[0]))
    rho[0] = (psi * psi) @ sign
    for k in range(1, 4):
        rho[k] = 2.0 * ((psi * (ao[k] @ c)) @ sign)
    return rho


def active_aos(mask, ao_loc):
    """AO indices of the shells that survive PySCF's screening anywhere in this block."""
    if mask is None:
        return None
    shells = np.nonzero(np.asarray(mask).any(axis=0))[0]
    if len(shells) == len(ao_loc) - 1:
        return None
    return np.concatenate([np.arange(ao_loc[s], ao_loc[s + 1]) for s in shells]) if len(shells) \
        else np.zeros(0, dtype=int)


#: Grid block size (MB of AO values and gradients) for the dense routes. Blocks of a few
#: thousand points are compact in space, so PySCF's shell screening leaves a fraction of the
#: basis functions active (measured on the bacteriochlorophyll model, grid 1: see the README);
#: PySCF would size blocks from max_memory, tens of thousands of points with nearly every
#: function active.
BLOCK_MB = 200
#: Smallest grid block (MB). PySCF passes the XC code what is left of the SCF's max_memory
#: after the process's current size, which is negative once the fitted tensors and caches
#: outgrow it; PySCF's block loop then falls to its smallest blocks (a few hundred points).
#: Measured on HC4/def2-SVP, grid 1 (82 k points, 2 threads): one XC build 0.77 s with
#: 200 MB blocks, 11–13 s with max_memory −800 MB (the value PySCF passed in a 19HC heme
#: SCF at def2-SVP with max_memory_mb 4000). So a block never falls below this size.
BLOCK_MIN_MB = 100


def block_mb(max_memory):
    """The grid block size (MB) for the memory PySCF says is left: at most BLOCK_MB, at least
    BLOCK_MIN_MB (see there)."""
    return max(BLOCK_MIN_MB, min(float(max_memory), BLOCK_MB))


def screened_blocks(ni, mol, grids, max_memory=BLOCK_MB):
    """Yield (p0, p1, ao, idx, weight): AO values and gradients (4, ng, n_active) of the shells
    that survive screening in each grid block (idx: their AO indices, None for all)."""
    ao_loc = mol.ao_loc_nr()
    p0 = 0
    for ao, mask, weight, _coords in ni.block_loop(mol, grids, mol.nao, 1,
                                                   max_memory=block_mb(max_memory)):
        p1 = p0 + weight.size
        idx = active_aos(mask, ao_loc)
        if idx is not None:
            ao = ao[:, :, idx]
        yield p0, p1, flush_tiny(ao), idx, weight
        p0 = p1


class DenseNumInt(numint.NumInt):
    """PySCF NumInt with a dense-BLAS closed-shell LDA/GGA energy and potential (``nr_rks``).

    ``dtype`` float32 does the grid arithmetic in float32 (the functional itself is evaluated
    in float64); the SCF uses it for its early cycles only, like float32 exchange.
    """

    dtype = np.float64
    #: MB that float32 AO values may occupy when kept between calls (0: never kept). The SCF
    #: sets it for its float32 cycles and clears the cache when it goes back to float64.
    cache_mb = 0
    _ao_cache = None
    _ao_cache_key = None

    def block_loop(self, mol, grids, nao=None, deriv=0, max_memory=2000, non0tab=None,
                   blksize=None, buf=None):
        """PySCF's block loop, its blocks never below BLOCK_MIN_MB (PySCF's own kernels, e.g.
        the second-order solver's XC response, size them from what is left of max_memory,
        negative in a large SCF)."""
        return super().block_loop(mol, grids, nao, deriv, max(float(max_memory), BLOCK_MIN_MB),
                                  non0tab, blksize, buf)

    def drop_cache(self):
        self._ao_cache = self._ao_cache_key = None

    @property
    def cached_mb(self):
        """Size of the kept float32 AO values (MB), 0 when none are kept."""
        if not self._ao_cache:
            return 0.0
        return sum(ao.nbytes for ao, _idx, _w in self._ao_cache) / 1e6

    def _blocks(self, mol, grids, max_memory, cdt):
        """(ao, idx, weight) per grid block in precision cdt; float32 values come from the
        cache when it holds this molecule and grid, and are put there when they fit."""
        key = (id(mol), id(grids.coords), grids.weights.size)
        if cdt == np.float32 and self._ao_cache is not None and self._ao_cache_key == key:
            yield from self._ao_cache
            return
        keep = cdt == np.float32 and self.cache_mb > 0 and self._ao_cache_key != (key, "full")
        store, size = [], 0
        for _p0, _p1, ao, idx, weight in screened_blocks(self, mol, grids, max_memory):
            if idx is not None and len(idx) == 0:
                continue
            if cdt != np.float64:
                ao = flush_tiny(ao.astype(cdt))
            if keep:
                size += ao.nbytes
                if size > self.cache_mb * 1e6:  # does not fit: not tried again for this grid
                    keep, store = False, []
                    self._ao_cache, self._ao_cache_key = None, (key, "full")
                else:
                    store.append((ao, idx, weight))
            yield ao, idx, weight
        if keep:
            self._ao_cache, self._ao_cache_key = store, key

    def nr_rks(self, mol, grids, xc_code, dms, relativity=0, hermi=1, max_memory=2000,
               verbose=None):
        xctype = self._xc_type(xc_code)
        dm = np.asarray(dms)
        if xctype != "GGA" or dm.ndim != 2 or hermi != 1 or np.iscomplexobj(dm):
            return super().nr_rks(mol, grids, xc_code, dms, relativity, hermi, max_memory,
                                  verbose)
        with all_blas_threads():
            return self._nr_rks_dense(mol, grids, xc_code, dms, max_memory)

    def _nr_rks_dense(self, mol, grids, xc_code, dms, max_memory):
        dm = np.asarray(dms)  # dms may carry mo_coeff/mo_occ tags, dm is the plain array
        c, sign = density_factor(dm, getattr(dms, "mo_coeff", None), getattr(dms, "mo_occ", None))
        nao = mol.nao
        vmat = np.zeros((nao, nao))
        nelec = excsum = 0.0
        cdt = np.dtype(self.dtype)
        for ao, idx, weight in self._blocks(mol, grids, max_memory, cdt):
            ci = c if idx is None else c[idx]
            if cdt != np.float64:
                ci = ci.astype(cdt)
            rho = gga_density(ao, ci, sign.astype(cdt))
            exc, vxc = self.eval_xc_eff(xc_code, rho, deriv=1, xctype="GGA")[:2]
            flush_tiny(vxc)
            den = rho[0] * weight
            nelec += den.sum()
            excsum += den @ exc
            _add_gga_potential(vmat, ao, idx, weight * vxc, cdt)
        vmat = vmat + vmat.T
        return nelec, excsum, vmat

    def nr_uks(self, mol, grids, xc_code, dms, relativity=0, hermi=1, max_memory=2000,
               verbose=None):
        xctype = self._xc_type(xc_code)
        dm = np.asarray(dms)
        if (xctype != "GGA" or dm.ndim != 3 or dm.shape[0] != 2 or hermi != 1
                or np.iscomplexobj(dm)):
            return super().nr_uks(mol, grids, xc_code, dms, relativity, hermi, max_memory,
                                  verbose)
        with all_blas_threads():
            return self._nr_uks_dense(mol, grids, xc_code, dms, max_memory)

    def _nr_uks_dense(self, mol, grids, xc_code, dms, max_memory):
        """Open-shell GGA energy and (α, β) potentials: the closed-shell route per spin, with
        the functional evaluated on both spin densities together."""
        dm = np.asarray(dms)
        mo_c, mo_o = getattr(dms, "mo_coeff", None), getattr(dms, "mo_occ", None)
        factors = [density_factor(dm[s], None if mo_c is None else mo_c[s],
                                  None if mo_o is None else mo_o[s]) for s in (0, 1)]
        nao = mol.nao
        vmat = np.zeros((2, nao, nao))
        nelec, excsum = np.zeros(2), 0.0
        cdt = np.dtype(self.dtype)
        for ao, idx, weight in self._blocks(mol, grids, max_memory, cdt):
            rho = np.empty((2, 4, weight.size))
            for s, (c, sign) in enumerate(factors):
                ci = c if idx is None else c[idx]
                rho[s] = gga_density(ao, ci.astype(cdt), sign.astype(cdt))
            exc, vxc = self.eval_xc_eff(xc_code, rho, deriv=1, xctype="GGA", spin=1)[:2]
            flush_tiny(vxc)
            den = rho[:, 0] * weight
            nelec += den.sum(axis=1)
            excsum += den.sum(axis=0) @ exc
            for s in (0, 1):
                _add_gga_potential(vmat[s], ao, idx, weight * vxc[s], cdt)
        vmat = vmat + vmat.transpose(0, 2, 1)
        return nelec, excsum, vmat


def _add_gga_potential(vmat, ao, idx, wv, cdt):
    """Add ½ V of one grid block to vmat (the caller adds Vᵀ): V_μν = Σ_g [wv_ρ φ_μ φ_ν +
    wv_∇ρ · ∇(φ_μ φ_ν)] with wv the weighted functional derivatives (4, ng)."""
    wv = np.array(wv, dtype=np.float64)
    wv[0] *= 0.5  # V + Vᵀ by the caller
    wv = flush_tiny(wv.astype(cdt)) if cdt != np.float64 else wv
    aow = ao[0] * wv[0][:, None]
    tmp = np.empty_like(aow)
    for k in range(1, 4):
        aow += np.multiply(ao[k], wv[k][:, None], out=tmp)
    v = ao[0].T @ flush_tiny(aow)
    if idx is None:
        vmat += v
    else:
        vmat[np.ix_(idx, idx)] += v


class MOKernel:
    """Closed-shell singlet GGA kernel applied to TDA amplitudes in the MO basis.

    For amplitudes x_ia (all trial vectors at once) with transition density
    ρ1 = Σ_ia 2x_ia φ_i φ_a it returns  Σ_g w_g [u_ρ φ_i φ_a + u_∇ρ·∇(φ_i φ_a)],  u = f_xc ρ1,
    which is C_oᵀ V_xc[ρ1] C_v of PySCF's ``nr_rks_fxc`` with the spin-0 kernel. Occupied and
    virtual orbital values on the grid are cached when they fit in ``cache_mb``, otherwise
    re-evaluated from the AO values at each call.
    """

    def __init__(self, mf, grids, orbo, orbv, cache_mb=2000, max_memory_mb=2000):
        mol = mf.mol
        ni = mf._numint
        if ni._xc_type(mf.xc) != "GGA":
            raise ValueError(f"MOKernel handles GGA kernels only (xc {mf.xc!r})")
        self.mol, self.grids, self.ni, self.xc = mol, grids, ni, mf.xc
        self.orbo, self.orbv = orbo, orbv
        self.max_memory_mb = max_memory_mb
        self.wfxc = self._kernel(mf, grids) * grids.weights   # (4, 4, ng), weights folded in
        ng = grids.weights.size
        need_mb = ng * 4 * (orbo.shape[1] + orbv.shape[1]) * 8 / 1e6
        # float64 if it fits, else float32 storage (converted back per block), else recomputed
        self.cache_dtype = (np.float64 if need_mb <= cache_mb else
                            np.float32 if need_mb / 2 <= cache_mb else None)
        self.cached = self.cache_dtype is not None
        self.cache_mb = need_mb if self.cache_dtype is np.float64 else need_mb / 2
        self._cache = None
        if self.cached:
            with all_blas_threads():
                self._cache = list(self._orbital_blocks(dtype=self.cache_dtype))

    def _kernel(self, mf, grids):
        """f_xc (4, 4, ng) of the ground-state density, which is built with dense products from
        all occupied orbitals (PySCF's cache_xc_kernel, same numbers, spends ~90 s here on the
        bacteriochlorophyll model's 338 k-point grid in its sparse kernels)."""
        c, sign = density_factor(None, mf.mo_coeff, mf.mo_occ)
        rho = np.empty((4, grids.weights.size))
        p0 = 0
        with all_blas_threads():
            for p0, p1, ao, idx, _w in screened_blocks(self.ni, self.mol, grids,
                                                       self.max_memory_mb):
                if idx is not None and len(idx) == 0:
                    rho[:, p0:p1] = 0.0
                    continue
                rho[:, p0:p1] = gga_density(ao, c if idx is None else c[idx], sign)
        return self.ni.eval_xc_eff(self.xc, rho, deriv=2, xctype="GGA")[2]

    def _orbital_blocks(self, sub=4096, dtype=np.float64):
        """(p0, p1, φ_o, φ_v) on contiguous sub-blocks of at most ``sub`` grid points, in
        ``dtype``. For float32 the AO values and orbitals are rounded to float32 before their
        product (2x the float64 speed, and the values are stored in float32 anyway); the
        products of AO values and orbital coefficients are written straight into the block
        arrays (measured on the bacteriochlorophyll model, 338 k points: 89 s before, with
        single-threaded float64 products, stacking and sub-block copies; see the README)."""
        no, nv = self.orbo.shape[1], self.orbv.shape[1]
        dt = np.dtype(dtype)
        for p0, p1, ao, idx, _w in screened_blocks(self.ni, self.mol, self.grids,
                                                   self.max_memory_mb):
            ng = p1 - p0
            empty = idx is not None and len(idx) == 0   # no AO survives the screening here
            if not empty:
                o = (self.orbo if idx is None else self.orbo[idx]).astype(dt)
                v = (self.orbv if idx is None else self.orbv[idx]).astype(dt)
            for q0 in range(0, ng, sub):
                q1 = min(ng, q0 + sub)
                if empty:
                    yield p0 + q0, p0 + q1, np.zeros((4, q1 - q0, no), dt), \
                        np.zeros((4, q1 - q0, nv), dt)
                    continue
                phio = np.empty((4, q1 - q0, no), dt)
                phiv = np.empty((4, q1 - q0, nv), dt)
                for k in range(4):
                    a = ao[k, q0:q1].astype(dt, copy=False)
                    if dt != ao.dtype:  # float32 subnormals would slow the product down
                        a = flush_tiny(a)
                    np.dot(a, o, out=phio[k])
                    np.dot(a, v, out=phiv[k])
                yield p0 + q0, p0 + q1, flush_tiny(phio), flush_tiny(phiv)

    def __call__(self, xs):
        with all_blas_threads():
            return self._apply(np.asarray(xs))

    def _apply(self, xs):
        """The kernel in the cache precision: float64 when the orbital values are cached in
        float64 or recomputed, float32 when they are cached in float32 (the grid sums are then
        float32 per 4096-point block and accumulated in float64)."""
        nx, no, nv = xs.shape
        cdt = np.dtype(self.cache_dtype or np.float64)
        out = np.zeros((nx * no, nv))
        blocks = self._cache if self.cached else self._orbital_blocks()
        xt = (2.0 * xs).transpose(2, 0, 1).reshape(nv, nx * no).astype(cdt)    # (v, x·o)
        buf = None
        for p0, p1, phio, phiv in blocks:
            ng = p1 - p0
            size = 4 * ng * nx * no
            if buf is None or buf[0].size < size:  # reused: fresh arrays cost page faults
                buf = (np.empty(size, cdt), np.empty(size, cdt))
            # t^k_g,xi = Σ_a X_ia ∇^k φ_a(g)
            t = np.dot(phiv.reshape(4 * ng, nv), xt,
                       out=buf[0][:size].reshape(4 * ng, nx * no)).reshape(4, ng, nx, no)
            flush_tiny(t)
            rho1 = np.empty((4, ng, nx))
            rho1[0] = np.einsum("gxi,gi->gx", t[0], phio[0])
            for k in range(1, 4):
                rho1[k] = (np.einsum("gxi,gi->gx", t[0], phio[k])
                           + np.einsum("gxi,gi->gx", t[k], phio[0]))
            u = flush_tiny(flush_tiny(np.einsum("kgx,klg->lgx", rho1, self.wfxc[:, :, p0:p1]))
                           .astype(cdt))
            # V_ia = Σ_g (u0 φ_i + u_k ∇_kφ_i) φ_a + Σ_k (u_k φ_i) ∇_kφ_a: one matrix product
            g = buf[1][:size].reshape(4, ng, nx, no)
            np.multiply(u[0][:, :, None], phio[0][:, None, :], out=g[0])
            for k in range(1, 4):
                g[0] += u[k][:, :, None] * phio[k][:, None, :]
                np.multiply(u[k][:, :, None], phio[0][:, None, :], out=g[k])
            out += flush_tiny(g).reshape(4 * ng, nx * no).T @ phiv.reshape(4 * ng, nv)
        return out.reshape(nx, no, nv)
