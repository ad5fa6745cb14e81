"""Molecules and SRSH-PCM ground states: building the SCF object, the fallback ladder, and the
float32 early cycles.

- Ground state: Kohn–Sham with the SRSH functional (:mod:`siteshift.qm.functional`) and, when
  ε_static > 1, IEF-PCM (Cancès, Mennucci, Tomasi, JCP 107, 3032 (1997)) or C-PCM with ε_static.
"""
from __future__ import annotations

import time
import warnings

import numpy as np
from pyscf import dft, gto
from pyscf.scf import diis as scf_diis
from pyscf.lib.exceptions import BasisNotFoundError

from ..base.units import HARTREE2EV
from .dfjk import CompactDF
from .earlycycles import EarlyCycles
from .embedding import attach_charges
from .functional import SRSH
from .molecule import check_molecule
from .pcm import FactoredPCM, FittedPCM
from .settings import EngineError, ExciteSettings
from .stability import UNSTABLE_BELOW
from .xcgrid import DenseNumInt

def build_molecule(elements, coords_ang, charge=0, spin=0, basis="def2-svp", max_memory_mb=4000,
                   verbose=0) -> gto.Mole:
    """A PySCF molecule from element symbols and Å coordinates; spin = 2S (unpaired electrons).
    The input is checked first (:func:`check_molecule`)."""
    coords = check_molecule(elements, coords_ang, charge, spin)
    atom = [(str(e).strip().capitalize(), tuple(c)) for e, c in zip(elements, coords)]
    mol = gto.Mole(atom=atom, basis=basis, charge=int(charge), spin=int(spin), unit="Angstrom",
                   max_memory=max_memory_mb, verbose=verbose)
    try:
        with warnings.catch_warnings():   # PySCF's "try basis-set-exchange" hint
            warnings.simplefilter("ignore")
            mol.build()
    except BasisNotFoundError:
        raise EngineError(f"basis {basis!r} is not known to PySCF for these elements "
                          f"({', '.join(sorted(set(a[0] for a in atom)))}); check its spelling "
                          "(e.g. 6-31g, def2-svp, cc-pvdz)") from None
    except RuntimeError as exc:
        raise EngineError(f"PySCF could not build the molecule (charge {charge}, 2S {spin}, "
                          f"basis {basis}): {exc}") from None
    return mol


def _attach_pcm(mf, settings: ExciteSettings, eps: float):
    mf = mf.PCM()
    mf.with_solvent.method = settings.pcm_method.upper()
    mf.with_solvent.eps = float(eps)
    mf.with_solvent.lebedev_order = settings.lebedev_order
    return mf


def make_scf(mol, settings: ExciteSettings, functional: SRSH | None = None, solvated=None,
             charges=None):
    """An (unrun) RKS/UKS object with the SRSH functional, DF and PCM as the settings say, and
    the embedding charges (:class:`siteshift.qm.embedding.PointCharges`) when given."""
    functional = functional or settings.functional
    mf = dft.RKS(mol) if mol.spin == 0 else dft.UKS(mol)
    mf._numint = DenseNumInt()   # dense-BLAS GGA potentials, closed and open shells
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
        if settings.auxbasis is None and not covers(mol, mf.with_df.auxbasis):
            mf.with_df.auxbasis = UNIVERSAL_JKFIT
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
    return attach_charges(mf, charges)


#: JK-fitting basis used when PySCF's automatic choice lacks an element of the molecule (e.g.
#: Fe with a Pople basis): Weigend's universal JK fit, defined for H–Rn (Weigend, JCC 29, 167
#: (2008))
UNIVERSAL_JKFIT = "def2-universal-jkfit"


def covers(mol, auxbasis) -> bool:
    """Whether a fitting basis (a name or per-element dict) is defined for every element of
    mol. PySCF's automatic choice for Pople bases (cc-pVDZ-JKFIT) has no Fe, for instance."""
    import contextlib
    import io

    from pyscf import df
    from pyscf.lib.exceptions import BasisNotFoundError
    try:
        with contextlib.redirect_stdout(io.StringIO()):   # PySCF prints advice on failure
            df.addons.make_auxmol(mol, auxbasis)
        return True
    except (BasisNotFoundError, KeyError, RuntimeError):
        return False


#: Cycles of the damped step before DIIS takes over. PySCF damps the Fock matrix only while
#: cycle < diis_start_cycle − 1 (``pyscf.scf.hf.get_fock``); with its default diis_start_cycle
#: of 1 a ``damp`` setting alone never acts, so the damped step sets both.
DAMPED_CYCLES = 4

