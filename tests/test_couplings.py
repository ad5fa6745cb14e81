"""Excitonic couplings (three routes), exciton states and spectra, and the supermolecular dimer,
checked against the point-dipole law, PySCF's exact four-centre integrals and textbook exciton
theory."""
import numpy as np
import pytest
from pyscf.scf import jk
from siteshift.base.units import EV2CM1
from siteshift.interactions.couplings import (
    DIPOLE_CM1,
    HARTREE2CM1,
    couple,
    orientation,
    screening_factor,
)
from siteshift.interactions.dimer import excite_dimer, model_pair
from siteshift.interactions.excitons import exciton_states, spectra
from siteshift.interactions.transitions import (
    SiteTransitions,
    site_transitions,
    transition_densities,
)
from siteshift.qm.excite import excite
from siteshift.qm.scf import build_molecule
from siteshift.qm.settings import ExciteSettings

# s-trans-1,3-butadiene, planar in xy (Å; an approximate geometry, bond lengths 1.33/1.38/1.08–
# 1.10 Å): its lowest bright state is the π→π* along the long axis
BUTADIENE = (["C", "C", "C", "C", "H", "H", "H", "H", "H", "H"],
             np.array([[-1.84, -0.42, 0], [-0.66, 0.20, 0], [0.66, -0.20, 0], [1.84, 0.42, 0],
                       [-2.78, 0.12, 0], [-1.90, -1.50, 0], [-0.60, 1.29, 0],
                       [2.78, -0.12, 0], [1.90, 1.50, 0], [0.60, -1.29, 0]]))
SETTINGS = ExciteSettings(basis="6-31g", eps_static=1.0, eps_optical=1.0, nstates=3,
                          omega=0.3, grid_level=1)


def _rot_z(deg):
    t = np.radians(deg)
    return np.array([[np.cos(t), -np.sin(t), 0], [np.sin(t), np.cos(t), 0], [0, 0, 1]])


def _site(coords, name):
    el = BUTADIENE[0]
    res = excite(el, coords, settings=SETTINGS, keep_response=True)
    r = res["_response"]
    mol = build_molecule(el, coords, 0, 0, SETTINGS.basis)
    e = [s["energy_ev"] for s in res["states"]]
    st = site_transitions(mol, r["mo_coeff"], r["mo_occ"], r["xs"], e,
                          [s["band"] for s in res["states"]], name)
    bright = int(np.argmax([s["oscillator_strength"] for s in res["states"]]))
    return st, mol, {**r, "energies_ev": np.array(e)}, bright


@pytest.fixture(scope="module")
def monomer():
    return _site(BUTADIENE[1], "a")


@pytest.fixture(scope="module")
def rotated():
    # the same molecule turned 90° about z: its in-plane transition dipole turns with it
    return _site(BUTADIENE[1] @ _rot_z(90).T, "r")


def _moved(st: SiteTransitions, shift):
    """A copy of a site translated rigidly (fitted coefficients and charges are unchanged by a
    translation)."""
    return SiteTransitions(st.pigment_id + "'", st.ccd_code, st.elements, st.coords_A + shift,
                           st.basis, st.auxbasis, st.energies_ev, st.bands,
                           st.dipoles_au + 0.0, st.aux_coeffs, st.charges, st.charge_rms)


def test_transition_dipole_matches_the_response(monomer):
    st, mol, r, k = monomer
    res = excite(BUTADIENE[0], BUTADIENE[1], settings=SETTINGS)
    mu = np.array(res["states"][k]["transition_dipole_debye"])
    assert np.allclose(np.abs(st.dipole_debye(k)), np.abs(mu), atol=1e-3)
    # transition charges sum to zero and carry the dipole (ESP fit, Madjet et al. 2006)
    q = st.charges[k]
    assert abs(q.sum()) < 1e-8
    mu_q = (q[:, None] * st.coords_A).sum(0) / 0.529177210903
    assert np.linalg.norm(mu_q - st.dipoles_au[k]) < 0.05 * np.linalg.norm(st.dipoles_au[k])


@pytest.mark.parametrize("direction,kappa", [((0, 0, 1), 1.0), ("dipole", -2.0),
                                             ((1, 1, 1), None), ((1, 0, 1), None)])
