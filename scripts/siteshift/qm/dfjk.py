"""Density fitting with compact in-core three-index tensors (float32 storage, float64 arithmetic).

An SRSH ground state needs two fitted Coulomb tensors, the full-range one and the erf-attenuated
long-range one. For a bacteriochlorophyll model (852 basis functions, 4266 auxiliary functions)
each takes 12.4 GB in float64, so PySCF puts at least one on disk and reads it back every SCF
cycle. Stored in float32 they take 6.2 GB each and both stay in memory. Every block is converted
back to float64 before it is used, so only the storage is rounded (relative 6e-8, the size of
usual integral screening thresholds); the tests measure what this does to SCF and excitation
energies against PySCF's float64 tensors.

Exchange is built from a factorisation of each density matrix, K = Σ_P (L_P U)(L_P V)ᵀ with
D = U Vᵀ: the occupied orbitals when the SCF tags the density with them, otherwise a truncated
SVD, so cost scales with the rank of D rather than with nao³ (Weigend, PCCP 4, 4285 (2002) for
the occupied-orbital form of RI-K).
"""
from __future__ import annotations

import numpy as np
import scipy.linalg
from pyscf import df, gto, lib
from threadpoolctl import threadpool_limits


def all_blas_threads():
    """All OpenMP threads PySCF was given, for siteshift's own dense BLAS work (BLAS is kept
    single-threaded elsewhere, where PySCF's own OpenMP loops call it)."""
    return threadpool_limits(max(1, lib.num_threads()), user_api="blas")


def _metric_factor(j2c):
    """(kind, factor) with factor⁻¹-like action: the Cholesky factor or w^-1/2 Uᵀ if singular."""
    try:
        return "chol", np.asfortranarray(scipy.linalg.cholesky(j2c, lower=True))
    except np.linalg.LinAlgError:
        w, u = scipy.linalg.eigh(j2c)
        keep = w > 1e-10 * w.max()
        return "eig", (u[:, keep] / np.sqrt(w[keep])).T


#: AO pairs whose Schwarz bound √(μν|μν) is below this are left out of the fitted tensors
#: (their columns are zero). For Coulomb-metric fitting Σ_P L_P,μν² = (μν|fit μν) ≤ (μν|μν), so
#: no element of a dropped column exceeds the bound; 1e-12 is below the float32 rounding of the
#: stored elements (6e-8 relative) and near PySCF's direct-SCF screening (1e-13). The erf
#: long-range tensor obeys the same bound, since erf(ωr)/r ≤ 1/r in Fourier space. Measured on
#: the bacteriochlorophyll model (def2-SVP): 52 % of the AO pairs are kept, so the build's solve
#: is halved (see the README's speed section).
PAIR_TOL = 1e-12
#: Size of the float64 buffer into which stored float32 rows are converted when they are read
#: once (a few rows: no whole-block float64 copy goes through memory).
CONVERT_BLOCK_BYTES = 32e6


def expcutoff_for(tol=PAIR_TOL):
    """libcint's primitive-pair cutoff matching a pair threshold, a decade below it: ln(10/tol).

    Measured on the bacteriochlorophyll model (60 shells × all pairs below them × all auxiliary
    shells): 30 instead of libcint's 60 takes the three-index integrals from 8.4 to 4.8 s, with
    the largest change of any integral 8.6e-14."""
    return float(np.log(10.0 / tol)) if tol and tol > 0 else None