#: Commutator error (max |SDF − FDS| element, a.u.) above which :class:`AdiisDiis` takes
#: ADIIS's Fock matrix alone, and below which CDIIS's alone; between them the two are mixed,
#: F = (err/hi) F_ADIIS + (1 − err/hi) F_CDIIS. The rule (0.1 and 1e-4) is Hu & Yang's
#: "ADIIS+DIIS", JCP 132, 054109 (2010) (thresholds from memory).
ADIIS_ABOVE = 0.1
CDIIS_BELOW = 1e-4


def adiis_weight(err, hi=ADIIS_ABOVE, lo=CDIIS_BELOW):
    """The weight of ADIIS's Fock matrix at commutator error err (see :data:`ADIIS_ABOVE`)."""
    if err >= hi:
        return 1.0
    if err <= lo:
        return 0.0
    return float(err / hi)


class AdiisDiis(scf_diis.CDIIS):
    """ADIIS (Hu & Yang, JCP 132, 054109 (2010): the Fock matrices combined to minimise an
    energy model, coefficients ≥ 0) far from convergence, PySCF's CDIIS near it, mixed between
    (:func:`adiis_weight`). Both keep their own history of the same Fock and density matrices.

    Why: an ion's UKS SCF started from the neutral's density. Measured on the cation of
    4'-hydroxycinnamic acid (HC4, CCD ideal coordinates, STO-3G, grid 0, IEF-PCM ε 4, ω 0.22,
    2 threads; the neutral 11 cycles, 4.3 s): CDIIS stalls (|g| ~ 2e-2) and the ladder went on
    to the damped and second-order steps, 47 cycles and 57 s; CDIIS with 14 vectors converged
    in 28 cycles to another cation state 8.5 mEh higher; level shift 0.2 Eh, maximum-overlap
    occupations, EDIIS and pure ADIIS either did not converge in 80 cycles or took 52 (ADIIS,
    29 s); ADIIS+DIIS: 22 cycles, 16.4 s, the second-order solver's state (−565.309283 Eh,
    ⟨S²⟩ 0.775, to 1e-8 Eh).
    """

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self._adiis = scf_diis.ADIIS(*args, **kwargs)
        self.last_error = None

    def update(self, s, d, f, *args, **kwargs):
        self._adiis.space = self.space
        f_a = self._adiis.update(s, d, f, *args, **kwargs)
        f_c = super().update(s, d, f, *args, **kwargs)
        self.last_error = err = float(np.abs(scf_diis.get_err_vec_orig(s, d, f)).max())
        w = adiis_weight(err)
        return f_a if w == 1.0 else f_c if w == 0.0 else w * f_a + (1.0 - w) * f_c


#: The SCF fallback ladder: each step is tried from the previous step's density. The second
#: step damps its first DAMPED_CYCLES Fock matrices (F ← (1 − d) F + d F_previous) and shifts
#: the virtual levels by 0.5 Eh throughout, then extrapolates with DIIS.
SCF_LADDER = (
    ("diis", {"DIIS": scf_diis.CDIIS}),
    ("level_shift+damping", {"level_shift": 0.5, "damp": 0.3,
                             "diis_start_cycle": DAMPED_CYCLES + 1, "DIIS": scf_diis.CDIIS}),
    ("second_order", None),
)

#: Open shells without a d-block metal (ions, radicals, triplets) start with ADIIS+DIIS
#: (:class:`AdiisDiis`, the cation measurement there), then the damped step and second order.
SCF_LADDER_OPEN = (("adiis+diis", {"DIIS": AdiisDiis}),) + SCF_LADDER[1:]

#: d-block metals start with the second-order (Newton) step. Heme b + 2 His (19HC, STO-3G, PBE,
#: grid 0): from minao DIIS wandered 7-10 Eh above the minimum (|g| 3.6-4.4, 20 cycles; Fermi
#: smearing, finer grid, level shift + damping did not help); second order went down
#: monotonically to |g| 1.4e-3 in 15 iterations (E −3134.2162 Eh; 27-43 s each).
#: ADIIS+DIIS first was tried (records/heme_scf.tsv, README): 5x faster, but it ends on other
#: SCF solutions (heme 6-31G 14.9 mEh, Fe–C–O 3.7 mEh above the second-order one).
#: The second-order step hands on to CDIIS (fresh history) once |g| < METAL_HANDOVER_BELOW:
#: heme alone (19HC, 6-31G, SRSH gas, 389 AOs): second order reached |g| 1.2e-3 in 8
#: iterations (30 min), its 9th took 474 s; CDIIS from there converged in 28 cycles (3.6 min)
#: to the same solution (2e-8 Eh). DIIS may crawl instead (Fe–C–O, STO-3G: |g| 2e-4, 0.2 mEh
#: above), so it stalls out down to METAL_DIIS_STALL_ABOVE and second order finishes.
METAL_HANDOVER_BELOW = 2e-3
METAL_DIIS_STALL_ABOVE = 1e-5
D_BLOCK = {"Sc", "Ti", "V", "Cr", "Mn", "Fe", "Co", "Ni", "Cu", "Zn", "Ru", "Rh", "Pd", "Ag",
           "Os", "Ir", "Pt", "Au"}
