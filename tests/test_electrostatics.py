"""Protein electrostatics: embedding charges in the QM, the relaxed first-order shift, ESP
charges, force-field charges of whole structures, residue attribution."""
import json

import numpy as np
import pandas as pd
import pytest
from pyscf import dft, qmmm

from siteshift.base.units import HARTREE2EV
from siteshift.environment.charges import (assign_charges, residue_key, residue_totals,
                                           site_charges)
from siteshift.qm.embedding import (PointCharges, first_order_shifts, read_point_charges,
                                    transition_density)
from siteshift.qm.excite import excite
from siteshift.qm.fasttda import fast_response
from siteshift.qm.relaxed import relaxed_difference_density, xc_kernel_terms
from siteshift.qm.scf import build_molecule, make_scf, run_scf
from siteshift.qm.settings import EngineError, ExciteSettings

# formaldehyde (Å; common practice geometry, from memory), C=O along z, O at +z
CH2O = (["C", "O", "H", "H"],
        [[0, 0, -0.529], [0, 0, 0.679], [0, 0.935, -1.117], [0, -0.935, -1.117]])
WATER = (["O", "H", "H"], [[0.0, 0.0, 0.1173], [0.0, 0.7572, -0.4692], [0.0, -0.7572, -0.4692]])


def _settings(eps=1.0, **kw):
    return ExciteSettings(basis="6-31g", grid_level=2, nstates=2, df_storage="float64",
                          eps_static=eps, eps_optical=min(2.0, eps), lebedev_order=11,
                          response_tol=1e-6, conv_tol=1e-11, **kw)


def _charges():
    rng = np.random.default_rng(7)
    return rng.normal(size=(6, 3)) * 2.0 + np.array([0, 0, 5.0]), rng.normal(size=6) * 0.4


@pytest.mark.parametrize("eps", [1.0, 4.0])
@pytest.mark.parametrize("width", [0.0, 0.8])
def test_embedded_scf_equals_pyscf_qmmm(eps, width):
    # an independent route: PySCF's own qmmm.mm_charge (point charges through int1e_grids,
    # Gaussian ones through its own fake molecule) on the same molecule, functional, DF, PCM
    pos, q = _charges()
    s = _settings(eps)
    mol = build_molecule(*CH2O, basis="6-31g")
    pc = PointCharges(pos, q, np.full(6, width) if width else None)
    mf, *_ = run_scf(make_scf(mol, s, charges=pc))
    ref = dft.RKS(mol)
    ref.xc, ref.grids.level, ref.conv_tol = s.functional.xc, 2, 1e-11
    ref = ref.density_fit()
    if eps > 1:
        ref = ref.PCM()
        ref.with_solvent.eps, ref.with_solvent.lebedev_order = eps, 11
        ref.with_solvent.method = "IEF-PCM"
    ref = qmmm.mm_charge(ref, pos, q, radii=np.full(6, width) if width else None, unit="Angstrom")
    ref.kernel()
    assert abs(mf.e_tot - ref.e_tot) < 1e-6


def test_fast_and_stock_tda_agree_with_charges():
    pos, q = _charges()
    pc = PointCharges(pos, q)
    r = {solver: excite(*CH2O, settings=_settings(4.0, solver=solver), charges=pc)
         for solver in ("fast", "stock")}
    for a, b in zip(r["fast"]["states"], r["stock"]["states"]):
        assert abs(a["energy_ev"] - b["energy_ev"]) < 1e-5
    emb = r["fast"]["embedding"]
    assert emb["n_charges"] == 6 and abs(emb["total_charge_e"] - q.sum()) < 1e-12
    assert emb["scale"] == 1.0 and np.isfinite(emb["interaction_energy_ev"])


@pytest.fixture(scope="module")
def ch2o_states():
    out = {}
    for eps in (1.0, 4.0):
        s = _settings(eps)
        mol = build_molecule(*CH2O, basis="6-31g")
        mf, *_ = run_scf(make_scf(mol, s))
        stats = {}
        e = fast_response(mf, s, stats=stats)[0]
        P = [relaxed_difference_density(mf, stats["xs"][k], s) for k in range(2)]
        out[eps] = (s, mol, mf, e, stats["xs"], P)
    return out


