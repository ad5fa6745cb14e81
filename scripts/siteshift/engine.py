"""SRSH-PCM ground and excited states with PySCF.

Pure functions over plain data: a molecule is given as element symbols and Å coordinates, settings as
an :class:`ExciteSettings`; results are plain dictionaries ready for JSON.

Physics
- Ground state: Kohn–Sham with the SRSH functional (:mod:`siteshift.functional`) and, when
  ε_static > 1, IEF-PCM (Cancès, Mennucci, Tomasi, JCP 107, 3032 (1997)) or C-PCM with ε_static.
- Vertical excitations: linear response (TDA by default, Hirata & Head-Gordon CPL 314, 291 (1999);
  full TDDFT as option) with *non-equilibrium* solvation: the continuum's fast part responds with
  ε_optical (Cammi & Mennucci, JCP 110, 9877 (1999)). PySCF 2.14 replaces the excited-state dielectric
  by 1.78 whatever the ground state used; here the response solvent is rebuilt with the ε_optical we
  were given, and the value actually used is read back from the object and recorded.
- Two response paths share the same ground state: ``stock`` (PySCF's TDA/TDDFT) and ``fast`` (an
  MO-basis TDA built from density-fitted three-index tensors and a precomputed PCM surface
  operator). Both solve the same equations; tests hold them within 1e-6 eV of each other.
"""
from __future__ import annotations

import platform
import time
from dataclasses import asdict, dataclass

import numpy as np
import pyscf
import scipy.linalg
from pyscf import df, dft, gto, lib
from pyscf.data import nist

from .bands import assign_bands
from .dfjk import (CompactDF, FactoredPCM, FittedPCM, all_blas_threads, pack_sym, unpack_lower,
                   unpack_sym)
from .functional import SRSH
from .xcgrid import DenseNumInt, MOKernel

HARTREE2EV = nist.HARTREE2EV
AU2DEBYE = nist.AU2DEBYE
#: λ[nm] = NM_EV / E[eV]  (h c / e in eV·nm, from CODATA constants through pyscf.data.nist)
NM_EV = nist.PLANCK * nist.LIGHT_SPEED_SI / nist.E_CHARGE * 1e9

PCM_METHODS = ("IEF-PCM", "C-PCM")


def configure_threads(n: int) -> None:
    """Use n OpenMP threads in PySCF's own kernels and keep BLAS single-threaded.

    PySCF's OpenMP loops call BLAS inside; letting OpenBLAS spawn its own threads as well
    oversubscribes the cores. Measured on 2 cores (20-atom UKS SCF, 6-31G, grid 1): OpenMP 2 +
    BLAS 1: 23.0 s; both 2: 34.5 s; both 1: 40.7 s.
    """
    from threadpoolctl import threadpool_limits
    threadpool_limits(1, user_api="blas")
    lib.num_threads(max(1, int(n)))


class EngineError(RuntimeError):
    """A calculation could not be set up or did not converge."""


