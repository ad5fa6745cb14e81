#!/usr/bin/env python
"""Benchmark: the QM work of a small study, timed end to end three ways — cold, warm, stock.

The study: one pigment type (the hc4 or bcl model, from CCD ideal coordinates) at two
geometries — as built, and a second copy turned, moved and jittered by --jitter Å RMS (another
site of the structure, or the same site in a mutant) — and at each ε_static of --eps
(ε_optical 2). Per site: the neutral's SCF and TDA; with --ions the neutral, cation and anion
SCFs; with --dimer the two copies computed whole at the first ε.

The same jobs, three ways:
- cold: siteshift's fast path, every SCF from PySCF's default guess;
- warm: as a study runs them (``qm.warm_start: reference``): the tuning run's gas-phase
  orbitals start the first geometry's sites, the first geometry's site at the same ε starts
  the second's, each site's ions start from its density, the dimer from its monomers;
- stock: PySCF's own density fitting, XC integration and TDA, cold, each job bounded by
  --stock-timeout (a job that runs out is recorded as such; --no-stock skips the way).

Every job runs in a forked process: its wall time by stage (SCF, response, ions), SCF cycles,
largest |ΔE| of its excitation (or ion) energies against the cold job, and its peak RSS. One
row per job is appended to records/study_speed_jobs.tsv and one summary row (per-way totals,
ratios, cycles, the slowest job's peak memory, the machine's matrix-product rate of the day,
the commit) to records/study_speed.tsv.

    python scripts/benchmarks/study_speed.py --system hc4 --basis 6-31g --eps 4,12 --ions --dimer
"""
from __future__ import annotations

import argparse
import multiprocessing as mp
import platform
import resource
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parents[1] / "scripts"))
sys.path.insert(0, str(HERE))

from response_speed import append_rows, provenance, system  # noqa: E402
from siteshift.base.units import HARTREE2EV  # noqa: E402
from warm_start import add_site_args, second_copy  # noqa: E402

WAYS = ("cold", "warm", "stock")


def _settings(args, eps, stock=False):
    from siteshift.qm.settings import ExciteSettings
    s = ExciteSettings(basis=args.basis, grid_level=args.grid_level, omega=args.omega,
                       eps_static=eps, eps_optical=min(2.0, eps), nstates=args.nstates,
                       max_memory_mb=args.max_memory)
    s.pcm_fit = args.pcm_fit
    if args.lebedev:
        s.lebedev_order = args.lebedev
    if stock:
        s.df_storage = "pyscf"
        s.pcm_fit = False
    return s


def _stock_scf(mol, s, dm0=None):
    from pyscf.dft import numint
    from siteshift.qm.scf import make_scf, run_scf
    mf = make_scf(mol, s)
    mf._numint = numint.NumInt()          # PySCF's own XC integration
    return run_scf(mf, dm0=dm0, mixed_precision=False)


def site_job(args, geo, eps, way, start, save):
    """One site: SCF + TDA. start: None or an .npz of orbitals (with the geometry they were
    converged on) to carry over. save: where to keep this job's orbitals and amplitudes."""
    import numpy as np
    from siteshift.qm.excite import excite
    from siteshift.qm.scf import build_molecule
    from siteshift.qm.stock import stock_response
    from siteshift.qm.warmstart import warm_density
    el, _ = system(args.system)
    s = _settings(args, eps, stock=way == "stock")
    if way == "stock":
        t0 = time.perf_counter()
        mol = build_molecule(el, geo, 0, 0, s.basis, s.max_memory_mb)
        mf, _step, cycles = _stock_scf(mol, s)
        t1 = time.perf_counter()
        e, *_ = stock_response(mf, s)
        return {"scf_s": t1 - t0, "response_s": time.perf_counter() - t1, "scf_cycles": cycles,
                "energies_ev": sorted(np.asarray(e) * HARTREE2EV),
                "scf_energy_hartree": float(mf.e_tot), "start": "cold"}
    dm0 = how = None
    if start is not None:
        mol = build_molecule(el, geo, 0, 0, s.basis, s.max_memory_mb)
        dm0, how = warm_density(mol, start, el, geo, s.basis)
        assert how["kind"] == "warm", how
    r = excite(el, geo, 0, 0, s, dm0=dm0, start=how, keep_density=True, keep_response=True)
    resp = r["_response"]
    np.savez(save, mo_coeff=resp["mo_coeff"], mo_occ=resp["mo_occ"], xs=resp["xs"],
             energies_ev=[st["energy_ev"] for st in r["states"]], dm=r["_dm"],
             elements=np.asarray(el), coords_A=geo, basis=np.asarray(s.basis),
             source=np.asarray(f"{way} site at eps {eps:g}"))
    return {"scf_s": r["timings_s"]["scf"], "response_s": r["timings_s"].get("response"),
            "scf_cycles": r["scf_cycles"], "scf_energy_hartree": r["scf_energy_hartree"],
            "energies_ev": sorted(st["energy_ev"] for st in r["states"]),
            "start": (how or {}).get("source", "cold")}