@pytest.mark.parametrize("R,tol", [(30.0, 0.04), (50.0, 0.02)])
def test_point_dipole_limit(monomer, direction, kappa, R, tol):
    # far apart, the transition-density and transition-charge couplings follow the point-dipole
    # law J = 5.04 κ μ_A μ_B / R³ cm⁻¹ (μ in D, R in nm; Förster's dipole coupling, common
    # practice); parallel dipoles side by side κ = 1, head to tail κ = −2. Measured departures
    # (the molecule's higher multipoles; it is 5 Å long): at 30 Å ≤ 2.5 % (densities) and
    # ≤ 3.9 % (charges) in the oblique arrangements, ≤ 2 % side by side and head to tail; at
    # 50 Å ≤ 1.5 % in all
    st, _mol, _r, k = monomer
    mu = st.dipole_debye(k)
    n = mu / np.linalg.norm(mu) if direction == "dipole" else np.asarray(direction, float)
    n = n / np.linalg.norm(n)
    b = _moved(st, R * n)
    u = mu / np.linalg.norm(mu)
    kap = 1.0 - 3.0 * (u @ n) ** 2
    if kappa is not None:
        assert kap == pytest.approx(kappa, abs=1e-9)
    ref = 5.04 * kap * np.linalg.norm(mu) ** 2 / (R / 10.0) ** 3
    c = couple(st, b, [k], [k], screening="none")[0]
    assert c["j_tdc_cm1"] == pytest.approx(ref, rel=tol)
    assert c["j_charges_cm1"] == pytest.approx(ref, rel=tol)
    assert c["j_dipole_cm1"] == pytest.approx(ref, rel=0.002)   # 5.034 vs the rounded 5.04
    assert c["kappa"] == pytest.approx(kap, abs=1e-3)


def test_perpendicular_dipoles_do_not_couple(monomer, rotated):
    # κ = 0: both dipoles in the xy plane at right angles, stacked along z
    st, _m, _r, k = monomer
    rt, _m2, _r2, kr = rotated
    kap, _R = orientation(st.dipoles_au[k], rt.dipoles_au[kr], (0, 0, 0), (0, 0, 40))
    assert abs(kap) < 1e-3
    b = _moved(rt, np.array([0, 0, 40.0]))
    parallel = couple(st, _moved(st, np.array([0, 0, 40.0])), [k], [k], screening="none")[0]
    c = couple(st, b, [k], [kr], screening="none")[0]
    for route in ("tdc", "charges", "dipole"):
        assert abs(c[f"j_{route}_cm1"]) < 0.01 * abs(parallel[f"j_{route}_cm1"])


@pytest.mark.parametrize("d", [6.0, 8.0])
def test_fitted_coupling_equals_exact_four_centre_integrals(monomer, d):
    # PySCF's exact two-electron integrals between the two molecules' AO densities (an
    # independent route: no fitting) against the auxiliary-basis coupling
    st, mol, r, k = monomer
    shift = np.array([0, d, 0])
    b, mol_b, rb, kb = _site(BUTADIENE[1] + shift, "b")
    ta = transition_densities(r["mo_coeff"], r["mo_occ"], r["xs"])[k]
    tb = transition_densities(rb["mo_coeff"], rb["mo_occ"], rb["xs"])[kb]
    v = jk.get_jk((mol, mol, mol_b, mol_b), tb, scripts="ijkl,lk->ij", intor="int2e")
    exact = float(np.einsum("ij,ij", v, ta)) * HARTREE2CM1
    c = couple(st, b, [k], [kb], screening="none")[0]
    assert abs(c["j_tdc_cm1"]) == pytest.approx(abs(exact), rel=0.02)
    assert np.sign(c["j_tdc_cm1"] * c["j_charges_cm1"]) > 0


def test_screening_models():
    # Förster's 1/n², and s(R) = A exp(−βR) + s0 with A 2.68, β 0.27 Å⁻¹, s0 0.54 (from memory:
    # Scholes et al., J. Phys. Chem. B 111, 6978 (2007))
    assert screening_factor("optical", 10.0, 2.0) == pytest.approx(0.5)
    assert screening_factor("none", 10.0, 2.0) == 1.0
    assert screening_factor("distance", 0.0, 2.0) == pytest.approx(3.22)
    assert screening_factor("distance", 100.0, 2.0) == pytest.approx(0.54, abs=1e-6)
    assert screening_factor("distance", 15.0, 2.0) == pytest.approx(2.68 * np.exp(-4.05) + 0.54)
    with pytest.raises(ValueError, match="optical, distance or none"):
        screening_factor("cubic", 1.0, 2.0)
    # the constant of the dipole law in these units: 5.034 cm⁻¹ (5.04 rounded, common practice)
    assert DIPOLE_CM1 == pytest.approx(5.034, abs=2e-3)