@pytest.mark.parametrize("eps", [1.0, 4.0])
def test_first_order_shift_of_a_small_far_charge(ch2o_states, eps):
    # first-order perturbation theory: the shift of an excitation by a weak, distant charge is
    # q φ_Δ(R) with φ_Δ the potential of the relaxed difference density (Furche & Ahlrichs,
    # JCP 117, 7433 (2002)); within 5 % at 10 and 20 Å, in the gas phase and in PCM
    s, mol, _mf, e, _xs, P = ch2o_states[eps]
    for pos in ([0, 0, 10.0], [0, 8.0, 12.0], [0, 0, -20.0]):
        pc = PointCharges([pos], [0.05])
        full = excite(*CH2O, settings=s, charges=pc)
        for k in range(2):
            d_full = full["states"][k]["energy_ev"] - e[k] * HARTREE2EV
            d_first = first_order_shifts(mol, P[k], pc).sum() * HARTREE2EV
            assert d_first == pytest.approx(d_full, rel=0.05)


def test_first_order_sign_flips_across_the_molecule_and_vanishes_far_away(ch2o_states):
    # the excitations move charge along C=O: a charge beyond O and one beyond the CH2 end shift
    # them oppositely (the dipole term dominates far away); at 100 Å the shift is gone
    _s, mol, _mf, _e, _xs, P = ch2o_states[1.0]
    for k in range(2):
        up = first_order_shifts(mol, P[k], PointCharges([[0, 0, 15.0]], [0.1]))[0]
        down = first_order_shifts(mol, P[k], PointCharges([[0, 0, -15.0]], [0.1]))[0]
        far = first_order_shifts(mol, P[k], PointCharges([[0, 0, 100.0]], [0.1]))[0]
        assert up * down < 0
        # the far field of a dipole: 1/R² from 15 to 100 Å is 0.0225 (within 30 %)
        assert abs(far / up) == pytest.approx((15 / 100) ** 2, rel=0.3)
        assert abs(far) * HARTREE2EV * 1000 < 0.05   # meV


@pytest.mark.parametrize("eps", [1.0, 4.0])
def test_z_vector_products_in_the_mo_basis_equal_pyscfs_ao_response(ch2o_states, eps):
    # an independent route: PySCF's own density response (mf.gen_response, with the PCM
    # object's equilibrium reaction field) to the symmetric density of a rotation z, projected
    # on the virtual-occupied block, against the MO-basis (A + B - Δε) z of the fitted tensors
    from siteshift.qm.relaxed import _coupling_products
    s, _mol, mf, _e, xs, P = ch2o_states[eps]
    nocc = int((mf.mo_occ > 0).sum())
    z = np.random.default_rng(3).normal(size=(3, len(mf.mo_occ) - nocc, nocc))
    mo, ao = _coupling_products(mf, "mo", None)(z), _coupling_products(mf, "ao", None)(z)
    assert np.abs(ao).max() > 0.1
    assert np.abs(mo - ao).max() < 1e-9 * np.abs(ao).max()
    # the fixture's densities took the MO route ("auto"); the AO route gives the same
    for k in range(2):
        P_ao = relaxed_difference_density(mf, xs[k], s, route="ao")
        assert np.abs(P[k] - P_ao).max() < 1e-8