@dataclass
class ExciteSettings:
    """Every setting of one SRSH-PCM excited-state calculation (defaults: full-accuracy preset)."""

    alpha: float = 0.2
    omega: float = 0.2                   # bohr⁻¹
    eps_static: float = 1.0              # ground-state continuum (1 = gas phase)
    eps_optical: float = 1.0             # fast (electronic) continuum for vertical excitations
    screen: str = "static"               # which ε sets α+β = 1/ε: "static" or "optical"
    basis: str = "def2-svp"
    auxbasis: str | None = None          # None: PySCF's automatic JK-fitting basis
    density_fitting: bool = True
    grid_level: int = 3
    pcm_method: str = "IEF-PCM"
    lebedev_order: int = 17              # surface points per atom sphere: 17 → 110
    nstates: int = 4
    tda: bool = True
    equilibrium: bool = False            # equilibrium solvation of the excitations (ε_static)
    solver: str = "fast"                 # "fast" (MO-basis TDA) or "stock" (PySCF TDA/TDDFT)
    conv_tol: float = 1e-9               # SCF energy, Hartree
    # Davidson residual norm: the stock path's (PySCF's TDA stops at sqrt(conv_tol), 3.2e-4 as
    # siteshift runs it; 3e-3 by PySCF's default). Measured on 4'-hydroxycinnamic acid/def2-SVP,
    # grid 1, float32 tensors, fitted PCM, frozen core, 4 states, against 1e-6 (11 products):
    # 3e-4 moves E by 0.0016 meV and f by 3e-5 in 7 products; 1e-4 0.0016 meV, 6e-6, 8 products;
    # 1e-3 0.0019 meV, 3e-5, 6 products (benchmarks/davidson_tolerance.tsv). The 0.0016 meV,
    # the same at every tolerance, is of the size of the float32 (vv) exchange's rounding.
    response_tol: float = 3e-4
    max_memory_mb: int = 4000
    df_storage: str = "float32"          # fitted tensors in memory: "float32", "float64" or "pyscf"
    df_pair_tol: float = 1e-12           # Schwarz bound of the AO pairs kept (dfjk.PAIR_TOL; 0: all)
    response_grid_level: int | None = None   # XC-kernel grid of the fast TDA (None: SCF grid)
    occ_window_ev: float | None = None   # fast TDA: occupied orbitals within this of the HOMO
    vir_window_ev: float | None = None   # fast TDA: virtual orbitals within this of the LUMO
    pcm_fit: bool = False                # PCM potentials from the fitted density (in-core DF only)

    def check(self) -> None:
        if self.eps_static < 1.0 or self.eps_optical < 1.0:
            raise EngineError(
                f"dielectric constants must be >= 1 (eps_static={self.eps_static}, "
                f"eps_optical={self.eps_optical}); set them in the dielectric model or override")
        if self.eps_optical > self.eps_static + 1e-12:
            raise EngineError(
                f"eps_optical={self.eps_optical} exceeds eps_static={self.eps_static}: the fast "
                "(electronic) response cannot screen more than the full static response")
        if self.screen not in ("static", "optical"):
            raise EngineError(f"screen must be 'static' or 'optical', got {self.screen!r}")
        if self.pcm_method.upper() not in PCM_METHODS:
            raise EngineError(f"pcm_method must be one of {PCM_METHODS}, got {self.pcm_method!r}")
        if self.solver not in ("fast", "stock"):
            raise EngineError(f"solver must be 'fast' or 'stock', got {self.solver!r}")
        if self.nstates < 1:
            raise EngineError(f"nstates must be >= 1, got {self.nstates}")
        if not 0.0 < self.response_tol <= 1e-2:
            raise EngineError(f"response_tol must be > 0 and <= 0.01 (a Davidson residual norm), "
                              f"got {self.response_tol}")
        if not 0.0 <= self.df_pair_tol <= 1e-8:
            raise EngineError(f"df_pair_tol must be between 0 and 1e-8, got {self.df_pair_tol}")
        if self.df_storage not in ("float32", "float64", "pyscf"):
            raise EngineError(f"df_storage must be 'float32', 'float64' or 'pyscf', got "
                              f"{self.df_storage!r}")
        for k in ("occ_window_ev", "vir_window_ev"):
            v = getattr(self, k)
            if v is not None and v <= 0:
                raise EngineError(f"{k} must be > 0 eV or null (no window), got {v}")

    @property
    def eps_screen(self) -> float:
        return self.eps_static if self.screen == "static" else self.eps_optical

    @property
    def functional(self) -> SRSH:
        return SRSH(self.alpha, self.omega, self.eps_screen)

    @property
    def solvated(self) -> bool:
        return self.eps_static > 1.0


# --------------------------------------------------------------------------------------------
# molecule and ground state
# --------------------------------------------------------------------------------------------

def build_molecule(elements, coords_ang, charge=0, spin=0, basis="def2-svp", max_memory_mb=4000,
                   verbose=0) -> gto.Mole:
    """A PySCF molecule from element symbols and Å coordinates; spin = 2S (unpaired electrons)."""
    coords = np.asarray(coords_ang, dtype=float).reshape(-1, 3)
    if len(elements) != len(coords):
        raise EngineError(f"{len(elements)} elements but {len(coords)} coordinates")
    if len(elements) == 0:
        raise EngineError("empty molecule")
    atom = [(str(e).capitalize(), tuple(c)) for e, c in zip(elements, coords)]
    mol = gto.Mole(atom=atom, basis=basis, charge=int(charge), spin=int(spin), unit="Angstrom",
                   max_memory=max_memory_mb, verbose=verbose)
    try:
        mol.build()
    except RuntimeError as exc:  # PySCF raises RuntimeError for impossible electron counts
        raise EngineError(f"charge {charge} and spin {spin} are impossible for this molecule "
                          f"({int(sum(gto.charge(e) for e in elements)) - int(charge)} electrons): "
                          f"{exc}") from None
    return mol