def test_h_and_j_dimers_follow_kasha():
    # Kasha's exciton model (Kasha, Rawls, El-Bayoumi, Pure Appl. Chem. 11, 371 (1965)): parallel
    # dipoles side by side (H) put all the strength in the upper state, shifted blue by J > 0;
    # head to tail (J) in the lower one, shifted red; the two states are 2|J| apart
    from siteshift.interactions.couplings import dipole_coupling
    mu = np.array([0.0, 0.0, 3.0])        # a.u.
    for pos, blue in (((5.0, 0, 0), True), ((0, 0, 8.0), False)):
        J = dipole_coupling(mu, mu, (0, 0, 0), pos) * HARTREE2CM1
        assert (J > 0) == blue
        st = exciton_states([2.0, 2.0], [[0, J], [J, 0]], [mu * 2.5417] * 2, [(0, 0, 0), pos])
        bright = int(np.argmax(st["dipole_strength_D2"]))
        assert st["energies_ev"][bright] * EV2CM1 == pytest.approx(2.0 * EV2CM1 + J,
                                                                    abs=1e-6)
        assert st["dipole_strength_D2"][bright] == pytest.approx(2 * (3.0 * 2.5417) ** 2,
                                                                 rel=1e-3)
        assert np.ptp(st["energies_ev"]) * EV2CM1 == pytest.approx(2 * abs(J), rel=1e-4)
        assert model_pair(2.0, 2.0, J)[1] - model_pair(2.0, 2.0, J)[0] == pytest.approx(
            np.ptp(st["energies_ev"]), rel=1e-9)


def test_exciton_sum_rules_and_mirror_image():
    rng = np.random.default_rng(3)
    n = 5
    E = 1.6 + 0.02 * rng.normal(size=n)
    J = rng.normal(size=(n, n)) * 80.0
    J = 0.5 * (J + J.T)
    np.fill_diagonal(J, 0.0)
    mu = rng.normal(size=(n, 3)) * 5.0
    r = rng.normal(size=(n, 3)) * 10.0
    st = exciton_states(E, J, mu, r)
    # the coupling moves dipole strength between states, never creates it
    assert st["dipole_strength_D2"].sum() == pytest.approx((mu ** 2).sum(), rel=1e-10)
    # Coulomb-only exciton CD: the rotational strengths sum to zero
    assert abs(st["rotational_strength_DmuB"].sum()) < 1e-10 * np.abs(
        st["rotational_strength_DmuB"]).sum()
    assert np.abs(st["rotational_strength_DmuB"]).max() > 1e-3
    # the mirror image (z → −z for positions and dipoles) has the opposite CD
    m = np.diag([1.0, 1.0, -1.0])
    mirror = exciton_states(E, J, mu @ m, r @ m)
    assert np.allclose(mirror["rotational_strength_DmuB"], -st["rotational_strength_DmuB"])
    assert np.allclose(mirror["energies_ev"], st["energies_ev"])
    assert st["participation_ratio"].min() >= 1.0 - 1e-12
    assert st["participation_ratio"].max() <= n + 1e-12
    # the broadened absorption has the total dipole strength as its area, with or without
    # static disorder; disorder draws are seeded
    for fwhm, samples in ((0.0, 1), (300.0, 50)):
        sp = spectra(E, J, mu, r, homogeneous_fwhm_cm1=200.0, disorder_fwhm_cm1=fwhm,
                     samples=samples, seed=5, grid=np.linspace(1.0, 2.2, 6000))
        area = np.trapezoid(sp["absorption_D2_per_ev"], sp["energy_ev"])
        assert area == pytest.approx((mu ** 2).sum(), rel=1e-3)
        assert abs(np.trapezoid(sp["cd_DmuB_per_ev"], sp["energy_ev"])) < 1e-6 * np.abs(
            sp["cd_DmuB_per_ev"]).max()
    again = spectra(E, J, mu, r, homogeneous_fwhm_cm1=200.0, disorder_fwhm_cm1=300.0,
                    samples=50, seed=5, grid=np.linspace(1.0, 2.2, 6000))
    assert np.array_equal(again["absorption_D2_per_ev"], sp["absorption_D2_per_ev"])