def test_fitted_far_field_potential_against_exact_integrals(ch2o_states):
    # Reference: the exact three-centre integrals of the difference density (PySCF int3c2e
    # against point charges). The fit keeps the density's charge, dipole and quadrupole, so its
    # moments to order 4, so its potential's error falls off faster than the potential itself
    # (measured on the relaxed n→π* density of formaldehyde/6-31G: 7e-5 relative at 12 Å,
    # 4e-5 at 20 Å from the centroid); inside the cut-off the exact integrals are used
    from siteshift.qm.embedding import DensityPotential, density_potential
    _s, mol, _mf, _e, _xs, P = ch2o_states[1.0]
    rng = np.random.default_rng(1)
    fitted = DensityPotential(mol, P[0], exact_within_A=0.0)
    err = {}
    for R in (12.0, 20.0):
        d = rng.normal(size=(100, 3))
        pts = d / np.linalg.norm(d, axis=1)[:, None] * R
        exact = density_potential(mol, P[0], pts)
        err[R] = np.abs(fitted(pts) - exact).max() / np.abs(exact).max()
    assert err[12.0] < 2e-4 and err[20.0] < 1e-4
    assert fitted.n_fitted == 200 and fitted.n_exact == 0
    # mixed: points nearer than 5 Å to an atom are exact, the rest fitted
    mixed = DensityPotential(mol, P[0], exact_within_A=5.0)
    pts = np.array([[0, 0, 3.0], [0, 0, 30.0]])
    v = mixed(pts)
    assert v[0] == density_potential(mol, P[0], pts[:1])[0]
    assert v[1] == pytest.approx(density_potential(mol, P[0], pts[1:])[0], rel=1e-3)
    assert (mixed.n_exact, mixed.n_fitted) == (1, 1)
    # the fit's moments are the density's (charge 0 within 1e-10, the rest to 1e-8)
    aux, c = fitted._fit()
    sh = fitted.shared
    m = fitted._density_moments(sh["powers"], sh["origin"])
    assert np.abs(sh["M"].T @ c - m).max() < 1e-8 and abs(m[0]) < 1e-10
    assert len(m) == 35 and np.abs(m[1:4]).max() > 0.1     # moments to order 4; a dipole


def test_relaxed_density_moves_no_charge_and_differs_from_unrelaxed(ch2o_states):
    _s, mol, mf, _e, xs, P = ch2o_states[4.0]
    S = mol.intor("int1e_ovlp")
    from siteshift.qm.embedding import difference_density
    for k in range(2):
        assert abs(np.trace(P[k] @ S)) < 1e-10
        T = difference_density(mf.mo_coeff, mf.mo_occ, xs[k])
        assert abs(np.trace(T @ S)) < 1e-10 and np.abs(P[k] - T).max() > 1e-3
    # the transition density's dipole is the transition dipole (a check of its normalisation)
    r = mol.intor("int1e_r")
    mu = np.einsum("xij,ji->x", r, transition_density(mf.mo_coeff, mf.mo_occ, xs[1]))
    osc = 2 / 3 * (_e[1]) * mu @ mu
    assert osc > 0


def test_xc_kernel_terms_match_pyscf_gradient_kernel(ch2o_states):
    # PySCF's TDDFT gradient kernel contraction (grad.tdrks._contract_xc_kernel) against ours
    # (public nr_rks_fxc, the third derivative by a central difference)
    from functools import reduce
    from types import SimpleNamespace

    from pyscf.grad import tdrks
    _s, mol, mf, _e, xs, _P = ch2o_states[1.0]
    # the kernel reads only the molecule and the ground state off its gradient object (which
    # PySCF refuses to build for density fitting)
    g = SimpleNamespace(mol=mol, base=SimpleNamespace(_scf=mf))
    occ = mf.mo_occ
    orbo, orbv = mf.mo_coeff[:, occ > 0], mf.mo_coeff[:, occ == 0]
    xp = (xs[0] / np.sqrt(2)).T
    dmx = reduce(np.dot, (orbv, xp, orbo.T))
    doo = orbo @ (-2 * xp.T @ xp) @ orbo.T + orbv @ (2 * xp @ xp.T) @ orbv.T
    f1vo, f1oo, _v, k1ao = tdrks._contract_xc_kernel(g, mf.xc, dmx, doo, True, True, True, 4000)
    ours = xc_kernel_terms(mf, mf.make_rdm1(), dmx + dmx.T, 2.0 * doo)
    for ref, mine in zip((f1vo[0], f1oo[0], k1ao[0]), ours):
        assert np.abs(ref - mine).max() < 1e-6 * max(1.0, np.abs(ref).max())


