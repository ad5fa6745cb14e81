"""Settings of one SRSH-PCM calculation, the engine's error type and thread set-up."""
from __future__ import annotations

from dataclasses import dataclass

from pyscf import lib

from ..base.defaults import DEFAULT_NSTATES, FALLBACK_OMEGA, default, preset
from .functional import SRSH

_QM = default("qm")
_FULL = preset("full")
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

    # defaults: the study config's schema and the "full" preset (siteshift.base.defaults)
    alpha: float = _QM["alpha"]
    omega: float = FALLBACK_OMEGA        # bohr⁻¹
    eps_static: float = 1.0              # ground-state continuum (1 = gas phase)
    eps_optical: float = 1.0             # fast (electronic) continuum for vertical excitations
    screen: str = _QM["screen"]          # which ε sets α+β = 1/ε: "static" or "optical"
    basis: str = _FULL["basis"]
    auxbasis: str | None = _QM["auxbasis"]   # None: PySCF's automatic JK-fitting basis
    density_fitting: bool = _QM["density_fitting"]
    grid_level: int = _FULL["grid_level"]
    pcm_method: str = _QM["pcm_method"]
    lebedev_order: int = _FULL["lebedev_order"]   # surface points per atom sphere: 17 → 110
    nstates: int = DEFAULT_NSTATES
    tda: bool = _QM["tda"]
    equilibrium: bool = _QM["equilibrium"]   # equilibrium solvation of the excitations (ε_static)
    solver: str = _QM["solver"]          # "fast" (MO-basis TDA) or "stock" (PySCF TDA/TDDFT)
    conv_tol: float = 1e-9               # SCF energy, Hartree
    # Davidson residual norm: the stock path's (PySCF's TDA stops at sqrt(conv_tol), 3.2e-4 as
    # siteshift runs it; 3e-3 by PySCF's default). Measured on 4'-hydroxycinnamic acid/def2-SVP,
    # grid 1, float32 tensors, fitted PCM, frozen core, 4 states, against 1e-6 (11 products):
    # 3e-4 moves E by 0.0016 meV and f by 3e-5 in 7 products; 1e-4 0.0016 meV, 6e-6, 8 products;
    # 1e-3 0.0019 meV, 3e-5, 6 products (scripts/benchmarks/records/davidson_tolerance.tsv).
    # The 0.0016 meV, the same at every tolerance, is of the size of the float32 (vv) exchange's
    # rounding.
    response_tol: float = _QM["response_tol"]
    max_memory_mb: int = _QM["max_memory_mb"]
    df_storage: str = _QM["df_storage"]  # fitted tensors in memory: "float32", "float64", "pyscf"
    df_pair_tol: float = _QM["df_pair_tol"]  # Schwarz bound of the AO pairs kept (0: all)
    response_grid_level: int | None = _QM["response_grid_level"]  # fast TDA XC grid (None: SCF's)
    occ_window_ev: float | None = _QM["occ_window_ev"]  # fast TDA: occupied within this of HOMO
    vir_window_ev: float | None = _QM["vir_window_ev"]  # fast TDA: virtual within this of LUMO
    pcm_fit: bool = _QM["pcm_fit"]       # PCM potentials from the fitted density (in-core DF)

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