def test_supermolecular_dimer_splitting_equals_twice_the_coupling(monomer):
    # two butadienes stacked 6 Å apart (weakly coupled, no overlap): the splitting of the
    # supermolecular TDA's exciton pair equals 2|J| of the transition-density coupling within
    # 10 % (measured: 0.2 % at 6 Å, 0.3 % at 8 Å, 2 % at 5 Å; at 4 Å overlap and charge
    # transfer (28 %) make it 1.5x)
    st, _mol, r, k = monomer
    shift = np.array([0, 0, 6.0])
    b, _mb, rb, kb = _site(BUTADIENE[1] + shift, "b")
    c = couple(st, b, [k], [kb], screening="none")[0]
    out, res = excite_dimer((BUTADIENE[0], BUTADIENE[1], 0),
                            (BUTADIENE[0], BUTADIENE[1] + shift, 0), SETTINGS, r, rb, k, kb,
                            nstates=6)
    assert out["splitting_cm1"] == pytest.approx(2 * abs(c["j_tdc_cm1"]), rel=0.10)
    assert abs(out["j_supermolecular_cm1"]) == pytest.approx(abs(c["j_tdc_cm1"]), rel=0.10)
    assert np.sign(out["j_supermolecular_cm1"]) == np.sign(c["j_tdc_cm1"])
    # stacked parallel: an H dimer, the upper state carries the intensity; both states are
    # local excitations shared evenly, with no charge transfer
    assert out["intensity_ratio_upper_lower"] > 100
    lo, up = (out["states"][i - 1] for i in out["pair"])
    for s in (lo, up):
        assert s["share_a"] == pytest.approx(0.5, abs=0.05)
        assert s["charge_transfer"] < 0.02
    assert min(out["pair_weights"]) > 0.9


def test_dimer_starts_from_its_monomers(monomer):
    # two butadienes stacked 4 Å apart (their orbitals overlap): the dimer's SCF started from
    # the monomers' orbitals (block-diagonal, Löwdin-orthonormalised in the dimer's overlap)
    # converges to the state PySCF's own default guess reaches (the reference: the same SCF
    # from PySCF's minao guess), to the SCF tolerance's scatter, in fewer cycles
    from siteshift.qm.warmstart import fragment_start
    st, _mol, r, k = monomer
    shift = np.array([0, 0, 4.0])
    _b, _mb, rb, kb = _site(BUTADIENE[1] + shift, "b")
    el = BUTADIENE[0] * 2
    mol = build_molecule(el, np.vstack([BUTADIENE[1], BUTADIENE[1] + shift]), 0, 0,
                         SETTINGS.basis)
    dm, how = fragment_start(mol, [(r["mo_coeff"], r["mo_occ"]), (rb["mo_coeff"],
                                                                   rb["mo_occ"])], "monomers")
    S = mol.intor_symmetric("int1e_ovlp")
    assert how["kind"] == "warm"
    assert np.trace(dm @ S) == pytest.approx(mol.nelectron, abs=1e-8)
    assert np.allclose(dm @ S @ dm, 2 * dm, atol=1e-8)        # a closed-shell projector
    # a fragment set that does not make up the dimer starts cold, with the reason
    _dm, bad = fragment_start(mol, [(r["mo_coeff"], r["mo_occ"])], "one monomer")
    assert bad["kind"] == "cold" and "AOs" in bad["reason"]
    runs = {}
    for on in (True, False):
        out, res = excite_dimer((BUTADIENE[0], BUTADIENE[1], 0),
                                (BUTADIENE[0], BUTADIENE[1] + shift, 0), SETTINGS, r, rb, k, kb,
                                nstates=4, fragment_start_on=on)
        runs[on] = res
    warm, cold = runs[True], runs[False]
    assert warm["scf_start"]["kind"] == "warm" and cold["scf_start"]["kind"] == "cold"
    assert warm["scf_energy_hartree"] == pytest.approx(cold["scf_energy_hartree"], abs=1e-7)
    assert max(abs(a["energy_ev"] - b["energy_ev"])
               for a, b in zip(warm["states"], cold["states"])) < 1e-4
    assert warm["scf_cycles"] < cold["scf_cycles"]


def _model_json(path, coords, pid):
    import json
    path.write_text(json.dumps({
        "pigment_id": pid, "ccd_code": "BUT", "elements": BUTADIENE[0],
        "coords_A": np.asarray(coords).tolist(), "charge": 0, "multiplicity": 1,
        "band_axes": {}, "nstates_default": 3}))
    return str(path)