def test_esp_charges_reproduce_the_dipole():
    # Merz–Kollman-type fit (Besler, Merz, Kollman, JCC 11, 431 (1990)): the charges sum to
    # the molecule's charge and their dipole is the QM dipole within 5 %
    from siteshift.qm.esp import esp_charges
    for el, xyz in (WATER, CH2O):
        s = ExciteSettings(basis="6-31g*", grid_level=2, df_storage="float64")
        mf, *_ = run_scf(make_scf(build_molecule(el, xyz, basis="6-31g*"), s))
        r = esp_charges(mf, el, xyz, 0)
        assert abs(sum(r["charges"])) < 1e-10
        fit, qm = np.array(r["dipole_fit_debye"]), np.array(r["dipole_qm_debye"])
        assert np.linalg.norm(fit - qm) < 0.05 * np.linalg.norm(qm)
    assert r["charges"][1] < 0 < r["charges"][0]   # formaldehyde: C+, O−


def test_point_charge_files(tmp_path):
    f = tmp_path / "q.txt"
    f.write_text("# x y z q\n1 2 3 -0.5\n4 5 6 0.5 0.7  # with a width\n\n")
    pc = read_point_charges(f, scale=0.5)
    assert len(pc) == 2 and pc.scaled.tolist() == [-0.25, 0.25]
    assert pc.widths_A.tolist() == [0.0, 0.7]
    f.write_text("1 2 3\n")
    with pytest.raises(EngineError, match=r"line 1: expected 'x y z q'"):
        read_point_charges(f)
    f.write_text("1 2 nan 0.1\n")
    with pytest.raises(EngineError, match="not a finite number"):
        read_point_charges(f)


def test_cli_excite_with_point_charges(tmp_path, capsys):
    from siteshift.cli import main
    xyz = tmp_path / "w.xyz"
    xyz.write_text("3\nwater\n" + "\n".join(f"{e} {x} {y} {z}" for e, (x, y, z) in
                                            zip(*WATER)) + "\n")
    q = tmp_path / "q.txt"
    q.write_text("0 0 4 0.8\n0 3 -3 -0.3\n")
    out = tmp_path / "r.json"
    assert main(["excite", str(xyz), "--gas", "--omega", "0.3", "--basis", "sto-3g",
                 "--grid-level", "0", "--states", "2", "--point-charges", str(q),
                 "--charge-scale", "0.5", "--json", str(out)]) == 0
    emb = json.loads(out.read_text())["embedding"]
    assert emb["n_charges"] == 2 and emb["total_charge_e"] == pytest.approx(0.5)
    assert emb["scale"] == 0.5 and "interaction_energy_ev" in emb
    assert "embedded in 2 charges" in capsys.readouterr().out


# --------------------------------------------------------------------------------------------
# force-field charges of whole structures
# --------------------------------------------------------------------------------------------

#: formal charges of amino-acid side chains at pH 7 (common practice)
SIDE_CHAIN_CHARGE = {"ASP": -1, "GLU": -1, "LYS": 1, "ARG": 1}


def _fake_fits(atoms, library, codes):
    from siteshift.study.stages import find_pigment
    from siteshift.structures.inventory import model_for, pigment_residues
    pigs, _ = pigment_residues(atoms, library)
    out = {}
    for p in pigs:
        if p.code in codes and p.code not in out:
            m = model_for(find_pigment(atoms, library, p.id), library)
            out[p.code] = {"names": m.names, "charges": [0.0] * len(m.names)}
    return out


@pytest.fixture(scope="module")
def demo_charges(root, library):
    from siteshift.structures.reading import read_structure
    atoms = read_structure(root / "config/demo/pcd2_wt.pdb")
    return atoms, assign_charges(atoms, library, _fake_fits(atoms, library, {"HC4"}))


