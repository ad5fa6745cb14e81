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
HARTREE_EV = 27.211386245988  # CODATA 2018, as pyscf.data.nist.HARTREE2EV
sys.path.insert(0, str(ROOT / "scripts"))


def system(name):
    import biotite.structure.info as info
    from siteshift.structures.library import load_library
    from siteshift.structures.qmmodel import build_qm_model
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
    from siteshift.qm.fasttda import fast_response
    from siteshift.qm.scf import build_molecule, make_scf, run_scf
    from siteshift.qm.settings import ExciteSettings, configure_threads
    from siteshift.qm.stock import stock_response
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
    log(f"SCF {t1 - t0:.1f} s, {cycles} cycles, E = {mf.e_tot:.10f} Eh")
    stats = {}
    e, f, *_ = (fast_response(mf, s, log=log, stats=stats) if path == "fast"
                else stock_response(mf, s))
    t2 = time.perf_counter()
    order = np.argsort(e)
    rec = {"path": path, "nao": mol.nao, "scf_s": t1 - t0, "scf_cycles": cycles,
           "scf_energy": mf.e_tot, "response_s": t2 - t1, "peak_rss_mb": rss(),
           "e_ev": (np.asarray(e)[order] * HARTREE_EV).tolist(),
           "f": np.asarray(f)[order].tolist()}
    if stats:
        rec.update(vectors=stats["vectors"], products=stats["products"],
                   product_s=stats["product_s"], setup_s=stats["setup_s"])
        if args.state:  # ground state and amplitudes for the stock check in another process
            np.savez(args.state, mo_coeff=mf.mo_coeff, mo_energy=mf.mo_energy, mo_occ=mf.mo_occ,
                     e_tot=mf.e_tot, xs=stats["xs"][order], e=np.asarray(e)[order])
    q.put(rec)


def check(path, name, args, q):
    """PySCF's stock TDA operator on the fast path's ground state and amplitudes.

    One product of PySCF's response function (its DF exchange on AO densities, its XC kernel,
    its PCM response with the same ε_optical) with the fast path's normalised eigenvectors x
    gives the Rayleigh quotients xᵀAx, which equal PySCF's eigenvalues to second order in the
    residual |Ax − (xᵀAx)x| (also reported), and the time of one stock product per trial vector.
    With --stock-refine, PySCF's own Davidson then continues from these vectors to convergence.
    """
    import numpy as np
    from pyscf.dft import numint
    from siteshift.qm.pcm import response_solvent
    from siteshift.qm.scf import build_molecule, make_scf
    from siteshift.qm.settings import ExciteSettings, configure_threads
    configure_threads(args.threads)
    el, xyz = system(name)
    s = ExciteSettings(basis=args.basis, grid_level=args.grid_level, eps_static=4.0,
                       eps_optical=2.0, omega=0.2, nstates=4, lebedev_order=args.lebedev,
                       max_memory_mb=args.max_memory, df_storage="pyscf")
    mol = build_molecule(el, xyz, 0, 0, s.basis, s.max_memory_mb)
    mf = make_scf(mol, s)
    mf._numint = numint.NumInt()
    st = np.load(args.state)
    mf.mo_coeff, mf.mo_energy, mf.mo_occ = st["mo_coeff"], st["mo_energy"], st["mo_occ"]
    mf.e_tot, mf.converged = float(st["e_tot"]), True
    mf.grids.build(with_non0tab=True)
    t0 = time.perf_counter()
    td = mf.TDA()
    td.nstates, td.conv_tol = s.nstates, 1e-7
    td.with_solvent = response_solvent(mf, s)
    vind, _hdiag = td.gen_vind(mf)
    # PySCF builds its fitted tensors (full range, then the erf one) on first use: built here,
    # so that they count as set-up and the product below is the cost per trial vector
    mf.with_df.build()
    omega = mf._numint.rsh_and_hybrid_coeff(mf.xc, mol.spin)[0]
    if omega:
        with mf.with_df.range_coulomb(omega) as rsh_df:
            rsh_df.build()
    t1 = time.perf_counter()
    # printed now: a product stopped by --stock-timeout still shows how the time was split
    print(f"[stock-check] set-up (PySCF's fitted tensors, operator) {t1 - t0:.1f} s; product "
          f"started", flush=True)
    x = st["xs"][:args.stock_vectors] if args.stock_vectors else st["xs"]
    st = dict(st, xs=x, e=st["e"][:len(x)])
    x = x.reshape(len(x), -1)
    x = x / np.linalg.norm(x, axis=1)[:, None]
    ax = np.asarray(vind(x)).reshape(x.shape)
    t2 = time.perf_counter()
    rq = np.einsum("si,si->s", x, ax)
    r = ax - rq[:, None] * x
    res = np.linalg.norm(r, axis=1)
    # the residual on the pairs the fast path solved for (an orbital window leaves the others
    # at zero; their coupling shows in the full residual but moves E only to second order)
    inside = np.any(st["xs"] != 0, axis=0).ravel()
    res_win = np.linalg.norm(r[:, inside], axis=1)
    rss = lambda: resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # noqa: E731
    rec = {"path": "stock-check", "nao": mol.nao, "setup_s": t1 - t0, "product_s": t2 - t1,
           "vectors": len(x), "rq_ev": (rq * HARTREE_EV).tolist(),
           "max_abs_dE_rq_ev": float(np.max(np.abs(rq - st["e"]))) * HARTREE_EV,
           "max_residual": float(res.max()), "max_residual_window": float(res_win.max()),
           "window_pairs": int(inside.sum()), "all_pairs": int(inside.size),
           "peak_rss_mb": rss()}
    print(f"[stock-check] one stock product, {len(x)} vectors: {t2 - t1:.1f} s (set-up "
          f"{t1 - t0:.1f} s); Rayleigh quotients {rec['rq_ev']} eV; fast "
          f"{(st['e'] * HARTREE_EV).tolist()} eV; residuals {res.tolist()}, on the fast "
          f"path's pairs {res_win.tolist()}", flush=True)
    q.put(dict(rec))
    if args.stock_refine:
        t3 = time.perf_counter()
        td.kernel(x0=list(x * np.sqrt(0.5)))
        e = np.asarray(td.e)
        order = np.argsort(e)
        rec.update(refine_s=time.perf_counter() - t3,
                   e_ev=(e[order] * HARTREE_EV).tolist(),
                   f=np.asarray(td.oscillator_strength(gauge="length"))[order].tolist(),
                   peak_rss_mb=rss())
        q.put(rec)


