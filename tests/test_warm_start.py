"""Warm starts: converged orbitals carried to another geometry of the same molecule.

Reference: PySCF's own SCF converged on each geometry from its default guess. Facts used:
a Kohn–Sham density turns with the molecule (rigid rotation and translation leave the
energy unchanged; common practice); Löwdin's symmetric orthonormalisation C (Cᵀ S C)^-1/2
gives orthonormal orbitals in the metric S (Löwdin, JCP 18, 365 (1950)), so the carried
density holds exactly N electrons and is idempotent in the new basis. Water and HOF
geometries are idealised (from memory: O–H 0.96 Å, ∠HOH 104.5°).
"""
import numpy as np
import pytest
from pyscf import dft, gto
from scipy.spatial.transform import Rotation

from siteshift.qm.ions import ionize
from siteshift.qm.scf import build_molecule, make_scf, run_scf
from siteshift.qm.settings import ExciteSettings
from siteshift.qm.warmstart import (WARM_MAX_RMSD_A, carry_density, save_orbitals, superpose,
                                    warm_density)

HOF = (["O", "H", "H", "F"], np.array([[0, 0, 0.117], [0, 0.757, -0.469], [0, -0.757, -0.469],
                                       [1.2, 0.3, 0.5]]))
WATER = (["O", "H", "H"], np.array([[0.0, 0.0, 0.1173], [0.0, 0.7572, -0.4692],
                                    [0.0, -0.7572, -0.4692]]))
TURN = Rotation.from_euler("zyx", [40, 70, -25], degrees=True).as_matrix()


def _mol(el, xyz, basis, spin=0):
    return gto.M(atom=list(zip(el, map(tuple, xyz))), basis=basis, spin=spin, verbose=0)


def _scf(mol, dm0=None):
    mf = dft.UKS(mol) if mol.spin else dft.RKS(mol)
    mf.xc, mf.conv_tol = "pbe", 1e-10
    cycles = []
    mf.callback = lambda env: cycles.append(1)
    mf.kernel(dm0=dm0)
    assert mf.converged
    return mf, len(cycles)


@pytest.mark.parametrize("basis", ["6-31g", "def2-svp"])   # s/p only, and d shells
def test_turned_molecule_keeps_its_density(basis):
    el, xyz = HOF
    new = xyz @ TURN.T + np.array([3.0, 1.0, -2.0])
    R, rmsd = superpose(xyz, new)
    assert rmsd < 1e-10 and np.allclose(R, TURN, atol=1e-10)   # Kabsch recovers the turn
    old, _ = _scf(_mol(el, xyz, basis, spin=1))
    mol = _mol(el, new, basis, spin=1)
    ref, cold = _scf(mol)
    dm = carry_density(mol, old.mo_coeff, old.mo_occ, rotation=R)
    # PySCF's density on the turned molecule, to the SCF's own convergence
    assert np.abs(dm - ref.make_rdm1()).max() < 1e-4
    warm, n = _scf(mol, dm0=dm)
    # (a few cycles remain: the DFT grid does not turn with the molecule)
    assert abs(warm.e_tot - ref.e_tot) < 1e-8 and n <= 4 < cold // 2
    # without turning the p and d coefficients the start is a poor one
    unturned = carry_density(mol, old.mo_coeff, old.mo_occ)
    assert np.abs(unturned - ref.make_rdm1()).max() > 0.1


def test_distorted_geometry_right_electron_count_and_fewer_cycles():
    el, xyz = WATER
    bent = xyz.copy()
    bent[1] *= 1.04                      # one O–H bond 4 % longer
    old, _ = _scf(_mol(el, xyz, "def2-svp"))
    mol = _mol(el, bent, "def2-svp")
    S = mol.intor_symmetric("int1e_ovlp")
    dm = carry_density(mol, old.mo_coeff, old.mo_occ)
    # Löwdin: N electrons exactly and D S D = 2 D (closed shell) in the new metric
    assert abs(np.trace(dm @ S) - 10) < 1e-10
    assert np.abs(dm @ S @ dm - 2 * dm).max() < 1e-10
    ref, cold = _scf(mol)
    warm, n = _scf(mol, dm0=dm)
    assert abs(warm.e_tot - ref.e_tot) < 1e-8 and n < cold