def _attach_pcm(mf, settings: ExciteSettings, eps: float):
    mf = mf.PCM()
    mf.with_solvent.method = settings.pcm_method.upper()
    mf.with_solvent.eps = float(eps)
    mf.with_solvent.lebedev_order = settings.lebedev_order
    return mf


def make_scf(mol, settings: ExciteSettings, functional: SRSH | None = None, solvated=None):
    """An (unrun) RKS/UKS object with the SRSH functional, DF and PCM as the settings say."""
    functional = functional or settings.functional
    mf = dft.RKS(mol) if mol.spin == 0 else dft.UKS(mol)
    if mol.spin == 0:
        mf._numint = DenseNumInt()
    mf.xc = functional.xc
    mf.grids.level = settings.grid_level
    mf.conv_tol = settings.conv_tol
    # PySCF's extra cycle after convergence (one more Fock build, 89-93 s as a float64
    # cycle on the bacteriochlorophyll model) is skipped: measured on 4'-hydroxycinnamic
    # acid/def2-SVP (grid 1, fitted PCM), same SCF energy to 1e-10 Eh, excitations moved by
    # at most 4e-5 eV (the spread between initial guesses), f by 1e-5
    mf.conv_check = False
    mf.max_memory = settings.max_memory_mb
    if settings.density_fitting:
        mf = mf.density_fit(auxbasis=settings.auxbasis)
        if settings.df_storage != "pyscf":
            mf.with_df = CompactDF(mol, auxbasis=mf.with_df.auxbasis, storage=settings.df_storage,
                                   block_mb=min(1000, max(100, settings.max_memory_mb // 8)),
                                   pair_tol=settings.df_pair_tol)
    if settings.solvated if solvated is None else solvated:
        mf = _attach_pcm(mf, settings, settings.eps_static)
        if settings.pcm_fit and isinstance(getattr(mf, "with_df", None), CompactDF):
            mf.with_solvent.__class__ = FittedPCM
            mf.with_solvent.fit_df = mf.with_df
        elif settings.df_storage != "pyscf":  # "pyscf" keeps PySCF's objects as they are
            mf.with_solvent.__class__ = FactoredPCM
    return mf


#: The SCF fallback ladder: each step is tried from the previous step's density.
SCF_LADDER = (
    ("diis", {}),
    ("level_shift+damping", {"level_shift": 0.3, "damp": 0.5, "diis_start_cycle": 4}),
    ("second_order", None),
)


#: Orbital-gradient norm below which the SCF's exchange goes back to float64 (see
#: :class:`_EarlyCycles`). Measured on 4'-hydroxycinnamic acid/def2-SVP, grid 1, fitted PCM:
#: 1e-3 and 1e-4 both take 12 cycles (8 and 10 of them in float32), same energy to 1e-10 Eh,
#: excitations within 2e-6 eV; 3e-5 takes 14.
K_FLOAT64_BELOW = 1e-4
#: MB left free when the float32 cycles decide whether AO values on the grid can be kept
#: between cycles (from the SCF's max_memory less what the process holds after its first cycle).
AO_CACHE_RESERVE_MB = 1000


class _EarlyCycles:
    """Float32 exchange (and XC grid sums) for the early SCF cycles, float64 from then on.

    Measured on 4'-hydroxycinnamic acid/def2-SVP: float32 exchange is 2.1x faster, and its error
    (max |ΔK| 1e-5 Eh on a matrix of max 9.8, ΔE_K 2.5e-5 Eh) is far below the changes of the
    early cycles but would stop the convergence at about that level. So the exchange switches to
    float64 once the orbital gradient falls below ``K_FLOAT64_BELOW``, and convergence cannot be
    declared before: the converged state is the float64 one, as without the switch. Only a
    :class:`CompactDF` ground state takes part; its :class:`DenseNumInt` grid sums follow the
    same switch. (A coarse XC grid for the same early cycles was
    tried and dropped: grid 0 before grid 1 took 22 cycles instead of 12 on that molecule.)
    """

    def __init__(self, solver):
        self.solver = solver
        self.df = getattr(solver, "with_df", None)
        self.early = isinstance(self.df, CompactDF)
        self.early_cycles = 0
        self.cached_mb = 0.0
        if not self.early:
            return
        self.df.k_dtype = np.float32
        self.ni = solver._numint if isinstance(solver._numint, DenseNumInt) else None
        if self.ni is not None:
            self.ni.dtype = np.float32
        self.inner_cb = inner_cb = solver.callback

        self.best_gorb, self.stalled = np.inf, 0

        def callback(env):
            if self.early:
                self.early_cycles += 1
                gorb = env.get("norm_gorb", 1.0)
                # a gradient that stops falling is at float32's noise level: go on in float64
                self.stalled = self.stalled + 1 if gorb >= self.best_gorb else 0
                self.best_gorb = min(self.best_gorb, gorb)
                if gorb < K_FLOAT64_BELOW or self.stalled >= 2:
                    self.finish()
                elif self.ni is not None and not self.ni.cache_mb:
                    # both fitted tensors exist after the first cycle: what memory is left
                    # may keep the float32 AO values on the grid for the cycles to come
                    rss = lib.current_memory()[0]
                    self.ni.cache_mb = max(0.0, solver.max_memory - rss - AO_CACHE_RESERVE_MB)
            if inner_cb:
                inner_cb(env)

        def check(env):
            if self.early:
                return False
            return (abs(env["e_tot"] - env["last_hf_e"]) < env["conv_tol"]
                    and env["norm_gorb"] < env["conv_tol_grad"])

        solver.callback = callback
        solver.check_convergence = check

    def finish(self):
        self.df.k_dtype = np.float64
        if self.ni is not None:
            self.ni.dtype = np.float64
            self.cached_mb = max(self.cached_mb, self.ni.cached_mb)
            self.ni.cache_mb = 0
            self.ni.drop_cache()
        self.early = False

    def describe(self):
        if not hasattr(self, "inner_cb"):
            return ""
        xc = " and XC grid sums" if self.ni is not None else ""
        if self.cached_mb:
            xc += f", float32 AO values kept: {self.cached_mb:.0f} MB"
        return f" ({self.early_cycles} with float32 exchange{xc})"

    def restore(self):
        if not hasattr(self, "inner_cb"):  # nothing was changed
            return
        if self.early:
            self.finish()
        self.solver.callback = self.inner_cb
        self.solver.check_convergence = None


def run_scf(mf, dm0=None, log=None, max_cycle=100, mixed_precision=True):
    """Run an SCF through the fallback ladder; return (mf, step_name, cycles) or raise.

    mixed_precision: float32 exchange until the orbital gradient is below K_FLOAT64_BELOW (only
    for in-core CompactDF tensors)."""
    dm = dm0
    tried = []
    for name, attrs in SCF_LADDER:
        if attrs is None:
            solver = mf.newton()
        else:
            solver = mf
            for k, v in attrs.items():
                setattr(solver, k, v)
        solver.max_cycle = max_cycle
        cycles = []
        solver.callback = lambda env: cycles.append(env.get("cycle"))
        early = _EarlyCycles(solver) if mixed_precision and attrs is not None else None
        try:
            solver.kernel(dm0=dm)
        finally:
            if early is not None:
                early.restore()
        tried.append(name)
        if log:
            mixed = early.describe() if early is not None else ""
            log(f"SCF step '{name}': converged={solver.converged} E={solver.e_tot:.10f} Eh "
                f"after {len(cycles)} cycles{mixed}")
        if solver.converged:
            return solver, name, len(cycles)
        dm = solver.make_rdm1()
    raise EngineError(f"SCF did not converge after the fallback ladder {tried}; try a smaller "
                      "basis, a different charge/multiplicity, or check the geometry for clashes")


def frontier_ev(mf):
    """(HOMO, LUMO) orbital energies in eV (the α spin for open shells)."""
    e = np.asarray(mf.mo_energy)
    occ = np.asarray(mf.mo_occ)
    if e.ndim == 2:
        e, occ = e[0], occ[0]
    homo = e[occ > 0].max()
    lumo = e[occ == 0].min() if np.any(occ == 0) else np.nan
    return homo * HARTREE2EV, lumo * HARTREE2EV


# --------------------------------------------------------------------------------------------
# excited states
# --------------------------------------------------------------------------------------------

def _response_solvent(mf, settings: ExciteSettings):
    """The continuum that responds during a vertical excitation, with the ε we were given."""
    sol = mf.with_solvent.copy()
    sol.equilibrium_solvation = settings.equilibrium
    sol.reset()
    sol.eps = float(settings.eps_static if settings.equilibrium else settings.eps_optical)
    sol.build()
    return sol


def stock_response(mf, settings: ExciteSettings):
    """PySCF's own TDA/TDDFT on a converged ground state, with the ε_optical fix applied."""
    td = mf.TDA() if settings.tda else mf.TDDFT()
    td.nstates = settings.nstates
    td.conv_tol = 1e-7  # energy change (Hartree); PySCF checks residuals at sqrt(conv_tol)
    eps_used = None
    if hasattr(td, "with_solvent"):
        td.with_solvent = _response_solvent(mf, settings)
        eps_used = float(td.with_solvent.eps)
    td.kernel()
    if not all(np.atleast_1d(td.converged)):
        raise EngineError("the response (Davidson) solver did not converge; raise nstates or "
                          "loosen response_tol")
    energies = np.asarray(td.e)
    osc = np.asarray(td.oscillator_strength(gauge="length"))
    tdip = np.asarray(td.transition_dipole())
    pairs = []
    for x, _y in td.xy:
        if isinstance(x, (tuple, list)):  # UKS: (x_alpha, x_beta)
            pairs.append(_dominant_pairs_uks(mf, x))
        else:
            x = np.asarray(x)
            pairs.append(_dominant_pairs(mf, x / np.linalg.norm(x)))
    return energies, osc, tdip, pairs, eps_used


class FastTDA:
    """MO-basis TDA for closed-shell SRSH-PCM (singlet excitations).

    A x = Δε x + 2 (ia|jb) x − [c_SR·(ij|ab) + c_LR·(ij|ab)_LR] x + f_xc x + 2 Vᵀ M V x

    Coulomb and exchange blocks come from density-fitted three-index tensors in the MO basis,
    (pq|rs) ≈ Σ_P B^P_pq B^P_rs; the long-range exchange uses the erf-attenuated tensor. The
    (ab) blocks are kept packed (a ≥ b) in the storage precision of the ground state's fitted
    tensors and unpacked one auxiliary block at a time. The XC kernel is applied in the MO basis
    (:class:`siteshift.xcgrid.MOKernel`) on the SCF grid or a coarser response grid. The PCM
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
        sol = _response_solvent(mf, settings)
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
        for p0, p1 in lib.prange(0, ng, blk):
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

    def matvec(self, xs):
        t0 = time.perf_counter()
        xs = np.asarray(xs).reshape(-1, self.nocc, self.nvir)
        out = xs * self.e_ia
        # Coulomb: 2 (ia|jb) x_jb, two matrix products over B_ov viewed as (naux, o·v)
        bov = self.Bov.reshape(len(self.Bov), -1)
        t = xs.reshape(len(xs), -1) @ bov.T
        coef = 2.0 * t
        if self.W is not None:  # fitted PCM: 2 Vᵀ M V x with V = Wᵀ B
            coef += 2.0 * (((t @ self.W) @ self.M.T) @ self.W.T)
        out += (coef @ bov).reshape(out.shape)
        # exact exchange: c (ij|ab) x_jb = Σ_P Σ_b (Σ_j B_ij x_jb) B_ab, in the precision of the
        # stored B_ab, which is unpacked one auxiliary block at a time into a reused buffer
        for c, Boo, Bvv in ((self.c_sr, self.Boo, self.Bvv),
                            (self.c_lr - self.c_sr, self.Loo, self.Lvv)):
            if c == 0 or Boo is None:
                continue
            out -= c * self._exchange(xs, Boo, Bvv)
        # non-equilibrium PCM: 2 Vᵀ M V x
        if self.V is not None:
            vg = lib.einsum("gia,xia->xg", self.V, xs)
            q = vg @ self.M.T
            out += 2.0 * lib.einsum("gia,xg->xia", self.V, q)
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
    pairs = [_dominant_pairs(mf, x) for x in full]
    if stats is not None:
        stats.update(xs=full, products=solver.n_products, vectors=solver.n_vectors,
                     product_s=solver.product_s, setup_s=solver.setup_s,
                     warm_start=x0 is not None)
    return e, osc, tdip, pairs, solver.pcm_eps


def _dominant_pairs(mf, x, threshold=0.05, top=4):
    """Dominant occupied→virtual pairs of a normalised closed-shell amplitude (weight = x²)."""
    occ = np.asarray(mf.mo_occ)
    nocc = int((occ > 0).sum())
    w = (np.asarray(x) ** 2).reshape(nocc, -1)
    w = w / w.sum()
    idx = np.argsort(w.ravel())[::-1][:top]
    out = []
    homo = nocc - 1
    for k in idx:
        i, a = divmod(int(k), w.shape[1])
        if w.ravel()[k] < threshold:
            break
        out.append({"from": _orb_label(i, homo), "to": _orb_label(nocc + a, homo),
                    "weight": round(float(w.ravel()[k]), 4)})
    return out


def _dominant_pairs_uks(mf, x, threshold=0.05, top=4):
    out = []
    for spin, xs in zip("ab", x):
        occ = np.asarray(mf.mo_occ)[0 if spin == "a" else 1]
        nocc = int((occ > 0).sum())
        w = np.asarray(xs).reshape(nocc, -1) ** 2
        for k in np.argsort(w.ravel())[::-1][:top]:
            i, a = divmod(int(k), w.shape[1])
            out.append((float(w.ravel()[k]), spin, i, nocc + a, nocc - 1))
    total = sum(o[0] for o in out) or 1.0
    out.sort(reverse=True)
    return [{"from": _orb_label(i, h) + s, "to": _orb_label(a, h) + s,
             "weight": round(wt / total, 4)}
            for wt, s, i, a, h in out[:top] if wt / total >= threshold]


def _orb_label(k, homo):
    if k <= homo:
        return "HOMO" if k == homo else f"HOMO-{homo - k}"
    return "LUMO" if k == homo + 1 else f"LUMO+{k - homo - 1}"


def excite(elements, coords_ang, charge=0, spin=0, settings: ExciteSettings | None = None,
           log=None, dm0=None, band_axes=None, bright_threshold=0.01, keep_density=False,
           x0=None, keep_amplitudes=False):
    """One SRSH-PCM excited-state calculation; returns the JSON-ready result dictionary.

    band_axes: optional {"Qy": (i, j), "Qx": (k, l)} atom-index pairs (0-based) whose directions
    name tetrapyrrole bands; without them the lowest state with f ≥ bright_threshold is flagged
    "bright".
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
    mf = make_scf(mol, settings, functional)
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
        e, osc, tdip, pairs, eps_used = stock_response(mf, settings)
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
    assign_bands(states, coords, band_axes, bright_threshold)
    result = {
        "scf_energy_hartree": float(mf.e_tot),
        "converged": bool(mf.converged),
        "scf_step": step,
        "scf_cycles": cycles,
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
        "versions": {"python": platform.python_version(), "pyscf": pyscf.__version__,
                     "numpy": np.__version__},
    }
    if keep_density:
        result["_dm"] = mf.make_rdm1()
    if keep_amplitudes and "xs" in stats:
        result["_xs"] = stats["xs"]
    return result


# --------------------------------------------------------------------------------------------
# optimal tuning of ω (ionization-potential theorem)
# --------------------------------------------------------------------------------------------

def tune_omega(elements, coords_ang, charge=0, spin=0, settings: ExciteSettings | None = None,
               bounds=(0.05, 0.6), xatol=0.01, include_anion=False, log=None):
    """Gas-phase optimal tuning of ω: minimise J²(ω) = Σ_i (ε_HOMO(N+i) + IP(N+i))².

    Stein, Kronik, Baer, JACS 131, 2818 (2009) (i = 0); Stein et al., PRL 105, 266802 (2010)
    (i = 0, 1 with the anion). α is held fixed and α+β = 1 (gas phase). Returns a dictionary with
    the tuned ω (bohr⁻¹), J at the optimum (eV), and every evaluation of the curve.
    """
    from scipy.optimize import minimize_scalar

    settings = settings or ExciteSettings()
    log = log or (lambda s: None)
    mol0 = build_molecule(elements, coords_ang, charge, spin, settings.basis,
                          settings.max_memory_mb)
    mol_c = build_molecule(elements, coords_ang, charge + 1, (spin + 1) if spin == 0 else spin - 1,
                           settings.basis, settings.max_memory_mb)
    mol_a = (build_molecule(elements, coords_ang, charge - 1, spin + 1 if spin == 0 else spin - 1,
                            settings.basis, settings.max_memory_mb) if include_anion else None)
    dms = {}
    curve = []

    def energy(mol, key, omega):
        mf = make_scf(mol, settings, SRSH(settings.alpha, omega, 1.0), solvated=False)
        mf, _, _ = run_scf(mf, dm0=dms.get(key))
        dms[key] = mf.make_rdm1()
        return mf

    def j2(omega):
        t = time.perf_counter()
        n = energy(mol0, "n", omega)
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
    return {
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