def ion_job(args, geo, eps, way, site_npz):
    """Neutral, cation, anion SCFs of one site (warm: the neutral from the site's density)."""
    import numpy as np
    from siteshift.qm.ions import ionize
    from siteshift.qm.scf import build_molecule
    el, _ = system(args.system)
    s = _settings(args, eps, stock=way == "stock")
    if way == "stock":
        out, t, cyc, e = {}, {}, {}, {}
        dm = None
        for name, (q, spin) in (("neutral", (0, 0)), ("cation", (1, 1)), ("anion", (-1, 1))):
            t0 = time.perf_counter()
            mol = build_molecule(el, geo, q, spin, s.basis, s.max_memory_mb)
            # each ion from the neutral's density, as siteshift does
            mf, _step, cyc[name] = _stock_scf(mol, s, dm0=dm)
            t[name], e[name] = time.perf_counter() - t0, float(mf.e_tot)
            if name == "neutral":
                d = mf.make_rdm1()
                dm = np.asarray([d / 2, d / 2])
        out = {"scf": {k: {"time_s": t[k], "cycles": cyc[k], "energy_hartree": e[k]}
                       for k in t}}
    else:
        dm0 = np.load(site_npz)["dm"] if way == "warm" else None
        out = ionize(el, geo, settings=s, fit_charges=False, dm0=dm0,
                     start={"kind": "warm", "source": "the site's density"} if dm0 is not None
                     else None)
    sc = out["scf"]
    return {"scf_s": sum(v["time_s"] for v in sc.values()),
            **{f"{k}_s": round(v["time_s"], 2) for k, v in sc.items()},
            **{f"{k}_cycles": v["cycles"] for k, v in sc.items()},
            "scf_cycles": sum(v["cycles"] for v in sc.values()),
            "energies_ev": [(sc["cation"]["energy_hartree"] - sc["neutral"]["energy_hartree"])
                            * HARTREE2EV, (sc["neutral"]["energy_hartree"]
                                   - sc["anion"]["energy_hartree"]) * HARTREE2EV],
            "start": "site density" if way == "warm" else "cold"}


def dimer_job(args, eps, way, npz_a, npz_b, geo_a, geo_b):
    """The two copies computed whole; the monomers' responses from their site jobs."""
    import numpy as np
    from siteshift.interactions.dimer import excite_dimer
    el, _ = system(args.system)
    s = _settings(args, eps)
    resp = []
    for f in (npz_a, npz_b):
        z = np.load(f)
        resp.append({k: z[k] for k in ("mo_coeff", "mo_occ", "xs", "energies_ev")})
    t0 = time.perf_counter()
    _out, res = excite_dimer((el, geo_a, 0), (el, geo_b, 0), s, resp[0], resp[1], 0, 0,
                             fragment_start_on=way == "warm")
    return {"scf_s": res["timings_s"]["scf"], "response_s": res["timings_s"].get("response"),
            "wall_inner_s": time.perf_counter() - t0, "scf_cycles": res["scf_cycles"],
            "scf_energy_hartree": res["scf_energy_hartree"],
            "energies_ev": sorted(st["energy_ev"] for st in res["states"]),
            "start": res["scf_start"].get("source", "cold")}


