#!/usr/bin/env python
"""Benchmark: the cost of a site's cation and anion SCFs against its neutral SCF.

For each system, one process runs siteshift's ion calculation (:func:`siteshift.qm.ions.ionize`:
neutral RKS, then cation and anion UKS from the neutral's density; in-core fitted tensors,
dense-grid XC for closed and open shells, float32 early cycles, fitted PCM) in a continuum of
ε = 4, and prints each SCF's wall time, cycles and the ratios cation/neutral and anion/neutral
(the target: at most 1.5). With --stock it also runs the cation through PySCF's own UKS path
(PySCF's density fitting and XC integration) from the same starting density, and reports its
time and the energy difference. Rows are appended to records/ion_cost.tsv with the machine's
matrix-product rate of the day.

    python scripts/benchmarks/ion_cost.py --systems hc4 --basis 6-31g --grid-level 1 [--stock]

Systems as in response_speed.py: hc4 (4'-hydroxycinnamic acid, 20 atoms) and bcl
(bacteriochlorophyll a, phytyl cut to a methyl, 85 atoms), from CCD ideal coordinates.
"""
from __future__ import annotations

import argparse
import platform
import resource
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parents[1] / "scripts"))
sys.path.insert(0, str(HERE))

from response_speed import append_rows, provenance, system  # noqa: E402


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--systems", default="hc4")
    ap.add_argument("--basis", default="6-31g")
    ap.add_argument("--grid-level", type=int, default=1)
    ap.add_argument("--eps", type=float, default=4.0)
    ap.add_argument("--omega", type=float, default=0.2)
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--max-memory", type=int, default=16000)
    ap.add_argument("--stock", action="store_true", help="also the cation on PySCF's own path")
    ap.add_argument("--out", default=str(HERE / "records" / "ion_cost.tsv"))
    args = ap.parse_args()
    import numpy as np
    from pyscf import dft

    from siteshift.qm.ions import ionize
    from siteshift.qm.scf import build_molecule, make_scf, run_scf
    from siteshift.qm.settings import ExciteSettings, configure_threads
    configure_threads(args.threads)
    prov = provenance()
    print(f"machine: {prov['gemm_f32_gflops']} GFLOP/s float32, {prov['gemm_f64_gflops']} "
          "float64 (2 threads)", flush=True)
    rows = []
    for name in args.systems.split(","):
        el, xyz = system(name)
        s = ExciteSettings(basis=args.basis, grid_level=args.grid_level, eps_static=args.eps,
                           eps_optical=min(2.0, args.eps), omega=args.omega,
                           max_memory_mb=args.max_memory)
        t0 = time.perf_counter()
        r = ionize(el, xyz, settings=s, fit_charges=False,
                   log=lambda m: print(f"[{name}] {m}", flush=True))
        wall = time.perf_counter() - t0
        scf = r["scf"]
        row = {"system": name, "basis": args.basis, "grid_level": args.grid_level,
               "eps_static": args.eps, "nao": None, "threads": args.threads,
               **{f"{k}_s": scf[k]["time_s"] for k in scf},
               **{f"{k}_cycles": scf[k]["cycles"] for k in scf},
               "cation_over_neutral": r["ion_over_neutral_time"]["cation"],
               "anion_over_neutral": r["ion_over_neutral_time"]["anion"],
               "ip_ev": r["ip_deltascf_ev"], "ea_ev": r["ea_deltascf_ev"],
               "wall_s": round(wall, 1)}
        if args.stock:
            mol = build_molecule(el, xyz, 1, 1, s.basis, s.max_memory_mb)
            row["nao"] = mol.nao
            ss = ExciteSettings(**{**s.__dict__, "df_storage": "pyscf"})
            mf = make_scf(mol, ss)
            mf._numint = dft.numint.NumInt()
            dm0 = r["_dm"]
            t1 = time.perf_counter()
            mf, _step, cyc = run_scf(mf, dm0=np.asarray(dm0), mixed_precision=False)
            row.update(stock_cation_s=round(time.perf_counter() - t1, 1),
                       stock_cation_cycles=cyc,
                       stock_minus_fast_cation_hartree=float(mf.e_tot
                                                             - scf["cation"]["energy_hartree"]))
            print(f"[{name}] stock cation {row['stock_cation_s']} s, {cyc} cycles, ΔE "
                  f"{row['stock_minus_fast_cation_hartree']:.2e} Eh", flush=True)
        row.update(peak_rss_mb=round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024),
                   host=platform.node()[:12], date=time.strftime("%Y-%m-%d %H:%M"), **prov)
        print(f"[{name}] neutral {row['neutral_s']} s ({row['neutral_cycles']} cycles), cation "
              f"{row['cation_s']} s ({row['cation_cycles']}), anion {row['anion_s']} s "
              f"({row['anion_cycles']}): ratios {row['cation_over_neutral']}, "
              f"{row['anion_over_neutral']}", flush=True)
        rows.append(row)
    append_rows(args.out, rows)


if __name__ == "__main__":
    main()
