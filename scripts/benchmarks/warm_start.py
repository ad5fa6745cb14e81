#!/usr/bin/env python
"""Benchmark: a small study's sites started warm (from the tuning run's orbitals) against cold.

What a study does, one pigment type at a time: the gas-phase SCF at the tuned ω (the tuning
run's last neutral, whose orbitals the workflow keeps), then every site of that type, each at
its own geometry and ε, and the site's cation and anion. Here the sites are the type's model at
two geometries (as built, and turned, moved and jittered by --jitter Å RMS, seeded: a second
copy in the structure, or the same site in a mutant's structure) and at each ε of --eps. Every
site is computed in separate SCFs: cold (PySCF's default guess, the ladder of siteshift), warm
from the gas-phase orbitals carried over (``qm.warm_start: tuning``,
:func:`siteshift.qm.warmstart.warm_density`) and, for every site but the first, warm from the first
site's converged orbitals carried over (``qm.warm_start: reference``: the same site in the
reference variant); the ions of one site start from its neutral.

It prints, per site, SCF cycles and seconds cold and warm, their ratios and the largest
difference of the excitation energies; then the ions' times against the neutral; the machine's
matrix-product rate of the day, peak memory; and appends one row per site to
records/warm_start.tsv.

    python scripts/benchmarks/warm_start.py --systems hc4 --basis 6-31g --eps 4,12

Systems as in response_speed.py: hc4 (20 atoms) and bcl (85 atoms), from CCD ideal coordinates.
"""
from __future__ import annotations

import argparse
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


def second_copy(xyz, jitter, seed=7):
    """The model turned (40°, 70°, −25° Euler zyx), moved 12 Å and jittered (Å RMS)."""
    import numpy as np
    from scipy.spatial.transform import Rotation
    R = Rotation.from_euler("zyx", [40, 70, -25], degrees=True).as_matrix()
    rng = np.random.default_rng(seed)
    noise = rng.standard_normal(xyz.shape)
    noise *= jitter / np.sqrt((noise ** 2).sum(axis=1).mean())
    return (xyz + noise) @ R.T + np.array([12.0, 0.0, 0.0])


