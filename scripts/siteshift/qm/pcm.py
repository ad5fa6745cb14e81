"""Polarizable continuum pieces that siteshift adds to PySCF's PCM.

- :class:`FactoredPCM`: the surface matrix K factorised once for all SCF cycles.
- :class:`FittedPCM`: surface potential and reaction-field matrix from the fitted density.
- :func:`response_solvent`: the continuum that responds during a vertical excitation, built with
  the ε asked for (PySCF 2.14's TDA/TDDFT would put 1.78 there whatever was set).
"""
from __future__ import annotations

import numpy as np
import scipy.linalg
from pyscf import gto
from pyscf.solvent import pcm

from .dfjk import all_blas_threads
from .settings import ExciteSettings


def response_solvent(mf, settings: ExciteSettings):
    """The continuum that responds during a vertical excitation, with the ε we were given."""
    sol = mf.with_solvent.copy()
    sol.equilibrium_solvation = settings.equilibrium
    sol.reset()
    sol.eps = float(settings.eps_static if settings.equilibrium else settings.eps_optical)
    sol.build()
    return sol


#: Largest in-memory table (MB) of the AO-pair × surface-point integrals (μν|g) that
#: :class:`FactoredPCM` keeps between calls (also at most a quarter of the job's max_memory).
#: PySCF computes the table twice per SCF cycle and per coupled-perturbed iteration; measured
#: on the demo chromophore (20 atoms, 6-31G, IEF-PCM): 63 such passes took 42 of the 148 s
#: of its excited-state job with relaxed densities. A table too large in float64 is kept in
#: float32 (and used in float64, block by block) when that fits: heme b at 6-31G (19HC: 389
#: AOs, 1.8 GB in float64) spent ~60 % of each continuum SCF cycle recomputing it. A pigment
#: whose table fits neither way (a bacteriochlorophyll at def2-SVP: tens of GB) keeps PySCF's
#: blocked recomputation.
PCM_TABLE_MAX_MB = 2000
#: AO-pair rows of the table converted to float64 at a time (float32 storage)
PCM_TABLE_ROWS = 4096


