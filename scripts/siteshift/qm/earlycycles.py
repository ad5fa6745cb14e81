"""Float32 exchange and XC grid sums for the early cycles of an SCF (:class:`EarlyCycles`),
used by :func:`siteshift.qm.scf.run_scf`."""
from __future__ import annotations

import numpy as np
from pyscf import lib

from .dfjk import CompactDF
from .xcgrid import DenseNumInt


#: Orbital-gradient norm below which the SCF's exchange goes back to float64 (see
#: :class:`EarlyCycles`). Measured on 4'-hydroxycinnamic acid/def2-SVP, grid 1, fitted PCM:
#: 1e-3 and 1e-4 both take 12 cycles (8 and 10 of them in float32), same energy to 1e-10 Eh,
#: excitations within 2e-6 eV; 3e-5 takes 14.
K_FLOAT64_BELOW = 1e-4
#: A float32 cycle whose |g| is above this fraction of the lowest before it made no progress;
#: two such cycles in a row end the float32 cycles whatever |g| is. Float32's noise floor in
#: |g| grows with the molecule: heme b in IEF-PCM (19HC, 6-31G, 389 AOs) sat at |g| 2.6-2.8e-4
#: for seven float32 cycles (K_FLOAT64_BELOW is never reached there), new minima 1-4 % apart
#: kept the old rule (no new minimum twice) from switching.
EARLY_PROGRESS = 0.8
#: MB left free when the float32 cycles decide whether AO values on the grid can be kept
#: between cycles (from the SCF's max_memory less what the process holds after its first cycle).
AO_CACHE_RESERVE_MB = 1000


def clear_history(diis):
    """Make a PySCF DIIS object (and an ADIIS inside it) forget its vectors: the next
    extrapolation uses only what comes after. PySCF's DIIS has no public reset; its stored
    vectors are overwritten as the bookkeeping starts again from slot 0."""
    for d in (diis, getattr(diis, "_adiis", None)):
        if d is not None:
            d._bookkeep, d._head, d._H, d._xprev, d._err_vec_touched = [], 0, None, None, False


class EarlyCycles:
    """Float32 exchange (and XC grid sums) for the early SCF cycles, float64 from then on.

    Measured on 4'-hydroxycinnamic acid/def2-SVP: float32 exchange is 2.1x faster, and its error
    (max |ΔK| 1e-5 Eh on a matrix of max 9.8, ΔE_K 2.5e-5 Eh) is far below the changes of the
    early cycles but would stop the convergence at about that level. So the exchange switches to
    float64 once the orbital gradient falls below ``K_FLOAT64_BELOW``, and convergence cannot be
    declared before: the converged state is the float64 one, as without the switch. Only a
    :class:`CompactDF` ground state takes part; its :class:`DenseNumInt` grid sums follow the
    same switch. (A coarse XC grid for the same early cycles was
    tried and dropped: grid 0 before grid 1 took 22 cycles instead of 12 on that molecule.)

    on_noise_floor: called when the float32 cycles end on their noise floor rather than below
    K_FLOAT64_BELOW (the SCF's stall watch then starts its count again).
    """

    def __init__(self, solver, on_noise_floor=None):
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
                # a gradient that stops falling is at float32's noise level: go on in float64,
                # with a fresh DIIS history (its float32 Fock matrices hold that noise) and a
                # fresh stall count. Below K_FLOAT64_BELOW the history is kept: clearing it
                # there left water's SCF (STO-3G) at |g| 4.9e-6 instead of 2.8e-6, 5.5e-5 eV
                # off in its excitations
                self.stalled = self.stalled + 1 if gorb > EARLY_PROGRESS * self.best_gorb else 0
                self.best_gorb = min(self.best_gorb, gorb)
                if gorb < K_FLOAT64_BELOW or self.stalled >= 2:
                    self.finish()
                    if gorb >= K_FLOAT64_BELOW:   # ended on the noise floor
                        clear_history(env.get("mf_diis"))
                        if on_noise_floor is not None:
                            on_noise_floor()
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