SCF_LADDER_METAL = (("second_order", {"leave_below": METAL_HANDOVER_BELOW}),
                    ("diis", {"DIIS": scf_diis.CDIIS, "after_handover": True,
                              "stall_above": METAL_DIIS_STALL_ABOVE}),
                    ("second_order", None), SCF_LADDER[1])
#: A metal SCF started from a given density (a converged density of the same model in
#: another environment: gas phase → continuum, another ω, the charges added) starts with CDIIS
#: (stalling out down to METAL_DIIS_STALL_ABOVE), then second order. Heme alone (19HC, 6-31G,
#: SRSH, IEF-PCM ε 4) from its converged gas-phase density: |g| 2.7e-3 at the start; second
#: order took 295 s and 350 s for its first two iterations, and |g| rose to 4.7e-3 in them.
SCF_LADDER_METAL_WARM = (("diis", {"DIIS": scf_diis.CDIIS,
                                    "stall_above": METAL_DIIS_STALL_ABOVE}),
                         ("second_order", None), SCF_LADDER[1])


def ladder_for(mol, warm=False):
    """The fallback ladder for a molecule: second order first (DIIS once inside the basin, then
    second order again if DIIS crawls) when it holds a d-block metal, DIIS first (then second
    order) if such a molecule starts from a given density (warm), else ADIIS+DIIS first for an
    open shell, else DIIS."""
    if _elements(mol) & D_BLOCK:
        return SCF_LADDER_METAL_WARM if warm else SCF_LADDER_METAL
    return SCF_LADDER_OPEN if mol.spin else SCF_LADDER


#: A DIIS or damped step whose orbital gradient stops falling is left for the next step of the
#: ladder from its current density, rather than running to max_cycle: after at least
#: ``STALL_MIN_CYCLES`` cycles, if the best |g| of the last ``STALL_WINDOW`` cycles is not below
#: ``STALL_RATIO`` times the best before them (and still above ``STALL_ABOVE``, so float32
#: noise near convergence never counts). A ladder step with a ``leave_below`` entry is also
#: left once |g| falls below it, its density handed on; a step marked ``after_handover`` runs
#: only after such a hand-over, and a ``stall_above`` entry sets a step's own floor
#: (:data:`METAL_HANDOVER_BELOW`). Heme b (6-31G): DIIS sat at |g| ~ 3 for 100 cycles. The
#: count starts again when the early float32 cycles end (:mod:`siteshift.qm.earlycycles`).
STALL_MIN_CYCLES = 20
STALL_WINDOW = 10
STALL_RATIO = 0.5
STALL_ABOVE = 1e-3


class _Stalled(Exception):
    """Raised from an SCF callback to leave a step that stopped converging."""

    def __init__(self, gorb):
        super().__init__(f"orbital gradient stalled at {gorb:.2e}")
        self.gorb = gorb


class _HandedOn(Exception):
    """Raised from an SCF callback to leave a step whose work is done: |g| below its step's
    ``leave_below``; the next step (marked ``after_handover``) takes over."""

    def __init__(self, gorb, below):
        super().__init__(f"orbital gradient {gorb:.2e} below {below:.0e}, handed on")
        self.gorb = gorb