class FactoredPCM(pcm.PCM):
    """PySCF's PCM with its surface matrix K factorised once for all SCF cycles, and the
    (μν|g) table kept in memory when small enough (``PCM_TABLE_MAX_MB``)."""

    def _table(self):
        """(μν|g) over AO pairs μ ≥ ν (packed) × surface points (float64, or float32 when only
        that fits the budget), or None when too large."""
        coords = self.surface["grid_coords"]
        key = (coords.shape, float(np.sum(coords)), float(np.sum(self.surface["charge_exp"])))
        if getattr(self, "_t_key", None) == key:
            return self._t
        mol = self.mol
        npair = mol.nao * (mol.nao + 1) // 2
        budget = min(PCM_TABLE_MAX_MB, self.max_memory / 4)
        self._t_key, self._t = key, None
        dtype = next((np.dtype(d) for d in (np.float64, np.float32)
                      if npair * len(coords) * np.dtype(d).itemsize / 1e6 <= budget), None)
        if dtype is None:
            return None
        from pyscf import df, lib
        expn = self.surface["charge_exp"] ** 2
        intor = mol._add_suffix("int3c2e")
        t = np.empty((npair, len(coords)), dtype)
        # point blocks of ~100 MB in float64 before they are stored
        for p0, p1 in lib.prange(0, len(coords), max(1, int(1e8 / 8 / npair))):
            fake = gto.fakemol_for_charges(coords[p0:p1], expnt=expn[p0:p1])
            fake.cart = mol.cart
            t[:, p0:p1] = df.incore.aux_e2(mol, fake, intor=intor, aosym="s2ij")
        self._t = t
        return t

    @staticmethod
    def _row_blocks(t):
        """(r0, r1, float64 block) of the table's AO-pair rows (no copy in float64)."""
        if t.dtype == np.float64:
            yield 0, len(t), t
            return
        buf = np.empty((min(PCM_TABLE_ROWS, len(t)), t.shape[1]))
        for r0 in range(0, len(t), PCM_TABLE_ROWS):
            r1 = min(len(t), r0 + PCM_TABLE_ROWS)
            np.copyto(buf[:r1 - r0], t[r0:r1])
            yield r0, r1, buf[:r1 - r0]

    def _get_v(self, dms):
        t = self._table()
        if t is None:
            return super()._get_v(dms)
        from pyscf import lib
        dms = np.asarray(dms).reshape(-1, self.mol.nao, self.mol.nao)
        packed = lib.pack_tril(dms + dms.transpose(0, 2, 1))
        idx = np.arange(self.mol.nao)
        packed[:, idx * (idx + 1) // 2 + idx] *= 0.5      # the diagonal counted once
        out = np.zeros((len(packed), t.shape[1]))
        with all_blas_threads():
            for r0, r1, blk in self._row_blocks(t):
                out += packed[:, r0:r1] @ blk
        return out

    def _get_vmat(self, q):
        t = self._table()
        if t is None:
            return super()._get_vmat(q)
        from pyscf import lib
        q = np.asarray(q).reshape(-1, t.shape[1])
        out = np.empty((len(q), len(t)))
        with all_blas_threads():
            for r0, r1, blk in self._row_blocks(t):
                out[:, r0:r1] = q @ blk.T
        return -lib.unpack_tril(out)

    def _lu(self):
        """The LU factors of K, refreshed whenever PySCF replaces K."""
        K = self._intermediates["K"]
        lu = getattr(self, "_k_lu", None)
        if lu is None or lu[0] is not K:
            with all_blas_threads():
                lu = self._k_lu = (K, scipy.linalg.lu_factor(K))
        return lu[1]

    def _B_dot_x(self, dms):
        """PySCF's reaction-field response to a density change (used by the coupled-perturbed
        equations of relaxed densities), with K's factors reused instead of two solves."""
        if not self._intermediates:
            self.build()
        shape = dms.shape
        nao = shape[-1]
        dms = dms.reshape(-1, nao, nao)
        R = self._intermediates["R"]
        lu = self._lu()
        v_grids = -self._get_v(dms)
        q = scipy.linalg.lu_solve(lu, R @ v_grids.T).T
        qt = (R.T @ scipy.linalg.lu_solve(lu, v_grids.T, trans=1)).T
        return self._get_vmat((q + qt) / 2.0).reshape(shape)

    def _get_vind(self, dms):
        """PySCF's PCM energy and potential, with K factorised once (LU) for every SCF cycle:
        PySCF solves K q = R v and Kᵀ y = v from scratch in each cycle (two O(n³) solves on a
        surface of thousands of points, 3 s per cycle on the bacteriochlorophyll model)."""
        if not self._intermediates:
            self.build()
        nao = dms.shape[-1]
        dms = dms.reshape(-1, nao, nao)
        if dms.shape[0] == 2:
            dms = (dms[0] + dms[1]).reshape(-1, nao, nao)
        R = self._intermediates["R"]
        lu = self._lu()
        v_grids = self.v_grids_n - self._get_v(dms)
        q = scipy.linalg.lu_solve(lu, R @ v_grids.T).T
        qt = (R.T @ scipy.linalg.lu_solve(lu, v_grids.T, trans=1)).T
        q_sym = (q + qt) / 2.0
        vmat = self._get_vmat(q_sym)
        epcm = 0.5 * np.dot(q_sym[0], v_grids[0])
        self._intermediates.update(q=q[0], q_sym=q_sym[0], v_grids=v_grids[0], dm=dms)
        return epcm, vmat[0]


class FittedPCM(FactoredPCM):
    """PCM whose surface potential and reaction-field matrix use the fitted density.

    PySCF evaluates (μν|g) for every surface point g twice per SCF cycle. With the density fitted
    as for the Coulomb matrix, v_g = Σ_P ρ_P W_Pg and V_μν = −Σ_P L_P,μν (W q)_P, with
    W = J^-1/2 (P|g) computed once: the same fitting that J already uses, so the cost per cycle is
    that of a J build. ``fit_df`` is the ground state's :class:`CompactDF`.
    """

    fit_df = None

    def _fit_weights(self):
        coords = self.surface["grid_coords"]
        key = (coords.shape, float(np.sum(coords)), id(self.fit_df))
        if getattr(self, "_w_key", None) != key:
            if 0.0 not in self.fit_df._metrics:
                self.fit_df.tensor(0.0)
            fake = gto.fakemol_for_charges(coords, expnt=self.surface["charge_exp"] ** 2)
            qg = gto.mole.intor_cross("int2c2e", self.fit_df.auxmol, fake)
            self._w = self.fit_df.apply_metric(qg)
            self._w_key = key
        return self._w

    def _get_v(self, dms):
        with all_blas_threads():
            return self.fit_df.fit_density(dms) @ self._fit_weights()

    def _get_vmat(self, q):
        with all_blas_threads():
            w = self._fit_weights()
            return -self.fit_df.contract_aux(np.reshape(q, (-1, w.shape[1])) @ w.T)
