#!/usr/bin/env python
"""Benchmark: siteshift's SRSH-PCM TDA path against PySCF's stock path, end to end.

For each system, two separate processes compute the same SRSH-PCM ground state and 4-state TDA:
- stock: PySCF's density fitting (float64 tensors, on disk when they do not fit max_memory),
  PySCF's XC integration and PySCF's TDA (with siteshift's ε_optical fix);
- fast: siteshift's path, in-core fitted tensors (float32 storage by default), dense-BLAS XC
  integration, MO-basis TDA with its options (response grid, orbital windows).
It prints SCF and response wall time, SCF cycles, peak memory (RSS) of each process, the speed-ups,
the SCF energy difference and the largest |ΔE| and |Δf| over the states, and appends the row to a
TSV so commits can be compared. A path that runs past its timeout is stopped and reported with
what it finished (the SCF alone, or nothing).

    python scripts/benchmarks/response_speed.py --systems hc4,bcl [--stock-timeout 1800]

Systems: hc4 (4'-hydroxycinnamic acid, 20 atoms) and bcl (bacteriochlorophyll a, phytyl cut to a
methyl, 85 atoms), both built from CCD ideal coordinates with siteshift's own QM-model builder.
The bcl stock path takes hours on a 2-core laptop; give --stock-timeout to bound it.
"""
from __future__ import annotations

import argparse
import json
import multiprocessing as mp
import platform
import resource
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "scripts"))


def system(name):
    import biotite.structure.info as info
    from siteshift.library import load_library
    from siteshift.qmmodel import build_qm_model
    code = {"hc4": "HC4", "bcl": "BCL"}[name]
    arr = info.residue(code)
    heavy = arr[arr.element != "H"]
    m = build_qm_model(f"X_{code}1", code, heavy.atom_name, heavy.element, heavy.coord,
                       load_library()[code])
    return m.elements, m.coords


def run(path, name, args, q):
    """One path end to end in this (forked) process; partial results go to q as they come."""
    import numpy as np
    from pyscf.dft import numint
    from siteshift.engine import (ExciteSettings, build_molecule, configure_threads,
                                  fast_response, make_scf, run_scf, stock_response)
    configure_threads(args.threads)
    el, xyz = system(name)
    s = ExciteSettings(basis=args.basis, grid_level=args.grid_level, eps_static=4.0,
                       eps_optical=2.0, omega=0.2, nstates=4, lebedev_order=args.lebedev,
                       max_memory_mb=args.max_memory)
    if path == "stock":
        s.df_storage = "pyscf"
    else:
        s.df_storage = args.df_storage
        s.response_grid_level = args.response_grid_level
        s.occ_window_ev, s.vir_window_ev = args.occ_window, args.vir_window
        s.pcm_fit = args.pcm_fit
    t0 = time.perf_counter()
    mol = build_molecule(el, xyz, 0, 0, s.basis, s.max_memory_mb)
    mf = make_scf(mol, s)
    if args.verbose:  # PySCF's per-cycle energies and timings, as a profile of the SCF
        mf.verbose, mf.stdout = 4, sys.stdout
    if path == "stock":
        mf._numint = numint.NumInt()  # PySCF's own XC integration
    mf, _, cycles = run_scf(mf)
    t1 = time.perf_counter()
    rss = lambda: resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # noqa: E731
    q.put({"path": path, "nao": mol.nao, "scf_s": t1 - t0, "scf_cycles": cycles,
           "scf_energy": mf.e_tot, "peak_rss_mb": rss()})
    log = (lambda m: print(f"[{path}] {m}", flush=True))
    e, f, *_ = (fast_response(mf, s, log=log) if path == "fast" else stock_response(mf, s))
    t2 = time.perf_counter()
    order = np.argsort(e)
    q.put({"path": path, "nao": mol.nao, "scf_s": t1 - t0, "scf_cycles": cycles,
           "scf_energy": mf.e_tot, "response_s": t2 - t1, "peak_rss_mb": rss(),
           "e_ev": (np.asarray(e)[order] * 27.211386245988).tolist(),
           "f": np.asarray(f)[order].tolist()})


