#!/usr/bin/env python
"""Benchmark: SCF cycles per ε-sweep point from the default guess, the previous point's density,
and the extrapolation in 1/ε that the sweep stage uses (siteshift.study.sweep_guess).

    python scripts/benchmarks/sweep_warm_start.py [--system hc4] [--basis 6-31g] [--grid-level 1]

Prints one line per point and the mean cycles per extra point (all but the first) for each start,
and appends the rows to benchmarks/sweep_warm_start.tsv.
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
    from siteshift.engine import (ExciteSettings, build_molecule, configure_threads, make_scf,
                                  run_scf)
    from siteshift.study import sweep_guess
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--system", default="hc4")
    ap.add_argument("--basis", default="6-31g")
    ap.add_argument("--grid-level", type=int, default=1)
    ap.add_argument("--eps", default="2,4,8,16")
    ap.add_argument("--n2", type=float, default=2.0)
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--tsv", default="benchmarks/sweep_warm_start.tsv")
    args = ap.parse_args()
    configure_threads(args.threads)
    el, xyz = system(args.system)
    grid = sorted(float(e) for e in args.eps.split(","))
    rows = []
    for start in ("default", "previous", "extrapolated"):
        dms, xs = [], []
        for k, eps in enumerate(grid):
            s = ExciteSettings(basis=args.basis, grid_level=args.grid_level, eps_static=eps,
                               eps_optical=min(args.n2, eps), omega=0.2, lebedev_order=11)
            mol = build_molecule(el, xyz, 0, 0, s.basis, s.max_memory_mb)
            kind, dm = (("default", None) if start == "default" else
                        sweep_guess(dms, xs, eps, extrapolate=start == "extrapolated"))
            t = time.perf_counter()
            mf, _, cycles = run_scf(make_scf(mol, s), dm0=dm)
            dms.append(np.asarray(mf.make_rdm1()))
            xs.append(1.0 / eps)
            rows.append({"system": args.system, "basis": args.basis, "start": start,
                         "eps_static": eps, "guess": kind, "scf_cycles": cycles,
                         "scf_s": round(time.perf_counter() - t, 2), "energy": mf.e_tot,
                         "host": platform.node(), "date": time.strftime("%Y-%m-%d %H:%M")})
            print(f"{start:12s} eps={eps:5.1f} guess={kind:12s} cycles={cycles:3d} "
                  f"{rows[-1]['scf_s']:6.1f} s", flush=True)
    df = pd.DataFrame(rows)
    extra = df[df.eps_static > grid[0]].groupby("start").scf_cycles.mean()
    for start, c in extra.items():
        print(f"mean SCF cycles per extra point, {start}: {c:.2f} "
              f"({100 * (1 - c / extra['default']):.0f} % fewer than default)")
    out = ROOT / args.tsv
    out.parent.mkdir(parents=True, exist_ok=True)
    df.to_csv(out, sep="\t", index=False, mode="a", header=not out.exists())
    print(f"appended to {out}")


if __name__ == "__main__":
    main()