class _StallWatch:
    """An SCF callback appending each cycle's |g| to history, keeping the density of the
    lowest |g| seen (``best_dm``, cycle ``best_cycle``), and raising :class:`_Stalled` when the
    step stopped converging (see ``STALL_MIN_CYCLES``), :class:`_HandedOn` below ``leave_below``.

    A step left unconverged hands its best density on, not its last (a wandering DIIS on heme
    b ended at |g| 3.6 after passing 0.12). In the second-order step |g| is taken before an
    iteration's rotation and the density after it (one iteration past the lowest |g|)."""

    def __init__(self, history, stall=True, leave_below=None, above=STALL_ABOVE):
        self.history, self.stall, self.leave_below = history, stall, leave_below
        self.above, self.since = above, 0   # since: the cycle the stall rule counts from
        self.best_g, self.best_dm, self.best_cycle = np.inf, None, 0
        self._anew = False

    def count_anew(self):
        """Start the stall count again after the current cycle (the float32 cycles ended on
        their noise floor: float64 DIIS gets a count of its own)."""
        self._anew = True

    def __call__(self, env):
        g = float(env.get("norm_gorb", np.inf))
        self.history.append(g)
        n = len(self.history)
        if g < self.best_g and env.get("dm") is not None:
            # PySCF's cycle makes a new density array each cycle: keeping the reference is safe
            self.best_g, self.best_dm, self.best_cycle = g, env["dm"], n
        if self._anew:
            self.since, self._anew = n, False
        if self.leave_below is not None and g < self.leave_below:
            raise _HandedOn(g, self.leave_below)
        counted = self.history[self.since:]
        if self.stall and len(counted) >= STALL_MIN_CYCLES and g > self.above:
            before = min(counted[:-STALL_WINDOW])
            recent = min(counted[-STALL_WINDOW:])
            if recent > STALL_RATIO * before:
                raise _Stalled(recent)

    def hand_on(self, solver):
        """The density the next step starts from: the best cycle's, else the solver's."""
        return self.best_dm if self.best_dm is not None else solver.make_rdm1()


def _with_progress(callback, log, step, cycles):
    """Wrap an SCF callback so each cycle's energy, |g| and time reach the log (a large
    pigment's cycle takes minutes: the log must show the job is moving)."""
    if log is None:
        return callback
    t = [time.perf_counter()]

    def wrapped(env):
        try:
            callback(env)
        finally:
            now = time.perf_counter()
            g = env.get("norm_gorb")
            log(f"SCF step '{step}' cycle {len(cycles)}: E={env.get('e_tot', float('nan')):.10f}"
                f" Eh, |g|={float(g) if g is not None else float('nan'):.2e}, "
                f"{now - t[0]:.1f} s")
            t[0] = now
    return wrapped


#: Restarts along an instability (:mod:`siteshift.qm.stability`) a metal SCF may take (Fe–C–O
#: needed two, see :func:`run_scf`).
MAX_STABILITY_RESTARTS = 2


def run_scf(mf, dm0=None, log=None, max_cycle=100, mixed_precision=True, stability=None):
    """Run an SCF through the fallback ladder (:func:`ladder`), and for a molecule with a
    d-block metal (or with stability=True) check that the solution is a minimum: while the
    orbital Hessian has a negative eigenvalue, go on with the second-order step from the
    orbitals rotated along it (at most MAX_STABILITY_RESTARTS times), and keep the lowest
    solution. Fe–C–O (STO-3G): the ADIIS+DIIS solution −1361.237395 Eh has λ −0.066 Eh; two
    restarts reach −1361.241137 (λ −3e-4), then −1361.241434 (λ +9e-4), the second-order
    solver's own from minao. Return
    (mf, step_name, cycles); the check is recorded as ``mf.stability`` (a dict, or None when
    not run)."""
    log_ = log or (lambda _m: None)
    base = mf
    plain = {k: getattr(base, k) for k in _STEP_ATTRS}   # the ladder's steps set these
    mf, step, total = ladder(mf, dm0, log, max_cycle, mixed_precision)
    mf.stability = None
    if stability is False or (stability is None and not (_elements(mf.mol) & D_BLOCK)):
        return mf, step, total
    from .stability import lowest_hessian_eigenvalue
    t = time.perf_counter()
    info = {}
    lam, mo = lowest_hessian_eigenvalue(mf, log=log, info=info)
    record = {"lowest_hessian_eigenvalue_eh": lam, "restarts": 0,
              "energies_eh": [float(mf.e_tot)], **info}
    log_(f"SCF stability: lowest orbital-Hessian eigenvalue {lam:.2e} Eh "
         f"({'a saddle point' if mo is not None else 'a minimum'}), "
         f"{time.perf_counter() - t:.1f} s")
    best = (mf, step)
    while mo is not None and record["restarts"] < MAX_STABILITY_RESTARTS:
        record["restarts"] += 1
        for k, v in plain.items():
            setattr(base, k, v)
        mf, step, n = _downhill(base.copy(), mo, mf.mo_occ, log, max_cycle, mixed_precision)
        total += n
        record["energies_eh"].append(float(mf.e_tot))
        lam, mo = lowest_hessian_eigenvalue(mf, log=log)
        log_(f"SCF stability, restart {record['restarts']}: E={mf.e_tot:.10f} Eh, lowest "
             f"eigenvalue {lam:.2e} Eh")
        if mf.e_tot < best[0].e_tot:
            best = (mf, step)
            record["lowest_hessian_eigenvalue_eh"] = lam
    mf, step = best
    record["stable"] = bool(record["lowest_hessian_eigenvalue_eh"] >= UNSTABLE_BELOW)
    if not record["stable"]:
        log_(f"warning: the SCF solution kept (E={mf.e_tot:.10f} Eh) is still a saddle point "
             f"after {record['restarts']} restarts (eigenvalue "
             f"{record['lowest_hessian_eigenvalue_eh']:.2e} Eh); recorded in scf_stability")
    mf.stability = record
    return mf, step, total