def measure(path, name, args, timeout):
    """The last record the path reached (SCF only if the response ran out of time), or None."""
    ctx = mp.get_context("fork")
    q = ctx.Queue()
    p = ctx.Process(target=check if path == "stock-check" else run, args=(path, name, args, q))
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


def check_row(name, args, fast, fast_wall, stock, stock_wall):
    """TSV row of a fast run checked with one stock product (see :func:`check`)."""
    fast, stock = fast or {}, stock or {}
    row = {"system": name, "basis": args.basis, "grid_level": args.grid_level,
           "response_grid_level": args.response_grid_level, "df_storage": args.df_storage,
           "pcm_fit": args.pcm_fit, "occ_window_ev": args.occ_window,
           "vir_window_ev": args.vir_window, "nao": fast.get("nao"), "stock_mode": "check",
           "fast_scf_s": _r(fast.get("scf_s")), "fast_scf_cycles": fast.get("scf_cycles"),
           "fast_response_s": _r(fast.get("response_s")),
           "fast_peak_rss_mb": _r(fast.get("peak_rss_mb"), 0), "fast_wall_s": fast_wall,
           "fast_finished": "response_s" in fast,
           "fast_job_s": (_r(fast["scf_s"] + fast["response_s"])
                          if "response_s" in fast else None),
           "fast_products": fast.get("products"), "fast_vectors": fast.get("vectors"),
           "fast_setup_s": _r(fast.get("setup_s")), "fast_product_s": _r(fast.get("product_s")),
           "stock_check_setup_s": _r(stock.get("setup_s")),
           "stock_check_product_s": _r(stock.get("product_s")),
           "stock_check_vectors": stock.get("vectors"), "stock_wall_s": stock_wall,
           "stock_peak_rss_mb": _r(stock.get("peak_rss_mb"), 0),
           "max_abs_dE_rq_ev": stock.get("max_abs_dE_rq_ev"),
           "max_residual_stock": stock.get("max_residual"),
           "max_residual_stock_window": stock.get("max_residual_window")}
    if fast.get("vectors") and stock.get("vectors"):
        fs = fast["product_s"] / fast["vectors"]
        ss = stock["product_s"] / stock["vectors"]
        row.update(fast_s_per_vector=_r(fs, 2), stock_s_per_vector=_r(ss, 2),
                   product_speedup=_r(ss / fs, 2),
                   # estimate: the stock Davidson taking as many trial vectors as the fast one
                   stock_response_est_s=_r(stock["setup_s"] + ss * fast["vectors"]),
                   response_speedup_est=_r((stock["setup_s"] + ss * fast["vectors"])
                                           / fast["response_s"], 2))
    if "e_ev" in stock and "e_ev" in fast:
        row.update(max_abs_dE_ev=max(abs(a - b) for a, b in zip(fast["e_ev"], stock["e_ev"])),
                   max_abs_df=max(abs(a - b) for a, b in zip(fast["f"], stock["f"])),
                   stock_refine_s=_r(stock.get("refine_s")))
    row.update(energies_ev=" ".join(f"{x:.5f}" for x in fast.get("e_ev", [])),
               oscillator_strengths=" ".join(f"{x:.4f}" for x in fast.get("f", [])),
               threads=args.threads, host=platform.node(), date=time.strftime("%Y-%m-%d %H:%M"))
    return row


