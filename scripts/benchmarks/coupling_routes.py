#!/usr/bin/env python
"""Benchmark: cost and accuracy of the three coupling routes and of keeping transition densities.

Two copies of a chromophore (HC4 from its CCD ideal coordinates, or s-trans-butadiene), the
second translated by each distance along a fixed oblique direction; per distance the coupling of
the bright states by the fitted transition densities (tdc), the transition charges and the point
dipoles, against the exact Coulomb integral of the two AO transition densities (PySCF's
four-centre integrals between the two molecules, the reference). Prints the time of each step
(transition densities fitted, ESP transition charges, each route per pair, the exact integral)
and each route's error, and appends the rows to scripts/benchmarks/records/coupling_routes.tsv.

    python scripts/benchmarks/coupling_routes.py [--system hc4] [--basis 6-31g]
        [--distances 6 10 20 40]
"""
from __future__ import annotations

import argparse
import platform
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "scripts"))
sys.path.insert(0, str(ROOT / "scripts" / "benchmarks"))

BUTADIENE = (["C", "C", "C", "C", "H", "H", "H", "H", "H", "H"],
             [[-1.84, -0.42, 0], [-0.66, 0.20, 0], [0.66, -0.20, 0], [1.84, 0.42, 0],
              [-2.78, 0.12, 0], [-1.90, -1.50, 0], [-0.60, 1.29, 0],
              [2.78, -0.12, 0], [1.90, 1.50, 0], [0.60, -1.29, 0]])


def main():
    import numpy as np
    from pyscf.scf import jk
    from siteshift.interactions.couplings import HARTREE2CM1, charge_coupling, couple, cross_coulomb
    from siteshift.interactions.transitions import (
        SiteTransitions,
        fit_auxiliary,
        transition_charges,
        transition_densities,
    )
    from siteshift.qm.excite import excite
    from siteshift.qm.scf import build_molecule
    from siteshift.qm.settings import ExciteSettings, configure_threads
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--system", default="hc4", choices=["hc4", "butadiene"])
    ap.add_argument("--basis", default="6-31g")
    ap.add_argument("--distances", type=float, nargs="+", default=[6.0, 10.0, 20.0, 40.0])
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--tsv", default="scripts/benchmarks/records/coupling_routes.tsv")
    args = ap.parse_args()
    configure_threads(args.threads)
    if args.system == "hc4":
        from response_speed import system
        el, xyz = system("hc4")
    else:
        el, xyz = BUTADIENE
    xyz = np.asarray(xyz, float)
    xyz = xyz - xyz.mean(0)
    s = ExciteSettings(basis=args.basis, grid_level=1, eps_static=1.0, eps_optical=1.0,
                       omega=0.25, nstates=3)

    def site(coords):
        res = excite(el, coords, settings=s, keep_response=True)
        r = res["_response"]
        mol = build_molecule(el, coords, 0, 0, s.basis)
        T = transition_densities(r["mo_coeff"], r["mo_occ"], r["xs"])
        t0 = time.perf_counter()
        d = fit_auxiliary(mol, T)
        t_fit = time.perf_counter() - t0
        t0 = time.perf_counter()
        q, rms = transition_charges(mol, el, coords, T)
        t_q = time.perf_counter() - t0
        with mol.with_common_orig((0, 0, 0)):
            dip = np.einsum("xmn,smn->sx", mol.intor_symmetric("int1e_r", comp=3), T)
        st = SiteTransitions("x", args.system, list(el), np.asarray(coords), s.basis,
                             "def2-universal-jfit", np.array([x["energy_ev"] for x in
                                                              res["states"]]),
                             [""] * len(res["states"]), dip, d, q, rms)
        k = int(np.argmax([x["oscillator_strength"] for x in res["states"]]))
        return st, mol, T, k, t_fit, t_q, res["timings_s"]

    a, mol_a, ta, k, t_fit, t_q, tim = site(xyz)
    print(f"{args.system}/{args.basis}: {mol_a.nao} AO, aux {a.aux_coeffs.shape[1]}; bright "
          f"state {k + 1} |mu| {np.linalg.norm(a.dipole_debye(k)):.2f} D; transition densities "
          f"fitted {t_fit:.2f} s, ESP transition charges {t_q:.2f} s (3 states; SCF "
          f"{tim['scf']:.1f} s, response {tim['response']:.1f} s)", flush=True)
    direction = np.array([1.0, 1.0, 1.0]) / np.sqrt(3.0)
    rows = []
    for R in args.distances:
        b, mol_b, tb, kb, *_ = site(xyz + R * direction)
        t0 = time.perf_counter()
        v = jk.get_jk((mol_a, mol_a, mol_b, mol_b), tb[kb], scripts="ijkl,lk->ij",
                      intor="int2e")
        exact = float(np.einsum("ij,ij", v, ta[k])) * HARTREE2CM1
        t_exact = time.perf_counter() - t0
        reps = 5
        t0 = time.perf_counter()
        for _ in range(reps):
            c = couple(a, b, [k], [kb], screening="none")[0]
        t_all = (time.perf_counter() - t0) / reps
        t0 = time.perf_counter()
        for _ in range(reps):
            float(a.aux_coeffs[k] @ cross_coulomb(a, b) @ b.aux_coeffs[kb])
        t_tdc = (time.perf_counter() - t0) / reps
        t0 = time.perf_counter()
        for _ in range(reps):
            charge_coupling(a.charges[k], a.coords_A, b.charges[kb], b.coords_A)
        t_chg = (time.perf_counter() - t0) / reps
        row = {"system": args.system, "basis": args.basis, "nao": mol_a.nao,
               "naux": a.aux_coeffs.shape[1], "distance_A": R, "kappa": c["kappa"],
               "j_exact_cm1": exact, "j_tdc_cm1": c["j_tdc_cm1"],
               "j_charges_cm1": c["j_charges_cm1"], "j_dipole_cm1": c["j_dipole_cm1"],
               "err_tdc_pct": 100 * (c["j_tdc_cm1"] / exact - 1),
               "err_charges_pct": 100 * (c["j_charges_cm1"] / exact - 1),
               "err_dipole_pct": 100 * (c["j_dipole_cm1"] / exact - 1),
               "time_exact_s": round(t_exact, 3), "time_three_routes_s": round(t_all, 4),
               "time_tdc_s": round(t_tdc, 4), "time_charges_s": round(t_chg, 6),
               "time_fit_per_site_s": round(t_fit, 2), "time_charges_per_site_s": round(t_q, 2),
               "host": platform.node(), "date": time.strftime("%Y-%m-%d %H:%M")}
        rows.append(row)
        print(f"R {R:5.1f} Å κ {c['kappa']:+.3f}: exact {exact:9.3f}  tdc {c['j_tdc_cm1']:9.3f} "
              f"({row['err_tdc_pct']:+.2f} %)  charges {c['j_charges_cm1']:9.3f} "
              f"({row['err_charges_pct']:+.2f} %)  dipole {c['j_dipole_cm1']:9.3f} "
              f"({row['err_dipole_pct']:+.2f} %) cm-1; exact {t_exact:.2f} s, tdc "
              f"{t_tdc * 1000:.1f} ms, charges {t_chg * 1e6:.0f} µs, all three "
              f"{t_all * 1000:.1f} ms", flush=True)
    from response_speed import append_rows
    append_rows(ROOT / args.tsv, rows)


if __name__ == "__main__":
    main()
