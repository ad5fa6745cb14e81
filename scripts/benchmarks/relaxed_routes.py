#!/usr/bin/env python
"""Benchmark: the Z-vector of relaxed difference densities on its two routes.

One chromophore (HC4 or the bacteriochlorophyll model, from CCD ideal coordinates) in IEF-PCM
(ε 4 / 2) or the gas phase: SCF, fast TDA, then the relaxed difference densities of the lowest
states twice: with the coupled-perturbed products from PySCF's AO-basis response
(``route="ao"``, the reference) and from the MO-basis Hessian (``route="mo"``). Prints each
route's time (with its number of Krylov products), the largest difference of the two
densities, and the first-order shift of a probe charge (0.05 e, 8 Å above the centroid) from
each; appends a row to scripts/benchmarks/records/relaxed_routes.tsv.

    python scripts/benchmarks/relaxed_routes.py [--system hc4] [--basis 6-31g] [--eps 4]
        [--states 2] [--df-storage float32]
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


def main():
    import numpy as np
    from response_speed import append_rows, system
    from siteshift.base.units import HARTREE2EV
    from siteshift.qm.embedding import PointCharges, first_order_shifts
    from siteshift.qm.fasttda import fast_response
    from siteshift.qm.relaxed import relaxed_difference_densities
    from siteshift.qm.scf import build_molecule, make_scf, run_scf
    from siteshift.qm.settings import ExciteSettings, configure_threads
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--system", default="hc4", choices=["hc4", "bcl"])
    ap.add_argument("--basis", default="6-31g")
    ap.add_argument("--eps", type=float, default=4.0, help="ε_static (1: gas phase)")
    ap.add_argument("--states", type=int, default=2)
    ap.add_argument("--grid-level", type=int, default=1)
    ap.add_argument("--df-storage", default="float32", choices=["float32", "float64"])
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--tsv", default="scripts/benchmarks/records/relaxed_routes.tsv")
    args = ap.parse_args()
    configure_threads(args.threads)
    el, xyz = system(args.system)
    s = ExciteSettings(basis=args.basis, grid_level=args.grid_level, eps_static=args.eps,
                       eps_optical=min(2.0, args.eps), omega=0.2, nstates=args.states,
                       df_storage=args.df_storage)
    mol = build_molecule(el, xyz, basis=s.basis)
    t0 = time.perf_counter()
    mf, *_ = run_scf(make_scf(mol, s))
    t_scf = time.perf_counter() - t0
    stats = {}
    fast_response(mf, s, stats=stats)
    xs = list(stats["xs"])
    probe = PointCharges([np.mean(xyz, axis=0) + [0.0, 0.0, 8.0]], [0.05])
    out = {}
    for route in ("ao", "mo"):
        lines = []
        t0 = time.perf_counter()
        P = relaxed_difference_densities(mf, xs, s, route=route, log=lines.append)
        dt = time.perf_counter() - t0
        n = sum(1 for ln in lines if ln.startswith("Z-vector product"))
        krylov = next(float(ln.rsplit(", ", 1)[1].rstrip(" s")) for ln in lines
                      if ln.startswith("Z-vector:"))
        shifts = [first_order_shifts(mol, p, probe).sum() * HARTREE2EV * 1000 for p in P]
        out[route] = (P, dt, n, shifts, krylov)
        print(f"{route}: {dt:.1f} s, of which the Krylov solve {krylov:.1f} s ({n} products); "
              f"first-order shifts "
              f"{', '.join(f'{x:+.5f}' for x in shifts)} meV", flush=True)
    d = max(float(np.abs(a - b).max()) for a, b in zip(out["ao"][0], out["mo"][0]))
    ds = max(abs(a - b) for a, b in zip(out["ao"][3], out["mo"][3]))
    print(f"{args.system}/{args.basis} ({mol.nao} AOs), ε {args.eps}: AO route "
          f"{out['ao'][1]:.1f} s, MO route {out['mo'][1]:.1f} s, ratio "
          f"{out['ao'][1] / out['mo'][1]:.2f}; max |ΔP| {d:.1e}, max Δshift {ds:.1e} meV")
    row = {"system": args.system, "basis": args.basis, "nao": mol.nao, "eps": args.eps,
           "states": len(xs), "df_storage": args.df_storage, "scf_s": round(t_scf, 1),
           "ao_s": round(out["ao"][1], 2), "ao_products": out["ao"][2],
           "mo_s": round(out["mo"][1], 2), "mo_products": out["mo"][2],
           "ao_krylov_s": out["ao"][4], "mo_krylov_s": out["mo"][4],
           "ratio": round(out["ao"][1] / out["mo"][1], 2), "max_dP": d,
           "max_dshift_mev": ds, "host": platform.node(),
           "date": time.strftime("%Y-%m-%d %H:%M")}
    append_rows(ROOT / args.tsv, [row])

if __name__ == "__main__":
    main()