def test_open_and_closed_shell_layouts():
    el, xyz = WATER
    mol = _mol(el, xyz, "6-31g")
    rks, _ = _scf(mol)
    uks_mol = _mol(el, xyz, "6-31g", spin=2)
    dm = carry_density(uks_mol, rks.mo_coeff, rks.mo_occ)     # closed → open: halves
    assert dm.shape == (2, mol.nao, mol.nao) and np.allclose(dm[0], rks.make_rdm1() / 2)
    back = carry_density(mol, np.asarray([rks.mo_coeff] * 2), np.asarray([rks.mo_occ / 2] * 2))
    assert np.allclose(back, rks.make_rdm1(), atol=1e-10)  # open → closed: spins summed


def test_warm_density_falls_back_cold_with_a_reason(tmp_path):
    el, xyz = WATER
    s = ExciteSettings(basis="6-31g", grid_level=0, omega=0.3)
    mol = build_molecule(el, xyz, basis="6-31g")
    mf, _, _ = run_scf(make_scf(mol, s, solvated=False))
    path = tmp_path / "orb.npz"
    save_orbitals(path, mf, el, xyz, "6-31g", "water test")
    turned = xyz @ TURN.T + 5.0
    dm, rec = warm_density(build_molecule(el, turned, basis="6-31g"), path, el, turned, "6-31g")
    assert rec["kind"] == "warm" and rec["source"] == "water test" and rec["rmsd_A"] < 1e-6
    assert dm.shape == (mol.nao, mol.nao)
    cases = {
        "absent": (tmp_path / "none.npz", el, xyz, "6-31g"),
        "different atoms or atom order": (path, ["H", "O", "H"], xyz[[1, 0, 2]], "6-31g"),
        "basis 6-31g there": (path, el, xyz, "sto-3g"),
        "RMS from the saved one": (path, el, xyz * (1 + 3 * WARM_MAX_RMSD_A), "6-31g"),
    }
    for reason, (p, e, c, b) in cases.items():
        dm, rec = warm_density(build_molecule(e, c, basis=b), p, e, c, b)
        assert dm is None and rec["kind"] == "cold" and reason in rec["reason"], rec
    dm, rec = warm_density(build_molecule(el, xyz, charge=1, spin=1, basis="6-31g"), path, el,
                           xyz, "6-31g")
    assert dm is None and "9 here" in rec["reason"]   # a cation is not started from a neutral


def test_ions_from_given_starts_agree_with_cold():
    # the cation and anion started from densities of a neighbouring ε converge to the same
    # states as from the neutral's density (PySCF SCF, both paths of siteshift's ladder)
    el, xyz = WATER
    s = ExciteSettings(basis="6-31g", grid_level=0, omega=0.3, eps_static=4.0, eps_optical=2.0,
                       lebedev_order=17)
    near = ExciteSettings(**{**s.__dict__, "eps_static": 6.0})
    first = ionize(el, xyz, settings=near, fit_charges=False)
    cold = ionize(el, xyz, settings=s, fit_charges=False)
    warm = ionize(el, xyz, settings=s, fit_charges=False, dm0=first["_dms"]["neutral"],
                  starts={k: first["_dms"][k] for k in ("cation", "anion")},
                  start={"kind": "warm", "source": "eps 6"})
    for key in ("ip_deltascf_ev", "ea_deltascf_ev"):
        assert abs(warm[key] - cold[key]) < 1e-6
    assert warm["scf"]["neutral"]["start"]["source"] == "eps 6"
    assert warm["scf"]["cation"]["start"]["source"] == "given"
    assert sum(warm["scf"][k]["cycles"] for k in warm["scf"]) < sum(
        cold["scf"][k]["cycles"] for k in cold["scf"])