def _couple_cli(tmp_path, *extra):
    from siteshift.cli import main
    a = _model_json(tmp_path / "a.json", BUTADIENE[1], "A_BUT1")
    b = _model_json(tmp_path / "b.json", BUTADIENE[1] + [0, 0, 8.0], "B_BUT1")
    out = tmp_path / "J.json"
    rc = main(["couple", a, b, "--omega", "0.3", "--eps-static", "1", "--eps-optical", "1",
               "--screening", "none", "--cache", str(tmp_path / "cache"), "--json", str(out),
               *extra])
    assert rc == 0
    import json
    return json.loads(out.read_text())


def test_couple_command(tmp_path, capsys):
    # two stacked butadienes 8 Å apart (demo preset: 6-31G): the bright band couples
    r = _couple_cli(tmp_path)
    (c,) = r["couplings"]
    assert c["band_a"] == c["band_b"] == "bright"
    assert c["distance_A"] == pytest.approx(8.0, abs=0.05)
    assert c["j_tdc_cm1"] == pytest.approx(c["j_charges_cm1"], rel=0.05)
    assert 300 < c["j_tdc_cm1"] < 500        # measured with grid 1 in the library test: 409
    text = capsys.readouterr().out
    assert "J_tdc" in text and "bright" in text
    # every state pair on request; a second call reuses the cached transition densities
    r2 = _couple_cli(tmp_path, "--states", "all", "all")
    assert len(r2["couplings"]) == 9
    assert list((tmp_path / "cache").glob("*.transitions.npz"))


@pytest.mark.slow
def test_couple_command_dimer(tmp_path):
    r = _couple_cli(tmp_path, "--dimer")
    d = r["dimer"]
    assert d["splitting_cm1"] == pytest.approx(d["model_splitting_cm1"], rel=0.05)


def test_variant_stage_groups_and_dipole_rescaling(monomer, tmp_path):
    # the per-variant stage over files: couplings of every pair, a configured group, and a
    # measured dipole strength that rescales one type's transition densities (all routes)
    import json

    from siteshift.study.couplings import coupling_tables, excitons_stage
    st, _mol, _r, k = monomer
    sites, jsons, envs = [], [], []
    for n, shift in enumerate(([0, 0, 0], [0, 0, 8.0], [0, 0, 30.0])):
        s = _moved(st, np.array(shift, float))
        s.pigment_id, s.ccd_code = f"A_BUT{n + 1}", "BUT"
        s.save(tmp_path / f"t{n}.npz")
        sites.append(str(tmp_path / f"t{n}.npz"))
        states = [{"index": i + 1, "energy_ev": float(e),
                   "band": "bright" if i == k else None} for i, e in enumerate(st.energies_ev)]
        (tmp_path / f"s{n}.json").write_text(json.dumps({"states": states}))
        (tmp_path / f"e{n}.json").write_text(json.dumps({"dielectric": {"eps_optical": 2.0}}))
        jsons.append(str(tmp_path / f"s{n}.json"))
        envs.append(str(tmp_path / f"e{n}.json"))
    cfg = {"max_distance_A": 20.0, "groups": {"pair": ["A_BUT1", "A_BUT2"]}}
    plain = excitons_stage(sites, jsons, envs, tmp_path / "x.json", cfg, variant="v")
    mu2 = float(np.sum(st.dipole_debye(k) ** 2))
    cfg["dipole_strength_D2"] = {"BUT": 4.0 * mu2}     # twice the computed dipole
    scaled = excitons_stage(sites, jsons, envs, tmp_path / "y.json", cfg, variant="v")
    for p, q in zip(plain["couplings"], scaled["couplings"]):
        assert q["dipole_scale_a"] == pytest.approx(2.0)
        for route in ("tdc", "charges", "dipole"):
            assert q[f"j_{route}_cm1"] == pytest.approx(4.0 * p[f"j_{route}_cm1"], rel=1e-9)
        assert p["screening_factor"] == 0.5
    # the 30 Å partner lies beyond max_distance_A: listed, not coupled in the Hamiltonian
    far = [c for c in plain["couplings"] if c["distance_A"] > 20]
    assert far and all(c["route_used"] == "beyond cutoff" for c in far)
    J = np.array(plain["groups"]["all"]["couplings_cm1"])
    assert J[0, 2] == 0.0 and J[0, 1] != 0.0
    assert plain["groups"]["pair"]["sites"] == ["A_BUT1", "A_BUT2"]
    coupling_tables([tmp_path / "x.json"], tmp_path / "c.tsv", tmp_path / "s.tsv",
                    tmp_path / "p.tsv")
    import pandas as pd
    states = pd.read_csv(tmp_path / "s.tsv", sep="\t")
    assert set(states.group) == {"all", "pair"} and len(states) == 5
    # the degenerate pair's exciton states are split by 2|J|
    pair = states[states.group == "pair"].sort_values("energy_cm1")
    assert np.ptp(pair.energy_cm1) == pytest.approx(2 * abs(J[0, 1]), abs=0.2)  # 6 digits


