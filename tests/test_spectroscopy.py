"""Chiroptical units of the exciton model: rotational strengths against the exciton-chirality
formula evaluated independently in cgs and against PySCF's own supermolecular rotational
strengths, and the band integrals that turn dipole and rotational strengths into ε and Δε."""
import numpy as np
import pytest
from pyscf import dft, tdscf
from scipy import constants as sc

from siteshift.base.units import D2_PER_EPS_BAND, DMUB_PER_D2, DMUB_PER_DEPS_BAND
from siteshift.interactions.couplings import couple
from siteshift.interactions.excitons import (
    exciton_states,
    spectra,
    supermolecular_rotational_strengths,
)
from siteshift.interactions.transitions import site_transitions, transition_moments
from siteshift.qm.excite import excite
from siteshift.qm.scf import build_molecule
from siteshift.qm.settings import ExciteSettings


def _rot_z(deg):
    t = np.radians(deg)
    return np.array([[np.cos(t), -np.sin(t), 0], [np.sin(t), np.cos(t), 0], [0, 0, 1]])


def test_cgs_constants():
    # 1 D² = 1e-36 esu² cm², 1 D·μB = 1e-18 esu cm × 9.2740e-21 erg/G: 1 D² = 107.8 D·μB
    # (REFERENCES.md, "Rotational strength units"); the band integrals D = 9.18e-3 ∫ε/ν̃ dν̃ (D²)
    # and R = 0.248 ∫Δε/ν̃ dν̃ (D·μB) (common practice)
    assert DMUB_PER_D2 == pytest.approx(1e-36 / (1e-18 * 9.2740e-21), rel=1e-4)
    assert DMUB_PER_D2 == pytest.approx(107.8, abs=0.05)
    assert D2_PER_EPS_BAND == pytest.approx(9.18e-3, rel=1e-3)
    assert DMUB_PER_DEPS_BAND == pytest.approx(0.248, rel=2e-3)


def test_rotational_strength_of_the_worked_dimer_in_cgs():
    # two 6.1 D dipoles 10 Å apart along z, 60° apart in the xy plane, degenerate at 1.60 eV,
    # J = 100 cm⁻¹: R = ±(π/λ) ½ R_12·(μ1 × μ2) = ±0.0653 D² = ±7.04 D·μB (REFERENCES.md; the
    # exciton-chirality formula, van Amerongen, Valkunas & van Grondelle 2000, from memory).
    # The same number is evaluated here in cgs from scipy's CODATA constants, independently of
    # the module's own conversion.
    mu = 6.1
    d1 = mu * np.array([1.0, 0.0, 0.0])
    d2 = mu * np.array([np.cos(np.radians(60)), np.sin(np.radians(60)), 0.0])
    r = np.array([[0.0, 0.0, 0.0], [0.0, 0.0, 10.0]])
    st = exciton_states([1.60, 1.60], [[0.0, 100.0], [100.0, 0.0]], [d1, d2], r)
    lam_cm = sc.h * sc.c / (1.60 * sc.e) * 100.0
    debye_esu_cm = 1e-18
    mu_b_cgs = sc.physical_constants["Bohr magneton"][0] * 1e3        # erg/G
    r12 = (r[0] - r[1]) * 1e-8                                        # cm
    r_cgs = np.pi / lam_cm * 0.5 * r12 @ np.cross(d1, d2) * debye_esu_cm ** 2   # esu² cm²
    r_dmub = abs(r_cgs) / (debye_esu_cm * mu_b_cgs)
    R = st["rotational_strength_DmuB"]
    assert np.sort(np.abs(R)) == pytest.approx([r_dmub, r_dmub], rel=1e-6)
    assert r_dmub == pytest.approx(7.04, abs=0.01)
    assert abs(r_cgs) / 1e-36 == pytest.approx(0.0653, abs=2e-4)
    # J > 0: the upper state is the symmetric combination c = (1, 1)/√2, whose R has the sign
    # of ½ (π/λ) (r1 − r2)·(μ1 × μ2)
    assert np.sign(R[1]) == np.sign(r_cgs)