def significant_pairs(mol, tol=PAIR_TOL):
    """Boolean mask over the AO pairs packed μ ≥ ν: True where the Schwarz bound √(μν|μν) ≥ tol."""
    from pyscf.scf import _vhf
    nao = mol.nao
    if not tol or tol <= 0:
        return np.ones(nao * (nao + 1) // 2, dtype=bool)
    opt = _vhf.VHFOpt(mol, "int2e", "CVHFnrs8_prescreen", "CVHFsetnr_direct_scf",
                      "CVHFsetnr_direct_scf_dm")
    q = np.asarray(opt.get_q_cond() if hasattr(opt, "get_q_cond") else opt.q_cond)
    ao_loc = mol.ao_loc_nr()
    shell_of = np.repeat(np.arange(mol.nbas), np.diff(ao_loc))
    rows, cols = np.tril_indices(nao)
    return q[shell_of[rows], shell_of[cols]] >= tol


def build_cderi(mol, auxmol, omega=0.0, dtype=np.float32, block_mb=400, metric_out=None,
                pairs=None, expcutoff=None):
    """Fitted three-index tensor L[P, μν] (μ ≥ ν packed), L = J^-1/2 (P|μν), built in AO blocks.

    Returned as a list of row chunks (each a few hundred MB) so that a consumer can release the
    tensor chunk by chunk. omega ≠ 0 gives the erf-attenuated (long-range) tensor with the
    attenuated metric. No float64 copy of the whole tensor is ever held. ``pairs`` (a mask from
    :func:`significant_pairs`) limits the metric solve to those AO pairs; the others are zero.
    ``expcutoff`` is libcint's primitive-pair cutoff (ln of the smallest prefactor kept; libcint's
    own default is 60), see :func:`expcutoff_for`.
    """
    nao = mol.nao
    npair = nao * (nao + 1) // 2
    ao_loc = mol.ao_loc_nr()
    if expcutoff:
        # libcint skips primitive pairs whose Gaussian-product prefactor is below exp(-cutoff)
        mol = mol.copy()
        mol._env[gto.PTR_EXPCUTOFF] = expcutoff
    with mol.with_range_coulomb(omega), auxmol.with_range_coulomb(omega):
        kind, fac = _metric_factor(auxmol.intor("int2c2e", hermi=1))
        if metric_out is not None:
            metric_out[:] = [kind, fac]
        naux = fac.shape[0]
        rows = max(1, int(block_mb * 1e6 / np.dtype(dtype).itemsize / npair))
        bounds = list(lib.prange(0, naux, rows))
        out = [np.empty((r1 - r0, npair), dtype=dtype) for r0, r1 in bounds]
        limit = block_mb * 1e6 / 8 / max(auxmol.nao, 1) / 2
        ish0 = 0
        while ish0 < mol.nbas:
            ish1 = ish0 + 1
            while ish1 < mol.nbas and (ao_loc[ish1 + 1] * (ao_loc[ish1 + 1] + 1) // 2
                                       - ao_loc[ish0] * (ao_loc[ish0] + 1) // 2) < limit:
                ish1 += 1
            p0 = ao_loc[ish0] * (ao_loc[ish0] + 1) // 2
            p1 = ao_loc[ish1] * (ao_loc[ish1] + 1) // 2
            sel = None if pairs is None else np.nonzero(pairs[p0:p1])[0]
            if sel is not None and len(sel) == p1 - p0:
                sel = None
            j3c = df.incore.aux_e2(mol, auxmol, intor=mol._add_suffix("int3c2e"), aosym="s2ij",
                                   shls_slice=(ish0, ish1, 0, ish1, 0, auxmol.nbas))
            # (P|μν) with the pairs along rows; PySCF returns the pairs fastest, so this
            # transpose is C-contiguous and the selection gathers within rows
            rhs = j3c.reshape(p1 - p0, -1).T
            rhs = np.ascontiguousarray(rhs if sel is None else np.take(rhs, sel, axis=1))
            del j3c
            if kind == "chol":
                # L⁻¹ B as Bᵀ L⁻ᵀ on the Fortran view of the same memory: no layout copies
                blk = scipy.linalg.blas.dtrsm(1.0, fac, rhs.T, side=1, lower=1, trans_a=1,
                                              overwrite_b=1).T
            else:
                blk = fac @ rhs
            del rhs
            for (r0, r1), chunk in zip(bounds, out):
                if sel is None:
                    chunk[:, p0:p1] = blk[r0:r1]
                else:
                    view = chunk[:, p0:p1]
                    view[...] = 0
                    view[:, sel] = blk[r0:r1]
            ish0 = ish1
    return out


def _pair_density(dms):
    """D_μν + D_νμ packed over μ ≥ ν (diagonal once): Σ_pairs L_P,pair · this = Σ_μν L_P,μν D_μν."""
    dms = np.asarray(dms, dtype=np.float64)
    nao = dms.shape[-1]
    dms = dms.reshape(-1, nao, nao)
    dtril = lib.pack_tril(dms + dms.transpose(0, 2, 1))
    idx = np.arange(nao)
    dtril[:, idx * (idx + 1) // 2 + idx] *= 0.5
    return dtril


_TILE = 64


def unpack_sym(packed, nao, out):
    """Symmetric matrices (b, nao, nao) from rows packed over μ ≥ ν, written into ``out``.

    Any float dtype, including a float32 block unpacked into float32 or float64 ``out``; PySCF's
    ``lib.unpack_tril`` serves float64 only (other types go through fancy indexing, 10x slower).
    The lower triangle is copied row by row, the upper one by tiled transposes.
    """
    if packed.dtype == np.float64 and out.dtype == np.float64:
        return lib.unpack_tril(packed, out=out)
    unpack_lower(packed, nao, out)
    for m0 in range(0, nao, _TILE):
        m1 = min(nao, m0 + _TILE)
        out[:, :m0, m0:m1] = out[:, m0:m1, :m0].transpose(0, 2, 1)
        r, c = np.triu_indices(m1 - m0, 1)
        sub = out[:, m0:m1, m0:m1]
        sub[:, r, c] = sub[:, c, r]
    return out


def unpack_lower(packed, nao, out):
    """The lower triangles (μ ≥ ν) of rows packed over μ ≥ ν, written into ``out`` (b, nao, nao);
    the upper triangles are left as they were. For BLAS routines that read one triangle of a
    symmetric matrix (?symm): a third of the time of :func:`unpack_sym` (measured on 200 rows
    of 681 × 681 in float32: 0.18 s against 0.49 s)."""
    off = 0
    for mu in range(nao):
        out[:, mu, :mu + 1] = packed[:, off:off + mu + 1]
        off += mu + 1
    return out


def pack_sym(full, out=None):
    """Rows (b, n(n+1)/2) packed over μ ≥ ν from symmetric (b, n, n), any float dtype."""
    n = full.shape[-1]
    if out is None:
        out = np.empty((full.shape[0], n * (n + 1) // 2), dtype=full.dtype)
    if full.dtype == np.float64 and out.dtype == np.float64:
        out[:] = lib.pack_tril(full)
        return out
    off = 0
    for mu in range(n):
        out[:, off:off + mu + 1] = full[:, mu, :mu + 1]
        off += mu + 1
    return out


def _factor(dm, hermi, mo_coeff=None, mo_occ=None):
    """(U, V) with dm = U Vᵀ, of the lowest rank we can find cheaply; for a symmetric,
    indefinite dm (U, signs) with dm = U diag(signs) Uᵀ, signs a 1-D array of ±1."""
    if mo_coeff is not None and mo_occ is not None and hermi == 1:
        occ = np.asarray(mo_occ)
        sel = occ > 0
        c = np.asarray(mo_coeff)[:, sel] * np.sqrt(occ[sel])
        return c, c
    if not np.isfinite(dm).all():
        raise FloatingPointError("a density matrix handed to the fitted J/K build holds NaN or "
                                 "inf values (an SCF or response step diverged)")
    if hermi == 1:
        # symmetric (e.g. the second-order SCF's trial densities): dm = W diag(λ) Wᵀ, split
        # as (W √|λ| sign λ)(W √|λ|)ᵀ; eigh is also more robust than LAPACK's divide-and-conquer
        # SVD, which failed to converge on such a matrix (heme, 6-31G, second-order step)
        lam, w = np.linalg.eigh((dm + dm.T) * 0.5)
        keep = np.abs(lam) > 1e-12 * max(np.abs(lam).max(), 1e-300)
        r = w[:, keep] * np.sqrt(np.abs(lam[keep]))
        sign = np.sign(lam[keep])
        # an indefinite D = R diag(sign) Rᵀ: K needs the products L_P R once, not twice
        return (r, r) if (sign > 0).all() else (r, sign)
    try:
        u, s, vt = np.linalg.svd(dm)
    except np.linalg.LinAlgError:   # gesdd's rare failure: the slower QR-iteration driver
        u, s, vt = scipy.linalg.svd(dm, lapack_driver="gesvd")
    keep = s > 1e-12 * max(s.max(), 1e-300)
    rs = np.sqrt(s[keep])
    return u[:, keep] * rs, vt[keep].T * rs


class CompactDF(df.DF):
    """PySCF density-fitting object whose tensors live in memory in float32 (or float64).

    Drop-in for ``mf.with_df``: ``get_jk`` serves the full-range tensor (omega None/0) and any
    range-separated ω with its own attenuated tensor, each built once on first use.
    """

    def __init__(self, mol, auxbasis=None, storage="float32", block_mb=400, pair_tol=PAIR_TOL):
        super().__init__(mol, auxbasis)
        self.storage = np.dtype(storage)
        self.block_mb = block_mb
        #: Schwarz threshold of the AO pairs kept in the tensors (see PAIR_TOL); 0 keeps all
        self.pair_tol = pair_tol
        self.pair_fraction = None
        self._pairs = None
        #: precision of the exchange arithmetic; the SCF sets float32 for its early cycles
        self.k_dtype = np.float64
        self._tensors = {}
        self._metrics = {}
        self._last_rho = None

    def reset(self, mol=None):
        self._pairs = self.pair_fraction = None
        self._tensors = {}
        self._metrics = {}
        self._last_rho = None
        return super().reset(mol)

    def build(self):
        self.check_sanity()
        self.tensor(0.0)
        return self

    def tensor(self, omega=0.0):
        key = round(float(omega or 0.0), 12)
        if key not in self._tensors:
            auxbasis = self.auxbasis or df.make_auxbasis(self.mol, mp2fit=False)
            auxmol = df.addons.make_auxmol(self.mol, auxbasis)
            self.auxmol = auxmol
            metric = [None, None]
            if self._pairs is None:  # one mask serves both tensors
                self._pairs = significant_pairs(self.mol, self.pair_tol)
                self.pair_fraction = float(self._pairs.mean())
            pairs = self._pairs
            with all_blas_threads():
                self._tensors[key] = build_cderi(self.mol, auxmol, key, self.storage,
                                                 self.block_mb, metric_out=metric, pairs=pairs,
                                                 expcutoff=expcutoff_for(self.pair_tol))
            self._metrics[key] = tuple(metric)
        return self._tensors[key]

    def apply_metric(self, x):
        """J^-1/2 applied to the rows of x (naux, n): x in the fitted tensor's auxiliary space."""
        if 0.0 not in self._metrics:
            self.tensor(0.0)
        kind, fac = self._metrics[0.0]
        if kind == "chol":
            return scipy.linalg.solve_triangular(fac, x, lower=True)
        return fac @ x

    def fit_density(self, dms):
        """ρ_P = Σ_μν L_P,μν D_μν for each density (nset, naux); the D are symmetrised.

        Reuses the ρ of the last Coulomb build when it was for the same densities (the PCM
        asks for the density that J has just been built from: one pass over the tensor less)."""
        last = self._last_rho
        d = np.asarray(dms, dtype=np.float64)
        d = d.reshape(-1, d.shape[-1], d.shape[-1])
        if last is not None and last[0].shape == d.shape and np.array_equal(last[0], d):
            return last[1].copy()
        dtril = _pair_density(dms)
        out = np.empty((len(dtril), self.naux()))
        for p0, p1, blk in self._rows64():
            out[:, p0:p1] = dtril @ blk.T
        return out

    def _rows64(self, omega=0.0):
        """:meth:`blocks` of a few rows, for a tensor read once: stored float32 rows are
        converted into one small float64 buffer (a whole float64 block copy went through memory
        and back: the PCM potential matrix took 2.9-4.9 s per 1000 rows of the
        bacteriochlorophyll model's tensor this way, 1.5 s with these rows and dgemv)."""
        npair = self.mol.nao * (self.mol.nao + 1) // 2
        return self.blocks(omega, rows=max(1, int(CONVERT_BLOCK_BYTES // (8 * npair))))

    def contract_aux(self, c):
        """Σ_P c_P L_P,μν for each row of c (nset, naux) → (nset, nao, nao)."""
        c = np.atleast_2d(c)
        acc = np.zeros((len(c), self.mol.nao * (self.mol.nao + 1) // 2))
        for p0, p1, blk in self._rows64():
            for k in range(len(c)):  # accumulated in place by BLAS: no fresh product per row
                acc[k] = scipy.linalg.blas.dgemv(1.0, blk.T, c[k, p0:p1], beta=1.0, y=acc[k],
                                                 overwrite_y=1)
        return lib.unpack_tril(acc, 1)

    def drop(self, omega=None):
        """Release one tensor (or all); it is rebuilt on its next use. Metrics are kept."""
        if omega is None:
            self._tensors = {}
        else:
            self._tensors.pop(round(float(omega), 12), None)

    def naux(self, omega=0.0):
        return sum(len(c) for c in self.tensor(omega))

    def raw_blocks(self, omega=0.0, rows=None, consume=False):
        """Yield (p0, p1, block) of the fitted tensor as stored (float32 or float64), no copy.

        consume: release each stored chunk once yielded (the tensor is gone afterwards).
        """
        chunks = self.tensor(omega)
        key = round(float(omega or 0.0), 12)
        npair = self.mol.nao * (self.mol.nao + 1) // 2
        rows = rows or max(1, int(self.block_mb * 1e6 / 8 / npair))
        p0 = 0
        while chunks:
            c = chunks[0]
            for s0 in range(0, len(c), rows):
                s1 = min(len(c), s0 + rows)
                yield p0 + s0, p0 + s1, c[s0:s1]
            p0 += len(c)
            if consume:
                chunks.pop(0)
                if not chunks:
                    self._tensors.pop(key, None)
            else:
                chunks = chunks[1:]

    def blocks(self, omega=0.0, rows=None, consume=False):
        """Yield (p0, p1, float64 packed block) of the fitted tensor, chunk by chunk.

        The block is a view of one buffer reused for every block (a fresh 300 MB array per
        block costs more in page faults than the arithmetic on it): use it before the next.
        consume: release each stored chunk once yielded (the tensor is gone afterwards).
        """
        npair = self.mol.nao * (self.mol.nao + 1) // 2
        rows = rows or max(1, int(self.block_mb * 1e6 / 8 / npair))
        rows = min(rows, self.naux(omega))
        buf = None
        for p0, p1, raw in self.raw_blocks(omega, rows, consume):
            if raw.dtype == np.float64:
                yield p0, p1, raw
                continue
            if buf is None:
                buf = np.empty((rows, npair))
            out = buf[:p1 - p0]
            np.copyto(out, raw)
            yield p0, p1, out

    def get_jk(self, dm, hermi=1, with_j=True, with_k=True, direct_scf_tol=None, omega=None):
        with all_blas_threads():
            return self._get_jk(dm, hermi, with_j, with_k, omega)

    def _get_jk(self, dm, hermi, with_j, with_k, omega):
        if omega is not None and omega < 0:
            raise NotImplementedError("short-range (omega < 0) fitted exchange is not provided "
                                      "by CompactDF")
        mo_coeff = getattr(dm, "mo_coeff", None)
        mo_occ = getattr(dm, "mo_occ", None)
        dms = np.asarray(dm, dtype=np.float64)
        shape = dms.shape
        nao = shape[-1]
        dms = dms.reshape(-1, nao, nao)
        nset = len(dms)
        if mo_coeff is not None and nset > 1:
            mo_coeff = np.asarray(mo_coeff).reshape(nset, nao, -1)
            mo_occ = np.asarray(mo_occ).reshape(nset, -1)
        elif mo_coeff is not None:
            mo_coeff, mo_occ = [mo_coeff], [mo_occ]
        else:
            mo_coeff = mo_occ = [None] * nset
        vj = np.zeros_like(dms) if with_j else None
        vk = np.zeros_like(dms) if with_k else None
        npair = nao * (nao + 1) // 2
        if with_j:
            dtril = _pair_density(dms)
            jtril = np.zeros((nset, npair))
        cdt = np.dtype(self.k_dtype) if with_k else np.dtype(np.float64)
        factors = []
        for k in range(nset) if with_k else ():
            # column-major for ?symm; None for the second factor of a symmetric D = U Uᵀ
            u, v = _factor(dms[k], hermi, mo_coeff[k], mo_occ[k])
            factors.append((np.asfortranarray(u, dtype=cdt),
                            None if v is u else v.astype(cdt) if v.ndim == 1 else
                            np.asfortranarray(v, dtype=cdt)))
        rank = max((u.shape[1] for u, _ in factors), default=1)
        per_row = (8 * npair if with_j else 0) + cdt.itemsize * (nao * nao + 2 * nao * rank)
        rows = max(1, min(int(self.block_mb * 1e6 / per_row), self.naux(omega or 0.0)))
        # buffers reused by every block: fresh arrays of this size cost more in page faults
        b64 = np.empty((rows, npair)) if with_j else None
        if with_k:
            full = np.empty((rows, nao, nao), dtype=cdt)
            symm = scipy.linalg.blas.get_blas_funcs("symm", dtype=cdt)
            za = np.empty(rows * nao * rank, dtype=cdt)
            if any(v is not None and v.ndim == 2 for _, v in factors):
                zb = np.empty(rows * nao * rank, dtype=cdt)
        rho = np.empty((nset, self.naux(omega or 0.0))) if with_j else None
        for p0, p1, raw in self.raw_blocks(omega or 0.0, rows):
            nb = p1 - p0
            if with_j:
                blk = b64[:nb]
                np.copyto(blk, raw)
                rho[:, p0:p1] = dtril @ blk.T
                jtril += rho[:, p0:p1] @ blk
            if not with_k:
                continue
            # ?symm reads one triangle: only the lower one is unpacked, unless PySCF's C
            # routine can unpack the float64 rows at hand
            if cdt == np.float64 and raw.dtype == np.float64:
                f = lib.unpack_tril(raw, out=full[:nb])
            elif cdt == np.float64 and with_j:
                f = lib.unpack_tril(blk, out=full[:nb])
            else:
                f = unpack_lower(raw, nao, full[:nb])
            for k, (u, v) in enumerate(factors):
                if u.shape[1] == 0:  # an empty density (e.g. no electron of one spin)
                    continue
                zu = self._stacked(f, u, symm, za)
                if v is None:
                    vk[k] += zu.T @ zu
                elif v.ndim == 1:   # D = U diag(signs) Uᵀ; Z's rows run (P, i)
                    vk[k] += zu.T @ (zu * np.tile(v, nb)[:, None])
                else:
                    vk[k] += zu.T @ self._stacked(f, v, symm, zb)
        if with_j:
            vj = lib.unpack_tril(jtril, 1).reshape(shape)
            if not omega:
                self._last_rho = (dms.copy(), rho)
        if with_k:
            vk = vk.reshape(shape)
        return vj, vk

    @staticmethod
    def _stacked(f, u, symm, buf):
        """Z (nb·r, nao) with rows (P, i) = (L_P u)ᵀ, so that K = Zᵀ Z' over a block of rows.

        L_P u comes from BLAS ?symm on the lower triangle of L_P, written column-major straight
        into its rows of Z (no transposing copy, no upper triangle to unpack)."""
        nb, nao, r = f.shape[0], f.shape[1], u.shape[1]
        z = buf[:nb * r * nao].reshape(nb * r, nao)
        for p in range(nb):
            c = z[p * r:(p + 1) * r].T       # (nao, r), column-major view of Z's rows
            out = symm(1.0, f[p].T, u, c=c, overwrite_c=1, side=0, lower=0)
            if not np.shares_memory(out, c):  # f2py copied: keep its result
                c[...] = out
        return z
