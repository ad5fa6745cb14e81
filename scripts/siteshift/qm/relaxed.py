"""Relaxed excited-minus-ground difference density of a closed-shell TDA state (Z-vector).

The first-order change of an excitation energy under a one-electron perturbation h' is
Tr(P h'), with P the *relaxed* difference density: the unrelaxed part T (T_ab = Σ_i x_ia x_ib,
T_ij = −Σ_a x_ia x_ja) plus the orbital relaxation Z, which solves the ground-state
coupled-perturbed Kohn–Sham equations with the orbital derivative of the excitation energy as
right-hand side (Furche & Ahlrichs, JCP 117, 7433 (2002); the TDA case of the adiabatic TDDFT
Lagrangian). The unrelaxed T alone overestimates the response to a field: measured on
formaldehyde/6-31G (n→π*, π→π*), first-order shifts from T were 2–3× the finite shifts of a
0.1 e charge 8–100 Å away; with P they agree within 0.3 % (gas phase and PCM).

With a continuum, the Fock matrix holds the ground state's equilibrium reaction field (ε_static)
and the excitation kernel its fast part (ε_optical; nonequilibrium linear response): the
response of the Fock matrix to T and the coupled-perturbed equations include the ε_static
reaction field, the kernel terms the ε_optical one. The XC third derivative enters as a central
difference of PySCF's public second-derivative contraction (``nr_rks_fxc``) along the transition
density.

The coupled-perturbed equations' products, (A + B − Δε) z, are taken in the MO basis from the
fitted MO tensors where :class:`siteshift.qm.stability.MOHessian` applies (closed-shell GGA-type
KS with fitted tensors), else from PySCF's AO-basis response (``mf.gen_response``). On heme b
(19HC, 389 AOs, IEF-PCM) the AO route had not ended after 17 min: each product built Coulomb,
exchange and PCM surface integrals in the AO basis from densities of rank 2·n_occ.

Conventions follow PySCF's TDA gradient code (amplitudes x/√2 for each spin), so that P here is
the density whose trace with a one-electron operator gives the energy derivative.
"""
from __future__ import annotations

import numpy as np
from pyscf.scf import cphf

from .pcm import response_solvent
from .settings import EngineError, ExciteSettings

#: relative step of the central difference that gives the XC third derivative
KXC_STEP = 1e-4


def _fxc(mf, dm0, dm1):
    """∫ f_xc[ρ(dm0)] ρ(dm1) φ_μ φ_ν (spin-restricted kernel, symmetric dm1)."""
    ni = mf._numint
    return ni.nr_rks_fxc(mf.mol, mf.grids, mf.xc, dm0, dm1, hermi=1,
                         max_memory=mf.max_memory)


def xc_kernel_terms(mf, dm0, d_vo, d_oo, step=KXC_STEP):
    """(f1vo, f1oo, k1ao) of the TDA Lagrangian: f_xc applied to d_vo and to d_oo, and the
    third derivative applied twice to d_vo (central difference of f_xc along d_vo)."""
    f1vo = _fxc(mf, dm0, d_vo)
    f1oo = _fxc(mf, dm0, d_oo)
    h = step
    k1ao = (_fxc(mf, dm0 + h * d_vo, d_vo) - _fxc(mf, dm0 - h * d_vo, d_vo)) / (2 * h)
    return f1vo, f1oo, k1ao


def relaxed_difference_density(mf, x, settings: ExciteSettings | None = None, tol=1e-5,
                               max_cycle=50, step=KXC_STEP, route="auto", log=None):
    """Relaxed difference density (AO, symmetric) of one closed-shell singlet TDA state; see
    :func:`relaxed_difference_densities`."""
    return relaxed_difference_densities(mf, [x], settings, tol, max_cycle, step, route,
                                        log)[0]