def gas_job(args, save):
    """The tuning run's last neutral (gas phase at the tuned ω): the warm way's first source."""
    from siteshift.qm.functional import SRSH
    from siteshift.qm.scf import build_molecule, make_scf, run_scf
    from siteshift.qm.warmstart import save_orbitals
    el, xyz = system(args.system)
    s = _settings(args, 1.0)
    t0 = time.perf_counter()
    mol = build_molecule(el, xyz, 0, 0, s.basis, s.max_memory_mb)
    mf, _step, cycles = run_scf(make_scf(mol, s, SRSH(s.alpha, args.omega, 1.0), solvated=False))
    save_orbitals(save, mf, el, xyz, s.basis, "gas-phase tuning orbitals")
    return {"scf_s": time.perf_counter() - t0, "scf_cycles": cycles, "start": "cold"}


def _child(q, fn, fargs, threads):
    from siteshift.qm.settings import configure_threads
    configure_threads(threads)
    try:
        rec = fn(*fargs)
    except Exception as exc:   # reported in the row, the study goes on
        rec = {"error": f"{type(exc).__name__}: {exc}"[:300]}
    rec["peak_rss_mb"] = round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024)
    q.put(rec)


def in_child(fn, fargs, threads, timeout=None):
    """Run fn(*fargs) in a forked process; (record, wall s). Past timeout: {'timed_out': True}."""
    ctx = mp.get_context("fork")
    q = ctx.Queue()
    p = ctx.Process(target=_child, args=(q, fn, fargs, threads))
    t0 = time.perf_counter()
    p.start()
    rec = None
    while rec is None:
        try:
            rec = q.get(timeout=2)
        except Exception:   # queue.Empty
            if not p.is_alive():
                rec = {"error": f"process ended with code {p.exitcode}"}
            elif timeout and time.perf_counter() - t0 > timeout:
                p.terminate()
                rec = {"timed_out": True}
    p.join()
    return rec, round(time.perf_counter() - t0, 2)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--system", default="hc4", choices=["hc4", "bcl"])
    add_site_args(ap)
    ap.add_argument("--pcm-fit", action="store_true",
                    help="PCM potentials from the fitted density (qm.pcm_fit; fast and warm)")
    ap.add_argument("--lebedev", type=int, default=None,
                    help="Lebedev order of the PCM surface (default: the full preset's)")
    ap.add_argument("--ions", action="store_true", help="neutral/cation/anion SCFs per site")
    ap.add_argument("--dimer", action="store_true", help="the two copies whole, first ε")
    ap.add_argument("--no-stock", action="store_true", help="skip PySCF's stock path")
    ap.add_argument("--stock-timeout", type=float, default=1800.0, help="seconds per job")
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--max-memory", type=int, default=16000)
    ap.add_argument("--out", default=str(HERE / "records" / "study_speed.tsv"))
    ap.add_argument("--jobs-out", default=str(HERE / "records" / "study_speed_jobs.tsv"))
    args = ap.parse_args()
    import numpy as np
    import pandas as pd
    prov = provenance()
    print(f"machine: {prov['gemm_f32_gflops']} GFLOP/s float32, {prov['gemm_f64_gflops']} "
          f"float64 ({args.threads} threads); commit {prov['commit']}", flush=True)
    tmp = Path(tempfile.mkdtemp())
    _, xyz = system(args.system)
    xyz = np.asarray(xyz, dtype=float)
    geos = {"as built": xyz, "second copy": second_copy(xyz, args.jitter)}
    eps_list = [float(e) for e in args.eps.split(",")]
    ways = [w for w in WAYS if not (w == "stock" and args.no_stock)]
    rows = []

    def record(way, job, rec, wall):
        row = {"way": way, "job": job, "wall_s": wall, **{k: v for k, v in rec.items()
                                                           if k != "energies_ev"}}
        row["_e"] = rec.get("energies_ev")
        rows.append(row)
        state = ("timed out" if rec.get("timed_out") else rec.get("error")
                 or f"SCF {rec.get('scf_s', 0):.1f} s, {rec.get('scf_cycles')} cycles")
        print(f"[{way:5s}] {job:<32s} {wall:8.1f} s  {state}  start: {rec.get('start', '')}"
              f"  peak {rec.get('peak_rss_mb')} MB", flush=True)

    gas = tmp / "gas.npz"
    rec, wall = in_child(gas_job, (args, gas), args.threads)
    record("warm", "gas-phase source (tuning)", rec, wall)
    for way in ways:
        timeout = args.stock_timeout if way == "stock" else None
        for eps in eps_list:
            first = None
            for label, geo in geos.items():
                save = tmp / f"{way}_{label.replace(' ', '_')}_{eps:g}.npz"
                start = None
                if way == "warm":
                    start = gas if first is None else first
                rec, wall = in_child(site_job, (args, geo, eps, way, start, save), args.threads,
                                     timeout)
                record(way, f"site {label}, eps {eps:g}", rec, wall)
                first = first or save
                if args.ions:
                    rec, wall = in_child(ion_job, (args, geo, eps, way, save), args.threads,
                                         timeout)
                    record(way, f"ions {label}, eps {eps:g}", rec, wall)
        if args.dimer and way != "stock":
            eps = eps_list[0]
            npz = [tmp / f"{way}_{lab.replace(' ', '_')}_{eps:g}.npz" for lab in geos]
            rec, wall = in_child(dimer_job, (args, eps, way, *npz, *geos.values()),
                                 args.threads)
            record(way, f"dimer, eps {eps:g}", rec, wall)
    df = pd.DataFrame(rows)
    cold = df[df.way == "cold"].set_index("job")
    df["max_abs_dE_vs_cold_ev"] = [
        (max(abs(a - b) for a, b in zip(e, cold.loc[j, "_e"]))
         if isinstance(e, list) and j in cold.index and isinstance(cold.loc[j, "_e"], list)
         else None) for j, e in zip(df.job, df._e)]
    df = df.drop(columns="_e")
    stamp = {"system": args.system, "basis": args.basis, "grid_level": args.grid_level,
             "pcm_fit": args.pcm_fit, "lebedev_order": _settings(args, 4.0).lebedev_order,
             "eps": args.eps, "jitter_A": args.jitter, "threads": args.threads,
             "host": platform.node()[:12], "date": time.strftime("%Y-%m-%d %H:%M"), **prov}
    for k, v in stamp.items():
        df[k] = v
    summary = dict(stamp)
    done = {w: df[(df.way == w) & df.job.str.match("site|ions|dimer")] for w in ways}
    for w, d in done.items():
        ok = d[~d.get("timed_out", pd.Series(False, index=d.index)).fillna(False).astype(bool)
               & d.get("error", pd.Series(None, index=d.index)).isna()]
        summary.update({f"{w}_jobs": len(d), f"{w}_jobs_done": len(ok),
                        f"{w}_wall_s": round(ok.wall_s.sum(), 1),
                        f"{w}_scf_s": round(ok.scf_s.sum(), 1),
                        f"{w}_scf_cycles": int(ok.scf_cycles.sum()),
                        f"{w}_peak_rss_mb": int(d.peak_rss_mb.max())})
    summary["warm_source_s"] = round(float(df[df.job.str.startswith("gas")].wall_s.sum()), 1)
    site = {w: d[d.job.str.startswith("site")] for w, d in done.items()}
    summary["site_cycle_ratio_warm_cold"] = round(site["warm"].scf_cycles.sum()
                                                  / site["cold"].scf_cycles.sum(), 3)
    summary["wall_ratio_warm_cold"] = round(summary["warm_wall_s"] / summary["cold_wall_s"], 3)
    if "stock" in done and summary["stock_jobs_done"] == summary["stock_jobs"]:
        summary["wall_ratio_stock_cold"] = round(summary["stock_wall_s"]
                                                 / summary["cold_wall_s"], 3)
    if args.ions:
        for w in ("cold", "warm"):
            d = done[w][done[w].job.str.startswith("ions")]
            slow = np.maximum(d.cation_s.values, d.anion_s.values)
            summary[f"{w}_slower_ion_over_cold_site_scf"] = round(float(
                np.max(slow / site["cold"].scf_s.values)), 3)
    summary["max_abs_dE_warm_ev"] = df[df.way == "warm"].max_abs_dE_vs_cold_ev.max()
    if "stock" in done:
        summary["max_abs_dE_stock_ev"] = df[df.way == "stock"].max_abs_dE_vs_cold_ev.max()
    print("\n" + "\n".join(f"{k}: {v}" for k, v in summary.items()), flush=True)
    append_rows(args.jobs_out, df)
    append_rows(args.out, [summary])


if __name__ == "__main__":
    main()