def test_force_field_charges_are_integral_and_sum_to_the_formal_charge(demo_charges):
    # Amber ff14SB residue charges (OpenMM's amber14-all.xml): every residue integral, the
    # protein's total the sum of the formal charges (side chains, and +1/−1 per chain's ends)
    atoms, (charges, _report) = demo_charges
    tot = residue_totals(charges)
    assert np.allclose(tot, np.round(tot), atol=1e-4)
    prot = charges[charges.source == "ff14SB"]
    expected = 0
    for ch in sorted(set(prot.chain)):
        names = prot[prot.chain == ch].drop_duplicates(["resid"]).resname
        expected += sum(SIDE_CHAIN_CHARGE.get(n, 0) for n in names) + 1 - 1
    assert prot.charge_e.sum() == pytest.approx(expected, abs=1e-4)
    assert set(charges.source) >= {"ff14SB", "tip3p", "esp:HC4"}
    # every heavy atom of the structure has its charge row
    heavy = {(a.chainID, int(a.resid), a.name) for a in atoms if a.element != "H"}
    have = {(c, int(i), n) for c, i, n in zip(charges.chain, charges.resid, charges.atom)}
    assert heavy <= have


def test_19hc_charges_his_states_and_links(hc19_path, library):
    # 19HC (bis-His c-type cytochrome): every His binds an iron through Nε2 and is kept HID;
    # the Cys thioether links are reported; the hetero acetates carry −1 each (CCD ACT)
    from siteshift.structures.reading import read_structure
    atoms = read_structure(hc19_path)
    charges, report = assign_charges(atoms, library, _fake_fits(atoms, library, {"HEM"}))
    his = report[report.kind == "histidine"]
    assert len(his) == 36 and set(his.choice) == {"HID"}
    assert his.note.str.contains("NE2 binds a metal").all()
    assert (report.kind == "covalent link").sum() == 36
    assert (report.kind == "altloc").sum() > 0   # 19HC carries altlocs on 77 atoms
    act = charges[charges.resname == "ACT"]
    assert residue_totals(act).round(6).eq(-1).all()
    tot = residue_totals(charges)
    assert np.allclose(tot, np.round(tot), atol=1e-4)
    # the hemes' cut-off propionates keep their charge (carboxylates at pH 7: −1 e each, on
    # O1A/O2A and O1D/O2D), what carries none is said
    pig = report[report.kind == "pigment"]
    assert len(pig) == 18 and pig.note.str.contains("other dropped atoms").all()
    assert pig.note.str.contains("-2 e on O1A O1D O2A O2D").all()
    hem = charges[charges.resname == "HEM"]
    tail = hem[hem.source == "tail:HEM"]
    assert len(tail) == 72 and np.allclose(tail.charge_e, -0.5)
    assert np.allclose(residue_totals(hem), -2.0, atol=1e-6)   # the fake ESP fit sums to 0


def test_site_charges_leave_out_the_site_and_keep_ligand_residue_totals(hc19_path, library):
    # with the axial His side chains in the QM model: those atoms leave, CA is zeroed and the
    # backbone keeps the residue's total less what the QM model took (0 for a neutral His)
    from siteshift.structures.reading import read_structure
    from siteshift.structures.ligands import add_axial_ligands
    from siteshift.study.stages import find_pigment, model_record
    from siteshift.structures.inventory import model_for
    atoms = read_structure(hc19_path)
    charges, _r = assign_charges(atoms, library, _fake_fits(atoms, library, {"HEM"}))
    res = find_pigment(atoms, library, "A_HEM301")
    m = add_axial_ligands(model_for(res, library), library["HEM"],
                          atoms[~np.isin(atoms.indices, res.atoms.indices)])
    rec = model_record(m, library["HEM"], hc19_path)
    coords, q, keys, notes = site_charges(charges, rec)
    assert len(notes) == 3
    for tag in ("A:HIS37", "A:HIS51"):
        sel = [k == tag for k in keys]
        assert abs(np.asarray(q)[sel].sum()) < 1e-9
        assert sum(sel) == 6   # N H CA HA C O left, side chain in the QM
    # the site's own cut-off propionates stay (4 oxygens, −2 e), 1.5 Å or more from the model
    own = [k == "A:HEM301" for k in keys]
    assert sum(own) == 4 and np.asarray(q)[own].sum() == pytest.approx(-2.0)
    tail_note = [n for n in notes if "cut-off tail" in n][0]
    assert float(tail_note.split("closest QM atom ")[1].split()[0]) >= 1.5
    assert len(q) == len(charges) - sum(charges.resname.eq("HEM") & charges.resid.eq(301)
                                        & charges.chain.eq("A")) + 4 - 2 * 11