def append_rows(out, rows):
    """Append rows (dicts or a DataFrame) to a records TSV, keeping the earlier rows and the
    union of the columns."""
    import pandas as pd
    out = Path(out)
    out.parent.mkdir(parents=True, exist_ok=True)
    df = pd.DataFrame(rows)
    n = len(df)
    if out.exists():
        df = pd.concat([pd.read_csv(out, sep="\t"), df], ignore_index=True)
    df.to_csv(out, sep="\t", index=False)
    print(f"appended {n} row(s) to {out}")


def provenance():
    """Columns that make rows of different days and commits comparable: the commit (with
    '+dirty' for uncommitted changes) and this machine's float32/float64 matrix-product rate
    at the time of the run (2 threads, n = 3000), since shared machines vary from day to day."""
    import subprocess
    import numpy as np
    from threadpoolctl import threadpool_limits
    try:
        commit = subprocess.run(["git", "-C", str(ROOT), "rev-parse", "--short", "HEAD"],
                                capture_output=True, text=True, check=True).stdout.strip()
        dirty = subprocess.run(["git", "-C", str(ROOT), "status", "--porcelain", "scripts"],
                               capture_output=True, text=True).stdout.strip()
        commit += "+dirty" if dirty else ""
    except (OSError, subprocess.CalledProcessError):
        commit = None
    rates = {}
    n = 3000
    for dt in (np.float32, np.float64):
        a = np.random.default_rng(0).random((n, n)).astype(dt)
        with threadpool_limits(2, user_api="blas"):
            a @ a
            t = time.perf_counter()
            for _ in range(3):
                a @ a
            rates[np.dtype(dt).name] = round(3 * 2 * n ** 3 / (time.perf_counter() - t) / 1e9, 1)
    return {"commit": commit, "gemm_f32_gflops": rates["float32"],
            "gemm_f64_gflops": rates["float64"]}


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
    ap.add_argument("--stock-mode", default="full", choices=["full", "check"],
                    help="full: PySCF's SCF and TDA from scratch; check: PySCF's TDA operator on "
                         "the fast path's ground state and eigenvectors (one timed product, "
                         "Rayleigh quotients)")
    ap.add_argument("--stock-vectors", type=int, default=None,
                    help="check mode: apply PySCF's operator to the lowest N fast eigenvectors "
                         "only (default: all)")
    ap.add_argument("--stock-refine", action="store_true",
                    help="check mode: continue with PySCF's Davidson from the fast vectors")
    ap.add_argument("--tsv", default="scripts/benchmarks/records/response_speed.tsv")
    args = ap.parse_args()
    prov = provenance()
    print(f"commit {prov['commit']}; matrix products on this machine now: "
          f"{prov['gemm_f32_gflops']} GFLOP/s float32, {prov['gemm_f64_gflops']} float64",
          flush=True)
    rows = []
    for name in args.systems.split(","):
        args.state = None
        if args.stock_mode == "check":
            import tempfile
            args.state = str(Path(tempfile.mkdtemp()) / f"{name}_state.npz")
        fast, fast_wall = measure("fast", name, args, args.fast_timeout)
        if args.stock_mode == "check":
            stock, stock_wall = ((measure("stock-check", name, args, args.stock_timeout))
                                 if fast and "e_ev" in fast else (None, 0.0))
            row = check_row(name, args, fast, fast_wall, stock, stock_wall)
            row.update(prov)
            rows.append(row)
            print(json.dumps(row, indent=1), flush=True)
            continue
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
        row.update(threads=args.threads, host=platform.node(), date=time.strftime("%Y-%m-%d %H:%M"),
                   **prov)
        rows.append(row)
        print(json.dumps(row, indent=1), flush=True)
    append_rows(ROOT / args.tsv, rows)   # earlier rows may have other columns


if __name__ == "__main__":
    main()