def measure(path, name, args, timeout):
    """The last record the path reached (SCF only if the response ran out of time), or None."""
    ctx = mp.get_context("fork")
    q = ctx.Queue()
    p = ctx.Process(target=run, args=(path, name, args, q))
    t0 = time.perf_counter()
    p.start()
    last = None
    while p.is_alive() or not q.empty():
        try:
            last = q.get(timeout=5)
        except Exception:  # queue.Empty
            pass
        if timeout and time.perf_counter() - t0 > timeout and p.is_alive():
            p.terminate()
            p.join()
            while not q.empty():
                last = q.get()
            break
    p.join()
    return last, round(time.perf_counter() - t0, 1)


def _r(x, nd=1):
    return None if x is None else round(x, nd)


def main():
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--systems", default="hc4")
    ap.add_argument("--basis", default="def2-svp")
    ap.add_argument("--grid-level", type=int, default=3)
    ap.add_argument("--lebedev", type=int, default=17)
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--max-memory", type=int, default=16000)
    ap.add_argument("--stock-timeout", type=float, default=None, help="seconds")
    ap.add_argument("--fast-timeout", type=float, default=None, help="seconds")
    ap.add_argument("--df-storage", default="float32", choices=["float32", "float64", "pyscf"])
    ap.add_argument("--pcm-fit", action="store_true", help="fitted PCM potential (fast path)")
    ap.add_argument("--verbose", action="store_true", help="PySCF's per-cycle SCF log")
    ap.add_argument("--response-grid-level", type=int, default=None)
    ap.add_argument("--occ-window", type=float, default=None, help="eV below the HOMO")
    ap.add_argument("--vir-window", type=float, default=None, help="eV above the LUMO")
    ap.add_argument("--tsv", default="benchmarks/response_speed.tsv")
    args = ap.parse_args()
    rows = []
    for name in args.systems.split(","):
        fast, fast_wall = measure("fast", name, args, args.fast_timeout)
        stock, stock_wall = measure("stock", name, args, args.stock_timeout)
        row = {"system": name, "basis": args.basis, "grid_level": args.grid_level,
               "response_grid_level": args.response_grid_level, "df_storage": args.df_storage,
               "pcm_fit": args.pcm_fit,
               "occ_window_ev": args.occ_window, "vir_window_ev": args.vir_window,
               "nao": (fast or stock or {}).get("nao")}
        for tag, rec, wall in (("fast", fast, fast_wall), ("stock", stock, stock_wall)):
            rec = rec or {}
            row.update({f"{tag}_scf_s": _r(rec.get("scf_s")),
                        f"{tag}_scf_cycles": rec.get("scf_cycles"),
                        f"{tag}_response_s": _r(rec.get("response_s")),
                        f"{tag}_peak_rss_mb": _r(rec.get("peak_rss_mb"), 0),
                        f"{tag}_wall_s": wall,
                        f"{tag}_finished": "response_s" in rec})
        both = fast and stock and "e_ev" in fast and "e_ev" in stock
        row["scf_speedup"] = (_r(stock["scf_s"] / fast["scf_s"], 2)
                              if fast and stock else None)
        row["response_speedup"] = (_r(stock["response_s"] / fast["response_s"], 2)
                                   if both else None)
        if both:
            n = min(len(fast["e_ev"]), len(stock["e_ev"]))
            row.update(dE_scf_hartree=fast["scf_energy"] - stock["scf_energy"],
                       max_abs_dE_ev=max(abs(a - b) for a, b in
                                         zip(fast["e_ev"][:n], stock["e_ev"][:n])),
                       max_abs_df=max(abs(a - b) for a, b in zip(fast["f"][:n], stock["f"][:n])),
                       energies_ev=" ".join(f"{x:.5f}" for x in fast["e_ev"]))
        else:
            row.update(dE_scf_hartree=(fast["scf_energy"] - stock["scf_energy"]
                                       if fast and stock else None),
                       max_abs_dE_ev=None, max_abs_df=None,
                       energies_ev=" ".join(f"{x:.5f}" for x in (fast or {}).get("e_ev", [])))
        row.update(threads=args.threads, host=platform.node(), date=time.strftime("%Y-%m-%d %H:%M"))
        rows.append(row)
        print(json.dumps(row, indent=1), flush=True)
    out = Path(args.tsv)
    out.parent.mkdir(parents=True, exist_ok=True)
    import pandas as pd
    df = pd.DataFrame(rows)
    if out.exists():  # earlier rows may have other columns
        df = pd.concat([pd.read_csv(out, sep="\t"), df], ignore_index=True)
    df.to_csv(out, sep="\t", index=False)
    print(f"appended to {out}")


if __name__ == "__main__":
    main()
