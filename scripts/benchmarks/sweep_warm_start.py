#!/usr/bin/env python
"""Benchmark: SCF cycles and response products per ε-sweep point for each way of starting it.

Starts: default (PySCF's guess), previous (the previous point's density), extrapolated (the line
in 1/ε through the two computed densities nearest to the point, siteshift.study.sweep.sweep_guess),
anchored (the site calculation's density at --site-eps is the point before the first one, points
in ascending ε: as the sweep stage runs by default), outward (anchored, and the points computed
nearest to the anchor first, siteshift.study.sweep.sweep_order). --response-warm also starts each
response from the previous point's amplitudes in the anchored sweeps (measured: more Davidson
products, so the sweep stage does not do it).

    python scripts/benchmarks/sweep_warm_start.py [--system hc4] [--basis 6-31g] [--grid-level 1]

Prints one line per point and the mean SCF cycles per extra point (all points after the first SCF
of the sweep: after the first point, or every point when anchored), and appends the rows to
scripts/benchmarks/records/sweep_warm_start.tsv.
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
    import pandas as pd
    from response_speed import system
    from siteshift.qm.excite import excite
    from siteshift.qm.settings import ExciteSettings, configure_threads
    from siteshift.study.sweep import sweep_guess, sweep_order
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--system", default="hc4")
    ap.add_argument("--basis", default="6-31g")
    ap.add_argument("--grid-level", type=int, default=1)
    ap.add_argument("--eps", default="2,4,8,16")
    ap.add_argument("--n2", type=float, default=2.0)
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--site-eps", type=float, default=8.33,
                    help="ε_static of the site calculation that anchors the 'anchored' sweep")
    ap.add_argument("--starts", default="default,previous,extrapolated,anchored,outward")
    ap.add_argument("--response-warm", action="store_true")
    ap.add_argument("--tsv", default="scripts/benchmarks/records/sweep_warm_start.tsv")
    args = ap.parse_args()
    configure_threads(args.threads)
    el, xyz = system(args.system)
    grid = sorted(float(e) for e in args.eps.split(","))
    rows = []
    site = None

    def settings(eps):
        return ExciteSettings(basis=args.basis, grid_level=args.grid_level, eps_static=eps,
                              eps_optical=min(args.n2, eps), omega=0.2, lebedev_order=11)

    for start in args.starts.split(","):
        dms, xs, amps = [], [], None
        anchored = start in ("anchored", "outward")
        if anchored:  # the site calculation, not a sweep point
            if site is None:
                site = excite(el, xyz, settings=settings(args.site_eps), keep_density=True)
                print(f"anchor eps={args.site_eps}: {site['scf_cycles']} SCF cycles", flush=True)
            dms, xs = [np.asarray(site["_dm"])], [1.0 / args.site_eps]
        order = sweep_order(grid, 1.0 / args.site_eps) if start == "outward" else grid
        for k, eps in enumerate(order):
            kind, dm = (("default", None) if start == "default" else
                        sweep_guess(dms, xs, eps, extrapolate=start != "previous"))
            t = time.perf_counter()
            res = excite(el, xyz, settings=settings(eps), dm0=dm, keep_density=True,
                         x0=amps if anchored and args.response_warm else None,
                         keep_amplitudes=True)
            dms.append(np.asarray(res.pop("_dm")))
            xs.append(1.0 / eps)
            amps = res.pop("_xs", None)
            rows.append({"system": args.system, "basis": args.basis, "start": start,
                         "eps_static": eps, "guess": kind, "scf_cycles": res["scf_cycles"],
                         "response_products": res["response"]["products"],
                         "response_vectors": res["response"]["trial_vectors"],
                         "response_warm_start": res["response"]["warm_start"],
                         "site_eps": args.site_eps if anchored else None, "computed_as": k + 1,
                         "time_s": round(time.perf_counter() - t, 2),
                         "energy": res["scf_energy_hartree"],
                         "s1_ev": res["states"][0]["energy_ev"],
                         "host": platform.node(), "date": time.strftime("%Y-%m-%d %H:%M")})
            r = rows[-1]
            print(f"{start:12s} eps={eps:5.1f} guess={kind:12s} cycles={r['scf_cycles']:3d} "
                  f"products={r['response_products']} vectors={r['response_vectors']} "
                  f"{r['time_s']:6.1f} s", flush=True)
    df = pd.DataFrame(rows)
    cold = df[df.start == "default"]
    ref = cold[cold.eps_static > grid[0]].scf_cycles.mean()
    for start, d in df.groupby("start", sort=False):
        extra = d if start in ("anchored", "outward") else d[d.eps_static > grid[0]]
        c = extra.scf_cycles.mean()
        print(f"mean SCF cycles per extra point, {start}: {c:.2f} "
              f"({100 * (1 - c / ref):.0f} % fewer than the default guess's {ref:.2f}); "
              f"response products per point {d.response_products.mean():.2f}")
    from response_speed import append_rows
    append_rows(ROOT / args.tsv, df)   # earlier rows may have fewer columns


if __name__ == "__main__":
    main()