def test_survey_refuses_open_shell_models_and_flags_bonded_charges(hc19_path, tmp_path, capsys):
    # 19HC's hemes are bis-His c-type hemes: with their axial ligands in the QM model they are
    # Fe(III) doublets, for which the survey's (closed-shell) relaxed densities do not exist;
    # the error names the type and both ways out, before any QM is run
    from siteshift.cli import main
    from siteshift.study.electrostatics import _contacts
    assert main(["electrostatics", str(hc19_path), "--preset", "demo",
                 "--cache", str(tmp_path)]) != 0
    err = capsys.readouterr().err
    assert "HEM" in err and "multiplicity 2" in err and "--no-axial-ligands" in err
    assert not list(tmp_path.iterdir())
    # without them, the coordinating His sit at bonding distance of the model's Fe: flagged
    # (heavy atoms within 2.6 Å), hydrogens' ordinary contacts are not
    rec = {"elements": ["FE", "N", "H"], "coords_A": [[0, 0, 0], [2.0, 0, 0], [0, 0, 1.0]]}
    df = pd.DataFrame({"chain": ["A", "A", "A", "B"], "resname": ["HIS", "HIS", "ALA", "GLY"],
                       "resid": [37, 37, 5, 2], "icode": ["", "", "", ""],
                       "element": ["N", "C", "H", "C"],
                       "x_A": [0.0, 0.0, 0.0, 5.0], "y_A": [2.0, 3.0, 0.0, 0.0],
                       "z_A": [0.0, 0.0, 2.9, 0.0]})
    embedded = {"A:HIS37", "A:ALA5", "B:GLY2"}
    assert _contacts(df, rec, embedded) == ["A:HIS37"]
    assert _contacts(df, rec, {"A:ALA5"}) == []


def test_residue_keys():
    assert residue_key("A", "GLU", 6) == "A:GLU6" and residue_key("B", "HC4", 101, "A") == \
        "B:HC4101A"
    df = pd.DataFrame({"chain": ["A", "A"], "resname": ["GLU", "GLU"], "resid": [6, 6],
                       "icode": ["", ""], "charge_e": [-0.6, -0.4]})
    assert residue_totals(df)["A:GLU6"] == pytest.approx(-1.0)


def test_esp_cache_key_holds_the_ground_state_job_and_versions(monkeypatch, tmp_path):
    # the ESP charges are reused only for the same model, ground-state settings, code and PySCF
    # versions (issue: "the QM cache key includes ... the code and PySCF versions"); settings of
    # the excitations alone do not make a new gas-phase SCF
    import dataclasses

    import pyscf
    from siteshift.study.electrostatics import _esp_path
    rec = {"ccd_code": "XYZ", "elements": CH2O[0], "coords_A": CH2O[1], "charge": 0,
           "multiplicity": 1, "band_axes": {"Qy": ["C", "O"]}}
    s = ExciteSettings(basis="6-31g", eps_static=1.0, eps_optical=1.0)
    base = _esp_path(rec, s, tmp_path)
    assert base.name.startswith("esp_") and base == _esp_path(rec, s, tmp_path)
    assert _esp_path(rec, dataclasses.replace(s, nstates=12), tmp_path) == base
    assert _esp_path({**rec, "band_axes": None}, s, tmp_path) == base
    changed = [_esp_path(rec, dataclasses.replace(s, basis="def2-svp"), tmp_path),
               _esp_path(rec, dataclasses.replace(s, grid_level=s.grid_level - 1), tmp_path),
               _esp_path({**rec, "multiplicity": 3}, s, tmp_path),
               _esp_path({**rec, "charge": 1}, s, tmp_path)]
    monkeypatch.setattr(pyscf, "__version__", "0.0.1")
    changed.append(_esp_path(rec, s, tmp_path))
    assert len({base, *changed}) == 6