def relaxed_difference_densities(mf, xs, settings: ExciteSettings | None = None, tol=1e-5,
                                 max_cycle=50, step=KXC_STEP, route="auto", log=None):
    """Relaxed difference densities (AO, symmetric) of closed-shell singlet TDA states.

    mf: the converged ground state the response was solved on; xs: the states' amplitudes over
    all occupied × virtual pairs, each normalised Σ x² = 1 (as siteshift's fast path returns
    them). settings: to rebuild the response continuum (ε_optical, or ε_static for
    equilibrium). The states' Z-vector equations are solved together (one block Krylov solve,
    one stacked response per iteration). tol: the Krylov residual; measured on the demo
    chromophore (6-31G), tol 1e-4 to 1e-8 gave first-order shifts within 1e-7 meV of each
    other in 15–20 iterations. route: "mo" takes the coupled-perturbed products in the MO
    basis (:class:`siteshift.qm.stability.MOHessian`), "ao" from PySCF's AO-basis response,
    "auto" the MO basis where it applies. log: progress (the right-hand side's parts and each
    Krylov product's time).
    """
    import time
    log = log or (lambda s: None)
    if route not in ("auto", "mo", "ao"):
        raise ValueError(f"relaxed density route {route!r}: use 'auto', 'mo' or 'ao'")
    mol = mf.mol
    if mol.spin != 0:
        raise EngineError("relaxed difference densities are built for closed shells only")
    ni = mf._numint
    if ni._xc_type(mf.xc) not in ("LDA", "GGA", "HF"):
        raise EngineError(f"relaxed difference density: functional type of {mf.xc!r} not "
                          "supported (LDA/GGA hybrids only)")
    C = np.asarray(mf.mo_coeff)
    e = np.asarray(mf.mo_energy)
    occ = np.asarray(mf.mo_occ)
    orbo, orbv = C[:, occ > 0], C[:, occ == 0]
    nocc, nvir = orbo.shape[1], orbv.shape[1]
    dm0 = mf.make_rdm1()
    omega, c_lr, c_sr = ni.rsh_and_hybrid_coeff(mf.xc, mol.spin)
    solvent = getattr(mf, "with_solvent", None)
    fast = None
    if solvent is not None:
        fast = response_solvent(mf, settings or ExciteSettings(
            eps_static=solvent.eps, eps_optical=solvent.eps))
    per_state, dms = [], []
    for x in xs:
        xp = (np.asarray(x).reshape(nocc, nvir) / np.sqrt(2.0)).T      # (nvir, nocc), PySCF's
        dmx = orbv @ xp @ orbo.T
        T = orbo @ (-2.0 * xp.T @ xp) @ orbo.T + orbv @ (2.0 * xp @ xp.T) @ orbv.T
        per_state.append((xp, dmx, T))
        dms += [T, dmx + dmx.T, dmx - dmx.T]
    dms = np.asarray(dms)
    t0 = time.perf_counter()
    vj, vk = mf.get_jk(mol, dms, hermi=0)
    vk = vk * c_sr
    if omega != 0 and abs(c_lr - c_sr) > 0:
        vk = vk + mf.get_k(mol, dms, hermi=0, omega=omega) * (c_lr - c_sr)
    log(f"relaxed densities: Coulomb and exchange of {len(dms)} densities "
        f"{time.perf_counter() - t0:.1f} s")
    t0 = time.perf_counter()
    wvos = []
    for k, (xp, dmx, T) in enumerate(per_state):
        j = slice(3 * k, 3 * k + 3)
        vjk, vkk = vj[j], vk[j]
        d_vo = dmx + dmx.T
        f1vo, f1oo, k1ao = xc_kernel_terms(mf, dm0, d_vo, 2.0 * T, step)
        v_doo = 2.0 * vjk[0] - vkk[0] + f1oo + 2.0 * k1ao
        v_kern = 2.0 * vjk[1] - vkk[1] + 2.0 * f1vo
        if solvent is not None:
            # the Fock matrix's reaction field (ε_static) answers the density change (2T in
            # this convention, as the 2 J[T] beside it); the kernel's (ε_optical, or ε_static
            # for equilibrium excitations) answers the transition density, doubled as J is.
            # Measured on formaldehyde/6-31G at ε 4/2, a 0.02 e charge 8 Å away: first order /
            # finite shift 0.9989 and 0.9996 (with B(T) instead of B(2T): 0.82 and 0.88)
            v_doo = v_doo + 2.0 * solvent._B_dot_x(T)
            v_kern = v_kern + 2.0 * fast._B_dot_x(d_vo)
        wvo = 2.0 * orbv.T @ v_doo @ orbo
        vp = C.T @ v_kern @ C
        wvo -= 2.0 * xp @ vp[:nocc, :nocc].T
        wvo += 2.0 * vp[nocc:, nocc:].T @ xp
        vm = C.T @ (-vkk[2]) @ C
        wvo -= 2.0 * xp @ vm[:nocc, :nocc].T
        wvo += 2.0 * vm[nocc:, nocc:].T @ xp
        wvos.append(wvo)
    log(f"relaxed densities: XC kernel terms of {len(per_state)} states "
        f"{time.perf_counter() - t0:.1f} s")

    t0 = time.perf_counter()
    products = _coupling_products(mf, route, log)
    count = [0]

    def fvind(z):
        t = time.perf_counter()
        out = products(z.reshape(-1, nvir, nocc))
        count[0] += 1
        log(f"Z-vector product {count[0]}: {len(out)} vectors, {time.perf_counter() - t:.1f} s")
        return out.reshape(len(out), -1)

    z, _ = cphf.solve(fvind, e, occ, np.asarray(wvos), max_cycle=max_cycle, tol=tol)
    log(f"Z-vector: {count[0]} products, {time.perf_counter() - t0:.1f} s")
    out = []
    for (_xp, _dmx, T), zk in zip(per_state, z.reshape(-1, nvir, nocc)):
        zao = orbv @ zk @ orbo.T
        out.append(T + 0.5 * (zao + zao.T))
    return out