def test_spectra_integrate_back_to_the_strengths():
    # ∫ε/ν̃ dν̃ × 9.186e-3 = Σ D (D²) and ∫Δε/ν̃ dν̃ × 0.2476 = Σ R over one sign's band
    # (common practice band integrals; ∫ f/ν̃ dν̃ = ∫ f/E dE)
    d1 = 6.1 * np.array([1.0, 0.0, 0.0])
    d2 = 6.1 * np.array([0.5, np.sqrt(0.75), 0.0])
    r = [[0.0, 0.0, 0.0], [0.0, 0.0, 10.0]]
    J = [[0.0, 400.0], [400.0, 0.0]]
    grid = np.linspace(1.2, 2.0, 16000)
    sp = spectra([1.6, 1.6], J, [d1, d2], r, homogeneous_fwhm_cm1=150.0, grid=grid)
    st = exciton_states([1.6, 1.6], J, [d1, d2], r)
    e = sp["energy_ev"]
    assert np.trapezoid(sp["epsilon_M1cm1"] / e, e) * D2_PER_EPS_BAND == pytest.approx(
        2 * 6.1 ** 2, rel=1e-4)
    upper = e > 1.6
    band = np.trapezoid(sp["delta_epsilon_M1cm1"][upper] / e[upper], e[upper])
    assert band * DMUB_PER_DEPS_BAND == pytest.approx(st["rotational_strength_DmuB"][1],
                                                      rel=2e-3)
    # BChl-like magnitudes: a 6.1 D band 300 cm⁻¹ wide peaks near 1e5 M⁻¹ cm⁻¹ (measured BChl a
    # Qy ≈ 9e4 M⁻¹ cm⁻¹ in ether, from memory), far from the old units' scale
    mono = spectra([1.6], [[0.0]], [d1], [[0, 0, 0]], homogeneous_fwhm_cm1=300.0, grid=grid)
    assert 5e4 < mono["epsilon_M1cm1"].max() < 2e5


# ethylene, planar in xy with its C=C along x (Å; C=C 1.339, C–H 1.086, HCH 117.6°, an
# approximate experimental geometry, from memory): the π→π* is polarised along C=C
_T = np.radians(121.2 / 2)
ETHYLENE = (["C", "C", "H", "H", "H", "H"],
            np.array([[0.6695, 0, 0], [-0.6695, 0, 0],
                      [0.6695 + 1.086 * np.cos(_T), 1.086 * np.sin(_T), 0],
                      [0.6695 + 1.086 * np.cos(_T), -1.086 * np.sin(_T), 0],
                      [-0.6695 - 1.086 * np.cos(_T), 1.086 * np.sin(_T), 0],
                      [-0.6695 - 1.086 * np.cos(_T), -1.086 * np.sin(_T), 0]]))
SETTINGS = ExciteSettings(basis="6-31g", eps_static=1.0, eps_optical=1.0, nstates=5,
                          omega=0.3, grid_level=1)


def _ethylene_site(coords, name):
    el = ETHYLENE[0]
    res = excite(el, coords, settings=SETTINGS, keep_response=True)
    r = res["_response"]
    mol = build_molecule(el, coords, 0, 0, SETTINGS.basis)
    e = np.array([s["energy_ev"] for s in res["states"]])
    st = site_transitions(mol, r["mo_coeff"], r["mo_occ"], r["xs"], e,
                          [s["band"] for s in res["states"]], name)
    k = int(np.argmax([s["oscillator_strength"] for s in res["states"]]))
    return st, k, transition_moments(mol, r["mo_coeff"], r["mo_occ"], r["xs"], e), \
        {**r, "energies_ev": e}