def add_site_args(ap):
    """The options naming a type's sites (basis, grid, ε values, ω, the second copy's jitter,
    states), shared with study_speed.py."""
    ap.add_argument("--basis", default="6-31g")
    ap.add_argument("--grid-level", type=int, default=1)
    ap.add_argument("--eps", default="4,12", help="site ε_static values (ε_optical 2)")
    ap.add_argument("--omega", type=float, default=0.22)
    ap.add_argument("--jitter", type=float, default=0.05, help="Å RMS of the second copy")
    ap.add_argument("--nstates", type=int, default=3)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--systems", default="hc4")
    add_site_args(ap)
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--max-memory", type=int, default=16000)
    ap.add_argument("--no-ions", action="store_true")
    ap.add_argument("--out", default=str(HERE / "records" / "warm_start.tsv"))
    args = ap.parse_args()
    import numpy as np
    import pandas as pd

    from siteshift.qm.excite import excite
    from siteshift.qm.functional import SRSH
    from siteshift.qm.ions import ionize
    from siteshift.qm.scf import build_molecule, make_scf, run_scf
    from siteshift.qm.settings import ExciteSettings, configure_threads
    from siteshift.qm.warmstart import carried_start, save_orbitals, warm_density
    configure_threads(args.threads)
    prov = provenance()
    print(f"machine: {prov['gemm_f32_gflops']} GFLOP/s float32, {prov['gemm_f64_gflops']} "
          f"float64 ({args.threads} threads)", flush=True)
    rows = []
    tmp = Path(tempfile.mkdtemp())
    first_site = None
    for name in args.systems.split(","):
        el, xyz = system(name)
        xyz = np.asarray(xyz, dtype=float)
        gas = ExciteSettings(basis=args.basis, grid_level=args.grid_level, omega=args.omega,
                             max_memory_mb=args.max_memory)
        t0 = time.perf_counter()
        mol = build_molecule(el, xyz, 0, 0, gas.basis, gas.max_memory_mb)
        mf, _step, gas_cycles = run_scf(make_scf(mol, gas, SRSH(gas.alpha, args.omega, 1.0),
                                                 solvated=False))
        gas_s = time.perf_counter() - t0
        orb = tmp / f"{name}.npz"
        save_orbitals(orb, mf, el, xyz, gas.basis, f"{name} gas phase")
        print(f"[{name}] gas-phase source SCF: {gas_cycles} cycles, {gas_s:.1f} s, nao "
              f"{mol.nao}", flush=True)
        copies = {"as built": xyz, "second copy": second_copy(xyz, args.jitter)}
        for label, geo in copies.items():
            for eps in (float(e) for e in args.eps.split(",")):
                s = ExciteSettings(**{**gas.__dict__, "eps_static": eps,
                                      "eps_optical": min(2.0, eps), "nstates": args.nstates})
                res = {}
                for how in ("cold", "warm", "site"):
                    dm0 = start = None
                    m = build_molecule(el, geo, 0, 0, s.basis, s.max_memory_mb)
                    if how == "warm":
                        dm0, start = warm_density(m, orb, el, geo, s.basis)
                        assert start["kind"] == "warm", start
                    elif how == "site":
                        if first_site is None:
                            continue
                        dm0, start = carried_start(m, first_site, el, geo, s.basis)
                        assert start["kind"] == "warm", start
                    t = time.perf_counter()
                    r = excite(el, geo, 0, 0, s, dm0=dm0, start=start, keep_density=True,
                               keep_response=True)
                    r["wall_s"] = time.perf_counter() - t
                    res[how] = r
                c, w = res["cold"], res["warm"]
                if first_site is None:
                    resp = c["_response"]
                    first_site = {"mo_coeff": resp["mo_coeff"], "mo_occ": resp["mo_occ"],
                                  "elements": el, "coords_A": geo, "basis": s.basis,
                                  "source": f"{label} at eps {eps:g}"}
                de = max(abs(a["energy_ev"] - b["energy_ev"])
                         for a, b in zip(c["states"], w["states"]))
                row = {"system": name, "basis": args.basis, "grid_level": args.grid_level,
                       "nao": c["nao"], "geometry": label, "rmsd_A": w["scf_start"]["rmsd_A"],
                       "eps_static": eps, "cycles_cold": c["scf_cycles"],
                       "cycles_warm": w["scf_cycles"],
                       "cycle_ratio": round(w["scf_cycles"] / c["scf_cycles"], 3),
                       "scf_s_cold": c["timings_s"]["scf"], "scf_s_warm": w["timings_s"]["scf"],
                       "scf_time_ratio": round(w["timings_s"]["scf"] / c["timings_s"]["scf"], 3),
                       "dE_scf_hartree": w["scf_energy_hartree"] - c["scf_energy_hartree"],
                       "max_abs_dE_ev": de, "gas_source_s": round(gas_s, 1),
                       "gas_source_cycles": gas_cycles}
                if "site" in res:
                    f = res["site"]
                    row.update(
                        cycles_from_site=f["scf_cycles"], scf_s_from_site=f["timings_s"]["scf"],
                        cycle_ratio_from_site=round(f["scf_cycles"] / c["scf_cycles"], 3),
                        max_abs_dE_from_site_ev=max(abs(a["energy_ev"] - b["energy_ev"]) for a, b
                                                    in zip(c["states"], f["states"])))
                    print(f"[{name}] {label}, eps {eps:g}: from the first site "
                          f"{f['scf_cycles']} cycles ({row['cycle_ratio_from_site']:.2f}), SCF "
                          f"{row['scf_s_from_site']:.1f} s, max |ΔE| "
                          f"{row['max_abs_dE_from_site_ev']:.1e} eV", flush=True)
                print(f"[{name}] {label}, eps {eps:g}: cycles {c['scf_cycles']} cold → "
                      f"{w['scf_cycles']} warm ({row['cycle_ratio']:.2f}), SCF "
                      f"{row['scf_s_cold']:.1f} → {row['scf_s_warm']:.1f} s, max |ΔE| "
                      f"{de:.1e} eV, ΔE_SCF {row['dE_scf_hartree']:.1e} Eh", flush=True)
                if not args.no_ions and label == "second copy" and eps == float(
                        args.eps.split(",")[0]):
                    t = time.perf_counter()
                    ion = ionize(el, geo, settings=s, fit_charges=False, dm0=w["_dm"],
                                 start={"kind": "warm", "source": "the site's density"})
                    sc = ion["scf"]
                    row.update({f"{k}_s": sc[k]["time_s"] for k in sc})
                    row.update({f"{k}_cycles": sc[k]["cycles"] for k in sc})
                    row["ions_over_cold_neutral"] = round(
                        max(sc["cation"]["time_s"], sc["anion"]["time_s"])
                        / c["timings_s"]["scf"], 3)
                    row["ions_wall_s"] = round(time.perf_counter() - t, 1)
                    print(f"[{name}] ions of the second copy: neutral {sc['neutral']['cycles']} "
                          f"cycles {sc['neutral']['time_s']} s (warm from the site), cation "
                          f"{sc['cation']['cycles']} / {sc['cation']['time_s']} s, anion "
                          f"{sc['anion']['cycles']} / {sc['anion']['time_s']} s: slower ion / "
                          f"cold neutral {row['ions_over_cold_neutral']}", flush=True)
                rows.append(row)
    peak = round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024)
    for row in rows:
        row.update(peak_rss_mb=peak, threads=args.threads, host=platform.node()[:12],
                   date=time.strftime("%Y-%m-%d %H:%M"), **prov)
    df = pd.DataFrame(rows)
    print(f"mean cycle ratio warm/cold {df.cycle_ratio.mean():.2f}, SCF time ratio "
          f"{df.scf_time_ratio.mean():.2f}, max |ΔE| {df.max_abs_dE_ev.max():.1e} eV; from the "
          f"first site {df.get('cycle_ratio_from_site', pd.Series(dtype=float)).mean():.2f}; "
          f"peak RSS {peak} MB", flush=True)
    append_rows(args.out, df)


if __name__ == "__main__":
    main()