def test_library_dipole_strengths_rescale_couplings_by_default(monomer, tmp_path):
    # The library's measured dipole strengths (BChl a Qy 37.1 D², Chl a Qy ≈ 21 D² in vacuum:
    # Knox & Spring, Photochem. Photobiol. 77, 497 (2003), from memory) rescale a site's
    # coupled band by default; `false` keeps the computed dipole; another band keeps its own;
    # the tables keep the computed dipole and unscaled couplings beside the scaled ones.
    import json

    from siteshift.structures.library import LibraryError, load_library
    from siteshift.study.couplings import COUPLING_COLUMNS, excitons_stage
    lib = load_library()
    assert lib["BCL"].dipole_strength_D2 == {"Qy": pytest.approx(37.1)}
    assert 20.0 <= lib["CLA"].dipole_strength_D2["Qy"] <= 21.5
    assert "Knox" in lib["BCL"].dipole_strength_source
    with pytest.raises(LibraryError, match="dipole_strength_source"):
        load_library(extra={"BCL": {"dipole_strength_source": ""}})
    with pytest.raises(LibraryError, match="positive"):
        load_library(extra={"CLA": {"dipole_strength_D2": {"Qy": -3}}})
    st, _mol, _r, k = monomer
    mu2 = float(np.sum(st.dipole_debye(k) ** 2))

    def run(band, setting, name):
        sites, jsons, envs = [], [], []
        for n, shift in enumerate(([0, 0, 0], [0, 0, 8.0])):
            s = _moved(st, np.array(shift, float))
            s.pigment_id, s.ccd_code = f"A_BCL{n + 1}", "BCL"
            s.save(tmp_path / f"{name}{n}.npz")
            sites.append(str(tmp_path / f"{name}{n}.npz"))
            states = [{"index": i + 1, "energy_ev": float(e), "band": band if i == k else None}
                      for i, e in enumerate(st.energies_ev)]
            (tmp_path / f"{name}s{n}.json").write_text(json.dumps({"states": states}))
            (tmp_path / f"{name}e{n}.json").write_text(
                json.dumps({"dielectric": {"eps_optical": 2.0}}))
            jsons.append(str(tmp_path / f"{name}s{n}.json"))
            envs.append(str(tmp_path / f"{name}e{n}.json"))
        cfg = {} if setting is None else {"dipole_strength_D2": setting}
        return excitons_stage(sites, jsons, envs, tmp_path / f"{name}.json", cfg, variant="v",
                              library=lib)

    default, off = run("Qy", None, "d"), run("Qy", False, "o")
    other_band, mapped = run("Qx", None, "x"), run("Qy", {"BCL": 4.0 * mu2}, "m")
    f = np.sqrt(37.1 / mu2)
    c, c0 = default["couplings"][0], off["couplings"][0]
    assert c["dipole_scale_a"] == pytest.approx(f) and c0["dipole_scale_a"] == 1.0
    assert c["mu_a_debye"] ** 2 == pytest.approx(37.1)
    assert c["mu_a_computed_debye"] ** 2 == pytest.approx(mu2)
    assert c["j_tdc_cm1"] == pytest.approx(f * f * c0["j_tdc_cm1"], rel=1e-9)
    assert c["j_tdc_unscaled_cm1"] == pytest.approx(c0["j_tdc_cm1"], rel=1e-9)
    assert "Knox" in default["sites"][0]["dipole_strength_source"]
    assert other_band["couplings"][0]["dipole_scale_a"] == 1.0
    assert mapped["couplings"][0]["dipole_scale_a"] == pytest.approx(2.0)
    # the exciton states' strengths follow the rescaled dipoles: Σ D = 2 × 37.1 D²
    assert sum(default["groups"]["all"]["states"]["dipole_strength_D2"]) == pytest.approx(74.2)
    assert {"mu_a_computed_debye", "j_tdc_unscaled_cm1"} <= set(COUPLING_COLUMNS)