def _coupling_products(mf, route, log):
    """z ↦ (A + B − Δε) z over (n, n_vir, n_occ) trial vectors: the ground state's response
    to the symmetric density 2 C_v z C_oᵀ + transpose (Coulomb, exchange, XC and the
    continuum's equilibrium reaction field), projected on the virtual–occupied block."""
    from .dfjk import all_blas_threads
    from .stability import MOHessian
    sol = getattr(mf, "with_solvent", None)
    frozen = sol is not None and getattr(sol, "frozen", False)
    if route == "mo" or (route == "auto" and MOHessian.applies(mf) and not frozen):
        if frozen:
            raise EngineError("relaxed density route 'mo': a frozen reaction field is not "
                              "supported there; use route='ao'")
        with all_blas_threads():
            h = MOHessian(mf, continuum_response=True, log=log)

        def mo_products(z):
            x = z.transpose(0, 2, 1)
            with all_blas_threads():
                out = h.apb(x) - x * h.e_ia
            return out.transpose(0, 2, 1)
        return mo_products
    C = np.asarray(mf.mo_coeff)
    occ = np.asarray(mf.mo_occ)
    orbo, orbv = C[:, occ > 0], C[:, occ == 0]
    vresp = _ground_response(mf)

    def ao_products(z):
        d = np.asarray([orbv @ (zk * 2.0) @ orbo.T for zk in z])
        v = vresp(d + d.transpose(0, 2, 1))
        return np.asarray([orbv.T @ vk_ @ orbo for vk_ in v])
    return ao_products


def _ground_response(mf):
    """The ground state's density response (Coulomb, exchange, XC and, with a continuum, its
    equilibrium ε_static reaction field: the SCF's reaction field relaxes with the density)."""
    solvent = getattr(mf, "with_solvent", None)
    if solvent is None:
        return mf.gen_response(singlet=None, hermi=1)
    gas = mf.undo_solvent().gen_response(singlet=None, hermi=1)

    def vresp(dm1):
        return gas(dm1) + solvent._B_dot_x(dm1)
    return vresp