def test_exciton_cd_matches_pyscf_supermolecular_rotational_strengths():
    # Two ethylenes stacked 5 Å apart along z, the upper one turned 60° about z: a chiral
    # dimer whose π→π* pair carries a CD couplet. Reference: PySCF's own TDA of the whole dimer
    # (same functional, basis and grid), R_k = Im(⟨0|μ̂|k⟩·⟨k|m̂|0⟩) from
    # pyscf.tdscf's transition_dipole / transition_velocity_dipole / transition_magnetic_dipole.
    xa = ETHYLENE[1]
    xb = ETHYLENE[1] @ _rot_z(60).T + [0.0, 0.0, 5.0]
    a, ka, ma, ra = _ethylene_site(xa, "a")
    b, kb, mb, rb = _ethylene_site(xb, "b")
    c = couple(a, b, [ka], [kb], screening="none")[0]
    E = [a.energies_ev[ka], b.energies_ev[kb]]
    mu = np.array([a.dipole_debye(ka), b.dipole_debye(kb)])
    cen = np.array([a.centre_A(ka), b.centre_A(kb)])
    J = c["j_tdc_cm1"]
    model = exciton_states(E, [[0.0, J], [J, 0.0]], mu, cen)

    mol = build_molecule(ETHYLENE[0] * 2, np.vstack([xa, xb]), 0, 0, SETTINGS.basis)
    mf = dft.RKS(mol)
    mf.xc = SETTINGS.functional.xc
    mf.grids.level = SETTINGS.grid_level
    mf.conv_tol = 1e-10
    mf.kernel()
    td = tdscf.TDA(mf)
    td.nstates = 6
    td.conv_tol = 1e-8
    td.kernel()
    m = td.transition_magnetic_dipole()
    r_len = supermolecular_rotational_strengths(td.transition_dipole(), m)
    r_vel = supermolecular_rotational_strengths(
        td.transition_velocity_dipole() / td.e[:, None], m)
    # the project's transition moments from the same amplitudes equal PySCF's (Σ X² = 1 there)
    xs = np.array([x * np.sqrt(2.0) for x, _y in td.xy])
    tm = transition_moments(mol, mf.mo_coeff, mf.mo_occ, xs, td.e * 27.211386245988)
    assert np.allclose(tm["length"], td.transition_dipole(), atol=1e-10)
    assert np.allclose(tm["magnetic"], m, atol=1e-10)
    assert np.allclose(tm["velocity"], td.transition_velocity_dipole() / td.e[:, None],
                       atol=1e-7)
    # the exciton pair: the two brightest dimer states
    f = td.oscillator_strength()
    pair = np.sort(np.argsort(f)[-2:])
    assert td.e[pair] * 27.211386245988 == pytest.approx(model["energies_ev"], abs=0.01)
    # (1) sign: the couplet's signs (lower, upper) agree with the exciton model's
    assert np.sign(r_len[pair]).tolist() == np.sign(model["rotational_strength_DmuB"]).tolist()
    assert np.sign(r_vel[pair]).tolist() == np.sign(model["rotational_strength_DmuB"]).tolist()
    # (2) magnitude: the supermolecule's magnetic moment of a displaced monomer transition is
    # R_j × ⟨0|∇|k⟩_j, i.e. it carries the monomer's velocity-form dipole, which a TDA in a
    # small basis makes 0.37× the length form. The exciton formula with that dipole in the
    # magnetic factor (the exact-state limit is the module's formula, velocity = length)
    # reproduces PySCF's rotational strengths within the dimer's overlap error (measured:
    # 2–6 % length form, 3–11 % velocity form at 5 Å)
    from siteshift.interactions.excitons import rotational_prefactor
    v = np.array([ma["velocity"][ka], mb["velocity"][kb]]) * 2.5417464157449032   # D
    cc = model["coefficients"]
    pref = rotational_prefactor(E) * DMUB_PER_D2
    for electric, reference in ((mu, r_len[pair]), (v, r_vel[pair])):
        general = [pref * sum(cc[i, k] * cc[j, k] * cen[j] @ np.cross(v[j], electric[i])
                              for i in range(2) for j in range(2)) for k in range(2)]
        assert np.abs(reference) == pytest.approx(np.abs(general), rel=0.15)
        assert np.mean(np.abs(reference)) == pytest.approx(np.mean(np.abs(general)), rel=0.08)
    ratio = np.linalg.norm(v[0]) / np.linalg.norm(mu[0])
    assert np.mean(np.abs(r_len[pair])) == pytest.approx(
        ratio * np.abs(model["rotational_strength_DmuB"][0]), rel=0.08)

    # the dimer stage's own report (siteshift's TDA of the pair, analysed by fragments) gives
    # the same couplet as PySCF's TDA
    from siteshift.interactions.dimer import excite_dimer
    out, _res = excite_dimer((ETHYLENE[0], xa, 0), (ETHYLENE[0], xb, 0), SETTINGS, ra, rb, ka,
                             kb, nstates=6)
    ours = [out["states"][i - 1]["rotational_strength_DmuB"] for i in out["pair"]]
    assert ours == pytest.approx(r_len[pair].tolist(), rel=0.02)