_STEP_ATTRS = ("DIIS", "level_shift", "damp", "diis_start_cycle")


def _downhill(mf, mo_coeff, mo_occ, log, max_cycle, mixed_precision):
    """The second-order step from orbitals rotated off a saddle point (a minimiser: DIIS, a
    fixed-point method, went back to the saddle on Fe–C–O), then the ladder if it fails."""
    solver = _second_order(mf, log)
    solver.max_cycle = max_cycle
    cycles = []
    solver.callback = _with_progress(lambda env: cycles.append(env.get("norm_gorb")), log,
                                     "second_order (off the saddle)", cycles)
    solver.kernel(mo_coeff=mo_coeff, mo_occ=mo_occ)
    if solver.converged:
        return solver, "second_order", len(cycles)
    out, step, n = ladder(mf, solver.make_rdm1(), log, max_cycle, mixed_precision)
    return out, step, n + len(cycles)


def _second_order(mf, log=None):
    """PySCF's second-order solver, with MO-basis Hessian products where they apply
    (:func:`siteshift.qm.stability.use_mo_hessian`)."""
    from .stability import use_mo_hessian
    solver = mf.newton()
    use_mo_hessian(solver, log)
    return solver


def _elements(mol):
    return {mol.atom_pure_symbol(i) for i in range(mol.natm)}


def ladder(mf, dm0=None, log=None, max_cycle=100, mixed_precision=True):
    """Run an SCF through the fallback ladder; return (mf, step_name, cycles) or raise; cycles
    counts every step's (macro) cycles, those of the steps left unconverged included.

    dm0: a start density (a molecule with a d-block metal then starts with DIIS, see
    :data:`SCF_LADDER_METAL_WARM`). mixed_precision: float32 exchange until the orbital gradient
    is below K_FLOAT64_BELOW (only for in-core CompactDF tensors)."""
    dm = dm0
    tried = []
    total = 0    # cycles of every step tried: a stalled DIIS's cycles cost as much as any
    ladder = ladder_for(mf.mol, warm=dm0 is not None)
    handed_over = False   # the step before was left below its leave_below
    for name, attrs in ladder:
        attrs = dict(attrs or {})
        leave_below = attrs.pop("leave_below", None)
        stall_above = attrs.pop("stall_above", STALL_ABOVE)
        if attrs.pop("after_handover", False) and not handed_over:
            continue
        newton = name == "second_order"
        if newton:
            solver = _second_order(mf, log)
        else:
            solver = mf
            for k, v in attrs.items():
                setattr(solver, k, v)
        solver.max_cycle = max_cycle
        cycles = []
        last = newton or name == ladder[-1][0]   # a second-order step never stalls out
        watch = _StallWatch(cycles, stall=not last, leave_below=leave_below, above=stall_above)
        solver.callback = _with_progress(watch, log, name, cycles)
        early = (EarlyCycles(solver, on_noise_floor=watch.count_anew)
                 if mixed_precision and not newton else None)
        stalled = None
        try:
            solver.kernel(dm0=dm)
        except (_Stalled, _HandedOn) as exc:
            stalled = exc
            solver.converged = False
        finally:
            if early is not None:
                early.restore()
        tried.append(name)
        total += len(cycles)
        if log:
            mixed = early.describe() if early is not None else ""
            why = f", left early: {stalled}" if stalled else ""
            energy = f" E={solver.e_tot:.10f} Eh" if not stalled else ""
            handed = ""
            if not solver.converged and watch.best_dm is not None:
                handed = (f"; the next step starts from cycle {watch.best_cycle}'s density "
                          f"(the lowest |g|, {watch.best_g:.2e})")
            log(f"SCF step '{name}': converged={solver.converged}{energy} "
                f"after {len(cycles)} cycles{mixed}{why}{handed}")
        if solver.converged:
            return solver, name, total
        dm = watch.hand_on(solver)
        handed_over = isinstance(stalled, _HandedOn)
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