def test_cli_electrostatics_names_the_mutated_residue(root, tmp_path, capsys):
    # the demo mutant puts a glutamate into chain A's apolar pocket: the first-order survey
    # (one cached difference density per pigment type) names it as the top contributor, and a
    # second call reuses the cached density and ESP charges
    from siteshift.cli import main
    out = tmp_path / "es.json"
    args = ["electrostatics", str(root / "config/demo/pcd2_A_I6E.pdb"), "--preset", "demo",
            "--omega", "0.25", "--cache", str(tmp_path / "cache"), "--json", str(out)]
    assert main(args) == 0
    res = json.loads(out.read_text())
    a = next(p for p in res["pigments"] if p["pigment_id"] == "A_HC4101")
    b = next(p for p in res["pigments"] if p["pigment_id"] == "B_HC4101")
    assert a["bands"]["bright"]["residues"][0]["residue"] == "A:GLU6"
    assert a["bands"]["bright"]["residues"][0]["shift_mev"] > 0      # Glu⁻ blue-shifts it
    assert b["superposition_rmsd_A"] < 1.0 and a["reference_copy"] == "A_HC4101"
    assert "A:GLU6" in capsys.readouterr().out
    # the difference-density SCF started from the same model's gas-phase ESP-charge density
    (esp,) = (tmp_path / "cache").glob("esp_*.json")
    assert esp.with_suffix(".dm.npy").exists()
    (dens,) = [p for p in (tmp_path / "cache").glob("*.json") if p != esp]
    start = json.loads(dens.read_text())["scf_start"]
    assert start["kind"] == "warm" and "ESP-charge SCF of A_HC4101" in start["source"]
    t_first = res["timings_s"]["total_s"]
    assert main(args) == 0
    again = json.loads(out.read_text())
    assert again["timings_s"]["total_s"] < t_first
    assert again["pigments"][0]["bands"] == res["pigments"][0]["bands"]


def test_tail_groups_follow_ph():
    # ionisable groups of cut-off tails (pKa values common practice, from memory): a heme's two
    # propionic acids are carboxylates at pH 7 (−1 e each) and neutral at pH 3; FMN's phosphate
    # monoester is −2 e at pH 7, −1 e at pH 6; FAD's pyrophosphate −1 e per P
    from siteshift.environment.charges import tail_group_charges
    hem = ["CBA", "CGA", "O1A", "O2A", "CBD", "CGD", "O1D", "O2D"]
    q7 = tail_group_charges("HEM", hem, 7.0)
    assert sorted(q7) == ["O1A", "O1D", "O2A", "O2D"] and sum(q7.values()) == -2.0
    assert tail_group_charges("HEM", hem, 3.0) == {}
    from siteshift.structures.qmmodel import ccd_graph
    fmn = [n for n, e in zip(*ccd_graph("FMN")[:2]) if e != "H" and n in
           ("C2'", "C3'", "C4'", "C5'", "O2'", "O3'", "O4'", "O5'", "P", "O1P", "O2P", "O3P")]
    assert sum(tail_group_charges("FMN", fmn, 7.0).values()) == pytest.approx(-2.0)
    assert sum(tail_group_charges("FMN", fmn, 6.0).values()) == pytest.approx(-1.0)
    fad_heavy = [n for n, e in zip(*ccd_graph("FAD")[:2]) if e != "H"]
    fad_tail = [n for n in fad_heavy if "'" in n or n.endswith("A") or n.startswith(("P", "O"))
                and n not in ("O2", "O4")]
    q = tail_group_charges("FAD", fad_tail, 7.0)
    assert sum(q.values()) == pytest.approx(-2.0)
